"""The solver against published closed forms (see ../shared/REFERENCES.md).

Sources are named beside each check.  "derived" = follows by algebra from a
published model; "common practice" = a designer's rule of thumb.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import one_stage, tree_of

import biastree
from biastree.physics.devices import thermal_voltage


def npn(beta: float, early: str | None = None, is_: str = "1e-16A") -> dict:
    dev = {"kind": "npn", "is": is_, "beta": beta}
    if early:
        dev["early"] = early
    return dev


def test_thermal_voltage_at_27c() -> None:
    # Source: CODATA/SI 2019 exact k and q; REFERENCES.md: 25.865 mV at 300.15 K.
    assert float(thermal_voltage(300.15)) == pytest.approx(25.865e-3, abs=5e-7)


def test_finite_beta_one_output() -> None:
    # Source: Gray, Hurst, Lewis, Meyer 5th ed. ch. 4 (from memory) and Sedra & Smith:
    # Iout/Iin = 1/(1 + 2/β); β = 100 gives 0.980392.
    tree = tree_of(one_stage(npn(100), [{"to": "a"}], {"a": {"current": "100uA", "tolerance": "5%", "voltage": "5V"}}))
    op = biastree.solve(tree)
    assert op.l_current[0, 1] / 100e-6 == pytest.approx(0.980392, abs=5e-7)


@pytest.mark.parametrize("n", [1, 2, 5, 10, 20])
def test_finite_beta_n_outputs(n: int) -> None:
    # Source: G&M ch. 4 / S&S, general form derived: each of N unit outputs carries
    # Iin/(1 + (N + 1)/β).  Written as N branches of count 1 here.
    loads = {f"a{k}": {"current": "100uA", "tolerance": "50%", "voltage": "5V"} for k in range(n)}
    tree = tree_of(one_stage(npn(100), [{"to": f"a{k}"} for k in range(n)], loads))
    op = biastree.solve(tree)
    assert np.allclose(op.l_current[:, 1] / 100e-6, 1.0 / (1.0 + (n + 1) / 100.0), rtol=1e-13)


def test_count_is_fanout() -> None:
    # Derived: count k on one branch loads the input exactly like k branches.
    loads = {"a": {"current": "100uA", "tolerance": "50%", "voltage": "5V"}}
    tree = tree_of(one_stage(npn(100), [{"to": "a", "ratio": 2, "count": 3}], loads))
    op = biastree.solve(tree)
    assert op.l_current[0, 1] == pytest.approx(2 * 100e-6 / (1 + 7 / 100), rel=1e-13)


def test_early_test_vector() -> None:
    # Source: REFERENCES.md test vector (derived from the ngspice Gummel–Poon form,
    # bjtload.c): β = 100, V_A = 100 V, V_BE = 0.7 V, V_CE2 = 10 V, m = 1 →
    # Iout/Iin = (1 + 9.3/100)/1.02 = 1.071569.  IS is chosen so V_BE is exactly 0.7 V.
    i_in = 100e-6
    ic0 = i_in / 1.02
    is_ = ic0 / math.exp(0.7 / float(thermal_voltage(300.15)))
    tree = tree_of(
        one_stage(npn(100, "100V", f"{is_!r}A"), [{"to": "a"}], {"a": {"current": "100uA", "tolerance": "10%", "voltage": "10V"}})
    )
    op = biastree.solve(tree)
    assert op.m_v_in[0, 1] == pytest.approx(0.7, abs=1e-12)
    assert op.l_current[0, 1] / i_in == pytest.approx(1.071569, abs=5e-7)
    # Textbook form (G&M, from memory): [1 + (VCE2 − VCE1)/VA]/(1 + 2/β) agrees to first order.
    textbook = (1 + (10 - 0.7) / 100) / (1 + 2 / 100)
    assert op.l_current[0, 1] / i_in == pytest.approx(textbook, rel=1e-12)


def test_mos_ratio_with_lambda() -> None:
    # Source: Razavi 2nd ed. ch. 5 (square law with λ): Iout/Iin = (W/L ratio)·(1 + λVDS)/(1 + λVGS).
    # Hand numbers: KP = 200 µA/V², W/L = 10, VT = 0.5 V, λ = 0.05/V, VGS = 0.8 V ⇒
    # Iin = ½·2 mA/V²·0.09 V²·1.04 = 93.6 µA.
    mos = {"kind": "nmos", "kp": "200uA/V^2", "vth": "0.5V", "lambda": "0.05/V", "w": "10um", "l": "1um"}
    plan = one_stage(mos, [{"to": "a", "ratio": 2}], {"a": {"current": "187.2uA", "tolerance": "10%", "voltage": "1.5V"}},
                     current="93.6uA", supply="3.3V")
    op = biastree.solve(tree_of(plan))
    assert op.m_v_in[0, 1] == pytest.approx(0.8, abs=1e-12)
    assert op.l_current[0, 1] == pytest.approx(93.6e-6 * 2 * (1 + 0.05 * 1.5) / (1 + 0.05 * 0.8), rel=1e-12)


def test_mos_output_at_vgs_is_exact_copy() -> None:
    # Source: Razavi ch. 5: with VDS = VGS the copy is exact, λ notwithstanding.
    mos = {"kind": "nmos", "kp": "200uA/V^2", "vth": "0.5V", "lambda": "0.05/V", "w": "10um", "l": "1um"}
    plan = one_stage(mos, [{"to": "a"}], {"a": {"current": "93.6uA", "tolerance": "1%", "voltage": "0.8V"}},
                     current="93.6uA", supply="3.3V")
    result = biastree.check(tree_of(plan))
    assert abs(result.error[0, 1]) < 1e-12


def test_compliance_is_one_vbe() -> None:
    # Common practice: an npn output stays active while its collector is at least one
    # V_BE (≈ 0.7 V) above ground, i.e. VCB ≥ 0.
    def margin(v: float) -> tuple[float, float, bool]:
        plan = one_stage(npn(100, "50V"), [{"to": "a"}], {"a": {"current": "98uA", "tolerance": "10%", "voltage": f"{v}V"}})
        result = biastree.check(tree_of(plan))
        return float(result.compliance[0]), float(result.op.m_v_in[0, 1]), bool(result.passed[0])

    m1, vbe, ok1 = margin(1.0)
    assert 0.65 < vbe < 0.8  # about 0.7 V (common practice)
    assert m1 == pytest.approx(1.0 - vbe, abs=1e-12) and ok1
    m2, _, ok2 = margin(0.6)
    assert m2 < 0 and not ok2


def test_output_resistance_is_va_over_ic() -> None:
    # Common practice: r_o = V_A / I_C; 100 V / 2 mA = 50 kΩ.  In the simulator form
    # exactly dIC/dV = IC0/VA, with IC0 the current at VCB = 0.
    def current(v: float) -> float:
        plan = one_stage(npn(1e9, "100V"), [{"to": "a"}], {"a": {"current": "2mA", "tolerance": "10%", "voltage": f"{v}V"}},
                         current="2mA")
        return float(biastree.solve(tree_of(plan)).l_current[0, 1])

    r_o = 0.2 / (current(3.1) - current(2.9))
    assert r_o == pytest.approx(50e3, rel=1e-6)


def test_ideal_limits() -> None:
    # Derived: β → ∞ and V_A → ∞ (BJT), λ = 0 (MOS) give exactly the size ratios.
    plan = {
        "supply": "5V",
        "devices": {
            "qn": {"kind": "npn", "is": "1e-16A", "beta": 1e300},
            "mp": {"kind": "pmos", "kp": "80uA/V^2", "vth": "0.5V", "w": "10um", "l": "1um"},
        },
        "reference": {"current": "10uA", "feeds": "a"},
        "mirrors": {
            "a": {"device": "qn", "branches": [{"to": "b", "ratio": 3}, {"to": "x", "ratio": 0.25, "count": 5}]},
            "b": {"device": "mp", "input_size": 3, "branches": [{"to": "y", "ratio": 1.5, "count": 2}]},
        },
        "loads": {
            "x": {"current": "2.5uA", "tolerance": "1%", "voltage": "2V"},
            "y": {"current": "45uA", "tolerance": "1%", "voltage": [1.0, 2.0]},
        },
    }
    result = biastree.check(tree_of(plan))
    assert np.allclose(result.error, 0.0, atol=1e-14)
