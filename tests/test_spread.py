"""Spread and conditions: mismatch (Pelgrom), first-order σ with the tree's
correlations, Monte Carlo, temperature laws, corners and die gradients —
each check with its source beside it."""

from __future__ import annotations

import copy
import math
from dataclasses import replace

import numpy as np
import pytest
from conftest import ROOT
from helpers import one_stage, tree_of
from typer.testing import CliRunner

import biastree
from biastree.analysis.conditions import condition_columns
from biastree.analysis.corners import evaluate, parse_range, sweep_columns
from biastree.analysis.sample_solve import Draws, SampleSolver, supported
from biastree.analysis.spread import DeviceSigmas, analytic, device_sigmas, draw, general_solve, monte_carlo, single
from biastree.cli import app
from biastree.input.generate import Ranges, random_plan
from biastree.output.spice import to_spice
from biastree.physics.devices import thermal_voltage
from biastree.sim.verify import ngspice_monte_carlo, run_ngspice, simulated_currents, verify

runner = CliRunner()
VT = float(thermal_voltage(300.15))


def mos(**extra: object) -> dict:
    dev = {"kind": "nmos", "kp": "200uA/V^2", "vth": "0.5V", "lambda": "0", "w": "10um", "l": "1um"}
    dev.update(extra)
    return dev


def npn(**extra: object) -> dict:
    dev = {"kind": "npn", "is": "1e-16A", "beta": 1e12, "area": "4um^2"}
    dev.update(extra)
    return dev


# --- Pelgrom and the pair convention --------------------------------------------------


def test_pelgrom_area_law_and_pair_convention() -> None:
    # Pelgrom, Duinmaijer, Welbers, IEEE JSSC 24(5) 1989: σ(ΔVT) = A_VT/√(WL) for a PAIR;
    # one device alone has A_VT/√(2WL).  Four times the area halves σ.
    plan = one_stage(mos(a_vt_pair="5mV*um"), [{"to": "a", "ratio": 4}], {"a": {"current": "40uA", "tolerance": "5%", "voltage": "1V"}},
                     current="10uA", supply="3.3V")
    sig = device_sigmas(tree_of(plan))
    assert sig.in_vt[0] == pytest.approx(5e-9 / math.sqrt(2 * 10e-6 * 1e-6), rel=1e-12)
    assert sig.out_vt[0] == pytest.approx(sig.in_vt[0] / 2, rel=1e-12)
    plan["devices"]["d"] = mos(a_vt_single=f"{5 / math.sqrt(2)!r}mV*um")
    assert device_sigmas(tree_of(plan)).in_vt[0] == pytest.approx(sig.in_vt[0], rel=1e-12)
    assert single(5e-9, None) == pytest.approx(5e-9 / math.sqrt(2))


def _ekv_gm_over_id(vov: float, n: float = 1.4) -> float:
    # EKV charge-based interpolation (Enz, Vittoz, "Charge-Based MOS Transistor Modeling",
    # Wiley 2006, from memory): g_m·n·U_T/I_D = 2/(1 + √(1 + 4·IC)), with √(4·IC) = V_ov/(n·U_T)
    # so that it tends to the square law's 2/V_ov; written out here, not imported
    return 2 / (n * VT * (1 + math.sqrt(1 + (vov / (n * VT)) ** 2)))


def test_mos_current_mismatch_formula() -> None:
    # Kinget, IEEE JSSC 40(6) 2005; Lakshmikumar et al., IEEE JSSC SC-21(6) 1986:
    # σ²(ΔI/I) = (g_m/I)²·σ²(ΔVT) + σ²(Δβ/β) for a pair; g_m/I = 2/V_ov in strong inversion,
    # capped at 1/(n·U_T) towards weak inversion (EKV interpolation above).
    for current, share in (("10uA", 0.70), ("1mA", 0.97)):  # V_ov = 0.1 V and 1 V
        plan = one_stage(mos(a_vt_pair="5mV*um", a_beta_pair="1%*um"), [{"to": "a"}],
                         {"a": {"current": current, "tolerance": "5%", "voltage": "1V"}}, current=current,
                         supply="3.3V")
        tree = tree_of(plan)
        op = biastree.solve(tree)
        vov = float(op.m_v_in[0, 1]) - 0.5
        area = 10e-6 * 1e-6
        gm_id = _ekv_gm_over_id(vov)
        assert gm_id * vov / 2 == pytest.approx(share, abs=0.01)  # how far from the square law
        expected = math.sqrt(gm_id**2 * (5e-9 / math.sqrt(area)) ** 2 + (1e-8 / math.sqrt(area)) ** 2)
        assert analytic(tree).mismatch[0] == pytest.approx(expected, rel=1e-3)


