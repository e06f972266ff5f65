"""The search that both the planner and the repair run: change the plan, check it, repeat.

Every step evaluates the whole plan with ``biastree.analysis.pipeline.check_tree``
(the solver and audit of ``biastree check``), reads which loads fail and why,
and applies one combined set of changes:

* **rebalance** — the ratio of each branch into a block is set so that the
  middle of its error range (over the voltage ends) is zero, realised with
  whole unit devices (a larger input device when the rounding would eat the
  budget).  This cancels β loading and the systematic Early / λ error;
* **topology** — what is left is attacked where it comes from: the spread of
  the error over the voltage range by the block's own mirror (Early →
  cascode / wilson4, λ → cascode / wide_swing), the spread over the plan's
  conditions by the stage with the largest β loading (beta_helper /
  wilson4), compliance and headroom by a topology that needs less voltage;
* **split** — a block whose mirror cannot be given a better output moves to
  a mirror of its own (a single-output improved Wilson) fed by the same parent;
* **size** — k·σ of mismatch is cut by larger devices on the stage with the
  largest σ (Pelgrom's area law: σ ∝ 1/√area, so σ/2 costs 4× the area);
* **local** — a remote block whose base/gate line costs budget gets its
  current routed from beside the mirror instead.

A topology once tried on a mirror is not tried again, so the search ends.
What still fails at the end is reported as infeasible, with the block, the
constraint and the amount.
"""

from __future__ import annotations

import copy
import math
from typing import Any

import numpy as np

from biastree.analysis.audit import Audit
from biastree.errors import SolveError
from biastree.physics.topologies import TOPOLOGIES
from biastree.planner.evaluation import Change, Evaluator, Rules
from biastree.planner.ratios import realise
from biastree.tree.arrays import Tree
from biastree.units import format_si

# Topologies in order of cost (device units, then extra current).
COST_ORDER = ("simple", "beta_helper", "wilson", "wilson4", "cascode", "wide_swing")


def _family(data: dict[str, Any], mirror: str) -> str:
    kind = data["devices"][data["mirrors"][mirror]["device"]]["kind"]
    return "bjt" if kind in ("npn", "pnp") else "mos"


def _fits(ratios: list[float], allowed: list[float], n_in: int, units: list[int]) -> bool:
    return all(abs(u / n_in / r - 1.0) <= a for u, r, a in zip(units, ratios, allowed))


