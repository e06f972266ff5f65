"""The fast paths give the slow paths' answers (issue 13).

Oracles: the slow paths themselves — the standard-library JSON encoder over
``Audit.to_dict``, the per-load stage walk the audit used before it built
stage rows once per branch, one full re-solve per hint trial, the whole-tree
sweep for deep trees and a plain bisection for the MOS cascode node.  Where
the fast path does the same arithmetic the results must be equal to the last
float; where it iterates differently to the same fixed point (deep trees,
Newton vs bisection) the tolerance is stated beside the check.  Plans are the
samples and generated plans (invented data).
"""

from __future__ import annotations

import json

import jsonschema
import numpy as np
import pytest
from conftest import ROOT, SAMPLES
from helpers import tree_of

import biastree
from biastree.analysis import advise, solve as solve_module
from biastree.input.generate import random_plan
from biastree.output.json import iter_json, to_json, to_json_stdlib
from biastree.physics.topologies import TERM_LABELS, TOPOLOGIES, _mos_cascode_node


@pytest.fixture(scope="module")
def results() -> list[biastree.Audit]:
    out = [biastree.check(path) for path in SAMPLES]
    out += [biastree.check(tree_of(random_plan(n, seed=seed))) for n, seed in ((60, 5), (400, 11))]
    return out


def _stages_by_walk(result: biastree.Audit, load: int, case: int = 1) -> list[dict]:
    """The per-load stage walk (the audit's former code), as the reference."""
    tree, op = result.tree, result.op
    plan = tree.plan
    path = tree.path(load)
    out = []
    for k, m in enumerate(path):
        branch = int(tree.m_in_branch[path[k + 1]]) if k + 1 < len(path) else int(tree.l_branch[load])
        mirror = plan.mirrors[tree.mirrors[m]]
        family = "bjt" if tree.m_bipolar[m] else "mos"
        terms = []
        for key in TOPOLOGIES[mirror.topology].terms[family]:
            if key not in op.b_factors:
                continue
            value = op.b_factors[key][branch, case]
            if key == "gradient" and value == 1.0:
                continue
            terms.append({"term": key, "label": TERM_LABELS[key], "value": float(value - 1.0)})
        out.append({"mirror": tree.mirrors[m], "device": mirror.device, "topology": mirror.topology,
                    "branch": int(tree.b_index[branch]), "ratio": float(tree.b_ratio[branch]),
                    "input_current": float(op.m_i_in[m, case]), "output_current": float(op.b_current[branch, case]),
                    "fanout": float(tree.m_fanout[m]),
                    "error": float(np.prod([1.0 + t["value"] for t in terms])) - 1.0, "terms": terms})
    return out


def test_stage_rows_equal_the_per_load_walk(results) -> None:  # type: ignore[no-untyped-def]
    for result in results:
        for i in range(len(result.tree.loads)):
            for case in (0, 1, 2):
                # a card device's β term also says at which β it was taken (tests/test_gummel_poon.py checks it)
                got = [{**st, "terms": [{k: v for k, v in t.items() if k not in ("beta", "note")} for t in st["terms"]]}
                       for st in result.stages(i, case)]
                assert got == _stages_by_walk(result, i, case)


def test_stage_sigmas_equal_the_per_stage_formula() -> None:
    result = biastree.check(ROOT / "samples" / "die_spread.yaml")
    an, tree = result.spread, result.tree
    for i in range(len(tree.loads)):
        path = tree.path(i)
        expected = []
        for k, m in enumerate(path):
            b = int(tree.m_in_branch[path[k + 1]]) if k + 1 < len(path) else int(tree.l_branch[i])
            expected.append((tree.mirrors[m], float(np.sqrt(an.local_var(b)))))
        assert an.stage_sigmas(i) == expected


def test_orjson_output_equals_the_standard_library_to_the_last_float(results) -> None:  # type: ignore[no-untyped-def]
    schema = json.loads((ROOT / "schemas" / "results.schema.json").read_text())
    for result in results:
        reference = json.loads(to_json_stdlib(result))
        indented = to_json(result, indent=True)
        compact = to_json(result, indent=False)
        assert json.loads(indented) == reference
        assert json.loads(compact) == reference
        assert b"".join(iter_json(result, indent=False)) == compact.encode()
        jsonschema.validate(reference, schema)
        for detail in ("loads", "summary"):
            data = json.loads(to_json(result, detail))
            jsonschema.validate(data, schema)
            assert data["detail"] == detail and data["summary"] == reference["summary"]
            if detail == "loads":
                assert [{**l, "stages": r["stages"]} for l, r in zip(data["loads"], reference["loads"])] \
                    == reference["loads"]
            else:
                assert data["loads"] == []


def test_json_refuses_non_finite_numbers_as_before(results) -> None:  # type: ignore[no-untyped-def]
    import dataclasses

    result = results[0]
    broken = dataclasses.replace(result, margin=result.margin * np.nan)
    with pytest.raises(ValueError):
        to_json(broken)
    with pytest.raises(ValueError):
        to_json_stdlib(broken)