def test_weak_inversion_limit_restores_the_area_law() -> None:
    # At a fixed current the square law's σ from V_T does not fall with width: σ(V_T) ∝ 1/√W
    # but 2/V_ov ∝ √W.  A real device's g_m/I_D stops at 1/(n·U_T) (weak inversion;
    # REFERENCES.md, from memory), so there 16× the area gives 4× less σ (Pelgrom 1989).
    sigma = []
    for w in ("10um", "160um"):
        plan = one_stage(mos(a_vt_pair="5mV*um", w=w), [{"to": "a"}],
                         {"a": {"current": "0.5uA", "tolerance": "50%", "voltage": "1V"}}, current="0.5uA",
                         supply="3.3V")
        tree = tree_of(plan)
        vov = math.sqrt(2 * 0.5e-6 / (200e-6 * float(w[:-2])))  # λ = 0: the square law exactly
        single_vt = 5e-9 / math.sqrt(2 * float(w[:-2]) * 1e-12)
        got = float(analytic(tree).mismatch[0])
        assert got == pytest.approx(math.sqrt(2) * single_vt * _ekv_gm_over_id(vov), rel=1e-3)
        assert got < math.sqrt(2) * single_vt * 2 / vov  # below the square law's value
        sigma.append(got)
    assert 3.0 < sigma[0] / sigma[1] < 4.0  # the square law alone gives exactly 1


def test_bjt_vbe_rule() -> None:
    # REFERENCES.md (derived): ΔIC/IC = e^(ΔV_BE/V_T) − 1; 1 mV ≈ 3.9 %.  A 1 mV rail offset
    # on a remote output device takes 1 mV from its V_BE.
    plan = one_stage(npn(), [{"to": "a"}, {"to": "b"}],
                     {"a": {"current": "10uA", "tolerance": "5%", "voltage": "2V"},
                      "b": {"current": "10uA", "tolerance": "50%", "voltage": "2V"}}, current="10uA", supply="5V")
    plan["floorplan"] = {"positions": {"m": ["0mm", "0mm"], "b": ["1mm", "0mm"]}, "rail_gradient": "1mV/mm", "remote": ["b"]}
    op = biastree.solve(tree_of(plan))
    ratio = float(op.l_current[1, 1] / op.l_current[0, 1])
    assert ratio == pytest.approx(math.exp(-1e-3 / VT), rel=1e-9)
    assert math.exp(1e-3 / VT) - 1 == pytest.approx(0.0394, abs=5e-4)  # the rule of thumb itself


def test_mos_rail_offset_rule() -> None:
    # REFERENCES.md (derived): MOS strong inversion (1 ± ΔV/V_ov)² − 1; 1 mV at V_ov = 0.2 V ≈ 1 %.
    plan = one_stage(mos(), [{"to": "a"}, {"to": "b"}],
                     {"a": {"current": "40uA", "tolerance": "5%", "voltage": "1V"},
                      "b": {"current": "40uA", "tolerance": "50%", "voltage": "1V"}}, current="40uA", supply="3.3V")
    plan["floorplan"] = {"positions": {"m": ["0mm", "0mm"], "b": ["1mm", "0mm"]}, "rail_gradient": "1mV/mm", "remote": ["b"]}
    op = biastree.solve(tree_of(plan))
    vov = float(op.m_v_in[0, 1]) - 0.5
    assert vov == pytest.approx(0.2, rel=1e-9)  # 40 µA in W/L = 10 at KP = 200 µA/V²
    assert float(op.l_current[1, 1] / op.l_current[0, 1]) == pytest.approx((1 - 1e-3 / vov) ** 2, rel=1e-9)


