"""Repair a failing plan: keep the designer's tree, change as little as passes.

The same search as the planner (``search``), started from the designer's
plan, and allowed to touch only what fails: ratios of mirrors with failing
blocks are rebalanced (whole unit devices), failing mirrors get the cheapest
topology under which all of their blocks pass (every topology is tried on
every failing mirror at once, one check each), a block no topology can serve
on a shared mirror moves to a mirror of its own, devices grow where mismatch
dominates, and failing remote blocks get their current routed locally.  All
changes are found together and checked together; each is then priced by
reading both checked plans (its unit devices and the current it draws besides its outputs).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from biastree.analysis.audit import Audit
from biastree.input.model import Plan
from biastree.physics.topologies import TOPOLOGIES
from biastree.planner.costs import Figures, figures
from biastree.planner.evaluation import Change, Infeasible, Rules, infeasible
from biastree.planner.search import Search
from biastree.planner.synthesis import finish
from biastree.tree.arrays import Tree


@dataclass
class Repair:
    before: Figures
    after: Figures
    changes: list[Change]
    infeasible: list[Infeasible]
    text: str
    tree: Tree
    result: Audit

    @property
    def ok(self) -> bool:
        return not self.infeasible and bool(self.result.passed.all())


def plan_data(plan: Plan) -> dict[str, Any]:
    """A validated plan as plain data the search edits (SI floats)."""
    data = plan.model_dump(by_alias=True, exclude_none=True, exclude_defaults=True)
    data["supply"] = plan.supply
    data.setdefault("temperature", "27C")
    for load in data["loads"].values():
        if isinstance(load["voltage"], tuple):
            load["voltage"] = list(load["voltage"])
    for m in data["mirrors"].values():
        m.setdefault("input_size", 1.0)
        m.setdefault("topology", "simple")
    if plan.floorplan is not None:
        fp = data.setdefault("floorplan", {})
        fp["remote"] = list(plan.floorplan.remote)
        fp.setdefault("positions", {})
    return data


def repair(tree: Tree, result: Audit, forward_bias: float | None = None, max_units: int = 64) -> Repair:
    """Find a small combined set of changes that makes every load of ``tree`` pass."""
    data = plan_data(tree.plan)
    if forward_bias is not None:
        data["compliance"] = {"bjt_forward_bias": forward_bias}
    before = figures(result)
    failing = {tree.mirrors[int(tree.b_parent[tree.l_branch[i]])] for i in range(len(tree.loads)) if not result.passed[i]}
    search = Search(data, Rules(max_units=max_units))
    search.touch = failing | {m for m in data["mirrors"] if m not in tree.plan.mirrors}
    search.run()
    changes = search.changes
    if forward_bias is not None and forward_bias != tree.plan.compliance.bjt_forward_bias:
        changes.insert(0, Change("compliance", "compliance.bjt_forward_bias", f"{tree.plan.compliance.bjt_forward_bias:g} V",
                                 f"{forward_bias:g} V", "allowed by --forward-bias (V_CE stays above saturation)"))
    header = "Repaired by biastree plan --repair; every change is listed in its output.\n" + (tree.plan.title or "")
    text, new_tree, new_result = finish(search.data, header, "repaired plan")
    after = figures(new_result)
    _price(changes, tree, result, new_tree, new_result)
    bad = infeasible(new_tree, new_result) if not bool(new_result.passed.all()) else []
    return Repair(before, after, changes, bad, text, new_tree, new_result)


def _units(plan: Plan, tree: Tree, name: str) -> float:
    spec = plan.mirrors[name]
    m = tree.mirrors.index(name)
    return float(tree.m_mult[m]) * TOPOLOGIES[spec.topology].units(
        spec.input_size, float(tree.m_fanout[m]), {"helper_size": spec.helper_size, "swing_n": spec.swing_n})


def _price(changes: list[Change], tree: Tree, result: Audit, new_tree: Tree, new_result: Audit) -> None:
    """Cost of each mirror change, read from the two checked plans (no extra solve):
    unit devices as the audit counts them, and the current the mirror draws besides its
    outputs (helpers, bias devices) times the supply.  A mirror changed twice carries its whole change."""
    supply = tree.plan.supply
    for c in changes:
        if c.kind not in ("topology", "size", "rebalance") or c.target not in tree.mirrors or c.target not in new_tree.mirrors:
            continue
        m0, m1 = tree.mirrors.index(c.target), new_tree.mirrors.index(c.target)
        c.area = _units(new_tree.plan, new_tree, c.target) - _units(tree.plan, tree, c.target)
        c.power = supply * float(new_result.op.m_extra[m1, 1] * new_tree.m_mult[m1] - result.op.m_extra[m0, 1] * tree.m_mult[m0])
    seen: set[str] = set()
    for c in changes:  # one mirror's cost is shown once, on its first change
        if c.target in seen:
            c.power = c.area = 0.0
        seen.add(c.target)
