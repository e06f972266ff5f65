"""The solver on hand-computed trees and on properties that must always hold."""

from __future__ import annotations

import copy
import json
import math
import random

import numpy as np
import pytest
from helpers import tree_of
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

import biastree
from biastree.input.generate import random_plan
from biastree.physics.devices import thermal_voltage

VT = float(thermal_voltage(300.15))


def test_two_level_bipolar_tree_by_hand() -> None:
    # Hand computation with the Gummel–Poon equations of DESIGN.md / REFERENCES.md
    # (simulator form, derived): root npn feeds a pnp mirror and a load; the pnp's
    # input voltage sets the npn output's VCB, which is solved here with brentq.
    is_n, bf_n, va_n = 1e-17, 150.0, 70.0
    is_p, bf_p, va_p = 2e-17, 40.0, 30.0
    supply, iref = 3.3, 10e-6
    plan = {
        "supply": f"{supply}V",
        "devices": {
            "qn": {"kind": "npn", "is": is_n, "beta": bf_n, "early": f"{va_n}V"},
            "qp": {"kind": "pnp", "is": is_p, "beta": bf_p, "early": f"{va_p}V"},
        },
        "reference": {"current": iref, "feeds": "n"},
        "mirrors": {
            "n": {"device": "qn", "branches": [{"to": "p", "ratio": 2}, {"to": "a", "ratio": 0.5, "count": 3}]},
            "p": {"device": "qp", "input_size": 2, "branches": [{"to": "b", "ratio": 1.5, "count": 2}, {"to": "c", "ratio": 0.5}]},
        },
        "loads": {
            "a": {"current": "5uA", "tolerance": "10%", "voltage": "1.0V"},
            "b": {"current": "30uA", "tolerance": "10%", "voltage": "1.2V"},
            "c": {"current": "10uA", "tolerance": "10%", "voltage": "2.0V"},
        },
    }
    # stage n: fan-out 2 + 0.5·3 = 3.5
    ic0_n = iref / (1 + (1 + 3.5) / bf_n)
    vbe_n = VT * math.log(ic0_n / is_n)
    a = 0.5 * ic0_n * (1 + (1.0 - vbe_n) / va_n)

    def pnp_input(i_p: float) -> tuple[float, float]:
        ic0_p = i_p / (1 + (1 + 1.5 * 2 + 0.5) / bf_p)
        return ic0_p, VT * math.log(ic0_p / (is_p * 2))

    def residual(i_p: float) -> float:
        _, veb = pnp_input(i_p)
        return 2 * ic0_n * (1 + (supply - veb - vbe_n) / va_n) - i_p

    i_p = brentq(residual, 1e-6, 1e-4, xtol=1e-20, rtol=1e-15)
    ic0_p, veb_p = pnp_input(i_p)
    b = 1.5 * ic0_p * (1 + ((supply - 1.2) - veb_p) / va_p)
    c = 0.5 * ic0_p * (1 + ((supply - 2.0) - veb_p) / va_p)

    op = biastree.solve(tree_of(plan))
    got = dict(zip(op.tree.loads, op.l_current[:, 1]))
    assert got["a"] == pytest.approx(a, rel=1e-12)
    assert got["b"] == pytest.approx(b, rel=1e-12)
    assert got["c"] == pytest.approx(c, rel=1e-12)


def test_two_level_cmos_tree_by_hand() -> None:
    # Hand computation with the level-1 square law (Razavi ch. 3/5): nmos root, pmos child.
    kn, kp = 300e-6 * 4, 80e-6 * 8  # KP·W/L of the unit devices
    vtn, vtp, ln, lp = 0.45, 0.5, 0.04, 0.06
    plan = {
        "supply": "1.8V",
        "devices": {
            "mn": {"kind": "nmos", "kp": "300uA/V^2", "vth": vtn, "lambda": ln, "w": "4um", "l": "1um"},
            "mp": {"kind": "pmos", "kp": "80uA/V^2", "vth": vtp, "lambda": lp, "w": "8um", "l": "1um"},
        },
        "reference": {"current": "20uA", "feeds": "n"},
        "mirrors": {
            "n": {"device": "mn", "branches": [{"to": "p", "ratio": 1}, {"to": "a", "ratio": 2}]},
            "p": {"device": "mp", "branches": [{"to": "b", "ratio": 3}]},
        },
        "loads": {
            "a": {"current": "40uA", "tolerance": "10%", "voltage": "0.9V"},
            "b": {"current": "60uA", "tolerance": "10%", "voltage": "0.7V"},
        },
    }

    def vgs(i: float, k: float, vt: float, lam: float) -> float:
        return brentq(lambda v: 0.5 * k * (v - vt) ** 2 * (1 + lam * v) - i, vt, vt + 3, xtol=1e-15)

    vgs_n = vgs(20e-6, kn, vtn, ln)
    a = 20e-6 * 2 * (1 + ln * 0.9) / (1 + ln * vgs_n)
    i_p = brentq(lambda i: 20e-6 * (1 + ln * (1.8 - vgs(i, kp, vtp, lp))) / (1 + ln * vgs_n) - i, 1e-6, 1e-4, xtol=1e-20)
    b = i_p * 3 * (1 + lp * (1.8 - 0.7)) / (1 + lp * vgs(i_p, kp, vtp, lp))
    op = biastree.solve(tree_of(plan))
    got = dict(zip(op.tree.loads, op.l_current[:, 1]))
    assert got["a"] == pytest.approx(a, rel=1e-11)
    assert got["b"] == pytest.approx(b, rel=1e-11)