def test_thermal_offset_about_seven_percent_per_kelvin() -> None:
    # REFERENCES.md (derived): at fixed V_BE, d ln IC/dT = [XTI + (EG − V_BE)/V_T]/T ≈ 6–8 %/K;
    # 0.1 K between input and output ≈ 0.7 %.
    plan = one_stage(npn(), [{"to": "a"}, {"to": "b"}],
                     {"a": {"current": "10uA", "tolerance": "5%", "voltage": "2V"},
                      "b": {"current": "10uA", "tolerance": "50%", "voltage": "2V"}}, current="10uA", supply="5V")
    plan["floorplan"] = {"positions": {"m": ["0mm", "0mm"], "b": ["0.1mm", "0mm"]}, "thermal_gradient": "1K/mm",
                         "remote": ["b"]}
    op = biastree.solve(tree_of(plan))
    vbe = float(op.m_v_in[0, 1])
    slope = (3 + (1.11 - vbe) / VT) / 300.15
    change = float(op.l_current[1, 1] / op.l_current[0, 1]) - 1
    assert change == pytest.approx(0.1 * slope, rel=0.02)
    assert 0.006 < change < 0.008


# --- first order σ against Monte Carlo ----------------------------------------------------


def _cousins() -> dict:
    """Root mirror → two child mirrors → two loads each (invented; β, V_A ideal)."""
    dev = {"kind": "npn", "is": "1e-16A", "beta": 1e12, "area": "4um^2", "a_is_pair": "2%*um"}
    pnp = dict(dev, kind="pnp")
    return {
        "supply": "5V",
        "devices": {"qn": dev, "qp": pnp},
        "reference": {"current": "10uA", "feeds": "r"},
        "mirrors": {"r": {"device": "qn", "branches": [{"to": "a"}, {"to": "b", "ratio": 2}]},
                    "a": {"device": "qp", "branches": [{"to": "a1"}, {"to": "a2"}]},
                    "b": {"device": "qp", "input_size": 2, "branches": [{"to": "b1", "ratio": 0.5}]}},
        "loads": {n: {"current": "10uA", "tolerance": "50%", "voltage": "2V"} for n in ("a1", "a2", "b1")},
    }


def test_shared_ancestors_by_hand() -> None:
    # Derived by hand for ideal devices (every sensitivity exactly 1): one device of size s
    # has σ = (2 %·µm/√2)/√(4 µm²·s).  Siblings a1, a2 share mirror a's input device and
    # everything above: their ratio counts only their two output devices.  Cousins a1, b1
    # also differ by the root's two output devices and the two child mirrors' inputs.
    tree = tree_of(_cousins())
    an = analytic(tree)
    unit = 0.02 / math.sqrt(2) / 2.0  # σ of a unit device (4 µm²)
    s = lambda size: unit / math.sqrt(size)  # noqa: E731
    a1, a2, b1 = (tree.loads.index(n) for n in ("a1", "a2", "b1"))
    assert an.mismatch[a1] == pytest.approx(math.sqrt(4 * unit**2), rel=1e-4)  # r_in, r_out, a_in, a_out
    assert an.ratio_sigma(a1, a2) == pytest.approx(math.sqrt(2) * unit, rel=1e-4)
    cousins = math.sqrt(s(1) ** 2 + s(2) ** 2 + s(1) ** 2 + s(1) ** 2 + s(2) ** 2 + s(1) ** 2)
    assert an.ratio_sigma(a1, b1) == pytest.approx(cousins, rel=1e-4)


def _within(sample_sigma: float, expected: float, n: int, allowance: float = 0.0) -> bool:
    # A normal sample σ has relative standard error 1/√(2(n−1)) (χ² distribution of the
    # variance); accept 4 standard errors, plus a stated allowance for first-order error.
    return abs(sample_sigma / expected - 1) < 4 / math.sqrt(2 * (n - 1)) + allowance


def test_analytic_sigma_agrees_with_monte_carlo() -> None:
    tree = tree_of(_cousins())
    an = analytic(tree)
    n = 4000
    mc = monte_carlo(tree, n, seed=11, include_reference=False, include_process=False)
    for i in range(len(tree.loads)):
        assert _within(float(np.std(np.log(mc.currents[i]), ddof=1)), float(an.mismatch[i]), n)
    a1, a2, b1 = (tree.loads.index(x) for x in ("a1", "a2", "b1"))
    for i, j in ((a1, a2), (a1, b1)):
        assert _within(float(np.std(np.log(mc.currents[i] / mc.currents[j]), ddof=1)), an.ratio_sigma(i, j), n)


def test_analytic_sigma_agrees_with_monte_carlo_on_a_real_plan() -> None:
    # The demo plan with MOS and bipolar matching, β loading and Early effect: first order
    # holds to within sampling error plus 3 % for the square law's curvature at σ ≈ 1 %.
    tree = biastree.load(ROOT / "samples" / "die_spread.yaml")
    an = analytic(tree)
    n = 3000
    mc = monte_carlo(tree, n, seed=2, include_reference=False, include_process=False)
    for i in range(len(tree.loads)):
        assert _within(float(np.std(mc.currents[i] / mc.currents[i].mean(), ddof=1)), float(an.mismatch[i]), n, 0.03)


