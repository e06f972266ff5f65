"""Structural checks of a validated plan: the one place where a plan's
names, feeds, cycles, polarity, topology parameters, matching inputs and
floorplan are checked.  Field-level checks are pydantic's (``model``); the
loader runs both and reports every problem at once.

Every node fed once and reachable from the reference makes a tree; the rules
here guarantee that before ``biastree.tree`` builds its arrays.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from pydantic import BaseModel

from biastree.errors import format_path
from biastree.input.model import Plan, Plausible
from biastree.physics.topologies import TOPOLOGIES

if TYPE_CHECKING:
    import networkx as nx

REFERENCE = "reference"


def _hint(name: str, known: list[str]) -> str:
    close = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def is_sink(kind: str) -> bool:
    return kind in ("npn", "nmos")


def _check_spread(plan: Plan) -> list[tuple[tuple[Any, ...], str]]:
    """Matching coefficients given twice or without an area; matched pairs naming nothing."""
    out: list[tuple[tuple[Any, ...], str]] = []
    for name, dev in plan.devices.items():
        bipolar = dev.kind in ("npn", "pnp")
        pairs = (("a_is_pair", "a_is_single"),) if bipolar else (
            ("a_vt_pair", "a_vt_single"), ("a_beta_pair", "a_beta_single"))
        for pair, one in pairs:
            if getattr(dev, pair) is not None and getattr(dev, one) is not None:
                out.append((("devices", name, one), f"give either {pair} (a pair's σ) or {one} (one device's), not both"))
        if bipolar and (dev.a_is_pair or dev.a_is_single) and dev.area is None:
            out.append((("devices", name), "a bipolar matching coefficient needs the unit device's emitter area (area: 4um^2)"))
    for name, group in plan.matched.items():
        for k, load in enumerate(group.loads):
            if load not in plan.loads:
                out.append((("matched", name, "loads", k), f"no load named '{load}'{_hint(load, list(plan.loads))}"))
        if len(set(group.loads)) != len(group.loads):
            out.append((("matched", name, "loads"), "a matched pair needs two different loads"))
    return out


def levels(plan: Plan) -> list[list[str]]:
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
    return _structure(plan)[0]


def structure_tagged(plan: Plan) -> list[tuple[tuple[Any, ...], str, str]]:
    """``check_structure`` with what each problem depends on beyond its own
    place: ``reach`` (every feed), ``supply``, ``kind:m1:m2`` (those mirrors'
    device kinds) or ``""``.  The loader uses it to keep the structural
    problems that field errors elsewhere do not make meaningless."""
    problems, tags = _structure(plan)
    return [(path, message, tags.get(i, "")) for i, (path, message) in enumerate(problems)]


def _structure(plan: Plan) -> tuple[list[tuple[tuple[Any, ...], str]], dict[int, str]]:
    problems: list[tuple[tuple[Any, ...], str]] = []
    tags: dict[int, str] = {}
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
        family = "bjt" if device.kind in ("npn", "pnp") else "mos"
        topo = TOPOLOGIES[mirror.topology]
        if family not in topo.kinds:
            problems.append(
                (("mirrors", name, "topology"), f"topology '{topo.name}' is not available for {device.kind} devices")
            )
            tags[len(problems) - 1] = f"kind:{name}"
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
                tags[len(problems) - 1] = f"kind:{name}:{target}"

    reachable = {m for level in levels(plan) for m in level}
    reachable |= {b.to for m in reachable for b in mirrors[m].branches if b.to in loads}
    in_cycle: set[str] = set()
    # Every node fed once and reachable from the reference makes a tree: no
    # cycle is possible, so the (slower) search only runs when something is off.
    if problems or len(reachable) < len(mirrors) + len(loads):
        for cycle in _cycles(plan_graph(plan)):
            text = " -> ".join(cycle + [cycle[0]])
            problems.append((("mirrors", cycle[0]), f"cycle: {text}"))
            in_cycle.update(cycle)  # a cycle is reported once, not as unreachable too
    for name in mirrors:
        if name not in fed_by:
            why = f" (reference.feeds names '{ref.feeds}')" if ref.feeds not in mirrors else ""
            problems.append((("mirrors", name), f"never fed: no branch or reference drives this mirror{why}"))
            tags[len(problems) - 1] = "reach"
        elif name not in reachable and name not in in_cycle:
            problems.append((("mirrors", name), _unreachable(name, fed_by, in_cycle)))
            tags[len(problems) - 1] = "reach"
    for name in loads:
        if name not in fed_by:
            problems.append((("loads", name), "never fed: no branch drives this load"))
            tags[len(problems) - 1] = "reach"

    problems += check_floorplan(plan)
    problems += _check_spread(plan)
    for name, load in loads.items():
        lo, _, hi = load.v_range
        if lo < 0 or hi > plan.supply:
            problems.append(
                (("loads", name, "voltage"), f"node voltage must lie between 0 V and the supply ({plan.supply:g} V)")
            )
            tags[len(problems) - 1] = "supply"
    problems += _check_instances(plan)
    problems += check_plausible(plan)
    return problems, tags


MAX_INSTANCES = 1e9  # copies of one load, over all counts on its path


def _check_instances(plan: Plan) -> list[tuple[tuple[Any, ...], str]]:
    """Counts that multiply down the tree to more copies than any chip holds."""
    mult = {plan.reference.feeds: 1.0}
    out = []
    for level in levels(plan):
        for name in level:
            for i, branch in enumerate(plan.mirrors[name].branches):
                copies = mult.get(name, 1.0) * branch.count
                if copies > MAX_INSTANCES:
                    out.append((("mirrors", name, "branches", i, "count"),
                                f"the counts above make {copies:.3g} copies of '{branch.to}'; at most {MAX_INSTANCES:.0e}"))
                    copies = 1.0  # reported once, at the top
                if branch.to in plan.mirrors:
                    mult[branch.to] = copies
    return out


def _unreachable(name: str, fed_by: dict[str, tuple[Any, ...]], in_cycle: set[str]) -> str:
    """Why a fed mirror is not reachable: the first unfed ancestor or the cycle above it."""
    seen = {name}
    node = name
    while True:
        where = fed_by.get(node)
        if where is None:
            return f"not reachable from the reference: '{node}' above it is never fed"
        if where[0] == "reference":
            return "not reachable from the reference"  # not expected: reachable by definition
        node = where[1]
        if node in in_cycle:
            return f"not reachable from the reference (it hangs below the cycle through '{node}')"
        if node in seen:
            return "not reachable from the reference (it hangs below a cycle)"
        seen.add(node)


def plan_graph(plan: Plan) -> "nx.DiGraph":
    """The plan as a networkx DiGraph: reference → mirrors → loads (edges carry branch, ratio, count)."""
    import networkx as nx

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


def _cycles(graph: "nx.DiGraph") -> list[list[str]]:
    import networkx as nx

    out = []
    for component in nx.strongly_connected_components(graph):
        if len(component) > 1:
            start = min(component)
            cycle = nx.find_cycle(graph.subgraph(component), source=start)
            out.append([u for u, _ in cycle])
    return out


def check_floorplan(plan: Any) -> list[tuple[tuple[Any, ...], str]]:
    """Names in the floorplan that do not exist, and remote loads without positions."""
    fp = plan.floorplan
    if fp is None:
        return []
    out = []
    for name in fp.positions:
        if name not in plan.mirrors and name not in plan.loads:
            out.append((("floorplan", "positions", name), f"no mirror or load named '{name}'"))
    for k, name in enumerate(fp.remote):
        if name not in plan.loads:
            out.append((("floorplan", "remote", k), f"no load named '{name}'"))
            continue
        feeder = next((m for m, spec in plan.mirrors.items() if any(b.to == name for b in spec.branches)), None)
        if feeder is not None and plan.mirrors[feeder].topology in ("wilson", "wilson4"):
            out.append((("floorplan", "remote", k), f"'{name}' is fed by a Wilson mirror, whose output cannot be remote"))
        for who in (name, feeder):
            if who is not None and who not in fp.positions and name not in fp.offsets:
                out.append((("floorplan", "remote", k), f"'{name}' is remote, so '{who}' needs a position (or give offsets)"))
    for name in fp.offsets:
        if name not in fp.remote:
            out.append((("floorplan", "offsets", name), f"'{name}' is not listed under remote"))
    return out


# --- plausible values -------------------------------------------------------


def _ranges(model: type) -> list[tuple[str, Any, Any]]:
    """(field name, Plausible or None, alias) of the fields of a model class
    that carry a range or hold nested values (cached per class)."""
    cached = _RANGES.get(model)
    if cached is None:
        cached = []
        for name, field in model.model_fields.items():
            mark = next((m for m in field.metadata if isinstance(m, Plausible)), None)
            if mark is None:
                mark = _inner_mark(field.annotation)
            cached.append((name, mark, field.alias or name))
        _RANGES[model] = cached
    return cached


_RANGES: dict[type, list[tuple[str, Any, Any]]] = {}


def _inner_mark(annotation: Any) -> Any:
    """The Plausible mark of Annotated[...] inside Optional/list/tuple/Union annotations."""
    from typing import get_args

    for arg in get_args(annotation):
        meta = getattr(arg, "__metadata__", None)
        if meta:
            mark = next((m for m in meta if isinstance(m, Plausible)), None)
            if mark is not None:
                return mark
        mark = _inner_mark(arg)
        if mark is not None:
            return mark
    return None


def _outside(value: float, mark: Plausible) -> bool:
    x = abs(value) if mark.magnitude else value
    return not (mark.low <= x <= mark.high)


def _value_text(value: float, mark: Plausible) -> str:
    from biastree.units import format_si

    if mark.unit == "%":
        return f"{value * 100:.4g}%"
    if mark.unit == "K":
        return f"{value - 273.15:.4g}C"
    if mark.unit == "":
        return f"{value:.4g}"
    if value == 0 or 1e-18 <= abs(value) < 1e15:
        return format_si(value, mark.unit)
    return f"{value:.3g} {mark.unit}".strip()


def _range_text(mark: Plausible) -> str:
    lo, hi = _value_text(mark.low, mark), _value_text(mark.high, mark)
    return f"magnitude at most {hi}" if mark.magnitude and mark.low == 0 else f"{lo} … {hi}"


def check_plausible(plan: Plan) -> list[tuple[tuple[Any, ...], str]]:
    """Values outside the plausible range of an on-chip bias network (see
    ``Plausible`` on each field), except under the plan's ``allow_unusual`` keys.

    >>> from biastree.input.model import Load
    >>> plan = Plan.model_construct(loads={"a": Load(current=20, tolerance=0.05, voltage=1)}, allow_unusual=[])
    >>> check_plausible(plan)[0][0]
    ('loads', 'a', 'current')
    """
    allowed = [tuple(p.split(".")) for p in getattr(plan, "allow_unusual", [])]
    out: list[tuple[tuple[Any, ...], str]] = []

    def allowed_at(path: tuple[Any, ...]) -> bool:
        parts = tuple(str(k) for k in path if not isinstance(k, int))
        return any(parts[: len(a)] == a for a in allowed)

    def report(path: tuple[Any, ...], value: float, mark: Plausible) -> None:
        if allowed_at(path):
            return
        key = ".".join(str(k) for k in path if not isinstance(k, int))
        out.append((path, f"{_value_text(value, mark)} is outside the plausible range for an on-chip bias network "
                          f"({_range_text(mark)}); if you mean it, list '{key}' under allow_unusual"))

    def visit(value: Any, mark: Any, path: tuple[Any, ...]) -> None:
        if isinstance(value, dict) and len(value) > _BULK and _all_inside(list(value.values()), mark):
            return  # nothing to report in this section (checked in bulk); else visited in order
        if isinstance(value, BaseModel):
            for name, inner, alias in _ranges(type(value)):
                visit(getattr(value, name, None), inner, path + (alias,))
        elif isinstance(value, dict):
            for key, item in value.items():
                visit(item, mark, path + (key,))
        elif isinstance(value, (list, tuple)):
            for k, item in enumerate(value):
                visit(item, mark, path + (k,))
        elif mark is not None and isinstance(value, (int, float)) and not isinstance(value, bool):
            if _outside(float(value), mark):
                report(path, float(value), mark)

    visit(plan, None, ())
    return out


_BULK = 64  # sections with more entries than this are first checked in bulk


def _all_inside(values: list[Any], mark: Any) -> bool:
    """True when no number inside ``values`` (models of one class, or plain
    numbers, tuples and lists of them) lies outside its plausible range:
    then ``check_plausible`` has nothing to say about them.  False also
    means "not sure" (the caller then visits them one by one, in order)."""
    from operator import attrgetter

    import numpy as np

    if not values:
        return True
    types = set(map(type, values))
    if len(types) == 1 and issubclass(next(iter(types)), BaseModel):
        for name, inner, _ in _ranges(next(iter(types))):
            if not _all_inside(list(map(attrgetter(name), values)), inner):
                return False
        return True
    if types <= _PLAIN:
        if mark is None or not types & {float, int}:
            return True
        if bool in types or type(None) in types:
            values = [v for v in values if type(v) in (float, int)]
        x = np.array(values, dtype=float)
        if mark.magnitude:
            x = np.abs(x)
        return bool(np.all((mark.low <= x) & (x <= mark.high)))
    if types <= _PLAIN | {tuple, list}:
        inner_values = [item for v in values if type(v) in (tuple, list) for item in v]
        plain = [v for v in values if type(v) not in (tuple, list)]
        return _all_inside(plain, mark) and _all_inside(inner_values, mark)
    return False


_PLAIN = frozenset((float, int, bool, str, type(None)))


# --- large plans: the structure proved in bulk ---------------------------------


@dataclass(frozen=True)
class Layout:
    """A plan's tree as arrays, proved free of structural problems in bulk.

    Mirror indices are in plan order (``names``); ``depth`` is each mirror's
    generation (0 for the one the reference feeds).  Branches are flattened
    in plan order: ``b_parent`` owns branch k, which is the ``b_index``-th of
    its list and drives mirror ``b_mirror`` or load ``b_load`` (-1 for the
    other kind)."""

    names: list[str]
    depth: Any
    kinds: list[str]
    b_parent: Any
    b_index: Any
    b_mirror: Any
    b_load: Any
    b_ratio: Any
    b_count: Any


_MAX_GENERATIONS = 2000


def clean_layout(plan: Plan) -> Layout | None:
    """The tree's arrays when ``check_structure`` would find nothing, proved
    with whole-array tests; ``None`` when anything is off or unsure (then
    ``check_structure`` runs and says what, in its order and words)."""
    import numpy as np

    mirrors, loads, devices = plan.mirrors, plan.loads, plan.devices
    if REFERENCE in mirrors or REFERENCE in loads or not mirrors.keys().isdisjoint(loads):
        return None
    names = list(mirrors)
    specs = list(mirrors.values())
    m_index = {name: i for i, name in enumerate(names)}
    l_index = {name: i for i, name in enumerate(loads)}
    kinds = []
    for name, mirror in zip(names, specs):
        device = devices.get(mirror.device)
        if device is None:
            return None
        topo = TOPOLOGIES[mirror.topology]
        if ("bjt" if device.kind in ("npn", "pnp") else "mos") not in topo.kinds:
            return None
        if topo.params != _NO_PARAMS or topo.single_output or not mirror.model_fields_set.isdisjoint(_TOPOLOGY_KEYS):
            if _topology_params(name, mirror, topo):
                return None
        kinds.append(device.kind)
    n_m = len(names)
    counts = [len(m.branches) for m in specs]
    branches = [b for m in specs for b in m.branches]
    targets = [b.to for b in branches]
    b_mirror = np.array([m_index.get(t, -1) for t in targets], dtype=np.int64)
    b_load = np.array([l_index.get(t, -1) for t in targets], dtype=np.int64)
    b_parent = np.repeat(np.arange(n_m, dtype=np.int64), counts)
    starts = np.cumsum(counts) - np.asarray(counts)
    b_index = np.arange(len(branches), dtype=np.int64) - np.repeat(starts, counts)
    root = m_index.get(plan.reference.feeds)
    if root is None or np.any((b_mirror < 0) & (b_load < 0)) or np.any(b_mirror == b_parent):
        return None
    to_mirror = b_mirror >= 0
    fed = np.bincount(b_mirror[to_mirror], minlength=n_m)
    if fed[root] != 0 or np.any(np.delete(fed, root) != 1):
        return None
    if len(loads) and not np.all(np.bincount(b_load[b_load >= 0], minlength=len(loads)) == 1):
        return None
    sink = np.array([is_sink(k) for k in kinds], dtype=bool)
    if np.any(sink[b_parent[to_mirror]] == sink[b_mirror[to_mirror]]):
        return None  # polarity
    # generations: each mirror but the root is fed exactly once, so walking down from the root
    # reaches every mirror unless some hang in a cycle
    parent_of = np.full(n_m, -1, dtype=np.int64)
    parent_of[b_mirror[to_mirror]] = b_parent[to_mirror]
    b_count = np.array([b.count for b in branches], dtype=float)
    feeding = np.full(n_m, -1, dtype=np.int64)
    feeding[b_mirror[to_mirror]] = np.flatnonzero(to_mirror)
    depth = np.full(n_m, -1, dtype=np.int64)
    mult = np.ones(n_m)
    by_parent = np.argsort(parent_of, kind="stable")
    first = np.searchsorted(parent_of[by_parent], np.arange(n_m), side="left")
    last = np.searchsorted(parent_of[by_parent], np.arange(n_m), side="right")
    frontier = np.array([root], dtype=np.int64)
    depth[root] = 0
    for generation in range(1, _MAX_GENERATIONS + 1):
        sizes = last[frontier] - first[frontier]
        total = int(sizes.sum())
        if total == 0:
            break
        offsets = np.repeat(first[frontier] - (np.cumsum(sizes) - sizes), sizes) + np.arange(total)
        frontier = by_parent[offsets]
        depth[frontier] = generation
        b = feeding[frontier]
        mult[frontier] = mult[parent_of[frontier]] * b_count[b]
    else:
        return None  # deeper than this: the general walk
    if np.any(depth < 0):
        return None  # unreachable (below a cycle)
    if np.any(mult[b_parent] * b_count > MAX_INSTANCES):
        return None
    v = [load.v_range for load in loads.values()]
    if v:
        lo_hi = np.array([(r[0], r[2]) for r in v], dtype=float)
        if not (np.all(lo_hi[:, 0] >= 0) and np.all(lo_hi[:, 1] <= plan.supply)):
            return None
    if check_floorplan(plan) or _check_spread(plan) or check_plausible(plan):
        return None
    b_ratio = np.array([b.ratio for b in branches], dtype=float)
    return Layout(names, depth, kinds, b_parent, b_index, b_mirror, b_load, b_ratio, b_count)


_NO_PARAMS: tuple[str, ...] = ()
