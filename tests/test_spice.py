"""Netlists and the ngspice cross-check.  The simulator is the reference here:
ngspice (Debian package), Gummel–Poon BJT and level-1 MOS, run on the
netlists biastree exports, with tolerances .options reltol=1e-7."""

from __future__ import annotations

import os
import time

import numpy as np
import pytest
from conftest import ROOT, SAMPLES
from helpers import tree_of
from typer.testing import CliRunner

import biastree
from biastree.cli import app
from biastree.errors import SimulatorError
from biastree.input.generate import Ranges, random_plan
from biastree.output.spice import Names, to_spice
from biastree.sim.verify import parse_raw, run_ngspice, verify

runner = CliRunner()
GOLDEN = ROOT / "tests" / "golden"


def test_golden_netlist() -> None:
    tree = biastree.load(ROOT / "samples" / "bipolar_small.yaml")
    text = to_spice(tree, "nominal", "samples/bipolar_small.yaml").text
    golden = GOLDEN / "bipolar_small.nominal.cir"
    if os.environ.get("UPDATE_GOLDEN"):
        golden.write_text(text)
    assert text == golden.read_text(), "netlist changed: check it, then UPDATE_GOLDEN=1 pytest"


def test_safe_unique_names() -> None:
    names = Names()
    a = names.get("load", "ADC Bias.1")
    b = names.get("load", "adc_bias_1")  # differs only by case/punctuation: SPICE would merge them
    c = names.get("load", "x" * 100)
    d = names.get("load", "1st")
    assert a == "adc_bias_1" and b != a
    assert len(c) <= 24 and d[0].isalpha()
    assert names.get("load", "ADC Bias.1") == a  # stable


def test_netlist_of_awkward_names_simulates(ngspice) -> None:  # type: ignore[no-untyped-def]
    plan = {
        "supply": "3.3V",
        "devices": {"Q N": {"kind": "npn", "is": "1e-17A", "beta": 100, "early": "50V"},
                    "q.p": {"kind": "pnp", "is": "1e-17A", "beta": 50, "early": "40V"}},
        "reference": {"current": "10uA", "feeds": "Top Mirror"},
        "mirrors": {"Top Mirror": {"device": "Q N", "branches": [{"to": "top mirror", "ratio": 1}, {"to": "A.B", "count": 2}]},
                    "top mirror": {"device": "q.p", "branches": [{"to": "a.b"}, {"to": "x" * 60}]}},
        "loads": {"A.B": {"current": "10uA", "tolerance": "5%", "voltage": "1V"},
                  "a.b": {"current": "10uA", "tolerance": "5%", "voltage": "1.5V"},
                  "x" * 60: {"current": "10uA", "tolerance": "5%", "voltage": "2V"}},
    }
    comparison = verify(tree_of(plan))
    assert comparison.agrees, comparison.worst


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_samples_agree_with_ngspice(ngspice, sample) -> None:  # type: ignore[no-untyped-def]
    # Source: ngspice op analysis of the exported netlist at each end of every range.
    comparison = verify(biastree.load(sample), tolerance=1e-5)
    assert comparison.agrees, f"largest relative difference {comparison.worst:.3e}"
    assert comparison.worst < 1e-6  # in practice ~1e-8: the models are the same equations


def _random_ranges(seed: int) -> Ranges:
    rng = np.random.default_rng(seed)
    families = [("bjt",), ("mos",), ("bjt", "mos")][seed % 3]
    return Ranges(
        max_depth=int(rng.integers(1, 6)),
        max_fanout=int(rng.integers(1, 21)),
        families=families,
        ratio=(0.25, 16.0),
        max_count=8,
        max_mirror_count=3,
        beta=(20.0, 300.0),
        early=(10.0, 200.0),
    )


