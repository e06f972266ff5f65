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
from dataclasses import dataclass

import numpy as np

from biastree.analysis.audit import Audit
from biastree.analysis.pipeline import check_tree
from biastree.physics.topologies import TOPOLOGIES
from biastree.units import format_percent, format_si

MAX_TRIALS = 12  # re-solves of the whole tree per audit
MAX_MIRRORS = 2500  # above this, hints are skipped (each trial re-solves everything)

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


def _candidates(result: Audit, load: int) -> list[tuple[str, str, str]]:
    """(mirror, topology, motive) worth trying for one failing load."""
    tree = result.tree
    out = []
    if result.margin[load] < 0:
        stage, label, value = result.largest_term(load)
        if stage != "plan":
            for topo in _FOR_TERM.get(label, ()):
                out.append((stage, topo, f"{label} at {stage} dominates ({format_percent(value)})"))
    if result.compliance[load] < 0:
        parent = tree.mirrors[tree.b_parent[tree.l_branch[load]]]
        family = "bjt" if tree.m_bipolar[tree.b_parent[tree.l_branch[load]]] else "mos"
        for topo in _FOR_COMPLIANCE[family]:
            out.append((parent, topo, f"the output of {parent} lacks {format_si(-float(result.compliance[load]), 'V')}"))
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


def _trial(result: Audit, mirror: str, topology: str) -> Trial:
    plan = result.tree.plan
    spec = plan.mirrors[mirror]
    keep = {k: getattr(spec, k) for k in ("device", "input_size", "branches")}
    changed = type(spec)(topology=topology, **keep)
    new_plan = plan.model_copy(update={"mirrors": {**plan.mirrors, mirror: changed}})
    try:
        # the same verdict pipeline as the original (conditions and mismatch included)
        # same structure, other topology: no need to check the tree again
        tree = dataclasses.replace(result.tree, plan=new_plan)
        return Trial(mirror, topology, check_tree(tree, conditions=result.conditions is not None,
                                             mismatch=result.spread is not None, k_sigma=result.k_sigma,
                                             detail=False))
    except Exception as exc:  # a candidate that cannot be solved is simply not suggested
        return Trial(mirror, topology, None, str(exc))


def hints(result: Audit) -> dict[int, list[str]]:
    """Hints per failing load index (empty when nothing tried helps)."""
    tree = result.tree
    if len(tree.mirrors) > MAX_MIRRORS:
        return {}
    failing = [int(i) for i in np.flatnonzero(~result.passed)]
    wanted: dict[tuple[str, str], int] = {}
    motives: dict[int, list[tuple[str, str, str]]] = {}
    for i in failing:
        motives[i] = _candidates(result, i)
        for mirror, topo, _ in motives[i]:
            wanted[(mirror, topo)] = wanted.get((mirror, topo), 0) + 1
    chosen = sorted(wanted, key=lambda k: -wanted[k])[:MAX_TRIALS]
    trials = {key: _trial(result, *key) for key in chosen}
    out: dict[int, list[str]] = {}
    for i in failing:
        lines = []
        by_trial: dict[tuple[str, str], list[str]] = {}
        for mirror, topo, motive in motives[i]:
            by_trial.setdefault((mirror, topo), []).append(motive)
        for (mirror, topo), why in by_trial.items():
            trial = trials.get((mirror, topo))
            if trial is None or trial.result is None:
                continue
            new = trial.result
            err, _ = new.worst_error(i)
            if new.passed[i]:
                status = "would pass"
            else:
                left = [k for k, bad in (("budget", new.margin[i] < 0), ("compliance", new.compliance[i] < 0),
                                         ("headroom", new.upstream[i] >= 0)) if bad]
                status = f"would still fail ({', '.join(left)})"
            detail = (f"error {format_percent(err)} (budget ±{new.tolerance[i] * 100:.3g} %), "
                      f"compliance margin {format_si(float(new.compliance[i]), 'V')}")
            lines.append(f"{'; '.join(why)}: {topo} at {mirror} {status}: {detail}")
        if lines:
            out[i] = lines
    return out