def test_monte_carlo_is_reproducible_and_uses_the_reference() -> None:
    tree = biastree.load(ROOT / "samples" / "die_spread.yaml")
    a = monte_carlo(tree, 300, seed=4)
    b = monte_carlo(tree, 300, seed=4)
    assert np.array_equal(a.currents, b.currents)
    no_ref = monte_carlo(tree, 300, seed=4, include_reference=False, include_process=False)
    assert np.std(a.currents[0]) > np.std(no_ref.currents[0])


def test_monte_carlo_against_ngspice(ngspice) -> None:  # type: ignore[no-untyped-def]
    # Source: ngspice Monte Carlo of the exported netlist (alter of every device's area by
    # e^δ with sgauss, setseed), 1500 op runs; compared with biastree's Monte Carlo of
    # the same plan: the two sample σ agree within 4 standard errors of their difference.
    plan = copy.deepcopy(_cousins())
    plan["devices"]["qn"].update(beta=100, early="50V")
    plan["devices"]["qp"].update(beta=40, early="30V")
    tree = tree_of(plan)
    n = 1500
    ours = monte_carlo(tree, n, seed=3, include_reference=False, include_process=False).currents
    theirs = ngspice_monte_carlo(tree, n, seed=3)
    tol = 4 * math.sqrt(1 / (2 * (n - 1)) + 1 / (2 * (n - 1)))
    for i in range(len(tree.loads)):
        s_ours = np.std(ours[i], ddof=1) / ours[i].mean()
        s_theirs = np.std(theirs[i], ddof=1) / theirs[i].mean()
        assert abs(s_ours / s_theirs - 1) < tol
        assert ours[i].mean() == pytest.approx(theirs[i].mean(), rel=4 * s_ours / math.sqrt(n))
    r_ours, r_theirs = ours[0] / ours[2], theirs[0] / theirs[2]
    assert abs(np.std(r_ours) / np.std(r_theirs) - 1) < tol


def test_weak_inversion_monte_carlo_agrees_with_first_order() -> None:
    # The Monte Carlo feeds the square-law equations each device's ΔV_T scaled by the same
    # g_m/I_D share as the first-order σ: both agree at a small V_ov (0.03 V: share 0.39).
    plan = one_stage(mos(a_vt_pair="5mV*um", a_beta_pair="1%*um", **{"lambda": "0.05/V"}),
                     [{"to": "a"}, {"to": "b", "ratio": 2}],
                     {"a": {"current": "1uA", "tolerance": "50%", "voltage": "1V"},
                      "b": {"current": "2uA", "tolerance": "50%", "voltage": "1.5V"}}, current="1uA", supply="3.3V")
    tree = tree_of(plan)
    an = analytic(tree)
    n = 3000
    mc = monte_carlo(tree, n, seed=5, include_reference=False, include_process=False)
    for i in range(2):
        assert _within(float(np.std(np.log(mc.currents[i]), ddof=1)), float(an.mismatch[i]), n, 0.01)


def _stress(tree: biastree.Tree, rng: np.random.Generator, samples: int) -> Draws:
    """Deviations far larger than any real plan's (2 % IS, 3 mV V_T, 2 % KP on every device;
    5 % β, 20 mV V_T, 5 % KP process; 1 % reference), to exercise every term."""
    n_b, n_m = len(tree.b_parent), len(tree.mirrors)
    sig = DeviceSigmas(*(np.full(n, v) for n, v in ((n_m, 0.02), (n_b, 0.02), (n_m, 3e-3), (n_b, 3e-3),
                                                      (n_m, 0.02), (n_b, 0.02))))
    d = draw(tree, sig, rng, samples, include_reference=True, include_process=False)
    return replace(d, beta=rng.standard_normal(samples) * 0.05, vth=rng.standard_normal(samples) * 0.02,
                   kp=rng.standard_normal(samples) * 0.05, i_ref=d.i_ref * (1 + 0.01 * rng.standard_normal(samples)))


