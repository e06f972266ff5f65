"""Plan a bias tree from a block list.

1. **Requests that cannot be met** are found first where a rule says so
   outright (a budget no wider than the reference tolerance; a block current
   no whole-unit ratio within the limits can reach from the reference).
2. **Leaves**: blocks are grouped into mirrors (``grouping``).
3. **Levels**: a sinking leaf hangs on a sourcing mirror and vice versa, so
   sinking leaves get sourcing feeders, and everything that needs a sinking
   parent hangs on the root mirror the reference drives; when more than
   ``max_outputs`` mirrors need one parent, a further pair of levels is added
   (neighbours on the die share a feeder).
4. **Intermediate currents and ratios**: each mirror's input current is the
   least (objective ``power``) or the largest (``area``) the limits allow —
   within √max_ratio of the reference on either side so that any feeder can
   reach any child — and every ratio is whole units / whole units.
5. **Search with the checker** (``search``): rebalance ratios, upgrade
   topologies, split, size devices, until every block passes or nothing is
   left to try; what still fails is reported as infeasible.
6. The plan is written and **checked again from its text**: the verdicts the
   planner reports are those of ``biastree check`` on the written file.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from biastree.analysis.audit import Audit
from biastree.analysis.pipeline import check_tree
from biastree.input.blocks import BlockList
from biastree.input.loader import parse_text, validate
from biastree.planner.costs import Figures, figures, pareto
from biastree.planner.evaluation import Change, Infeasible, Rules, infeasible
from biastree.planner.grouping import Leaf, chunks, group
from biastree.planner.ratios import realise
from biastree.planner.search import Search
from biastree.planner.writer import to_yaml
from biastree.tree.arrays import Tree, build


@dataclass
class Outcome:
    """What the planner decided and how the written plan checks."""

    data: dict[str, Any] | None
    text: str | None
    tree: Tree | None
    result: Audit | None
    figures: Figures | None
    infeasible: list[Infeasible]
    changes: list[Change] = field(default_factory=list)
    decisions: list[str] = field(default_factory=list)
    alternatives: list[tuple[Figures, "Outcome"]] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.result is not None and not self.infeasible and bool(self.result.passed.all())


@dataclass
class _Node:
    name: str
    sink: bool  # polarity of this mirror
    current: float  # designed input current of one instance
    position: tuple[float, float] | None
    spec: dict[str, Any]


def _prechecks(blocks: BlockList) -> list[Infeasible]:
    out = []
    ref = blocks.reference
    lim = blocks.limits
    reach = lim.max_ratio * math.sqrt(lim.max_ratio)
    for n in sorted(blocks.blocks):
        b = blocks.blocks[n]
        if b.tolerance <= ref.tolerance:
            out.append(Infeasible(n, "budget tighter than the reference tolerance", ref.tolerance - b.tolerance, "%",
                                  f"budget ±{b.tolerance * 100:.3g} % ≤ reference tolerance ±{ref.tolerance * 100:.3g} %: "
                                  "no tree can deliver it"))
        if b.current > ref.current * reach * (1 + 1e-9):
            out.append(Infeasible(n, "current beyond reach", b.current - ref.current * reach, "A",
                                  f"more than max_ratio^1.5 = {reach:.3g}× the reference current (raise max_ratio or the reference)"))
        elif b.current < ref.current / reach * (1 - 1e-9):
            out.append(Infeasible(n, "current beyond reach", ref.current / reach - b.current, "A",
                                  f"less than 1/{reach:.3g} of the reference current (lower the reference or raise max_ratio)"))
    return out


def _window(blocks: BlockList, currents: list[float]) -> tuple[float, float]:
    """Allowed input current of a mirror feeding ``currents`` (lo may exceed hi: then lo wins)."""
    lim = blocks.limits
    s = math.sqrt(lim.max_ratio)
    ref = blocks.reference.current
    lo = max(lim.intermediate_current[0], ref / s, max(currents) / lim.max_ratio)
    hi = min(lim.intermediate_current[1], ref * s, min(currents) * lim.max_ratio)
    return lo, max(lo, hi)


def _choose(lo: float, hi: float, objective: str, scale: float) -> float:
    if objective == "area":
        return max(lo, hi / scale)
    return min(hi, lo * scale)


def _branches(children: list[tuple[str, float, int]], i_in: float, allowed: list[float], max_units: int) -> tuple[float, list[dict[str, Any]]]:
    ratios = [c / i_in for _, c, _ in children]
    got = realise(ratios, allowed, max_units)
    if got is None:
        n_in, units = 1, [max(1, round(r)) for r in ratios]
    else:
        n_in, units = got
    branches = []
    for (to, _, count), u in zip(children, units):
        b: dict[str, Any] = {"to": to, "ratio": u / n_in}
        if count != 1:
            b["count"] = count
        branches.append(b)
    return float(n_in), branches


def _first_topology(blocks: BlockList, device: str, fanout: float, tight: float) -> str:
    dev = blocks.devices[device]
    allowed = blocks.limits.topologies
    if dev.kind in ("npn", "pnp") and (1.0 + fanout) / dev.beta > 0.5 * tight:  # type: ignore[union-attr]
        if allowed is None or "beta_helper" in allowed:
            return "beta_helper"
    return "simple"


def skeleton(blocks: BlockList, leaves: list[Leaf], objective: str = "power", scale: float = 1.0) -> tuple[dict[str, Any], list[str]]:
    """Plain plan data for the leaves: levels, feeders, currents, whole-unit ratios."""
    lim = blocks.limits
    ref = blocks.reference
    used = set(blocks.blocks)

    def fresh(base: str) -> str:
        name = base
        while name in used:
            name += "_m"
        used.add(name)
        return name

    mirrors: dict[str, dict[str, Any]] = {}
    positions: dict[str, tuple[float, float]] = {}
    counters = {"snk": 0, "src": 0}
    nodes_sink: list[_Node] = []  # sinking mirrors that need a sourcing parent
    nodes_source: list[_Node] = []  # sourcing mirrors that need a sinking parent
    for leaf in leaves:
        sink = leaf.direction == "sink"
        tag = "snk" if sink else "src"
        counters[tag] += 1
        name = fresh(f"{tag}{counters[tag]}")
        currents = [blocks.blocks[n].current for n in leaf.blocks]
        lo, hi = _window(blocks, currents)
        i_in = _choose(lo, hi, objective, scale)
        slack = [max(blocks.blocks[n].tolerance - ref.tolerance, 1e-4) for n in leaf.blocks]
        n_in, branches = _branches([(n, blocks.blocks[n].current, blocks.blocks[n].count) for n in leaf.blocks], i_in,
                                   [0.15 * s for s in slack], lim.max_units)
        fan = sum(b["ratio"] * b.get("count", 1) for b in branches)
        spec = {"device": leaf.device, "input_size": n_in,
                "topology": _first_topology(blocks, leaf.device, fan, min(slack)), "branches": branches}
        mirrors[name] = spec
        if leaf.position is not None:
            positions[name] = leaf.position
        node = _Node(name, sink, i_in, leaf.position, spec)
        (nodes_sink if sink else nodes_source).append(node)

    dev_sink = _pick(blocks, "sink")
    dev_source = _pick(blocks, "source") if nodes_sink or len(nodes_source) > lim.max_outputs else None

    def feeders(children: list[_Node], sink: bool) -> list[_Node]:
        out = []
        for part in chunks(list(range(len(children))), [c.position for c in children], lim.max_outputs):
            kids = [children[k] for k in part]
            tag = "fn" if sink else "fp"
            counters[tag] = counters.get(tag, 0) + 1
            name = fresh(f"{tag}{counters[tag]}")
            lo, hi = _window(blocks, [c.current for c in kids])
            i_in = _choose(lo, hi, objective, scale)
            n_in, branches = _branches([(c.name, c.current, 1) for c in kids], i_in, [0.01] * len(kids), lim.max_units)
            device = dev_sink if sink else dev_source
            assert device is not None
            fan = sum(b["ratio"] for b in branches)
            spec = {"device": device, "input_size": n_in,
                    "topology": _first_topology(blocks, device, fan, 0.02), "branches": branches}
            mirrors[name] = spec
            pts = [c.position for c in kids if c.position is not None]
            pos = (float(np.mean([p[0] for p in pts])), float(np.mean([p[1] for p in pts]))) if pts else None
            if pos is not None:
                positions[name] = pos
            out.append(_Node(name, sink, i_in, pos, spec))
        return out

    need_sink_parent = list(nodes_source)
    need_source_parent = list(nodes_sink)
    levels = 1
    while True:
        if need_source_parent:
            need_sink_parent += feeders(need_source_parent, sink=False)
            need_source_parent = []
            levels += 1
        if len(need_sink_parent) <= lim.max_outputs:
            break
        need_source_parent = feeders(need_sink_parent, sink=True)
        need_sink_parent = []
        levels += 1
    root = fresh("root")
    n_in, branches = _branches([(c.name, c.current, 1) for c in need_sink_parent], ref.current,
                               [0.01] * len(need_sink_parent), lim.max_units)
    fan = sum(b["ratio"] for b in branches)
    mirrors = {root: {"device": dev_sink, "input_size": n_in, "topology": _first_topology(blocks, dev_sink, fan, 0.02),
                      "branches": branches}, **mirrors}
    if ref.position is not None:
        positions[root] = ref.position
    data = _plan_data(blocks, root, mirrors, positions)
    notes = [f"{len(leaves)} block mirror(s) ({sum(1 for lf in leaves if lf.direction == 'sink')} sinking, "
             f"{sum(1 for lf in leaves if lf.direction == 'source')} sourcing), {len(mirrors) - len(leaves)} distribution "
             f"mirror(s) including the root; {levels} level(s) of mirrors below the reference"]
    return data, notes


def _pick(blocks: BlockList, direction: str) -> str:
    from biastree.input.blocks import devices_for

    return devices_for(blocks, direction)[0]


def _plan_data(blocks: BlockList, root: str, mirrors: dict[str, Any], positions: dict[str, Any]) -> dict[str, Any]:
    dump = blocks.model_dump(by_alias=True, exclude_none=True, exclude_defaults=True)
    ref = {k: v for k, v in blocks.reference.model_dump(by_alias=True, exclude_none=True, exclude_defaults=True).items()
           if k not in ("position", "feeds")}
    ref["current"] = blocks.reference.current
    ref["feeds"] = root
    loads = {}
    for n in sorted(blocks.blocks):
        b = blocks.blocks[n]
        loads[n] = {"current": b.current, "tolerance": b.tolerance,
                    "voltage": list(b.voltage) if isinstance(b.voltage, tuple) else b.voltage}
        if b.position is not None:
            positions[n] = b.position
    data: dict[str, Any] = {"title": blocks.title or "Planned bias tree", "supply": blocks.supply,
                            "temperature": dump.get("temperature", "27C"),
                            "devices": dump["devices"], "reference": ref, "mirrors": mirrors, "loads": loads}
    for key in ("compliance", "conditions", "spread", "matched"):
        if key in dump:
            data[key] = dump[key]
    if blocks.floorplan is not None or positions:
        fp = dump.get("floorplan", {})
        fp = {k: v for k, v in fp.items() if k not in ("positions", "remote", "offsets")}
        fp["positions"] = positions
        data["floorplan"] = fp
    return data


def rules_for(blocks: BlockList) -> Rules:
    lim = blocks.limits
    return Rules(max_units=lim.max_units, max_ratio=lim.max_ratio, max_fanout=lim.max_fanout,
                 min_current=lim.intermediate_current[0],
                 topologies=set(lim.topologies) if lim.topologies is not None else None,
                 block_topologies={n: set(b.topologies) for n, b in blocks.blocks.items() if b.topologies is not None})


def finish(data: dict[str, Any], header: str, source: str = "planned plan") -> tuple[str, Tree, Audit]:
    """Write the plan's text and check it from that text (what `biastree check` will see)."""
    from biastree.input.model import Plan

    text = to_yaml(data, header)
    doc = parse_text(text, source)
    plan = validate(doc, Plan)
    tree = build(plan, doc.line_of, source)
    return text, tree, check_tree(tree, detail=False)  # verdicts do not depend on the detail


