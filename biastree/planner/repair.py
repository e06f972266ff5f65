"""Repair a failing plan: keep the designer's tree, find a small combined set of
changes under which every load passes, or say precisely what cannot pass.

Method (every judgement is ``check_tree`` on the edited plan, as ``biastree check``):

1. Each mirror that feeds a failing load (or whose output leaves a child
   mirror without headroom) is a *target*.  Its candidate fixes, cheapest
   kind first (``moves``): rebalanced ratios; every other allowed topology;
   larger (MOS: also longer) devices where mismatch or compliance decides;
   a remote load's output device moved beside the mirror; a failing load
   moved to a nearby mirror of the same device; a failing load split off to
   a mirror of its own fed by the same parent.
2. The k-th candidate of *every* target is applied at once and checked, the
   ratios of every touched mirror are then rebalanced from that check (twice:
   a new ratio changes the fan-out, hence the β loading) and checked again —
   three checks per level, whatever the number of targets.  Targets in
   different subtrees do not disturb each other (a leaf mirror's edit
   changes only its own loads; a split adds a branch to the parent, which the
   next round rebalances if a sibling moved).
3. Per target, the cheapest candidate under which all of its loads pass is
   kept (power, area or margin first, per the objective); all kept
   candidates are applied together and checked together; a round repeats
   while loads fail and the count falls.
4. What still fails is reported with the block, the constraint that decides
   and by how much, and what was tried.

Each change is priced from the final checked plan against the original:
unit devices (and MOS gate area) of the mirrors it touched, and the overhead
current they draw (helpers, bias devices, branches into other mirrors) × supply.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from biastree.analysis.audit import Audit
from biastree.analysis.pipeline import check_tree
from biastree.errors import BiasTreeError
from biastree.input.model import Plan
from biastree.planner.costs import Figures, figures
from biastree.planner.evaluation import Evaluator, Infeasible, infeasible
from biastree.planner.moves import Limits, Move, State, candidates, grown, mirror_cost, ratio_text
from biastree.planner.synthesis import finish
from biastree.tree.arrays import Tree
from biastree.units import format_percent, format_si


@dataclass
class Fix:
    """One change, in a designer's words: what, why, before → after, effect, cost."""

    kind: str  # rebalance, topology, size, longer, local, move, split, compliance
    target: str  # the mirror (or load) changed
    loads: list[str]  # the failing loads it is for
    before: str
    after: str
    why: str  # the deciding term, in plain words
    how: str = ""  # why this change answers it
    effect: str = ""  # worst margin of those loads before → after
    power: float = 0.0  # W added
    area: float = 0.0  # unit devices added
    gate_area: float = 0.0  # m² of MOS gate added
    touched: tuple[str, ...] = ()  # mirrors it changed (priced on it unless an earlier change had them)

    @property
    def what(self) -> str:
        return self.kind


@dataclass
class Repair:
    before: Figures
    after: Figures
    changes: list[Fix]
    infeasible: list[Infeasible]
    text: str
    tree: Tree
    result: Audit
    checks: int = 0  # plans checked by the search
    rounds: list[tuple[int, int, int]] = field(default_factory=list)  # (failing loads, levels, checks) per round

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


def repair(tree: Tree, result: Audit, forward_bias: float | None = None, max_units: int = 64,
           objective: str = "power", rounds: int = 6) -> Repair:
    """Find a small combined set of changes that makes every load of ``tree`` pass.

    >>> import biastree
    >>> tree = biastree.load("samples/die_spread.yaml")
    >>> fixed = repair(tree, biastree.check("samples/die_spread.yaml"))
    >>> fixed.ok, [c.kind for c in fixed.changes]
    (True, ['local'])
    """
    detailed = result if result.op.b_factors else check_tree(tree)
    before = figures(result)
    fixes: list[Fix] = []
    data = plan_data(tree.plan)
    if forward_bias is not None and forward_bias != tree.plan.compliance.bjt_forward_bias:
        data["compliance"] = dict(data.get("compliance", {}), bjt_forward_bias=forward_bias)
        fixes.append(Fix("compliance", "compliance.bjt_forward_bias", [], f"{tree.plan.compliance.bjt_forward_bias:g} V",
                         f"{forward_bias:g} V", "allowed by --forward-bias (V_CE stays above saturation)"))
    header = "Repaired by biastree plan --repair; every change is listed in its output.\n" + (tree.plan.title or "")
    if not fixes and bool(result.passed.all()):
        text, _, _ = finish(data, header, "repaired plan")
        return Repair(before, before, [], [], text, tree, result)
    state = State(data, Evaluator(), Limits(max_units=max_units, objective=objective))
    state.check()
    hopeless = _hopeless(state)
    search_rounds(state, hopeless, detailed, fixes, rounds)
    text, new_tree, new_result = finish(state.data, header, "repaired plan")
    after = figures(new_result)
    _price(fixes, tree, result, new_tree, new_result, state)
    _effects(fixes, tree, result, new_tree, new_result)
    bad = _explain(new_tree, new_result, state, hopeless) if not bool(new_result.passed.all()) else []
    return Repair(before, after, _merged(fixes), bad, text, new_tree, new_result, state.evaluate.calls, state.rounds)


