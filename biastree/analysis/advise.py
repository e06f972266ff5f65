"""Computed hints for failing loads: which topology change at which stage
would fix them, found by re-solving the tree with that change.

For each failing load the largest error term names a stage and an effect;
the candidate topologies that attack that effect are tried at that stage
(β loading → beta_helper, or a Wilson where the mirror has one output;
Early effect → cascode or Wilson; channel-length modulation → cascode or
wide_swing; compliance → a topology that needs less voltage), and the hint
reports what the load would then get.  Nothing here is canned text: every
number comes from a re-solve.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass
from functools import partial

import numpy as np

from biastree.analysis.audit import Audit, audit
from biastree.analysis.corners import ConditionResult
from biastree.analysis.pipeline import check_tree
from biastree.analysis.solve import DEEP_TREE, solve
from biastree.analysis.spread import analytic
from biastree.analysis.trials import INDEPENDENT as _INDEPENDENT
from biastree.analysis.trials import outcomes
from biastree.physics.topologies import TOPOLOGIES
from biastree.tree.arrays import Tree
from biastree.units import format_percent, format_si

FIRST_TRIALS = 12  # trials always run on small plans (those addressing the most failing loads)
SMALL_PLAN = 200  # mirrors
HINT_WORK = 1  # otherwise trials while the mirrors they re-solve stay under this many times the tree's

_FOR_TERM = {
    "β loading": ("beta_helper", "wilson"),
    "Early effect": ("cascode", "wilson"),
    "channel-length modulation": ("cascode", "wide_swing"),
}
_FOR_COMPLIANCE = {"bjt": ("simple", "beta_helper"), "mos": ("wide_swing", "simple")}


@dataclass(frozen=True)
class Trial:
    mirror: str
    topology: str
    result: Audit | None  # None: the change is not possible (e.g. Wilson with many outputs)
    why_not: str = ""


def _term_motive(label: str, stage: str, value: float) -> str:
    return f"{label} at {stage} dominates ({format_percent(value)})"


def _compliance_motive(parent: str, lacks: float) -> str:
    return f"the output of {parent} lacks {format_si(lacks, 'V')}"


def _candidates(result: Audit, load: int) -> list[tuple[str, str, Callable[[], str]]]:
    """(mirror, topology, motive) worth trying for one failing load; the motive's
    words are formatted only for the hints that are printed."""
    tree = result.tree
    out = []
    if result.margin[load] < 0:
        stage, label, value = result.largest_term(load)
        if stage != "plan":
            for topo in _FOR_TERM.get(label, ()):
                out.append((stage, topo, partial(_term_motive, label, stage, value)))
    if result.compliance[load] < 0:
        parent = tree.mirrors[tree.b_parent[tree.l_branch[load]]]
        family = "bjt" if tree.m_bipolar[tree.b_parent[tree.l_branch[load]]] else "mos"
        for topo in _FOR_COMPLIANCE[family]:
            out.append((parent, topo, partial(_compliance_motive, parent, -float(result.compliance[load]))))
    plan = tree.plan
    usable = []
    for mirror, topo, motive in out:
        spec = plan.mirrors[mirror]
        t = TOPOLOGIES[topo]
        family = "bjt" if plan.devices[spec.device].kind in ("npn", "pnp") else "mos"
        if topo == spec.topology or family not in t.kinds:
            continue
        if t.single_output and (len(spec.branches) != 1 or spec.branches[0].count != 1):
            continue
        usable.append((mirror, topo, motive))
    return usable


def _changed(spec, topology: str):  # type: ignore[no-untyped-def]
    keep = {k: getattr(spec, k) for k in ("device", "input_size", "branches")}
    return type(spec)(topology=topology, **keep)


def _solve_with(result: Audit, changes: dict[str, str], only: np.ndarray | None = None) -> Audit:
    """The same verdict pipeline as the original (conditions and mismatch
    included), with the topologies of ``changes`` swapped in.  Same structure,
    other topologies: the tree need not be checked or built again.  With
    ``only`` (bool per mirror), only those mirrors are re-solved, starting from
    the original solution; everything else cannot move (see ``_reach``)."""
    plan = result.tree.plan
    mirrors = dict(plan.mirrors)
    for mirror, topology in changes.items():
        mirrors[mirror] = _changed(plan.mirrors[mirror], topology)
    tree = dataclasses.replace(result.tree, plan=plan.model_copy(update={"mirrors": mirrors}))
    if only is None:
        return check_tree(tree, conditions=result.conditions is not None, mismatch=result.spread is not None,
                          k_sigma=result.k_sigma, detail=False)
    op = solve(tree, result.op.columns, output_resistance=False, base=result.op, only=only)
    cond = None
    if result.conditions is not None:
        c = result.conditions
        cond = ConditionResult(tree, c.columns, solve(tree, c.columns, output_resistance=False, base=c.op, only=only))
    spread = analytic(tree, base=result.spread, only=only) if result.spread is not None else None
    return audit(op, cond, spread, result.k_sigma)


def _trial(result: Audit, mirror: str, topology: str, only: np.ndarray | None = None) -> Trial:
    try:
        return Trial(mirror, topology, _solve_with(result, {mirror: topology}, only))
    except Exception as exc:  # a candidate that cannot be solved is simply not suggested
        return Trial(mirror, topology, None, str(exc))


class _Spans:
    """Each mirror's subtree as one run of a depth-first order."""

    def __init__(self, tree: Tree) -> None:
        n = len(tree.mirrors)
        children: list[list[int]] = [[] for _ in range(n)]
        for b in np.flatnonzero(~tree.b_to_load).tolist():
            children[int(tree.b_parent[b])].append(int(tree.b_child[b]))
        order: list[int] = []
        size = [1] * n
        stack = [(int(tree.generations[0][0]), False)]
        while stack:
            m, done = stack.pop()
            if done:
                size[m] += sum(size[c] for c in children[m])
                continue
            order.append(m)
            stack.append((m, True))
            stack.extend((c, False) for c in reversed(children[m]))
        self.order = np.array(order, dtype=np.int64)
        self.start = np.empty(n, dtype=np.int64)
        self.start[self.order] = np.arange(n)
        self.size = size
        self.tree = tree

    def mask(self, tops: list[int]) -> np.ndarray:
        """Subtrees of ``tops`` and each top's parent (whose branch to it moves)."""
        tree = self.tree
        out = np.zeros(len(tree.mirrors), dtype=bool)
        for top in tops:
            out[self.order[self.start[top]:self.start[top] + self.size[top]]] = True
            b = int(tree.m_in_branch[top])
            if b >= 0:
                out[int(tree.b_parent[b])] = True
        return out