def plan_blocks(blocks: BlockList, objective: str = "power", scale: float = 1.0, search: bool = True,
                split_all: bool = False, alternatives: bool = False) -> Outcome:
    """Plan a tree for ``blocks``; ``alternatives`` also plans with larger
    intermediate currents and returns the Pareto set of the passing plans.

    >>> from biastree.input.blocks import load_blocks
    >>> out = plan_blocks(load_blocks("samples/blocks_sensor_hub.yaml"))
    >>> out.ok
    True
    """
    pre = _prechecks(blocks)
    if pre:
        return Outcome(None, None, None, None, None, pre)
    leaves = group(blocks, split_all=split_all)
    data, notes = skeleton(blocks, leaves, objective, scale)
    changes: list[Change] = []
    if search:
        s = Search(data, rules_for(blocks))
        s.run()
        data, changes = s.data, s.changes
    header = ("Planned by biastree plan from a block list" + (f" ({blocks.title})" if blocks.title else "")
              + ".\nEvery block's verdict below is what `biastree check` gives on this file.")
    text, tree, result = finish(data, header)
    fig = figures(result)
    bad = infeasible(tree, result) if not bool(result.passed.all()) else []
    if blocks.limits.area_budget is not None and fig.device_units > blocks.limits.area_budget and not bad:
        bad.append(Infeasible("(whole tree)", "area budget", fig.device_units - blocks.limits.area_budget, "",
                              f"the passing plan needs {fig.device_units:g} unit devices, the budget is "
                              f"{blocks.limits.area_budget:g}"))
    out = Outcome(data, text, tree, result, fig, bad, changes, notes + _decisions(tree, changes))
    if alternatives:
        cands: list[tuple[Figures, Outcome]] = [(fig, out)]
        for obj, sc in (("power", 2.0), ("power", 4.0), ("area", 1.0), ("area", 4.0)):
            if (obj, sc) == (objective, scale):
                continue
            alt = plan_blocks(blocks, obj, sc, search)
            if alt.figures is not None and not alt.infeasible:
                cands.append((alt.figures, alt))
        out.alternatives = pareto(cands)[:5]
    return out


def _decisions(tree: Tree, changes: list[Change]) -> list[str]:
    plan = tree.plan
    topo: dict[str, int] = {}
    for m in tree.mirrors:
        t = plan.mirrors[m].topology
        topo[t] = topo.get(t, 0) + 1
    kinds: dict[str, int] = {}
    for c in changes:
        kinds[c.kind] = kinds.get(c.kind, 0) + 1
    lines = ["topologies: " + ", ".join(f"{n} × {t}" for t, n in sorted(topo.items()))]
    if kinds:
        lines.append("search steps: " + ", ".join(f"{n} {k}" for k, n in sorted(kinds.items())))
    return lines
