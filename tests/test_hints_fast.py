"""Hints for every failing load from one restricted re-solve of all trials
(``analysis.trials``) give what one full re-solve per trial gives (issue 13).

Oracle: the slow path itself — for every trial the whole edited plan checked
again by ``check_tree`` (``advise._trial``), its audit read for each load.
Texts must be equal; the numbers behind them (margin, compliance margin,
worst error) equal within the solver's convergence (sweeps stop when no input
voltage moves by 1e-12 V; both paths reach the same fixed point from
different starts).  Plans: the samples and generated plans (invented data),
bipolar and MOS, several topologies, with conditions and mismatch.
"""

from __future__ import annotations

import copy
import dataclasses

import numpy as np
import pytest
import yaml
from conftest import ROOT
from helpers import tree_of

import biastree
from biastree.analysis import advise, trials
from biastree.input.generate import Ranges, random_plan

ALL = ("simple", "beta_helper", "cascode", "wilson", "wilson4", "wide_swing", "degenerated")


def _generated(n: int, seed: int, topologies: tuple[str, ...] = ALL, families: tuple[str, ...] = ("bjt", "mos"),
               conditions: bool = False, mismatch: bool = False) -> biastree.Tree:
    plan = random_plan(n, seed=seed, ranges=Ranges(topologies=topologies, families=families))
    if conditions:
        plan["conditions"] = {"temperatures": ["-40C", "27C", "125C"], "supplies": ["3.0V", "3.6V"],
                              "corners": {"weak": {"beta": "-20%", "vth": "30mV"}}}
    if mismatch:  # invented coefficients of the usual size
        d = plan["devices"]
        d["qn"].update(area="40um^2", a_is_pair="1%*um")
        d["qp"].update(area="60um^2", a_is_pair="1.5%*um")
        for k in ("mn", "mp"):
            d[k].update(a_vt_pair="5mV*um", a_beta_pair="1%*um")
    return tree_of(plan)


def _all_simple(name: str) -> biastree.Tree:
    data = yaml.safe_load((ROOT / "samples" / name).read_text())
    for mirror in data["mirrors"].values():
        mirror["topology"] = "simple"
        mirror.pop("degeneration_drop", None)
    return tree_of(data)


CASES = {
    "failing_budgets": lambda: biastree.load(ROOT / "samples" / "failing_budgets.yaml"),
    "mixed_as_simple": lambda: _all_simple("mixed_topologies.yaml"),
    "die_spread_as_simple": lambda: _all_simple("die_spread.yaml"),  # conditions, mismatch, floorplan
    "generated_simple": lambda: _generated(60, 5, ("simple",)),
    "generated_bjt": lambda: _generated(40, 8, families=("bjt",)),
    "generated_mos": lambda: _generated(40, 9, families=("mos",)),
    "generated_conditions": lambda: _generated(30, 2, conditions=True),
    "generated_mismatch": lambda: _generated(30, 3, mismatch=True),
    "generated_both": lambda: _generated(24, 4, conditions=True, mismatch=True),
}


@pytest.fixture(scope="module", params=sorted(CASES))
def result(request) -> biastree.Audit:  # type: ignore[no-untyped-def]
    return biastree.check(CASES[request.param]())


def test_texts_equal_one_full_re_solve_per_trial(result) -> None:  # type: ignore[no-untyped-def]
    fast = advise.hints(result)
    assert fast == advise.hints(result, batched=False)
    failing = int((~result.passed).sum())
    assert failing and len(fast) == sum(1 for i in np.flatnonzero(~result.passed)
                                        if advise._candidates(result, int(i)))  # every load with a candidate


def test_numbers_equal_one_full_re_solve_per_trial(result) -> None:  # type: ignore[no-untyped-def]
    failing = np.flatnonzero(~result.passed)
    pairs = advise._motives(result, failing)
    keys = list(dict.fromkeys(zip(pairs.mirror, pairs.topology)))
    k_of = {key: k for k, key in enumerate(keys)}
    pair_trial = np.array([k_of[key] for key in zip(pairs.mirror, pairs.topology)])
    specs = {t: advise._changed(result.tree.plan.mirrors[result.tree.mirrors[m]], t) for m, t in keys}
    got = trials.outcomes(result, np.array([m for m, _ in keys]), [t for _, t in keys], specs,
                          pair_trial, np.array(pairs.load))
    compared = 0
    slow = {k: advise._trial(result, result.tree.mirrors[m], t).result for k, (m, t) in enumerate(keys)}
    for j, (k, i) in enumerate(zip(pair_trial.tolist(), pairs.load)):
        want = slow[k]
        if want is None:
            continue
        assert got.solved[j]
        compared += 1
        assert got.passed[j] == want.passed[i]
        assert got.margin[j] == pytest.approx(want.margin[i], abs=1e-12)
        assert got.compliance[j] == pytest.approx(want.compliance[i], abs=1e-12)
        assert got.error[j] == pytest.approx(want.worst_error(i)[0], rel=1e-11, abs=1e-14)
        assert got.tolerance[j] == want.tolerance[i]
        assert bool(got.headroom_lost[j]) == bool(want.upstream[i] >= 0)
    assert compared


def test_trials_the_rows_cannot_answer_are_re_solved_in_full(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    result = biastree.check(CASES["generated_conditions"]())
    expected = advise.hints(result, batched=False)
    real = advise.outcomes

    def unsettled(*args, **kwargs):  # type: ignore[no-untyped-def]
        got = real(*args, **kwargs)
        return dataclasses.replace(got, solved=np.arange(len(got.solved)) % 2 == 0)

    monkeypatch.setattr(advise, "outcomes", unsettled)
    assert advise.hints(result) == expected


def test_hint_number_is_the_re_solved_plan() -> None:
    """One trial checked by hand: the plan edited and checked again (the
    mixed sample with every mirror simple; p_dist's β loading dominates)."""
    data = yaml.safe_load((ROOT / "samples" / "mixed_topologies.yaml").read_text())
    for mirror in data["mirrors"].values():
        mirror["topology"] = "simple"
        mirror.pop("degeneration_drop", None)
    result = biastree.check(tree_of(data))
    again = copy.deepcopy(data)
    again["mirrors"]["p_dist"]["topology"] = "beta_helper"
    fixed = biastree.check(tree_of(again))
    for i, lines in advise.hints(result).items():
        for line in lines:
            if "beta_helper at p_dist" in line:
                err, _ = fixed.worst_error(i)
                assert f"error {err * 100:+.3g} %" in line
                assert ("would pass" in line) == bool(fixed.passed[i])


def test_candidates_for_all_loads_equal_the_per_load_rule(result) -> None:  # type: ignore[no-untyped-def]
    """``_motives`` (all failing loads at once) names the trials and words ``_candidates`` names load by load."""
    failing = np.flatnonzero(~result.passed)
    pairs = advise._motives(result, failing)
    got: dict[int, list[tuple[str, str, str]]] = {}
    for i, m, t, why in zip(pairs.load, pairs.mirror, pairs.topology, pairs.why):
        got.setdefault(i, []).append((result.tree.mirrors[m], t, why))
    for i in failing.tolist():
        merged: dict[tuple[str, str], list[str]] = {}
        for m, t, motive in advise._candidates(result, i):
            merged.setdefault((m, t), []).append(motive())
        assert got.get(i, []) == [(m, t, "; ".join(w)) for (m, t), w in merged.items()]