def search_rounds(state: State, hopeless: dict[int, Infeasible], detailed: Audit | None, fixes: list[Fix],
                  rounds: int = 6) -> None:
    """Rounds of combined moves while loads fail (below the state's bar) and their number falls."""
    last = None
    for _ in range(rounds):
        failing = int((~state.ok(state.result)).sum())
        if failing == 0 or (last is not None and failing >= last):
            break
        last = failing
        c0, l0 = state.evaluate.calls, state.levels
        kept = _round(state, hopeless, detailed, fixes)
        state.rounds.append((failing, state.levels - l0, state.evaluate.calls - c0))
        if not kept:
            break


def improve(data: dict[str, Any], bar: float, objective: str = "power", max_units: int = 64,
            topologies: set[str] | None = None) -> dict[str, Any]:
    """A passing plan's data with every load given at least ``bar`` of budget margin where the
    repair's moves can give it (the same moves, with "passing" raised to the bar)."""
    state = State(copy.deepcopy(data), Evaluator(), Limits(max_units=max_units, objective=objective, topologies=topologies))
    state.bar = bar
    state.check()
    search_rounds(state, {}, None, [], rounds=3)
    return state.data


def _hopeless(state: State) -> dict[int, Infeasible]:
    """Loads no change of the tree can make pass: a budget no wider than the reference tolerance."""
    r, tree = state.result, state.tree
    out = {}
    for i in np.flatnonzero(~r.passed).tolist():
        if r.tolerance[i] <= r.reference_tolerance:
            out[i] = Infeasible(tree.loads[i], "budget tighter than the reference tolerance",
                                float(r.reference_tolerance - r.tolerance[i]), "%",
                                f"budget ±{r.tolerance[i] * 100:.3g} % ≤ reference tolerance ±{r.reference_tolerance * 100:.3g} %: "
                                "no tree can deliver it")
    return out


def _round(state: State, hopeless: dict[int, Infeasible], detailed: Audit | None, fixes: list[Fix]) -> list[Move]:
    """One round: every target's candidates, level by level, then the best of each applied together."""
    targets = _targets(state, hopeless)
    queues = {m: candidates(state, m, loads) for m, loads in targets.items()}
    passing: dict[str, list[Move]] = {}
    while any(queues.values()):
        level: list[Move] = []
        owned: set[str] = set()
        patched: set[str] = set()
        for m in sorted(queues):
            q = queues[m]
            k = next((j for j, mv in enumerate(q) if not (mv.owns & (owned | patched)) and not (mv.patches & owned)), None)
            if k is None:
                continue
            mv = q.pop(k)
            owned |= mv.owns
            patched |= mv.patches
            level.append(mv)
        if not level:
            break
        state.levels += 1
        for mv, ok in zip(level, state.trial(level)):
            more = grown(state, mv) if not mv.complete else None
            if more is not None:
                queues[mv.target].insert(0, more)
            if ok:
                passing.setdefault(mv.target, []).append(mv)
                if mv.complete and mv.rank <= 2:  # no new branch or mirror needed
                    queues[mv.target] = [x for x in queues[mv.target] if x.rank <= 2]
    chosen: list[Move] = []
    owned, patched = set(), set()
    for m in sorted(passing):
        best = min(passing[m], key=lambda mv: mv.key(state.limits.objective))
        if best.owns & (owned | patched) or best.patches & owned:
            continue  # applied next round
        owned |= best.owns
        patched |= best.patches
        chosen.append(best)
    if not chosen:
        return []
    saved = copy.deepcopy(state.data)
    before = int((~state.ok(state.result)).sum())
    found = [_fixes_of(mv, detailed, saved) for mv in chosen] if detailed is not None else []
    for mv in chosen:
        mv.apply(state.data)
    state.check()
    if int((~state.ok(state.result)).sum()) > before:  # the kept moves interfered: keep what was there
        state.data = saved
        state.check()
        return []
    fixes.extend(found)
    return chosen