def _plans() -> list[tuple[str, biastree.Tree]]:
    out = []
    for path in sorted((ROOT / "samples").glob("*.yaml")):
        if path.name.startswith("blocks_"):
            continue  # a block list, not a plan
        tree = biastree.load(path)
        if supported(tree):
            out.append((path.name, tree))
    for n, seed, families in ((40, 1, ("bjt", "mos")), (300, 2, ("bjt",)), (300, 3, ("mos",)), (2000, 4, ("bjt", "mos"))):
        plan = random_plan(n, seed=seed, ranges=Ranges(families=families, max_count=4))
        out.append((f"random {n}/{seed}", tree_of(plan)))
    return out


def test_one_pass_solver_equals_the_general_solver() -> None:
    # The Monte Carlo's one-pass solver (biastree.analysis.sample_solve) against the general
    # solver on the same draws: every load current to 1e-12, the compliance and path
    # headroom margins to 1e-12 V, on the samples it applies to and on generated plans.
    names = []
    for name, tree in _plans():
        draws = _stress(tree, np.random.default_rng(7), 24)
        fast = SampleSolver(tree).solve(draws)
        assert fast is not None, name
        slow = general_solve(tree, draws)
        assert np.max(np.abs(fast[0] / slow[0] - 1)) < 1e-12, name
        assert np.max(np.abs(fast[1] - slow[1])) < 1e-12, name
        finite = np.isfinite(slow[2])
        assert np.array_equal(finite, np.isfinite(fast[2])), name
        assert np.max(np.abs(fast[2][finite] - slow[2][finite]), initial=0.0) < 1e-12, name
        names.append(name)
    assert {"bipolar_small.yaml", "cmos_soc.yaml", "failing_budgets.yaml"} <= set(names)
    tree = biastree.load(ROOT / "samples" / "die_spread.yaml")
    assert not supported(tree)  # β-helper and remote devices: the general solver


def test_monte_carlo_one_pass_and_general_paths_agree() -> None:
    plan = random_plan(200, seed=9, ranges=Ranges(families=("bjt", "mos")))
    for dev in plan["devices"].values():  # matching on every device (invented coefficients)
        if dev["kind"] in ("npn", "pnp"):
            dev.update(area="10um^2", a_is_pair="2%*um")
        else:
            dev.update(a_vt_pair="5mV*um", a_beta_pair="1%*um")
    tree = tree_of(plan)
    fast = monte_carlo(tree, 40, seed=3)
    slow = monte_carlo(tree, 40, seed=3, fast=False)
    assert np.max(np.abs(fast.currents / slow.currents - 1)) < 1e-12
    assert np.array_equal(fast.active, slow.active)
    assert np.std(np.log(fast.currents), axis=1).min() > 1e-3  # the mismatch was really sampled


# --- temperature, supply and corners ---------------------------------------------------------


def test_temperature_laws_against_ngspice(ngspice) -> None:  # type: ignore[no-untyped-def]
    # Source: ngspice `.temp` runs of the exported netlist (bjttemp.c laws with XTI, EG, XTB
    # written on the cards; MOS cards evaluated at the temperature): every load within 1e-5.
    plan = {
        "supply": "3.3V",
        "devices": {"qn": {"kind": "npn", "is": "1e-17A", "beta": 120, "early": "60V", "xtb": 1.5, "xti": 3.5, "eg": "1.12eV"},
                    "mp": {"kind": "pmos", "kp": "80uA/V^2", "vth": "0.5V", "lambda": "0.05/V", "w": "20um", "l": "2um",
                           "vth_tc": "-1.5mV/K", "mobility_exp": -1.3}},
        "reference": {"current": "10uA", "feeds": "n", "tempco": "200ppm/K", "tempco2": 1e-6},
        "mirrors": {"n": {"device": "qn", "branches": [{"to": "p"}, {"to": "a", "ratio": 2}]},
                    "p": {"device": "mp", "branches": [{"to": "b", "ratio": 3}]}},
        "loads": {"a": {"current": "20uA", "tolerance": "50%", "voltage": "1.5V"},
                  "b": {"current": "30uA", "tolerance": "50%", "voltage": "1.0V"}},
    }
    tree = tree_of(plan)
    temps = [t + 273.15 for t in (-40.0, 27.0, 85.0, 125.0)]
    result = evaluate(tree, sweep_columns(tree, temps))
    for k, kelvin in enumerate(temps):
        netlist = to_spice(tree, "nominal", temperature=kelvin)
        sim = simulated_currents(netlist, run_ngspice(netlist.text))
        for i, name in enumerate(tree.loads):
            assert result.op.l_current[i, k] == pytest.approx(sim[name], rel=1e-5)
    # the laws themselves: BF(T) = BF·(T/TNOM)^XTB
    cols = sweep_columns(tree, [398.15])
    from biastree.analysis.conditions import device_arrays

    assert device_arrays(tree, cols).beta[0, 0] == pytest.approx(120 * (398.15 / 300.15) ** 1.5, rel=1e-12)


