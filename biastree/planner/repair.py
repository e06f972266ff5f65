"""Repair a failing plan: keep the designer's tree, change as little as passes.

The same search as the planner (``search``), started from the designer's
plan, and allowed to touch only what fails: ratios of mirrors with failing
blocks are rebalanced (whole unit devices), failing mirrors get the cheapest
topology under which all of their blocks pass (every topology is tried on
every failing mirror at once, one check each), a block no topology can serve
on a shared mirror moves to a mirror of its own, devices grow where mismatch
dominates, and failing remote blocks get their current routed locally.  All
changes are found together and checked together; each is then priced by
taking it back alone (its marginal power and area).
"""

from __future__ import annotations

import copy
from dataclasses import dataclass
from typing import Any

from biastree.analysis.audit import Audit
from biastree.errors import SolveError
from biastree.input.model import Plan
from biastree.planner.costs import Figures, figures
from biastree.planner.search import Change, Infeasible, Rules, Search, evaluate, infeasible
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


def repair(tree: Tree, result: Audit, forward_bias: float | None = None, max_units: int = 64, price: int = 40) -> Repair:
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
    _price(changes[:price], data, search.data, after)
    bad = infeasible(new_tree, new_result) if not bool(new_result.passed.all()) else []
    return Repair(before, after, changes, bad, text, new_tree, new_result)


def _price(changes: list[Change], original: dict[str, Any], final: dict[str, Any], after: Figures) -> None:
    """Marginal cost of each mirror change: the final plan with that mirror put back."""
    for c in changes:
        if c.kind not in ("topology", "size", "rebalance") or c.target not in original["mirrors"]:
            continue
        trial = dict(final)
        trial["mirrors"] = dict(final["mirrors"])
        spec = copy.deepcopy(final["mirrors"][c.target])
        old = original["mirrors"][c.target]
        if c.kind == "topology":
            spec["topology"] = c.before
        elif c.kind == "size":
            spec["input_size"] = old.get("input_size", 1.0)
        else:
            spec = copy.deepcopy(old) | {"topology": spec.get("topology", "simple")}
            if len(spec["branches"]) != len(final["mirrors"][c.target]["branches"]):
                continue
        trial["mirrors"][c.target] = spec
        try:
            _, res = evaluate(trial)
        except (SolveError, ValueError):  # the plan without this change has no operating point: no price
            continue
        f = figures(res)
        c.power = after.overhead_power - f.overhead_power
        c.area = after.device_units - f.device_units