@settings(max_examples=40, deadline=None)
@given(st.integers(0, 10**6))
def test_kcl_at_every_bipolar_input(seed: int) -> None:
    # Current conservation (derived from Gummel–Poon): the current into a mirror's input
    # node equals the input device's collector current plus every base current, each
    # computed from the solved V_BE with the device equations.
    tree = tree_of(random_plan(5 + seed % 40, seed=seed))
    op = biastree.solve(tree)
    plan = tree.plan
    for i, name in enumerate(tree.mirrors):
        mirror = plan.mirrors[name]
        dev = plan.devices[mirror.device]
        if dev.kind not in ("npn", "pnp"):
            continue
        unit = dev.is_ * np.exp(op.m_v_in[i] / VT)
        area_out = sum(b.ratio * b.count for b in mirror.branches) * mirror.input_size
        expected = unit * mirror.input_size * (1 + 1 / dev.beta) + unit * area_out / dev.beta
        assert np.allclose(op.m_i_in[i], expected, rtol=1e-11)


def _idealise(plan: dict) -> dict:
    plan = copy.deepcopy(plan)
    for dev in plan["devices"].values():
        if dev["kind"] in ("npn", "pnp"):
            dev["beta"] = 1e300
            dev.pop("early", None)
        else:
            dev["lambda"] = 0
    return plan


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 10**6))
def test_ideal_devices_give_exact_ratios(seed: int) -> None:
    # Derived: with β → ∞, V_A → ∞ and λ = 0 every load gets I_ref × Π ratios.
    result = biastree.check(tree_of(_idealise(random_plan(5 + seed % 40, seed=seed))))
    assert np.allclose(result.delivered, result.ideal[:, None], rtol=1e-12, atol=0)


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 10**6), st.floats(0.1, 10))
def test_scales_with_reference(seed: int, scale: float) -> None:
    # Derived: without output-voltage effects (V_A → ∞, λ = 0) every current is
    # proportional to the reference, β loading included.
    plan = _idealise(random_plan(5 + seed % 30, seed=seed))
    for dev in plan["devices"].values():
        if dev["kind"] in ("npn", "pnp"):
            dev["beta"] = 37.0
    base = biastree.solve(tree_of(plan)).l_current
    plan["reference"]["current"] = f"{20 * scale!r}uA"
    scaled = biastree.solve(tree_of(plan)).l_current
    assert np.allclose(scaled, base * scale, rtol=1e-12)


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 10**6))
def test_reordering_changes_nothing(seed: int) -> None:
    plan = random_plan(5 + seed % 40, seed=seed)
    rng = random.Random(seed)

    def shuffled(d: dict) -> dict:
        items = list(d.items())
        rng.shuffle(items)
        return dict(items)

    other = copy.deepcopy(plan)
    other["mirrors"] = shuffled(other["mirrors"])
    other["loads"] = shuffled(other["loads"])
    other["devices"] = shuffled(other["devices"])
    for mirror in other["mirrors"].values():
        rng.shuffle(mirror["branches"])
    a, b = biastree.solve(tree_of(plan)), biastree.solve(tree_of(other))
    got_a = dict(zip(a.tree.loads, a.l_current.tolist()))
    got_b = dict(zip(b.tree.loads, b.l_current.tolist()))
    for name in got_a:
        assert np.allclose(got_a[name], got_b[name], rtol=1e-13)


def test_errors_compound_along_the_path() -> None:
    # Derived: a load's error is (1 + plan term)·Π_stages Π_terms (1 + term) − 1 exactly.
    result = biastree.check("samples/cmos_soc.yaml")
    for i in range(len(result.tree.loads)):
        product = 1 + result.plan_term(i)
        for stage in result.stages(i):
            for term in stage["terms"]:
                product *= 1 + term["value"]
        assert product - 1 == pytest.approx(result.error[i, 1], abs=1e-13)


def test_converges_in_few_sweeps() -> None:
    tree = tree_of(random_plan(2000, seed=3))
    op = biastree.solve(tree)
    assert op.sweeps <= 8


def test_json_roundtrip_of_generated_plan(tmp_path) -> None:  # type: ignore[no-untyped-def]
    from biastree.input.generate import to_text

    plan = random_plan(50, seed=9)
    (tmp_path / "a.yaml").write_text(to_text(plan, "yaml"))
    (tmp_path / "a.json").write_text(to_text(plan, "json"))
    a = biastree.check(tmp_path / "a.yaml")
    b = biastree.check(tmp_path / "a.json")
    assert (a.delivered == b.delivered).all()
    assert json.loads((tmp_path / "a.json").read_text())["title"].endswith("(invented data)")


def test_vectorised_largest_term_matches_the_stage_walk() -> None:
    # The audit finds each load's largest term two ways (vectorised for the table, a
    # per-load walk for the breakdown); they must name the same stage, effect and value.
    for name in ("failing_budgets", "cmos_soc", "mixed_topologies", "die_spread"):
        result = biastree.check(f"samples/{name}.yaml", conditions=False, mismatch=False)
        for i in range(len(result.tree.loads)):
            best = ("plan", "ratio arithmetic", result.plan_term(i))
            for stage in result.stages(i, int(result.worst_case[i])):
                for term in stage["terms"]:
                    if abs(term["value"]) > abs(best[2]):
                        best = (stage["mirror"], term["label"], term["value"])
            got = result.largest_term(i)
            assert got[:2] == best[:2] and got[2] == pytest.approx(best[2], abs=1e-15)