def _reach(tree: Tree, top: int) -> int:
    """The topmost mirror whose subtree holds everything a change at mirror
    ``top`` can move: a changed mirror's input voltage moves its feeding
    branch, and through it the parent's other outputs and input voltage only
    where the parent's outputs are coupled (base currents that depend on them)."""
    plan = tree.plan
    while True:
        b = int(tree.m_in_branch[top])
        if b < 0:
            return top
        parent = int(tree.b_parent[b])
        family = "bjt" if tree.m_bipolar[parent] else "mos"
        if family in _INDEPENDENT.get(plan.mirrors[tree.mirrors[parent]].topology, ()):
            return top
        top = parent


def waves(result: Audit, keys: list[tuple[str, str]]) -> list[list[tuple[str, str]]]:
    """Group trials so that no two in a group can move the same branch: their
    reaches are not ancestor and descendant (or the same mirror).  One re-solve
    then answers a whole group, each trial read off the loads below it."""
    tree = result.tree
    index = {name: i for i, name in enumerate(tree.mirrors)}
    tops = {key: _reach(tree, index[key[0]]) for key in keys}
    paths = tree.mirror_paths
    order = sorted(keys, key=lambda k: len(paths[tops[k]]))
    used: dict[int, set[int]] = {}  # top mirror → waves holding a trial that reaches from it
    out: list[list[tuple[str, str]]] = []
    for key in order:
        top = tops[key]
        taken: set[int] = set()
        for m in paths[top]:  # ancestors and the top itself
            taken |= used.get(m, set())
        w = 0
        while w in taken:
            w += 1
        if w == len(out):
            out.append([])
        out[w].append(key)
        used.setdefault(top, set()).add(w)
    return out


def _run_waves(result: Audit, keys: list[tuple[str, str]]) -> dict[tuple[str, str], Trial]:
    tree = result.tree
    index = {name: i for i, name in enumerate(tree.mirrors)}
    spans = _Spans(tree)
    trials: dict[tuple[str, str], Trial] = {}
    for group in waves(result, keys):
        tops = [_reach(tree, index[key[0]]) for key in group]
        try:
            shared = _solve_with(result, dict(group), spans.mask(tops))
        except Exception:  # one change that cannot be solved: try each of the group alone
            for key, top in zip(group, tops):
                trials[key] = _trial(result, *key, only=spans.mask([top]))
            continue
        for key in group:
            trials[key] = Trial(key[0], key[1], shared)
    return trials


def _within_budget(result: Audit, wanted: dict[tuple[str, str], int]) -> list[tuple[str, str]]:
    """The trials to run: those that address the most failing loads first (on a
    small plan the first FIRST_TRIALS always), while the mirrors they re-solve
    (each trial costs the subtree it can move) stay within HINT_WORK times the
    tree's mirrors — about the work of the audit itself.  The first trial always runs."""
    tree = result.tree
    index = {name: i for i, name in enumerate(tree.mirrors)}
    spans = _Spans(tree)
    ranked = sorted(wanted, key=lambda k: (-wanted[k], k))
    budget = HINT_WORK * len(tree.mirrors)
    chosen, spent = [], 0
    for key in ranked:
        cost = spans.size[_reach(tree, index[key[0]])]
        small = len(chosen) < FIRST_TRIALS and len(tree.mirrors) <= SMALL_PLAN
        if not small and chosen and spent + cost > budget:
            continue
        chosen.append(key)
        spent += cost
    return chosen