class Search:
    """Mutable state of one search over plain plan data."""

    def __init__(self, data: dict[str, Any], rules: Rules, touch: set[str] | None = None) -> None:
        self.data = copy.deepcopy(data)
        self.rules = rules
        self.changes: list[Change] = []
        self.tried: dict[str, set[str]] = {m: {spec.get("topology", "simple")} for m, spec in self.data["mirrors"].items()}
        self.touch = touch  # mirrors the search may rebalance freely (None: all)
        self.result: Audit | None = None
        self.tree: Tree | None = None
        self.evaluate = Evaluator(checked=False)
        self.escalated: set[str] = set()
        self.stuck: dict[str, int] = {}
        self.fallback: dict[str, dict[str, Any]] = {}
        self.new_feeders: dict[str, float] = {}  # feeders added this round: their expected input current
        self.seen: dict[str, int] = {}  # rounds in which each mirror had a failing block

    def _snapshot(self) -> dict[str, Any]:
        """A copy of the plan data to go back to: the search edits only the mirrors and the
        floorplan (the loads, devices and conditions are shared, never edited)."""
        out = dict(self.data)
        out["mirrors"] = copy.deepcopy(self.data["mirrors"])
        if "floorplan" in out:
            out["floorplan"] = copy.deepcopy(self.data["floorplan"])
        return out

    # --- the loop -----------------------------------------------------------

    def run(self) -> Audit:
        best: tuple[int, dict[str, Any], list[Change]] | None = None
        stale = 0
        for _ in range(self.rules.rounds):
            self.tree, self.result = self.evaluate(self.data)
            failed = int((~self.result.passed).sum())
            if best is None or failed < best[0]:
                best = (failed, self._snapshot(), list(self.changes))
                stale = 0
            else:
                stale += 1
            if failed == 0 or stale >= self.rules.patience or not self._round():
                break
        else:
            self.tree, self.result = self.evaluate(self.data)
            failed = int((~self.result.passed).sum())
        if best is not None and best[0] < failed:  # a later round made things worse: go back
            self.data, self.changes = best[1], best[2]
            self.tree, self.result = self.evaluate(self.data)
        if not bool(self.result.passed.all()):
            self._polish()
        if not bool(self.result.passed.all()):
            self._last_topologies()
        if not bool(self.result.passed.all()):
            self._feeder_knob()
        if self.rules.economise and bool(self.result.passed.all()):
            self._economise()
        self._merge_changes()
        return self.result

    def _polish(self) -> None:
        """The mirrors of the blocks that still fail re-centre their ratios from the last
        check (the best plan found may come from a round whose rebalance came later);
        kept while fewer blocks fail."""
        for _ in range(3):
            r = self.result
            assert r is not None
            failing = [m for m, idx in self._failing_mirrors().items()
                       if all(r.compliance[i] >= 0 and r.upstream[i] < 0 for i in idx)]
            if self.touch is not None:
                failing = [m for m in failing if m in self.touch]
            if not failing:
                return
            before = int((~r.passed).sum())
            trial = dict(self.data)
            trial["mirrors"] = dict(self.data["mirrors"])
            for m in failing:
                trial["mirrors"][m] = copy.deepcopy(self.data["mirrors"][m])
            sub = Search.__new__(Search)
            sub.data, sub.rules, sub.changes, sub.tree, sub.result = trial, self.rules, [], self.tree, r
            sub.touch = set(failing)
            if not sub._rebalance(failing_only=False):
                return
            try:
                t_tree, t_res = self.evaluate(trial)
            except (SolveError, ValueError):
                return
            if int((~t_res.passed).sum()) >= before:
                return
            self.data, self.tree, self.result = trial, t_tree, t_res
            self.changes.extend(sub.changes)

    def _last_topologies(self) -> None:
        """The mirrors of the blocks that still fail try every allowed topology once more from
        the final plan (the best plan may come from a round before their last change); kept
        when fewer blocks fail."""
        r = self.result
        assert r is not None
        failing = self._failing_mirrors()
        targets = sorted(m for m in failing if self.touch is None or m in self.touch)
        if not targets:
            return
        before = int((~r.passed).sum())
        saved = (self._snapshot(), list(self.changes), self.tree, self.result)
        tried, self.tried = self.tried, {}
        choice = self._trials(targets, {m: failing[m] for m in targets}, {m: {m} for m in targets})
        self.tried = tried
        if not choice:
            self.data, self.changes = saved[0], saved[1]
            return
        for m, (t, spec) in choice.items():
            if t != self.data["mirrors"][m].get("topology", "simple"):
                self._set_topology(m, t, f"least-cost topology under which every block of {m} passes")
            self.data["mirrors"][m] = spec
        try:
            self.tree, self.result = self.evaluate(self.data)
        except (SolveError, ValueError):
            self.data, self.changes, self.tree, self.result = saved
            return
        if int((~self.result.passed).sum()) >= before:
            self.data, self.changes, self.tree, self.result = saved

    def _feeder_knob(self) -> None:
        """Blocks whose own whole-unit ratios cannot be rounded finely enough: move the
        feeding branch of their mirror by a few units too (the product of two whole-unit
        ratios is much finer), one check per offset; kept only where it makes them pass."""
        tree, r = self.tree, self.result
        assert tree is not None and r is not None
        failing = {m: idx for m, idx in self._failing_mirrors().items()
                   if all(r.compliance[i] >= 0 and r.upstream[i] < 0 for i in idx)}
        feeds = {}
        for m in failing:
            b = int(tree.m_in_branch[tree.mirrors.index(m)])
            if b >= 0 and (self.touch is None or m in self.touch):
                feeds[m] = (tree.mirrors[int(tree.b_parent[b])], int(tree.b_index[b]))
        if not feeds:
            return
        before = int((~r.passed).sum())
        chosen: dict[str, tuple[float, dict[str, Any]]] = {}
        for offset in (1, -1, 2, -2, 3, -3):
            trial = dict(self.data)
            trial["mirrors"] = dict(self.data["mirrors"])
            todo = [m for m in feeds if m not in chosen]
            if not todo:
                break
            for m in todo:
                parent, k = feeds[m]
                pspec = copy.deepcopy(trial["mirrors"][parent]) if trial["mirrors"][parent] is self.data["mirrors"][parent] \
                    else trial["mirrors"][parent]
                size = pspec.get("input_size", 1.0)
                units = round(pspec["branches"][k].get("ratio", 1.0) * size) + offset
                if units < 1 or units > self.rules.max_units:
                    continue
                pspec["branches"][k]["ratio"] = units / size
                trial["mirrors"][parent] = pspec
                trial["mirrors"][m] = copy.deepcopy(self.data["mirrors"][m])
            try:
                t_tree, t_res = self.evaluate(trial)
                sub = Search.__new__(Search)
                sub.data, sub.rules, sub.changes, sub.tree, sub.result = trial, self.rules, [], t_tree, t_res
                sub.touch = set(todo)
                if sub._rebalance(failing_only=False):
                    t_tree, t_res = self.evaluate(trial)
            except (SolveError, ValueError):
                continue
            for m in todo:
                idx = failing[m]
                parent, k = feeds[m]
                if bool(t_res.passed[idx].all()):
                    chosen[m] = (trial["mirrors"][parent]["branches"][k]["ratio"], trial["mirrors"][m])
        if not chosen:
            return
        saved = (self._snapshot(), list(self.changes))
        for m, (ratio, spec) in chosen.items():
            parent, k = feeds[m]
            pspec = copy.deepcopy(self.data["mirrors"][parent])
            old = pspec["branches"][k].get("ratio", 1.0)
            pspec["branches"][k]["ratio"] = ratio
            self.data["mirrors"][parent] = pspec
            self.data["mirrors"][m] = spec
            self.changes.append(Change("rebalance", parent, f"{m} {old * pspec.get('input_size', 1.0):g} u",
                                       f"{m} {ratio * pspec.get('input_size', 1.0):g} u",
                                       f"the feeding branch of {m} moved so that its whole-unit ratios fit its blocks"))
        self.tree, self.result = self.evaluate(self.data)
        if int((~self.result.passed).sum()) >= before:  # the edits interfered: keep what was there
            self.data, self.changes = saved
            self.tree, self.result = self.evaluate(self.data)

    def _economise(self) -> None:
        """Once every block passes: the mirrors that feed only blocks get the cheapest
        topology under which their blocks still pass (one check per topology)."""
        tree, r = self.tree, self.result
        assert tree is not None and r is not None
        leaves = [m for m, spec in self.data["mirrors"].items()
                  if all(b["to"] in self.data["loads"] for b in spec["branches"])
                  and spec.get("topology", "simple") != "simple"]
        if not leaves:
            return
        saved = (self._snapshot(), list(self.changes))
        index = {n: i for i, n in enumerate(tree.loads)}
        judged = {m: [index[n] for n in self._loads_below(m)] for m in leaves}
        self.tried = {}
        choice = self._trials(leaves, judged, {m: {m} for m in leaves})
        for m, (t, spec) in choice.items():
            old = self.data["mirrors"][m]
            if t == old.get("topology", "simple"):
                continue
            self._set_topology(m, t, "cheaper, and every block of the mirror still passes")
            self.data["mirrors"][m] = spec
        self.tree, self.result = self.evaluate(self.data)
        if not bool(self.result.passed.all()):  # the changes interfered: keep the plan that passed
            self.data, self.changes = saved
            self.tree, self.result = self.evaluate(self.data)

    def _merge_changes(self) -> None:
        """Successive changes of one kind to one mirror are one change (first before → last after)."""
        out: list[Change] = []
        for c in self.changes:
            prev = next((o for o in reversed(out) if o.target == c.target and o.kind == c.kind), None)
            if prev is not None and c.kind in ("rebalance", "topology", "size"):
                prev.after = c.after
                if prev.before == prev.after:
                    out.remove(prev)
                continue
            out.append(c)
        self.changes = out

    def _failing_mirrors(self) -> dict[str, list[int]]:
        r, tree = self.result, self.tree
        assert r is not None and tree is not None
        out: dict[str, list[int]] = {}
        for i in np.flatnonzero(~r.passed).tolist():
            out.setdefault(tree.mirrors[int(tree.b_parent[tree.l_branch[i]])], []).append(i)
        return out

    def _round(self) -> bool:
        """One combined step: local routing, topology trials, then escalation, splits and sizes."""
        self.new_feeders = {}
        r, tree = self.result, self.tree
        assert r is not None and tree is not None
        acted = False
        fp = self.data.get("floorplan") or {}
        remote = set(fp.get("remote", []))
        failing = self._failing_mirrors()
        for m, loads in failing.items():
            for i in loads:
                name = tree.loads[i]
                if name in remote:
                    self._apply({name: ("local", None, f"{name} fails and sits on a long base/gate line")})
                    acted = True
        if acted:
            return True
        # mirrors tried: the failing ones, and the parents of those that no topology could fix last round
        targets = sorted(set(failing) | {p for p in self.escalated if p in self.data["mirrors"]})
        below_loads, below_mirrors = self._below()
        judged = {m: failing[m] if m in failing and m not in self.escalated else below_loads.get(m, []) for m in targets}
        touch = {m: below_mirrors.get(m, {m}) if m in self.escalated else {m} for m in targets}
        choice = self._trials(targets, judged, touch)
        for m, (t, spec) in choice.items():
            old = self.data["mirrors"][m]
            if t != old.get("topology", "simple"):
                self._set_topology(m, t, f"least-cost topology under which every block of {m} passes")
            if [b.get("ratio") for b in spec["branches"]] != [b.get("ratio") for b in old["branches"]] or \
                    spec.get("input_size") != old.get("input_size"):
                self.changes.append(Change("rebalance", m, self._ratio_text(old["branches"], old.get("input_size", 1.0)),
                                           self._ratio_text(spec["branches"], spec.get("input_size", 1.0)),
                                           "ratios set to cancel the systematic error of its blocks"))
            self.data["mirrors"][m] = spec
            acted = True
        actions: dict[str, tuple[str, Any, str]] = {}
        new_escalated: set[str] = set()
        for m in sorted(failing):
            self.seen[m] = self.seen.get(m, 0) + 1
            if m in choice and self.seen[m] < 3:
                continue
            # a mirror that keeps failing whatever topology it is given, and whose blocks only
            # rounding keeps off centre, splits them off (its topology may swing between two that
            # each leave a different block just off centre)
            if self.seen[m] >= 2 and self._rounding_limited(m, failing[m]):
                # only the whole-unit rounding of a shared mirror keeps these blocks off centre (their
                # error spread fits the budget): a mirror of their own gives two roundings in series
                for i in failing[m]:
                    self._split_for(m, tree.loads[i], actions)
                if any(tree.loads[i] in actions for i in failing[m]):
                    self.fallback.pop(m, None)
                    continue
            if m in choice:
                continue
            spec = self.fallback.pop(m, None)
            if spec is not None and spec != self.data["mirrors"][m]:
                old = self.data["mirrors"][m]
                self.changes.append(Change("rebalance", m, self._ratio_text(old["branches"], old.get("input_size", 1.0)),
                                           self._ratio_text(spec["branches"], spec.get("input_size", 1.0)),
                                           "ratios set to cancel the systematic error of its blocks"))
                self.data["mirrors"][m] = spec
                acted = True
                continue
            self.stuck[m] = self.stuck.get(m, 0) + 1
            parent = self._parent(m)
            if self.stuck[m] == 1 and parent is not None and parent not in self.escalated:
                new_escalated.add(parent)
                acted = True
                continue
            for i in failing[m]:
                mm = r.k_sigma * float(r.sigma[i])
                if mm > 0 and float(r.margin[i]) + mm > 0:
                    self._size(i, actions)
                else:
                    self._split_for(m, tree.loads[i], actions)
        self.escalated |= new_escalated
        return self._apply(actions) or acted

    def _rounding_limited(self, mirror: str, failing: list[int]) -> bool:
        r = self.result
        assert r is not None
        if len(self.data["mirrors"][mirror]["branches"]) < 2:
            return False
        for i in failing:
            if r.compliance[i] < 0 or r.upstream[i] >= 0 or r.k_sigma * float(r.sigma[i]) > 0:
                return False
            if r.conditions is not None:
                return False  # the spread over conditions may decide: the topology steps see to it
            half = 0.5 * float(r.error[i].max() - r.error[i].min())
            if half > 0.7 * self._slack(i):
                return False
        return True

    def _parent(self, mirror: str) -> str | None:
        tree = self.tree
        assert tree is not None
        if mirror not in tree.mirrors:
            return None
        b = int(tree.m_in_branch[tree.mirrors.index(mirror)])
        return tree.mirrors[int(tree.b_parent[b])] if b >= 0 else None

    def _below(self) -> tuple[dict[str, list[int]], dict[str, set[str]]]:
        """Per mirror, the loads below it and the mirrors below it (itself included)."""
        tree = self.tree
        assert tree is not None
        loads: dict[str, list[int]] = {}
        mirrors: dict[str, set[str]] = {}
        for i in range(len(tree.loads)):
            for m in tree.mirror_paths[int(tree.b_parent[tree.l_branch[i]])]:
                loads.setdefault(tree.mirrors[m], []).append(i)
        for path in tree.mirror_paths:
            for m in path:
                mirrors.setdefault(tree.mirrors[m], set()).add(tree.mirrors[path[-1]])
        return loads, mirrors

    def _cost(self, result: Audit, mirror: str, topology: str, spec: dict[str, Any]) -> tuple[float, float]:
        tree = result.tree
        m = tree.mirrors.index(mirror)
        fan = sum(b.get("ratio", 1.0) * b.get("count", 1) for b in spec["branches"])
        units = TOPOLOGIES[topology].units(spec.get("input_size", 1.0), fan,
                                           {"helper_size": spec.get("helper_size", 1.0), "swing_n": spec.get("swing_n", 1.25)})
        units *= float(tree.m_mult[m])
        extra = float(result.op.m_extra[m, 1] * tree.m_mult[m]) * tree.plan.supply
        return (extra, units) if self.rules.objective == "power" else (units, extra)

    def _trials(self, mirrors: list[str], judged: dict[str, list[int]],
                touch: dict[str, set[str]]) -> dict[str, tuple[str, dict[str, Any]]]:
        self.fallback = {}
        """Try every topology on every target mirror at once (one check, one rebalance and one
        more check per topology); per mirror, the least-cost topology under which its loads pass."""
        options: dict[str, list[tuple[tuple[float, float], str, dict[str, Any]]]] = {}
        for t in COST_ORDER:
            trial = dict(self.data)
            trial["mirrors"] = dict(self.data["mirrors"])
            changed = []
            touched: set[str] = set()
            for m in mirrors:
                if m in options and t != "beta_helper":
                    continue  # passes already with a cheaper topology (beta_helper still compared: rebalancing costs area)
                if not self._allowed(m, t, self._loads_below(m), fresh=True):
                    continue
                if touch[m] & touched:
                    continue  # nested targets are tried in separate rounds
                touched |= touch[m]
                spec = copy.deepcopy(self.data["mirrors"][m])
                spec["topology"] = t
                trial["mirrors"][m] = spec
                changed.append(m)
            if not changed:
                continue
            try:
                t_tree, t_res = self.evaluate(trial)
                sub = Search.__new__(Search)
                sub.data, sub.rules, sub.changes, sub.tree, sub.result = trial, self.rules, [], t_tree, t_res
                sub.touch = touched if self.touch is None else touched & (self.touch | set(changed))
                for n in sub.touch:
                    trial["mirrors"][n] = copy.deepcopy(trial["mirrors"][n])
                for _ in range(1):
                    if not sub._rebalance(failing_only=False):
                        break
                    t_tree, t_res = self.evaluate(trial)
                    sub.tree, sub.result = t_tree, t_res
                # an output just short of compliance: larger devices run at a lower current
                # density (V_BE falls by V_T·ln k, V_ov by √k), so size the mirror up and look again
                grown = self._grow_for_compliance(trial, t_res, changed, judged)
                if grown:
                    t_tree, t_res = self.evaluate(trial)
                    sub.tree, sub.result = t_tree, t_res
                    sub.touch = set(grown)
                    if sub._rebalance(failing_only=False):
                        t_tree, t_res = self.evaluate(trial)
            except (SolveError, ValueError):  # a topology that leaves no operating point is not chosen
                continue
            for m in changed:
                idx = judged[m]
                if t == self.data["mirrors"][m].get("topology", "simple"):
                    self.fallback[m] = trial["mirrors"][m]  # the same topology, ratios rebalanced
                if idx and bool(t_res.passed[idx].all()):
                    below = {n: trial["mirrors"][n] for n in touch[m] if n != m}
                    options.setdefault(m, []).append((self._cost(t_res, m, t, trial["mirrors"][m]), t, trial["mirrors"][m], below))
        out = {}
        for m, opts in options.items():
            _, t, spec, below = min(opts, key=lambda o: o[0])
            out[m] = (t, spec)
            self.data["mirrors"].update(below)  # the mirrors below an escalated one keep their rebalanced ratios
        return out

    def _grow_for_compliance(self, trial: dict[str, Any], res: Audit, changed: list[str],
                             judged: dict[str, list[int]]) -> list[str]:
        grown = []
        for m in changed:
            idx = judged[m]
            if not idx:
                continue
            short = -float(np.min(res.compliance[idx]))
            if not 0 < short < 0.15:
                continue
            spec = trial["mirrors"][m]
            size = spec.get("input_size", 1.0)
            biggest = size * max([1.0] + [b.get("ratio", 1.0) for b in spec["branches"]])
            k = min(int(self.rules.max_units // biggest), math.ceil(math.exp(1.3 * short / 0.0259)))
            if k < 2:
                continue
            trial["mirrors"][m] = dict(spec, input_size=size * k)
            grown.append(m)
        return grown

    def _split_for(self, mirror: str, load: str, actions: dict[str, tuple[str, Any, str]]) -> None:
        spec = self.data["mirrors"][mirror]
        tree = self.tree
        assert tree is not None
        if (self.rules.split and len(spec["branches"]) > 1 and load not in actions
                and tree.m_in_branch[tree.mirrors.index(mirror)] >= 0):
            actions[load] = ("split", mirror, f"no topology passes every block of {mirror}: {load} gets a mirror of its own")

    # --- helpers on the current result --------------------------------------

    def _allowed(self, mirror: str, topology: str, loads: list[str], fresh: bool = False) -> bool:
        topo = TOPOLOGIES[topology]
        family = _family(self.data, mirror)
        if family not in topo.kinds:
            return False
        if self.rules.topologies is not None and topology not in self.rules.topologies:
            return False
        for name in loads:
            allowed = self.rules.block_topologies.get(name)
            if allowed is not None and topology not in allowed:
                return False
        branches = self.data["mirrors"][mirror]["branches"]
        if topo.single_output and (len(branches) != 1 or branches[0].get("count", 1) != 1):
            return False
        if topology == "simple" and family == "bjt" and self._feeds_mirrors(mirror) and self._allowed(mirror, "beta_helper", [], True):
            # a bipolar mirror that feeds mirrors keeps its β loading small (÷β with a helper): its
            # fan-out changes as the search splits blocks off, and every block below would move with it
            return False
        return fresh or topology not in self.tried.setdefault(mirror, set())

    def _feeds_mirrors(self, mirror: str) -> bool:
        return any(b["to"] in self.data["mirrors"] for b in self.data["mirrors"][mirror]["branches"])

    def _loads_below(self, mirror: str) -> list[str]:
        loads = self.data["loads"]
        return [b["to"] for b in self.data["mirrors"][mirror]["branches"] if b["to"] in loads]

    def _set_topology(self, mirror: str, topology: str, why: str) -> None:
        spec = self.data["mirrors"][mirror]
        before = spec.get("topology", "simple")
        spec["topology"] = topology
        self.tried.setdefault(mirror, set()).add(topology)
        self.changes.append(Change("topology", mirror, before, topology, why))

    def _branches(self, mirror: int) -> range:
        tree = self.tree
        assert tree is not None
        start = int(np.searchsorted(tree.b_parent, mirror, "left"))
        return range(start, int(np.searchsorted(tree.b_parent, mirror, "right")))

    def _slack(self, load: int) -> float:
        r = self.result
        assert r is not None
        return float(r.tolerance[load] - r.reference_tolerance - r.k_sigma * r.sigma[load])

    # --- rebalance ----------------------------------------------------------

    def _rebalance(self, failing_only: bool) -> bool:
        """Cancel each block's systematic error with its branch ratio (whole units)."""
        if not self.rules.rebalance:
            return False
        r, tree = self.result, self.tree
        assert r is not None and tree is not None
        err = r.error
        mid = 0.5 * (err.max(axis=1) + err.min(axis=1))
        acted = False
        by_mirror: dict[int, list[int]] = {}
        for i in range(len(tree.loads)):
            if failing_only and r.passed[i]:
                continue
            slack = max(self._slack(i), 1e-4)
            if r.compliance[i] < 0 or r.upstream[i] >= 0:
                continue  # a current out of compliance says nothing about the ratio it needs
            if abs(mid[i]) > 0.05 * slack and abs(mid[i]) < 0.9:
                by_mirror.setdefault(int(tree.b_parent[tree.l_branch[i]]), []).append(i)
        for m, loads in by_mirror.items():
            name = tree.mirrors[m]
            if self.touch is not None and name not in self.touch:
                continue
            spec = self.data["mirrors"][name]
            branches = spec["branches"]
            # every block of the mirror is re-centred (a block already centred keeps its ratio
            # within the same allowance), so the rounding can use the whole input device
            idx = {int(tree.b_index[b]): int(tree.b_child[b]) for b in self._branches(m) if tree.b_to_load[b]}
            ratios, allowed = [], []
            for k, b in enumerate(branches):
                if k in idx:
                    i = idx[k]
                    ok = r.compliance[i] >= 0 and r.upstream[i] < 0 and abs(mid[i]) < 0.9
                    ratios.append(b.get("ratio", 1.0) / (1.0 + (mid[i] if ok else 0.0)))
                    allowed.append(max(0.3 * max(self._slack(i), 0.0), 5e-4))
                else:
                    ratios.append(b.get("ratio", 1.0))
                    allowed.append(0.01)
            size = spec.get("input_size", 1.0)
            if self.rules.whole:
                got = realise(ratios, allowed, self.rules.max_units, start=int(size) if float(size).is_integer() else 1,
                              max_ratio=self.rules.max_ratio)
                if got is None or not _fits(ratios, allowed, *got):
                    # the input device as it is leaves no room (an output would pass max_units) or
                    # rounds too coarsely: a smaller one may fit every output
                    low = realise(ratios, allowed, self.rules.max_units, max_ratio=self.rules.max_ratio)
                    if low is not None and (got is None or _fits(ratios, allowed, *low)):
                        got = low
                if got is None:
                    continue
                n_in, units = got
                new = [u / n_in for u in units]
            else:
                n_in, new = size, ratios
            before = [b.get("ratio", 1.0) for b in branches]
            if all(abs(a - b) < 1e-15 for a, b in zip(before, new)) and n_in == size:
                continue
            old_text = self._ratio_text(branches, size)
            spec["input_size"] = float(n_in)
            for b, value in zip(branches, new):
                b["ratio"] = value
            self.changes.append(Change("rebalance", name, old_text, self._ratio_text(branches, n_in),
                                       "ratios set to cancel the systematic error of " + ", ".join(tree.loads[i] for i in loads[:4])
                                       + (" …" if len(loads) > 4 else "")))
            acted = True
        return acted

    @staticmethod
    def _ratio_text(branches: list[dict[str, Any]], size: float) -> str:
        shown = ", ".join(f"{b['to']} {b.get('ratio', 1.0) * size:.4g}" for b in branches[:4])
        return f"input {size:g} u; {shown}{' …' if len(branches) > 4 else ''}"

    # --- topology, split, size, local ----------------------------------------

    def _size(self, load: int, actions: dict[str, tuple[str, Any, str]]) -> bool:
        """Larger devices on the stage with the largest mismatch σ (area law)."""
        r, tree = self.result, self.tree
        assert r is not None and tree is not None
        if r.spread is None:
            return False
        stages = sorted(r.spread.stage_sigmas(load), key=lambda s: -s[1])
        mm = r.k_sigma * float(r.sigma[load])
        want = mm + float(r.margin[load])  # k·σ that would just pass
        factor = (mm / want) ** 2 if want > 0 else 16.0
        for name, _ in stages:
            spec = self.data["mirrors"][name]
            size = spec.get("input_size", 1.0)
            biggest = size * max([1.0] + [b.get("ratio", 1.0) for b in spec["branches"]])
            room = self.rules.max_units / biggest
            if room < 2 - 1e-9:
                continue
            scale = max(2, min(int(room), math.ceil(factor * 1.1)))
            actions.setdefault(name, ("size", scale, f"{format_si(mm, '')}·k-σ mismatch of {tree.loads[load]}"))
            return True
        return False

    def _apply(self, actions: dict[str, tuple[str, Any, str]]) -> bool:
        acted = False
        for target, (kind, value, why) in actions.items():
            if kind == "topology":
                self._set_topology(target, value, why)
            elif kind == "size":
                spec = self.data["mirrors"][target]
                before = spec.get("input_size", 1.0)
                spec["input_size"] = before * value
                self.changes.append(Change("size", target, f"input {before:g} u", f"input {before * value:g} u", why))
            elif kind == "local":
                fp = self.data["floorplan"]
                fp["remote"] = [n for n in fp["remote"] if n != target]
                self.changes.append(Change("local", target, "output device at the block (base/gate line routed)",
                                           "current routed from an output beside the mirror", why))
            elif kind == "split":
                if not self._split(value, target, why):
                    continue
            acted = True
        return acted

    def _feeder_with_room(self, parent: str, load: str, current: float, count: int) -> str | None:
        """The mirror that feeds a block split off: its own mirror's parent when that has
        fan-out to spare (limit max_fanout), else the nearest mirror of the same device that
        feeds mirrors and has; None when none has."""
        tree, r = self.tree, self.result
        assert tree is not None and r is not None

        def room(name: str, current: float, count: int) -> bool:
            spec = self.data["mirrors"][name]
            p_in = self._input_current(name)
            if p_in is None:
                return False
            ratio = current / p_in if p_in > 0 else float("inf")
            if not 1 / self.rules.max_ratio <= ratio <= self.rules.max_ratio:
                return False
            fan = sum(b.get("ratio", 1.0) * b.get("count", 1) for b in spec["branches"])
            return fan + max(1.0, ratio) * count <= self.rules.max_fanout

        current = self._split_current(current)
        if room(parent, current, count):
            return parent
        positions = (self.data.get("floorplan") or {}).get("positions") or {}
        here = positions.get(load)

        def distance(m: str) -> tuple[float, str]:
            at = positions.get(m)
            if here is None or at is None:
                return (0.0, m)
            return (math.hypot(at[0] - here[0], at[1] - here[1]), m)

        def nearest(device: str, current: float, count: int, besides: str) -> str | None:
            others = [m for m, spec in self.data["mirrors"].items()
                      if m != besides and spec["device"] == device and self._feeds_mirrors(m) and room(m, current, count)]
            return min(others, key=distance) if others else None

        pspec = self.data["mirrors"][parent]
        found = nearest(pspec["device"], current, count, parent)
        if found is not None or count > 1:
            return found
        # every feeder of that device is full: a new one, fed by the nearest mirror with room one level up
        p_in = self._input_current(parent)
        grand = self._parent(parent)
        if p_in is None or grand is None:
            return None
        above = nearest(self.data["mirrors"][grand]["device"], p_in, 1, "")
        if above is None:
            return None
        aspec = self.data["mirrors"][above]
        a_in = self._input_current(above)
        assert a_in is not None
        size = aspec.get("input_size", 1.0)
        units = max(1, min(self.rules.max_units, round(p_in / a_in * size)))
        name = f"{parent}_x"
        while name in self.data["mirrors"] or name in self.data["loads"]:
            name += "x"
        aspec["branches"].append({"to": name, "ratio": units / size})
        self.data["mirrors"][name] = {"device": pspec["device"], "input_size": 1.0,
                                      "topology": pspec.get("topology", "simple"), "branches": []}
        self.tried[name] = {pspec.get("topology", "simple")}
        self.new_feeders[name] = a_in * units / size
        fp = self.data.get("floorplan")
        if fp and fp.get("positions") and here is not None:
            fp["positions"][name] = here
        self.changes.append(Change("split", name, "—", f"a new feeder fed by {above}",
                                   f"every {pspec['device']} feeder had its fan-out (max_fanout) in use"))
        return name

    def _split_current(self, current: float) -> float:
        root = math.sqrt(self.rules.max_ratio)
        return max(current / root, self.rules.min_current, self.data["reference"]["current"] / root)

    def _input_current(self, mirror: str) -> float | None:
        tree, r = self.tree, self.result
        assert tree is not None and r is not None
        if mirror in self.new_feeders:
            return self.new_feeders[mirror]
        if mirror not in tree.mirrors:
            return None
        return float(r.op.m_i_in[tree.mirrors.index(mirror), 1])

    def _split(self, mirror: str, load: str, why: str) -> bool:
        tree, r = self.tree, self.result
        assert tree is not None and r is not None
        mi = tree.mirrors.index(mirror)
        pb = int(tree.m_in_branch[mi])
        spec = self.data["mirrors"][mirror]
        if len(spec["branches"]) < 2:
            return False
        k = next(j for j, b in enumerate(spec["branches"]) if b["to"] == load)
        current = self.data["loads"][load]["current"]
        count = spec["branches"][k].get("count", 1)
        parent = self._feeder_with_room(tree.mirrors[int(tree.b_parent[pb])], load, current, count)
        copies_here = False  # the copies of the block hang on its new mirror (one feed), not on the feeder
        if parent is None and count > 1:
            parent = self._feeder_with_room(tree.mirrors[int(tree.b_parent[pb])], load, current, 1)
            copies_here = True
        if parent is None:
            return False
        spec["branches"].pop(k)
        pspec = self.data["mirrors"][parent]
        p_in = self._input_current(parent)
        assert p_in is not None
        size = pspec.get("input_size", 1.0)
        # the new mirror runs at a fraction of the block's current (ratio ≈ √max_ratio, within the
        # intermediate current range): its input is overhead, and a ratio with both sizes ≤ max_units/√max_ratio
        # can still be rounded to ≈ 0.1 %
        i_new = self._split_current(current)
        units = max(1, min(self.rules.max_units, round(i_new / p_in * size)))
        # the new mirror's own ratio makes up what the parent's whole units miss
        got = realise([current / (p_in * units / size)], [2e-3], self.rules.max_units, max_ratio=self.rules.max_ratio)
        n_new, u_new = got if got is not None else (1, [1])
        new = f"{mirror}_{load}"
        while new in self.data["mirrors"] or new in self.data["loads"]:
            new += "_"
        pspec["branches"].append({"to": new, "ratio": units / size, "count": 1 if copies_here else count})
        if pspec.get("topology", "simple") == "simple" and not self._allowed(parent, "simple", [], True):
            self._set_topology(parent, "beta_helper", f"it now feeds {new}: a helper keeps its β loading small")
        self.data["mirrors"][new] = {"device": spec["device"], "input_size": float(n_new), "topology": "simple",
                                     "branches": [{"to": load, "ratio": u_new[0] / n_new,
                                                   **({"count": count} if copies_here else {})}]}
        fp = self.data.get("floorplan")
        if fp and fp.get("positions") and load in fp["positions"]:
            fp["positions"][new] = fp["positions"][load]
        self.changes.append(Change("split", load, f"on {mirror}", f"on its own mirror {new} fed by {parent}", why))
        return True