def test_random_plans_agree_with_ngspice(ngspice) -> None:  # type: ignore[no-untyped-def]
    # 200 random valid plans (seeded): depth 1–5, fan-out 1–20, npn/pnp and nmos/pmos
    # levels mixed, ratios 0.25–16, counts 1–8, β 20–300, V_A 10–200 V, loads inside
    # compliance.  Every load, at every end of its range, within 1e-5 of ngspice.
    start = time.perf_counter()
    worst, loads = 0.0, 0
    for seed in range(200):
        n = 1 + seed % 25
        tree = tree_of(random_plan(n, seed=1000 + seed, ranges=_random_ranges(seed)))
        comparison = verify(tree, tolerance=1e-5)
        assert comparison.agrees, f"seed {1000 + seed}: largest relative difference {comparison.worst:.3e}"
        worst = max(worst, comparison.worst)
        loads += len(tree.loads)
    elapsed = time.perf_counter() - start
    print(f"\n200 random plans, {loads} loads × 3 ends: worst relative difference {worst:.2e}, {elapsed:.1f} s")


def test_parse_raw_of_real_ngspice_output(ngspice) -> None:  # type: ignore[no-untyped-def]
    netlist = "raw test\n.options filetype=ascii\nv1 a 0 dc 1.5\nr1 a b 1k\nr2 b 0 2k\n.op\n.end\n"
    values = run_ngspice(netlist)
    assert values["v(b)"][0] == pytest.approx(1.0, rel=1e-9)  # Ohm's law
    assert values["i(v1)"][0] == pytest.approx(-0.5e-3, rel=1e-9)  # SPICE: current into + node


def test_parse_raw_rejects_truncated_file() -> None:
    raw = "Title: t\nPlotname: Operating Point\nFlags: real\nNo. Variables: 2\nNo. Points: 1\nVariables:\n\t0\tv(a)\tvoltage\n"
    with pytest.raises(SimulatorError, match="truncated|no values"):
        parse_raw(raw)
    raw += "\t1\ti(v1)\tcurrent\nValues:\n0\t1.0\n"
    with pytest.raises(SimulatorError, match="incomplete"):
        parse_raw(raw)


def test_simulator_complaints_are_errors(ngspice) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(SimulatorError, match="ngspice"):
        run_ngspice("bad\nq1 a b c nosuchmodel\n.op\n.end\n")


def test_injected_disagreement_is_caught(ngspice) -> None:  # type: ignore[no-untyped-def]
    # The check must be able to fail: solve with a deliberately wrong β and compare.
    tree = biastree.load(ROOT / "samples" / "bipolar_small.yaml")
    wrong_devices = {
        name: dev.model_copy(update={"beta": dev.beta * 0.9}) if dev.kind in ("npn", "pnp") else dev
        for name, dev in tree.plan.devices.items()
    }
    wrong = biastree.build(tree.plan.model_copy(update={"devices": wrong_devices}))
    comparison = verify(tree, op=biastree.solve(wrong))
    assert not comparison.agrees and comparison.worst > 1e-3


def test_verify_cli(ngspice) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(app, ["verify", str(ROOT / "samples" / "cmos_soc.yaml")])
    assert result.exit_code == 0, result.output
    assert "biastree and ngspice agree" in result.output


def test_verify_without_ngspice_is_one_clear_line(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    import biastree.sim.verify as v

    monkeypatch.setattr(v.shutil, "which", lambda name: None)
    result = runner.invoke(app, ["verify", str(ROOT / "samples" / "cmos_soc.yaml")])
    assert result.exit_code == 2
    assert result.output.strip() == f"error: {v.INSTALL_HINT}"


def test_netlist_cli_all_ends(tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "tree.cir"
    result = runner.invoke(app, ["netlist", str(ROOT / "samples" / "cmos_soc.yaml"), "--case", "all", "-o", str(out)])
    assert result.exit_code == 0, result.output
    files = sorted(p.name for p in tmp_path.iterdir())
    assert files == ["tree.max.cir", "tree.min.cir", "tree.nominal.cir"]
    assert "load voltages at max" in (tmp_path / "tree.max.cir").read_text()
