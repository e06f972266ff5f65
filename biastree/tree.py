"""From a validated ``Plan`` to a checked tree (networkx DiGraph + arrays).

Structural rules live here: every name resolves, every mirror and load is
fed exactly once from the reference, no cycles, and current polarity works
(a sinking npn/nmos output can only feed a sourcing pnp/pmos mirror or a
load, and the other way round).  The arrays built here are what the solver
walks, one generation of mirrors at a time.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from functools import cached_property
from typing import Any, Callable

import networkx as nx
import numpy as np

from .errors import PlanError, Problem
from .loader import format_path
from .plan import BjtModel, Plan
from .topologies import TOPOLOGIES

REFERENCE = "reference"

Locate = Callable[[tuple[Any, ...]], "int | None"]


@dataclass(frozen=True)
class Tree:
    """A plan's bias tree.  Mirrors are listed in generation order (root first).

    Branch arrays (prefix ``b_``) have one entry per branch as written in the
    plan; ``count`` copies of a branch are one entry with a multiplicity.
    """

    plan: Plan
    mirrors: tuple[str, ...]
    loads: tuple[str, ...]
    generations: tuple[np.ndarray, ...]
    m_sink: np.ndarray  # bool: npn/nmos mirrors sink current to ground
    m_bipolar: np.ndarray  # bool
    m_in_branch: np.ndarray  # branch feeding each mirror (-1 for the root)
    m_mult: np.ndarray  # instances of each mirror (product of counts above it)
    m_fanout: np.ndarray  # Σ ratio·count over the mirror's branches
    b_parent: np.ndarray
    b_index: np.ndarray  # position in the parent's branch list
    b_ratio: np.ndarray
    b_count: np.ndarray
    b_to_load: np.ndarray  # bool
    b_child: np.ndarray  # index into mirrors or loads
    l_branch: np.ndarray  # branch feeding each load
    l_mult: np.ndarray  # instances of each load

    @cached_property
    def graph(self) -> nx.DiGraph:
        """The tree as a networkx DiGraph: reference → mirrors → loads.

        Edges carry ``branch`` (index in the parent's list), ``ratio`` and ``count``.
        """
        return _graph(self.plan)

    @cached_property
    def mirror_paths(self) -> list[tuple[int, ...]]:
        """For each mirror, the mirror indices from the root down to it."""
        paths: list[tuple[int, ...]] = [()] * len(self.mirrors)
        for gen in self.generations:
            for m in gen.tolist():
                b = int(self.m_in_branch[m])
                paths[m] = (paths[int(self.b_parent[b])] if b >= 0 else ()) + (m,)
        return paths

    @cached_property
    def m_ideal_in(self) -> np.ndarray:
        """Input current each mirror would get with ideal mirrors (ratios only)."""
        ideal = np.zeros(len(self.mirrors))
        ideal[self.generations[0]] = self.plan.reference.current
        for gen in self.generations[1:]:
            b = self.m_in_branch[gen]
            ideal[gen] = ideal[self.b_parent[b]] * self.b_ratio[b]
        return ideal

    def path(self, load: int) -> list[int]:
        """Mirror indices from the root down to the mirror that feeds ``load``."""
        return list(self.mirror_paths[int(self.b_parent[self.l_branch[load]])])


def _hint(name: str, known: list[str]) -> str:
    close = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def is_sink(kind: str) -> bool:
    return kind in ("npn", "nmos")


def _check_spread(plan: Plan) -> list[tuple[tuple[Any, ...], str]]:
    """Matching coefficients given twice or without an area; matched pairs naming nothing."""
    out: list[tuple[tuple[Any, ...], str]] = []
    for name, dev in plan.devices.items():
        pairs = (("a_is_pair", "a_is_single"),) if isinstance(dev, BjtModel) else (
            ("a_vt_pair", "a_vt_single"), ("a_beta_pair", "a_beta_single"))
        for pair, one in pairs:
            if getattr(dev, pair) is not None and getattr(dev, one) is not None:
                out.append((("devices", name, one), f"give either {pair} (a pair's σ) or {one} (one device's), not both"))
        if isinstance(dev, BjtModel) and (dev.a_is_pair or dev.a_is_single) and dev.area is None:
            out.append((("devices", name), "a bipolar matching coefficient needs the unit device's emitter area (area: 4um^2)"))
    for name, group in plan.matched.items():
        for k, load in enumerate(group.loads):
            if load not in plan.loads:
                out.append((("matched", name, "loads", k), f"no load named '{load}'{_hint(load, list(plan.loads))}"))
        if len(set(group.loads)) != len(group.loads):
            out.append((("matched", name, "loads"), "a matched pair needs two different loads"))
    return out


def _levels(plan: Plan) -> list[list[str]]:
    """Mirrors reachable from the reference, level by level (breadth first)."""
    levels: list[list[str]] = []
    seen: set[str] = set()
    level = [plan.reference.feeds] if plan.reference.feeds in plan.mirrors else []
    while level:
        levels.append(level)
        seen.update(level)
        nxt = []
        for name in level:
            for branch in plan.mirrors[name].branches:
                if branch.to in plan.mirrors and branch.to not in seen:
                    seen.add(branch.to)
                    nxt.append(branch.to)
        level = nxt
    return levels


_TOPOLOGY_KEYS = ("helper_size", "bleed", "degeneration", "degeneration_drop", "bias_current", "swing_n")


def _topology_params(name: str, mirror: Any, topo: Any) -> list[tuple[tuple[Any, ...], str]]:
    """Parameters given to the wrong topology, missing ones, and output limits."""
    out = []
    for key in _TOPOLOGY_KEYS:
        if key in mirror.model_fields_set and key not in topo.params:
            owners = sorted(t.name for t in TOPOLOGIES.values() if key in t.params)
            out.append((("mirrors", name, key), f"applies to {'/'.join(owners)} mirrors, not to a {topo.name} mirror"))
    if topo.name == "degenerated":
        given = [k for k in ("degeneration", "degeneration_drop") if getattr(mirror, k) is not None]
        if len(given) != 1:
            out.append((("mirrors", name), "a degenerated mirror needs exactly one of degeneration (Ω) or degeneration_drop (V)"))
    if topo.single_output and (len(mirror.branches) != 1 or mirror.branches[0].count != 1):
        out.append(
            (
                ("mirrors", name, "branches"),
                f"a {topo.name} mirror regulates a single output: give it one branch with count 1 "
                "(fan out through a mirror below it)",
            )
        )
    return out


def _no_device(name: str, known: list[str]) -> str:
    return f"no device model named '{name}'{_hint(name, known)}"


def _no_target(name: str, known: list[str]) -> str:
    return f"no mirror or load named '{name}'{_hint(name, known)}"


def _no_feed(name: str, mirrors: list[str], loads: list[str]) -> str:
    if name in loads:
        return f"'{name}' is a load; the reference must feed a mirror"
    return f"no mirror named '{name}'{_hint(name, mirrors)}"


def raw_name_problems(data: Any) -> list[tuple[tuple[Any, ...], str]]:
    """Names that resolve to nothing, found in raw (not yet validated) plan data.

    Used when field validation already failed, so that one run still reports
    every problem it can: a misspelt key and a branch to a misspelt load together.
    """
    if not isinstance(data, dict):
        return []
    def names(section: str) -> list[str]:
        value = data.get(section)
        return list(value) if isinstance(value, dict) else []
    devices, mirrors, loads = names("devices"), names("mirrors"), names("loads")
    out: list[tuple[tuple[Any, ...], str]] = []
    ref = data.get("reference")
    if isinstance(ref, dict) and isinstance(ref.get("feeds"), str) and ref["feeds"] not in mirrors and mirrors:
        out.append((("reference", "feeds"), _no_feed(ref["feeds"], mirrors, loads)))
    for name in mirrors:
        spec = data["mirrors"][name]
        if not isinstance(spec, dict):
            continue
        if isinstance(spec.get("device"), str) and devices and spec["device"] not in devices:
            out.append((("mirrors", name, "device"), _no_device(spec["device"], devices)))
        branches = spec.get("branches")
        for i, branch in enumerate(branches if isinstance(branches, list) else []):
            target = branch.get("to") if isinstance(branch, dict) else None
            if isinstance(target, str) and target not in mirrors and target not in loads:
                out.append((("mirrors", name, "branches", i, "to"), _no_target(target, mirrors + loads)))
    return out


def check_structure(plan: Plan) -> list[tuple[tuple[Any, ...], str]]:
    """Every structural problem of the plan as (key path, message)."""
    problems: list[tuple[tuple[Any, ...], str]] = []
    mirrors, loads, devices = plan.mirrors, plan.loads, plan.devices
    for name in sorted(set(mirrors) & set(loads)):
        problems.append((("loads", name), f"'{name}' names both a mirror and a load; names must be unique"))
    for section, names in (("mirrors", mirrors), ("loads", loads)):
        if REFERENCE in names:
            problems.append(((section, REFERENCE), "'reference' is reserved for the root; choose another name"))

    kinds: dict[str, str] = {}
    for name, mirror in mirrors.items():
        device = devices.get(mirror.device)
        if device is None:
            problems.append((("mirrors", name, "device"), _no_device(mirror.device, list(devices))))
            continue
        kinds[name] = device.kind
        family = "bjt" if isinstance(device, BjtModel) else "mos"
        topo = TOPOLOGIES[mirror.topology]
        if family not in topo.kinds:
            problems.append(
                (("mirrors", name, "topology"), f"topology '{topo.name}' is not available for {device.kind} devices")
            )
        problems += _topology_params(name, mirror, topo)

    fed_by: dict[str, tuple[Any, ...]] = {}
    ref = plan.reference
    if ref.feeds in mirrors:
        fed_by[ref.feeds] = ("reference", "feeds")
    else:
        problems.append((("reference", "feeds"), _no_feed(ref.feeds, list(mirrors), list(loads))))

    for name, mirror in mirrors.items():
        for i, branch in enumerate(mirror.branches):
            where = ("mirrors", name, "branches", i, "to")
            target = branch.to
            if target not in mirrors and target not in loads:
                problems.append((where, _no_target(target, list(mirrors) + list(loads))))
                continue
            if target == name:
                problems.append((where, f"mirror '{name}' cannot feed itself"))
                continue
            if target in fed_by:
                other = format_path(fed_by[target])
                problems.append(
                    (where, f"'{target}' is already fed by {other}; each mirror or load has one feed (use count for copies)")
                )
                continue
            fed_by[target] = where
            if target in mirrors and name in kinds and target in kinds and is_sink(kinds[name]) == is_sink(kinds[target]):
                verb = "sinks" if is_sink(kinds[name]) else "sources"
                want = "pnp/pmos" if is_sink(kinds[name]) else "npn/nmos"
                problems.append(
                    (
                        where,
                        f"polarity: {kinds[name]} mirror '{name}' {verb} current, so it can feed a {want} mirror or a load, "
                        f"not {kinds[target]} mirror '{target}'",
                    )
                )

    reachable = {m for level in _levels(plan) for m in level}
    reachable |= {b.to for m in reachable for b in mirrors[m].branches if b.to in loads}
    in_cycle: set[str] = set()
    # Every node fed once and reachable from the reference makes a tree: no
    # cycle is possible, so the (slower) search only runs when something is off.
    if problems or len(reachable) < len(mirrors) + len(loads):
        for cycle in _cycles(_graph(plan)):
            text = " -> ".join(cycle + [cycle[0]])
            problems.append((("mirrors", cycle[0]), f"cycle: {text}"))
            in_cycle.update(cycle)  # a cycle is reported once, not as unreachable too
    for name in mirrors:
        if name not in fed_by:
            problems.append((("mirrors", name), "never fed: no branch or reference drives this mirror"))
        elif name not in reachable and name not in in_cycle:
            problems.append((("mirrors", name), "not reachable from the reference (it hangs below a cycle)"))
    for name in loads:
        if name not in fed_by:
            problems.append((("loads", name), "never fed: no branch drives this load"))

    from .floorplan import check_floorplan

    problems += check_floorplan(plan)
    problems += _check_spread(plan)
    for name, load in loads.items():
        lo, _, hi = load.v_range
        if lo < 0 or hi > plan.supply:
            problems.append(
                (("loads", name, "voltage"), f"node voltage must lie between 0 V and the supply ({plan.supply:g} V)")
            )
    return problems


def _graph(plan: Plan) -> nx.DiGraph:
    graph = nx.DiGraph()
    graph.add_node(REFERENCE, role="reference")
    graph.add_nodes_from(plan.mirrors, role="mirror")
    graph.add_nodes_from(plan.loads, role="load")
    if plan.reference.feeds in plan.mirrors:
        graph.add_edge(REFERENCE, plan.reference.feeds, branch=-1)
    for name, mirror in plan.mirrors.items():
        for i, branch in enumerate(mirror.branches):
            if branch.to in graph and not graph.has_edge(name, branch.to):
                graph.add_edge(name, branch.to, branch=i, ratio=branch.ratio, count=branch.count)
    return graph


def _cycles(graph: nx.DiGraph) -> list[list[str]]:
    out = []
    for component in nx.strongly_connected_components(graph):
        if len(component) > 1:
            start = min(component)
            cycle = nx.find_cycle(graph.subgraph(component), source=start)
            out.append([u for u, _ in cycle])
    return out


def build(plan: Plan, locate: Locate | None = None, source: str | None = None) -> Tree:
    """Check the plan's structure and return its tree, or raise ``PlanError``.

    ``locate`` maps a key path to a line of the plan file, for messages.
    """
    problems = check_structure(plan)
    if problems:
        found = [Problem(format_path(path), msg, locate(path) if locate else None) for path, msg in problems]
        found.sort(key=lambda p: (p.line is None, p.line or 0))
        raise PlanError(found, source)
    order: list[str] = []
    generations = []
    for level in _levels(plan):
        names = sorted(level)
        if names:
            generations.append(np.arange(len(order), len(order) + len(names)))
            order.extend(names)
    m_index = {name: i for i, name in enumerate(order)}
    loads = tuple(plan.loads)
    l_index = {name: i for i, name in enumerate(loads)}

    parents, index, ratio, count, to_load, child = [], [], [], [], [], []
    for name in order:
        for i, branch in enumerate(plan.mirrors[name].branches):
            parents.append(m_index[name])
            index.append(i)
            ratio.append(branch.ratio)
            count.append(branch.count)
            is_load = branch.to in l_index
            to_load.append(is_load)
            child.append(l_index[branch.to] if is_load else m_index[branch.to])
    b_parent = np.array(parents, dtype=np.int64)
    b_ratio = np.array(ratio, dtype=float)
    b_count = np.array(count, dtype=float)
    b_to_load = np.array(to_load, dtype=bool)
    b_child = np.array(child, dtype=np.int64)

    n_m = len(order)
    m_in_branch = np.full(n_m, -1, dtype=np.int64)
    mirror_branches = np.flatnonzero(~b_to_load)
    m_in_branch[b_child[mirror_branches]] = mirror_branches
    l_branch = np.empty(len(loads), dtype=np.int64)
    load_branches = np.flatnonzero(b_to_load)
    l_branch[b_child[load_branches]] = load_branches

    m_mult = np.ones(n_m)
    for gen in generations[1:]:  # parents always sit in an earlier generation
        b = m_in_branch[gen]
        m_mult[gen] = m_mult[b_parent[b]] * b_count[b]
    l_mult = m_mult[b_parent[l_branch]] * b_count[l_branch]
    m_fanout = np.zeros(n_m)
    np.add.at(m_fanout, b_parent, b_ratio * b_count)

    kinds = [plan.devices[plan.mirrors[n].device].kind for n in order]
    return Tree(
        plan=plan,
        mirrors=tuple(order),
        loads=loads,
        generations=tuple(generations),
        m_sink=np.array([is_sink(k) for k in kinds], dtype=bool),
        m_bipolar=np.array([k in ("npn", "pnp") for k in kinds], dtype=bool),
        m_in_branch=m_in_branch,
        m_mult=m_mult,
        m_fanout=m_fanout,
        b_parent=b_parent,
        b_index=np.array(index, dtype=np.int64),
        b_ratio=b_ratio,
        b_count=b_count,
        b_to_load=b_to_load,
        b_child=b_child,
        l_branch=l_branch,
        l_mult=l_mult,
    )