@pytest.mark.parametrize("which", ["failing_budgets", "generated"])
def test_batched_hints_equal_one_re_solve_per_trial(which: str) -> None:
    tree = biastree.load(ROOT / "samples" / "failing_budgets.yaml") if which == "failing_budgets" \
        else tree_of(random_plan(60, seed=5))
    result = biastree.check(tree)
    assert advise.hints(result) == advise.hints(result, batched=False)
    # and the numbers behind the words: each trial's loads, from its wave and alone
    failing = [int(i) for i in np.flatnonzero(~result.passed)]
    motives = {i: advise._candidates(result, i) for i in failing}
    keys = list(dict.fromkeys((m, t) for i in failing for m, t, _ in motives[i]))
    batched = advise._run_waves(result, keys)
    if which == "generated":
        assert len(advise.waves(result, keys)) < len(keys)  # trials were shared
    for key in keys:
        alone = advise._trial(result, *key)
        loads = [i for i in failing if any((m, t) == key for m, t, _ in motives[i])]
        if alone.result is None:
            continue
        got, want = batched[key].result, alone.result
        for i in loads:
            assert got.passed[i] == want.passed[i]
            assert got.margin[i] == pytest.approx(want.margin[i], abs=1e-12)
            assert got.compliance[i] == pytest.approx(want.compliance[i], abs=1e-12)


def _chain(n: int) -> dict:
    """A chain of n mirrors, alternately nmos and npn-free pmos, a load at every
    level (invented values)."""
    mirrors, loads = {}, {}
    for i in range(n):
        branches = [{"to": f"l{i}", "ratio": 1}] + ([{"to": f"m{i + 1}", "ratio": 1}] if i + 1 < n else [])
        mirrors[f"m{i}"] = {"device": "mn" if i % 2 == 0 else "mp", "branches": branches,
                            **({"topology": "cascode"} if i % 3 == 0 else {})}
        loads[f"l{i}"] = {"current": "10uA", "tolerance": "5%", "voltage": "1.65V"}
    return {"title": "chain (invented)", "supply": "3.3V",
            "devices": {"mn": {"kind": "nmos", "kp": "200uA/V^2", "vth": "0.5V", "lambda": "0.05/V", "w": "4um", "l": "1um"},
                        "mp": {"kind": "pmos", "kp": "80uA/V^2", "vth": "0.5V", "lambda": "0.05/V", "w": "8um", "l": "1um"}},
            "reference": {"current": "10uA", "feeds": "m0"}, "mirrors": mirrors, "loads": loads}


def test_deep_tree_local_fixed_point_equals_the_whole_tree_sweep(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    tree = tree_of(_chain(60))
    fast = biastree.solve(tree)
    monkeypatch.setattr(solve_module, "DEEP_TREE", 10**9)
    slow = biastree.solve(tree)
    assert fast.sweeps <= 3 < slow.sweeps
    # both stop when no input voltage moves by 1e-12 V: the same fixed point within that
    assert np.allclose(fast.b_current, slow.b_current, rtol=1e-10, atol=0)
    assert np.allclose(fast.m_v_in, slow.m_v_in, rtol=0, atol=1e-11)


def test_region_re_solve_of_everything_equals_a_full_solve() -> None:
    tree = tree_of(random_plan(200, seed=2))
    full = biastree.solve(tree, output_resistance=False)
    again = biastree.solve(tree, output_resistance=False, base=full, only=np.ones(len(tree.mirrors), bool))
    assert np.allclose(again.b_current, full.b_current, rtol=1e-12, atol=0)


def _bisection(k2, k4, vg2, vg4, d, vth, lam):  # type: ignore[no-untyped-def]
    """The former solution of the cascode node: plain bisection to machine precision."""
    def f(vx):  # type: ignore[no-untyped-def]
        return 0.5 * k2 * (vg2 - vth) ** 2 * (1.0 + lam * vx) - 0.5 * k4 * np.maximum(vg4 - vx - vth, 0.0) ** 2 * (
            1.0 + lam * (d - vx))
    lo = np.zeros(np.broadcast(d, vg4).shape)
    hi = np.broadcast_to(vg4 - vth, lo.shape).copy()
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        positive = f(mid) > 0
        hi, lo = np.where(positive, mid, hi), np.where(positive, lo, mid)
    return 0.5 * (lo + hi)


def test_cascode_node_newton_equals_bisection() -> None:
    rng = np.random.default_rng(4)
    n = 5000
    k = rng.uniform(1e-5, 1e-3, n)
    vth = rng.uniform(0.3, 0.8, n)
    vg2 = vth + rng.uniform(0.05, 0.6, n)
    vg4 = vg2 + vth + rng.uniform(0.0, 0.6, n)
    args = (k * rng.uniform(0.5, 2, n), k, vg2, vg4, rng.uniform(0.0, 3.3, n), vth, rng.uniform(0.0, 0.2, n))
    # same root of the same residual: within a few ulps of a volt
    assert np.max(np.abs(_mos_cascode_node(*args) - _bisection(*args))) < 1e-14


def test_json_detail_option(tmp_path) -> None:  # type: ignore[no-untyped-def]
    from typer.testing import CliRunner

    from biastree.cli import app

    schema = json.loads((ROOT / "schemas" / "results.schema.json").read_text())
    plan = str(ROOT / "samples" / "die_spread.yaml")
    full = json.loads(CliRunner().invoke(app, ["check", plan, "--json"]).stdout)
    out = tmp_path / "r.json"
    result = CliRunner().invoke(app, ["check", plan, "--json", "--json-detail", "loads", "-o", str(out)])
    assert result.exit_code in (0, 1)
    data = json.loads(out.read_text())
    jsonschema.validate(data, schema)
    assert data["detail"] == "loads" and all("stages" not in l for l in data["loads"])
    assert [l["name"] for l in data["loads"]] == [l["name"] for l in full["loads"]]
    assert CliRunner().invoke(app, ["check", plan, "--json", "--json-detail", "all"]).exit_code == 2