def _targets(state: State, hopeless: dict[int, Infeasible]) -> dict[str, list[int]]:
    r, tree = state.result, state.tree
    out: dict[str, list[int]] = {}
    for i in np.flatnonzero(~state.ok(r)).tolist():
        if i in hopeless:
            continue
        up = int(r.upstream[i])
        if up >= 0:  # a mirror above lacks headroom for its child's input: fix that pair
            out.setdefault(tree.mirrors[int(tree.b_child[up])], []).append(i)
            out.setdefault(tree.mirrors[int(tree.b_parent[up])], []).append(i)
            continue
        out.setdefault(tree.mirrors[int(tree.b_parent[tree.l_branch[i]])], []).append(i)
    return out


def _why(r: Audit, loads: list[int]) -> str:
    """The deciding term of the worst of ``loads``, in a designer's words."""
    tree = r.tree
    i = min(loads, key=lambda k: float(min(r.margin[k], r.worst_compliance[k])))
    name = tree.loads[i]
    if r.compliance[i] < 0:
        return r.reasons(i)[-1] if r.upstream[i] < 0 else f"{name}: " + r.reasons(i)[-1]
    if r.upstream[i] >= 0:
        return next(x for x in r.reasons(i) if x.startswith("headroom"))
    if r.conditions is not None and r.conditions.compliance[i] < 0:
        return f"{name}: " + next(x for x in r.reasons(i) if x.startswith("compliance"))
    d = r.deciding(i)
    parts = [f"error {format_percent(d['error'])}"]
    if d["k_sigma"]:
        parts.append(f"mismatch {d['k']:g}σ {d['k_sigma'] * 100:.3g} %")
    if d["reference"]:
        parts.append(f"reference {d['reference'] * 100:.3g} %")
    top = next((t for t in d["terms"] if t["stage"] != "reference"), None)
    main = f"{top['label']} at {top['stage']} ({format_percent(top['value'])}) decides" if top else ""
    more = f" (+{len(loads) - 1} more)" if len(loads) > 1 else ""
    return (f"{name}{more}: {main}; " if main else f"{name}{more}: ") + \
        f"{' + '.join(parts)} = {d['used'] * 100:.3g} % over its ±{d['tolerance'] * 100:.3g} % budget at {r.deciding_text(i, d)}"


def describe(data: dict[str, Any], mv: Move) -> tuple[str, str]:
    """Before → after of one move, read from the plan data and the move's result."""
    before, after = [], []
    for name in sorted(mv.owns, key=lambda n: (n not in data["mirrors"], n)):
        new = mv.final[name]
        old = data["mirrors"].get(name)
        if old is None:
            parent = next((p for p, b in mv.added if b["to"] == name), None)
            feed = next((b for p, b in mv.added if b["to"] == name), None)
            fed = f", fed by {parent} ({feed['ratio'] * data['mirrors'][parent].get('input_size', 1.0):.4g} u)" if feed else ""
            after.append(f"new {new['topology']} mirror {name} ({ratio_text(new)}){fed}")
            continue
        head_old = [old.get("topology", "simple")] + ([old["device"]] if old["device"] != new["device"] else [])
        head_new = [new["topology"]] + ([new["device"]] if old["device"] != new["device"] else [])
        before.append(f"{name}: {' '.join(head_old)}, {ratio_text(old)}")
        after.append(f"{name}: {' '.join(head_new)}, {ratio_text(new)}")
    if mv.local:
        before.append(f"output device of {', '.join(mv.local)} at the block (base/gate line routed)")
        after.append("output device beside the mirror (the current is routed)")
    return "; ".join(before) or "—", "; ".join(after)


def _fixes_of(move: Move, detailed: Audit, data: dict[str, Any]) -> Fix:
    tree = detailed.tree
    index = {n: k for k, n in enumerate(tree.loads)}
    own = [index[n] for n in move.loads if n in index]
    why = _why(detailed, own) if own else ""
    before, after = describe(data, move)
    touched = (move.target,) + tuple(sorted((move.owns | move.patches) - {move.target}))
    return Fix(move.kind, move.target, list(move.loads), before, after, why, how=move.reason, touched=touched)


