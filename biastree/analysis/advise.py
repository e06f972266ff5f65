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
import gc
from collections.abc import Callable
from dataclasses import dataclass
from functools import partial

import numpy as np

from biastree.analysis.audit import Audit, audit, path_largest
from biastree.analysis.corners import ConditionResult
from biastree.analysis.pipeline import check_tree
from biastree.analysis.solve import DEEP_TREE, solve
from biastree.analysis.spread import analytic
from biastree.analysis.trials import INDEPENDENT as _INDEPENDENT
from biastree.analysis.trials import outcomes
from biastree.physics.topologies import TERM_LABELS, TOPOLOGIES
from biastree.tree.arrays import Tree
from biastree.units import format_percent, format_si, format_si_list

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
class _Pairs:
    """Every (failing load, trial) worth trying, load by load in the order
    ``_candidates`` gives them, with the words saying why."""

    load: list[int]
    mirror: list[int]
    topology: list[str]
    why: list[str]


def _motives(result: Audit, failing: np.ndarray) -> _Pairs:
    """``_candidates`` for every failing load at once."""
    tree = result.tree
    plan = tree.plan
    n = len(failing)
    topo = [plan.mirrors[m].topology for m in tree.mirrors]
    family = ["bjt" if b else "mos" for b in tree.m_bipolar.tolist()]
    first = np.searchsorted(tree.b_parent, np.arange(len(tree.mirrors)))
    n_out = np.diff(np.append(first, len(tree.b_parent)))
    single = ((n_out == 1) & (tree.b_count[np.minimum(first, len(tree.b_parent) - 1)] == 1)).tolist()
    allowed: dict[int, frozenset[str]] = {}

    def usable(m: int) -> frozenset[str]:
        got = allowed.get(m)
        if got is None:
            got = allowed[m] = frozenset(
                t for t, spec in TOPOLOGIES.items()
                if t != topo[m] and family[m] in spec.kinds and (not spec.single_output or single[m]))
        return got

    over = (result.margin[failing] < 0).tolist()
    if result.conditions is None and n:
        m, k, v, keys = result._largest
        plan_term = result.ideal[failing] / result.target[failing] - 1.0
        take = np.abs(v[failing]) > np.abs(plan_term)
        stage = np.where(take, m[failing], -1).tolist()
        labels = [TERM_LABELS[keys[int(x)]] for x in k[failing].tolist()]
        value = np.where(take, v[failing], plan_term)
    elif n:  # the largest term of each load's deciding case (``Audit.deciding``), all loads at once
        stage_a, labels, value = _deciding_terms(result, failing)
        stage = stage_a.tolist()
    else:
        stage, labels, value = [], [], np.zeros(0)
    pct = [format_percent(x) for x in value.tolist()]
    parent = tree.b_parent[tree.l_branch[failing]].tolist()
    short = (result.compliance[failing] < 0).tolist()
    lacks = format_si_list((-result.compliance[failing]).tolist(), "V")
    names = tree.mirrors
    out = _Pairs([], [], [], [])
    for j, i in enumerate(failing.tolist()):
        entries: list[list] = []  # type: ignore[type-arg]
        st = stage[j]
        if over[j] and st >= 0:
            why = f"{labels[j]} at {names[st]} dominates ({pct[j]})"
            ok = usable(st)
            entries = [[st, t, why] for t in _FOR_TERM.get(labels[j], ()) if t in ok]
        if short[j]:
            p = parent[j]
            why = f"the output of {names[p]} lacks {lacks[j]}"
            ok = usable(p)
            for t in _FOR_COMPLIANCE[family[p]]:
                if t in ok:
                    same = [e for e in entries if e[0] == p and e[1] == t]
                    if same:
                        same[0][2] += "; " + why
                    else:
                        entries.append([p, t, why])
        for mirror, t, why in entries:
            out.load.append(i)
            out.mirror.append(mirror)
            out.topology.append(t)
            out.why.append(why)
    return out