@dataclass(frozen=True)
class Outcome:
    """What one load would get from one trial: the numbers its hint prints."""

    passed: bool
    budget: bool  # still over its budget
    compliance: float  # V, over the voltage range
    headroom: bool  # a branch between mirrors on its path still out of compliance
    error: float  # worst error (voltage range, or conditions when larger)
    tolerance: float


def _outcome(new: Audit, i: int) -> Outcome:
    return Outcome(bool(new.passed[i]), bool(new.margin[i] < 0), float(new.compliance[i]), bool(new.upstream[i] >= 0),
                   new.worst_error(i)[0], float(new.tolerance[i]))


def _line(why: list[Callable[[], str]], mirror: str, topo: str, o: Outcome) -> str:
    if o.passed:
        status = "would pass"
    else:
        left = [k for k, bad in (("budget", o.budget), ("compliance", o.compliance < 0), ("headroom", o.headroom)) if bad]
        status = f"would still fail ({', '.join(left)})"
    detail = (f"error {format_percent(o.error)} (budget ±{o.tolerance * 100:.3g} %), "
              f"compliance margin {format_si(o.compliance, 'V')}")
    return f"{'; '.join(m() for m in why)}: {topo} at {mirror} {status}: {detail}"


def _fast(result: Audit, keys: list[tuple[str, str]], loads: dict[tuple[str, str], list[int]]) \
        -> dict[tuple[tuple[str, str], int], Outcome]:
    """Every trial's outcomes from one restricted re-solve of all of them
    (``analysis.trials``); a trial whose rows do not settle is re-solved in full."""
    tree = result.tree
    plan = tree.plan
    index = {name: i for i, name in enumerate(tree.mirrors)}
    specs = {}
    usable = []
    for key in keys:
        topo = key[1]
        if topo not in specs:
            try:
                specs[topo] = _changed(plan.mirrors[key[0]], topo)
            except Exception:  # noqa: BLE001 — a topology that cannot be built is left to the full re-solve
                specs[topo] = None
        if specs[topo] is not None:
            usable.append(key)
    pair_trial = np.array([k for k, key in enumerate(usable) for _ in loads[key]], dtype=np.int64)
    pair_load = np.array([i for key in usable for i in loads[key]], dtype=np.int64)
    out: dict[tuple[tuple[str, str], int], Outcome] = {}
    if usable:
        got = outcomes(result, np.array([index[m] for m, _ in usable]), [t for _, t in usable], specs,
                       pair_trial, pair_load)
        for k, i, ok, passed, margin, comp, head, err, tol in zip(
                got.trial.tolist(), got.load.tolist(), got.solved.tolist(), got.passed.tolist(),
                (got.margin < 0).tolist(), got.compliance.tolist(), got.headroom_lost.tolist(), got.error.tolist(),
                got.tolerance.tolist()):
            if ok:
                out[(usable[k], i)] = Outcome(passed, margin, comp, head, err, tol)
    for key in keys:  # what the rows could not answer: one full re-solve each
        if any((key, i) not in out for i in loads[key]):
            trial = _trial(result, *key)
            if trial.result is not None:
                for i in loads[key]:
                    out[(key, i)] = _outcome(trial.result, i)
    return out


def hints(result: Audit, batched: bool = True) -> dict[int, list[str]]:
    """Hints per failing load index (empty when nothing tried helps).

    Every candidate change is tried, for every failing load.  ``batched`` (the
    default) answers all trials with one restricted re-solve of the mirrors
    they can move (``analysis.trials``; on trees deeper than ``DEEP_TREE``
    generations, many trials per re-solve within a budget, see ``waves``);
    ``batched=False`` re-solves the tree once per trial, the slow path the
    tests compare against."""
    failing = [int(i) for i in np.flatnonzero(~result.passed)]
    motives: dict[int, dict[tuple[str, str], list[Callable[[], str]]]] = {}
    loads: dict[tuple[str, str], list[int]] = {}
    for i in failing:
        by_trial: dict[tuple[str, str], list[Callable[[], str]]] = {}
        for mirror, topo, motive in _candidates(result, i):
            by_trial.setdefault((mirror, topo), []).append(motive)
        motives[i] = by_trial
        for key in by_trial:
            loads.setdefault(key, []).append(i)
    found: dict[tuple[tuple[str, str], int], Outcome] = {}
    if not batched or len(result.tree.generations) > DEEP_TREE:
        counts = {key: len(v) for key, v in loads.items()}
        keys = list(loads) if not batched else _within_budget(result, counts)
        trials = _run_waves(result, keys) if batched else {key: _trial(result, *key) for key in keys}
        for key, trial in trials.items():
            if trial.result is not None:
                for i in loads[key]:
                    found[(key, i)] = _outcome(trial.result, i)
    else:
        found = _fast(result, list(loads), loads)
    out: dict[int, list[str]] = {}
    for i in failing:
        lines = [_line(why, mirror, topo, found[((mirror, topo), i)])
                 for (mirror, topo), why in motives[i].items() if ((mirror, topo), i) in found]
        if lines:
            out[i] = lines
    return out