def test_supply_and_corners_against_ngspice(ngspice) -> None:  # type: ignore[no-untyped-def]
    tree = biastree.load(ROOT / "samples" / "die_spread.yaml")
    result = evaluate(tree, sweep_columns(tree, supplies=[3.0, 3.6]))
    for k, vdd in enumerate((3.0, 3.6)):
        netlist = to_spice(tree, "nominal", supply=vdd)
        sim = simulated_currents(netlist, run_ngspice(netlist.text))
        for i, name in enumerate(tree.loads):
            assert result.op.l_current[i, k] == pytest.approx(sim[name], rel=1e-5)


def test_corner_shifts_move_the_right_way() -> None:
    tree = biastree.load(ROOT / "samples" / "die_spread.yaml")
    result = evaluate(tree, sweep_columns(tree, corners=["typical", "weak", "strong"]))
    i = tree.loads.index("adc_left")  # under an npn stage: β error grows at the weak corner
    typical, weak, strong = result.error[i]
    assert weak < typical < strong
    assert len(condition_columns(tree).names) == 3 * 2 * 3 * 3


def test_parse_range() -> None:
    assert len(parse_range("-40C:125C:5C", "C")) == 34
    assert parse_range("3.0V:3.6V:0.3V", "V") == pytest.approx([3.0, 3.3, 3.6])
    with pytest.raises(ValueError):
        parse_range("125C:-40C:5C", "C")


def test_gradients_against_ngspice(ngspice) -> None:  # type: ignore[no-untyped-def]
    # Source: ngspice with the remote output devices on offset rail sources and at their
    # own temperature (dtemp; MOS cards evaluated at it): all loads within 1e-5.
    comparison = verify(biastree.load(ROOT / "samples" / "die_spread.yaml"))
    assert comparison.agrees, comparison.worst


# --- verdicts and commands ---------------------------------------------------------------------


def test_check_uses_corners_and_k_sigma() -> None:
    tree = biastree.load(ROOT / "samples" / "die_spread.yaml")
    plain = biastree.check(tree, conditions=False, mismatch=False)
    full = biastree.check(tree)
    k3 = full.k_sigma * full.sigma
    expected = full.tolerance - np.maximum(np.abs(full.error).max(axis=1), np.abs(full.conditions.worst_error)) \
        - k3 - full.reference_tolerance
    assert np.allclose(full.margin, expected)
    assert (full.margin <= plain.margin + 1e-15).all()
    report = full.load_report(0)
    assert report["mismatch"]["k"] == 3 and report["conditions"]["at"]


def test_spread_cli(tmp_path) -> None:  # type: ignore[no-untyped-def]
    import json

    path = ROOT / "samples" / "die_spread.yaml"
    result = runner.invoke(app, ["spread", str(path), "--samples", "500", "--seed", "9", "--json"])
    assert result.exit_code == 1, result.output  # amp_far is outside its budget on every die
    data = json.loads(result.stdout)
    assert data["samples"] == 500 and len(data["loads"]) == 6 and data["matched"][0]["name"] == "adc_pair"
    table = runner.invoke(app, ["spread", str(path), "--samples", "200"]).output
    assert "σ (MC)" in table and "σ (1st order)" in table
    none = runner.invoke(app, ["spread", str(ROOT / "samples" / "cmos_soc.yaml")])
    assert none.exit_code == 2 and "no device has matching coefficients" in none.output


def test_sweep_and_corners_cli(tmp_path) -> None:  # type: ignore[no-untyped-def]
    path = ROOT / "samples" / "die_spread.yaml"
    out = runner.invoke(app, ["sweep", str(path), "--temperature=-40C:125C:5C", "--csv", str(tmp_path / "t.csv")])
    assert out.exit_code == 1, out.output  # amp_far fails its budget (as in `check`)
    # 34 temperatures × the 3 ends of each load's voltage range (judged like `check`)
    assert "102 conditions solved" in out.output
    assert len((tmp_path / "t.csv").read_text().splitlines()) == 1 + 102 * 6
    assert runner.invoke(app, ["corners", str(path)]).exit_code == 1
    assert runner.invoke(app, ["sweep", str(path), "--temperature", "nonsense"]).exit_code == 2