def _largest_per_column(result: Audit, op) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str]]:  # type: ignore[no-untyped-def]
    """Per load and column of ``op``: (mirror, term key index, value) of the first largest
    stage term on its path, in ``Audit.deciding``'s order (stages top-down, each
    topology's own terms in order; a later term wins only when strictly larger)."""
    tree = result.tree
    plan = tree.plan
    keys = list(op.b_factors)
    n_b, n_c = op.b_current.shape
    if not keys:
        z = np.zeros((len(tree.loads), n_c))
        return np.full(z.shape, -1), z.astype(np.int64), z, ["beta"]
    values = np.stack([op.b_factors[k] for k in keys]) - 1.0  # (K, n_b, C)
    allowed = np.zeros((len(keys), len(tree.mirrors)), dtype=bool)
    for m, name in enumerate(tree.mirrors):
        own = TOPOLOGIES[plan.mirrors[name].topology].terms["bjt" if tree.m_bipolar[m] else "mos"]
        for j, k in enumerate(keys):
            allowed[j, m] = k in own
    values = np.where(allowed[:, tree.b_parent][:, :, None], values, 0.0)
    which = np.argmax(np.abs(values), axis=0)  # the first of equal largest
    value = np.take_along_axis(values, which[None], axis=0)[0]
    return (*path_largest(tree, value, which), keys)


def _deciding_terms(result: Audit, failing: np.ndarray) -> tuple[np.ndarray, list[str], np.ndarray]:
    """``Audit.largest_term`` for every load of ``failing`` (plans with conditions):
    stage (mirror index, -1 for the plan's ratios), label and value."""
    cond = result.conditions
    rows = np.arange(len(result.target))
    own_err = result.error[rows, result.worst_case]
    use = np.abs(cond.worst_error) > np.abs(own_err)
    m0, k0, v0, keys0 = _largest_per_column(result, result.op)
    m, k, v = (a[rows, result.worst_case] for a in (m0, k0, v0))
    labels0 = np.array([TERM_LABELS[x] for x in keys0], dtype=object)
    label = labels0[k]
    if use[failing].any():
        op, where = result._condition_terms
        col = np.array([where.get(int(c), 0) for c in cond.worst_index])
        m1, k1, v1, keys1 = _largest_per_column(result, op)
        labels1 = np.array([TERM_LABELS[x] for x in keys1], dtype=object)
        m = np.where(use, m1[rows, col], m)
        v = np.where(use, v1[rows, col], v)
        label = np.where(use, labels1[k1[rows, col]], label)
    plan_term = result.ideal / result.target - 1.0
    take = np.abs(v) > np.abs(plan_term)
    stage = np.where(take, m, -1)[failing]
    value = np.where(take, v, plan_term)[failing]
    labels = [str(x) if t else "ratio arithmetic" for x, t in zip(label[failing].tolist(), take[failing].tolist())]
    return stage, labels, value


def _lines(passed: np.ndarray, budget: np.ndarray, compliance: np.ndarray, headroom: np.ndarray,
           error: np.ndarray, tolerance: np.ndarray) -> list[str]:
    """'would pass: error … (budget ±… %), compliance margin …' per outcome, in bulk."""
    margin = format_si_list(np.asarray(compliance, dtype=float).tolist(), "V")
    out = []
    for ok, over, c, head, err, tol, cm in zip(passed.tolist(), budget.tolist(), compliance.tolist(),
                                               headroom.tolist(), error.tolist(), tolerance.tolist(), margin):
        if ok:
            status = "would pass"
        else:
            left = [k for k, bad in (("budget", over), ("compliance", c < 0), ("headroom", head)) if bad]
            status = f"would still fail ({', '.join(left)})"
        out.append(f"{status}: error {format_percent(err)} (budget ±{tol * 100:.3g} %), compliance margin {cm}")
    return out


def _from_audits(result: Audit, trials: dict[tuple[str, str], Trial], keys: list[tuple[str, str]],
                 pair_trial: list[int], pair_load: list[int]) -> list[str | None]:
    """Each pair's outcome words, read off its trial's own audit (None: not run, or not solvable)."""
    sel, values = [], []
    for j, (k, i) in enumerate(zip(pair_trial, pair_load)):
        trial = trials.get(keys[k])
        new = None if trial is None else trial.result
        if new is not None:
            sel.append(j)
            values.append((bool(new.passed[i]), bool(new.margin[i] < 0), float(new.compliance[i]),
                           bool(new.upstream[i] >= 0), new.worst_error(i)[0], float(new.tolerance[i])))
    out: list[str | None] = [None] * len(pair_trial)
    if values:
        for j, w in zip(sel, _lines(*(np.array(c) for c in zip(*values)))):
            out[j] = w
    return out