def _mirror_cost(tree: Tree, r: Audit, name: str, area_of: dict[str, float]) -> tuple[float, float, float]:
    """(overhead current, unit devices, MOS gate area) one mirror draws / holds (``moves.mirror_cost``
    in plain unit devices, plus the gate area of a MOS mirror's units)."""
    cur, units = mirror_cost(tree, r, name, {})
    if name not in tree.mirrors:
        return cur, units, 0.0
    m = tree.mirrors.index(name)
    dev = tree.plan.devices[tree.plan.mirrors[name].device]
    gate = units * dev.w * dev.l if not tree.m_bipolar[m] else 0.0  # type: ignore[union-attr]
    return cur, units, gate


def _price(fixes: list[Fix], tree: Tree, result: Audit, new_tree: Tree, new_result: Audit, state: State) -> None:
    """Each mirror's cost difference goes to the first change that touched it."""
    seen: set[str] = set()
    supply = tree.plan.supply
    for f in fixes:
        for n in f.touched:
            if n in seen or (n not in new_tree.mirrors and n not in tree.mirrors):
                continue
            seen.add(n)
            c0, u0, g0 = _mirror_cost(tree, result, n, {})
            c1, u1, g1 = _mirror_cost(new_tree, new_result, n, {})
            f.power += supply * (c1 - c0)
            f.area += u1 - u0
            f.gate_area += g1 - g0


def _effects(fixes: list[Fix], tree: Tree, result: Audit, new_tree: Tree, new_result: Audit) -> None:
    old = {n: k for k, n in enumerate(tree.loads)}
    new = {n: k for k, n in enumerate(new_tree.loads)}
    for f in fixes:
        if not f.loads:
            continue
        a = min(float(result.margin[old[n]]) for n in f.loads)
        b = min(float(new_result.margin[new[n]]) for n in f.loads)
        ca = min(float(result.worst_compliance[old[n]]) for n in f.loads)
        cb = min(float(new_result.worst_compliance[new[n]]) for n in f.loads)
        text = f"worst budget margin {a * 100:+.3g} % → {b * 100:+.3g} %"
        if ca < 0 or cb < 0:
            text += f"; compliance {format_si(ca, 'V')} → {format_si(cb, 'V')}"
        f.effect = text


def _merged(fixes: list[Fix]) -> list[Fix]:
    """Successive changes of one kind to one target are one change (first before → last after)."""
    out: list[Fix] = []
    for f in fixes:
        prev = next((o for o in reversed(out) if o.target == f.target and o.kind == f.kind), None)
        if prev is not None and f.kind in ("rebalance", "topology", "size", "longer"):
            prev.after = f.after
            prev.power += f.power
            prev.area += f.area
            prev.gate_area += f.gate_area
            prev.loads = sorted(set(prev.loads) | set(f.loads))
            prev.effect = f.effect or prev.effect
            if prev.before == prev.after and not (prev.power or prev.area):
                out.remove(prev)
            continue
        out.append(f)
    return out


def _explain(tree: Tree, r: Audit, state: State, hopeless: dict[int, Infeasible]) -> list[Infeasible]:
    """What still fails: the constraint that decides, by how much, and what was tried."""
    out = []
    names = {tree.loads[i]: i for i in hopeless}
    base = {b.block: b for b in infeasible(tree, r)}
    for i in np.flatnonzero(~r.passed).tolist():
        name = tree.loads[i]
        if name in names:
            out.append(hopeless[names[name]])
            continue
        b = base[name]
        mirror = tree.mirrors[int(tree.b_parent[tree.l_branch[i]])]
        tried = [f"{k}: {v}" for k, v in sorted(state.tried.get(mirror, {}).items())]
        tried_text = f" (tried on {mirror} — {'; '.join(tried)})" if tried else ""
        detail = b.detail + tried_text
        if b.constraint != "compliance" and r.margin[i] < 0 and not r.compliance[i] < 0:
            d = r.deciding(i)
            left = float(r.tolerance[i] - r.reference_tolerance - r.k_sigma * r.sigma[i])
            detail = (f"budget ±{r.tolerance[i] * 100:.3g} % − reference {r.reference_tolerance * 100:.3g} %"
                      + (f" − mismatch {r.k_sigma:g}σ {r.k_sigma * r.sigma[i] * 100:.3g} %" if r.sigma[i] else "")
                      + f" leaves {left * 100:.3g} % for the error; it is {format_percent(d['error'])} at {r.deciding_text(i, d)}"
                      + tried_text)
        out.append(Infeasible(b.block, b.constraint, b.amount, b.unit, detail))
    return out


__all__ = ["Fix", "Repair", "repair", "plan_data", "BiasTreeError"]