def _fast(result: Audit, keys: list[tuple[str, str]], pair_trial: list[int], pair_load: list[int]) -> list[str | None]:
    """Every trial's outcomes from one restricted re-solve of all of them
    (``analysis.trials``); a trial whose rows do not settle is re-solved in full."""
    tree = result.tree
    plan = tree.plan
    index = {name: i for i, name in enumerate(tree.mirrors)}
    specs: dict[str, object] = {}
    for mirror, topo in keys:
        if topo not in specs:
            try:
                specs[topo] = _changed(plan.mirrors[mirror], topo)
            except Exception:  # a topology that cannot be built is left to the full re-solve
                specs[topo] = None
    out: list[str | None] = [None] * len(pair_trial)
    fit = [specs[t] is not None for _, t in keys]
    pt, pl = np.array(pair_trial, dtype=np.int64), np.array(pair_load, dtype=np.int64)
    sel = np.flatnonzero(np.array(fit)[pt]) if len(pt) else np.zeros(0, dtype=np.int64)
    if len(sel):
        got = outcomes(result, np.array([index[m] for m, _ in keys]), [t for _, t in keys], specs, pt[sel], pl[sel])
        ok = np.flatnonzero(got.solved)
        words = _lines(got.passed[ok], got.margin[ok] < 0, got.compliance[ok], got.headroom_lost[ok],
                       got.error[ok], got.tolerance[ok])
        for j, w in zip(sel[ok].tolist(), words):
            out[j] = w
    missing = [j for j, w in enumerate(out) if w is None]
    if missing:  # what the rows could not answer: one full re-solve per trial
        redo = {keys[k]: _trial(result, *keys[k]) for k in sorted({pair_trial[j] for j in missing})}
        again = _from_audits(result, redo, keys, [pair_trial[j] for j in missing], [pair_load[j] for j in missing])
        for j, w in zip(missing, again):
            out[j] = w
    return out


def hints(result: Audit, batched: bool = True) -> dict[int, list[str]]:
    """Hints per failing load index (empty when nothing tried helps).

    Every candidate change is tried, for every failing load.  ``batched`` (the
    default) answers all trials with one restricted re-solve of the mirrors
    they can move (``analysis.trials``; on trees deeper than ``DEEP_TREE``
    generations, many trials per re-solve within a budget, see ``waves``);
    ``batched=False`` re-solves the tree once per trial, the slow path the
    tests compare against."""
    # Many small acyclic objects (words, tuples): the cyclic collector would only
    # rescan the plan's objects again and again.
    enabled = gc.isenabled()
    gc.disable()
    try:
        return _hints(result, batched)
    finally:
        if enabled:
            gc.enable()


def _hints(result: Audit, batched: bool) -> dict[int, list[str]]:
    pairs = _motives(result, np.flatnonzero(~result.passed))
    names = result.tree.mirrors
    trial_of: dict[tuple[int, str], int] = {}
    pair_trial = [trial_of.setdefault(key, len(trial_of)) for key in zip(pairs.mirror, pairs.topology)]
    keys = [(names[m], t) for m, t in trial_of]
    if not batched or len(result.tree.generations) > DEEP_TREE:
        counts: dict[tuple[str, str], int] = {}
        for k in pair_trial:
            counts[keys[k]] = counts.get(keys[k], 0) + 1
        run = keys if not batched else _within_budget(result, counts)
        trials = _run_waves(result, run) if batched else {key: _trial(result, *key) for key in run}
        words = _from_audits(result, trials, keys, pair_trial, pairs.load)
    else:
        words = _fast(result, keys, pair_trial, pairs.load)
    out: dict[int, list[str]] = {}
    for i, why, m, t, w in zip(pairs.load, pairs.why, pairs.mirror, pairs.topology, words):
        if w is not None:
            out.setdefault(i, []).append(f"{why}: {t} at {names[m]} {w}")
    return out
