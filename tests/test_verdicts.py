"""Every verdict explains the case that decides it, and every command gives one.

Oracles, named beside each check: the exact multiplicative split of a load's
error (DESIGN.md, "errors compound multiplicatively"; derived), an
independent brute-force search over the solved cases, the simple-mirror β
formula (G&M 5th ed. ch. 4; REFERENCES.md), the compliance rule VCB ≥ 0
(DESIGN.md, common practice), the normal distribution (±3σ = 99.73 %), the
product rule for independent events, and ngspice runs of our netlists.
"""

from __future__ import annotations

import json
import math
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

import biastree
from biastree.analysis.conditions import condition_columns, default_columns
from biastree.analysis.corners import parse_range, sweep_columns
from biastree.analysis.solve import solve
from biastree.analysis.yields import die_yield, expanded_plan, required_yield
from biastree.cli import app
from biastree.output.columns import COLUMNS, visible
from biastree.output.csv import to_csv
from biastree.output.markdown import to_markdown
from biastree.output.table import to_table
from biastree.units import format_percent

from conftest import ROOT, SAMPLES

runner = CliRunner()
DIE = ROOT / "samples" / "die_spread.yaml"


# --- the deciding case ------------------------------------------------------------------------


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_deciding_terms_compound_to_the_deciding_error(sample: Path) -> None:
    # Oracle: the error splits exactly into multiplicative terms (derived): Π(1 + term) − 1
    # over the deciding case's terms is that case's error, and its budget use is
    # |error| + kσ + reference = tolerance − margin.
    result = biastree.check(sample)
    for i in range(len(result.tree.loads)):
        d = result.deciding(i)
        product = math.prod(1.0 + t["value"] for t in d["terms"]) - 1.0
        assert product == pytest.approx(d["error"], rel=1e-9, abs=1e-12)
        assert d["used"] == pytest.approx(d["tolerance"] - d["margin"], abs=1e-12)
        values = [abs(t["value"]) for t in d["terms"]]
        assert values == sorted(values, reverse=True)


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_deciding_case_is_the_largest_error_found_independently(sample: Path) -> None:
    # Oracle: brute force — solve the voltage ends and (when listed) every condition column
    # on their own, take the error of largest magnitude, and solve that one column alone.
    result = biastree.check(sample)
    tree = result.tree
    target = result.target[:, None]
    ends = solve(tree, default_columns(tree), output_resistance=False).l_current / target - 1.0
    has = bool(tree.plan.conditions.temperatures or tree.plan.conditions.supplies or tree.plan.conditions.corners)
    cols = condition_columns(tree) if has else None
    conds = solve(tree, cols, output_resistance=False).l_current / target - 1.0 if has else None
    for i in range(len(tree.loads)):
        d = result.deciding(i)
        best_end = int(np.argmax(np.abs(ends[i])))
        if conds is not None and np.abs(conds[i]).max() > abs(ends[i, best_end]):
            k = int(np.argmax(np.abs(conds[i])))
            assert d["condition"]["name"] == cols.names[k]
            alone = solve(tree, cols.take(np.array([k])), output_resistance=False).l_current[i, 0] / target[i, 0] - 1
            assert d["error"] == pytest.approx(alone, rel=1e-9)
        else:
            assert d["condition"] is None and d["end"] == ("min", "nominal", "max")[best_end]
            assert d["error"] == pytest.approx(ends[i, best_end], rel=1e-12)


def _beta_corner_plan(write_plan) -> Path:  # type: ignore[no-untyped-def]
    return write_plan("""
title: beta corner (invented)
supply: 5V
devices:
  q: {kind: npn, is: 1e-16A, beta: 100, early: 1000000V}
reference: {current: 10uA, tolerance: 0.5%, feeds: m}
mirrors:
  m: {device: q, branches: [{to: a, ratio: 1}, {to: b, ratio: 2}]}
loads:
  a: {current: 10uA, tolerance: 3%, voltage: 2V}
  b: {current: 20uA, tolerance: 10%, voltage: 2V}
conditions:
  corners:
    typical: {}
    weak: {beta: -50%}
""")


def test_beta_term_of_the_deciding_corner_matches_the_formula(write_plan) -> None:  # type: ignore[no-untyped-def]
    # Oracle: simple bipolar mirror, Iout/Iin = m/(1 + (1 + Σm)/β) (G&M 5th ed. ch. 4; general
    # form derived, REFERENCES.md), at the weak corner's β = 50: Σm = 3 → 1/(1 + 4/50) − 1.
    result = biastree.check(_beta_corner_plan(write_plan))
    a = result.tree.loads.index("a")
    d = result.deciding(a)
    assert d["condition"]["corner"] == "weak" and not result.passed[a]
    top = d["terms"][0]
    expected = 1.0 / (1.0 + 4.0 / 50.0) - 1.0
    assert (top["stage"], top["term"]) == ("m", "beta")
    assert top["value"] == pytest.approx(expected, rel=1e-9)
    # the reason names that case and quotes that value (not the nominal β = 100 one)
    reason = result.reasons(a)[0]
    assert "weak" in reason and f"β loading at m ({format_percent(expected)})" in reason
    assert format_percent(1.0 / (1.0 + 4.0 / 100.0) - 1.0) not in reason
    # the hints and the diagram take the same case's largest term
    assert result.largest_term(a) == ("m", "β loading", pytest.approx(expected, rel=1e-9))
    assert all(format_percent(expected) in h for h in result.hints.get(a, []) if "dominates" in h)
    # JSON: the same case, and the nominal breakdown beside it stays nominal
    data = json.loads(runner.invoke(app, ["check", str(_beta_corner_plan(write_plan)), "--json"]).stdout)
    load = next(l for l in data["loads"] if l["name"] == "a")
    assert load["deciding"]["condition"]["corner"] == "weak"
    assert load["deciding"]["terms"][0]["value"] == pytest.approx(expected, rel=1e-9)
    nominal_beta = next(t for t in load["stages"][0]["terms"] if t["term"] == "beta")["value"]
    assert nominal_beta == pytest.approx(1.0 / (1.0 + 4.0 / 100.0) - 1.0, rel=1e-9)


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_every_budget_reason_quotes_the_case_it_names(sample: Path) -> None:
    # Oracle: the deciding case's own numbers (checked above against the brute force).
    result = biastree.check(sample)
    for i in np.flatnonzero(result.margin < 0):
        d = result.deciding(int(i))
        reason = next(r for r in result.reasons(int(i)) if r.startswith("budget:"))
        top = d["terms"][0]
        assert f"at {result.deciding_text(int(i), d)};" in reason
        assert reason.endswith(f"{top['label']} at {top['stage']} ({format_percent(top['value'])})")
        assert f"error {format_percent(d['error'])}" in reason
        if d["condition"] is not None:
            assert d["condition"]["name"].rsplit(" ", 1)[0] in reason


def test_markdown_explains_the_deciding_case_and_labels_the_nominal_one() -> None:
    text = to_markdown(biastree.check(DIE))
    section = text[text.index("### amp_far"):]
    assert "deciding case (-40C 3.6V weak, min voltage 800 mV)" in section
    assert "| p_dist | die gradient | +15.669% |" in section  # the deciding case's value
    assert "term (nominal)" in section and "| p_dist | die gradient | +12.806% |" in section


# --- one set of columns -----------------------------------------------------------------------


def _header_cells(line: str) -> list[str]:
    return [c for c in re.split(r"\s{2,}", line.strip()) if c]


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_terminal_markdown_and_csv_share_their_columns(sample: Path) -> None:
    result = biastree.check(sample)
    cols = visible(result)
    titles = [c.title for c in cols]
    assert _header_cells(to_table(result).splitlines()[0]) == titles
    md_header = next(l for l in to_markdown(result).splitlines() if l.startswith("| load |"))
    assert [c.strip() for c in md_header.strip("|").split("|")] == titles
    csv_header = to_csv(result).splitlines()[0].split(",")
    assert csv_header == [h for c in cols for h in c.csv_headers()] + ["reasons"]
    assert len({c.key for c in COLUMNS}) == len(COLUMNS) and len({c.title for c in COLUMNS}) == len(COLUMNS)


def test_error_range_is_sorted_low_to_high() -> None:
    result = biastree.check(DIE)
    i = result.tree.loads.index("amp_near")  # its error falls with the voltage: +0.40 % at min, −1.93 % at max
    assert result.error[i, 0] > result.error[i, 2]
    row = next(l for l in to_table(result).splitlines() if l.startswith("amp_near"))
    assert "-1.93%..+0.40%" in row
    cells = next(r for r in to_csv(result).splitlines() if r.startswith("amp_near")).split(",")
    keys = [h for c in visible(result) for h in c.csv_headers()]
    low, high = float(cells[keys.index("error_range_low")]), float(cells[keys.index("error_range_high")])
    assert low == result.error[i, 2] and high == result.error[i, 0]


def test_check_sort_and_failing() -> None:
    path = str(ROOT / "samples" / "failing_budgets.yaml")
    data = json.loads(runner.invoke(app, ["check", path, "--json"]).stdout)
    margins = {l["name"]: l["margin"] for l in data["loads"]}
    out = runner.invoke(app, ["check", path, "--sort", "margin"])
    assert out.exit_code == 1
    order = [l.split()[0] for l in out.stdout.splitlines()[2:2 + len(margins)]]
    assert order == sorted(margins, key=margins.get)
    out = runner.invoke(app, ["check", path, "--sort", "margin", "--descending", "--failing"])
    rows = [l.split()[0] for l in out.stdout.splitlines()[2:] if l.split() and l.split()[0] in margins]
    failing = [n for n in sorted(margins, key=margins.get, reverse=True) if margins[n] < 0 or n == "hot_node"]
    assert rows[:len(failing)] == failing and "ok_block" not in rows
    bad = runner.invoke(app, ["check", path, "--sort", "nonsense"])
    assert bad.exit_code == 2 and bad.output.count("\n") == 1 and "--sort: no column 'nonsense'" in bad.output
    assert runner.invoke(app, ["check", path, "--sort", "kσ"]).exit_code == 1  # the title works too


# --- corners and sweep ------------------------------------------------------------------------


def _low_supply_plan(write_plan) -> Path:  # type: ignore[no-untyped-def]
    return write_plan("""
title: compliance lost at the low supply (invented)
supply: 3.3V
devices:
  qn: {kind: npn, is: 1e-17A, beta: 150, early: 70V}
  qp: {kind: pnp, is: 2e-17A, beta: 60, early: 50V}
reference: {current: 10uA, tolerance: 1%, feeds: n}
mirrors:
  n: {device: qn, branches: [{to: p}]}
  p: {device: qp, branches: [{to: a}]}
loads:
  a: {current: 10uA, tolerance: 10%, voltage: 2.0V}
conditions:
  supplies: [3.3V, 2.5V]
""")


def test_compliance_lost_in_one_corner_fails(write_plan) -> None:  # type: ignore[no-untyped-def]
    # Oracle: the output pnp must keep VCB ≥ 0, i.e. V_EC ≥ V_EB ≈ 0.7 V (DESIGN.md, common
    # practice): at 2.5 V the node at 2.0 V leaves 0.5 V; at 3.3 V it leaves 1.3 V.
    path = _low_supply_plan(write_plan)
    out = runner.invoke(app, ["corners", str(path)])
    assert out.exit_code == 1, out.output
    assert re.search(r"a: compliance: the output device leaves its active region at 27C 2\.5V \w+ \(-\d", out.stdout)
    data = json.loads(runner.invoke(app, ["corners", str(path), "--json"]).stdout)
    assert data["loads"][0]["verdict"] == "fail" and data["summary"]["failed"] == 1
    assert data["loads"][0]["compliance_margin"] < -0.1 and "2.5V" in data["loads"][0]["compliance_at"]
    assert runner.invoke(app, ["check", str(path)]).exit_code == 1  # check agrees
    assert runner.invoke(app, ["sweep", str(path), "--supply", "3.0V:3.6V:0.3V"]).exit_code == 0
    assert runner.invoke(app, ["sweep", str(path), "--supply", "2.4V:3.3V:0.3V"]).exit_code == 1


def test_corners_margin_is_the_check_margin() -> None:
    # Where the condition matrix holds the worst error, `corners` and `check` judge alike.
    data = json.loads(runner.invoke(app, ["corners", str(DIE), "--json"]).stdout)
    result = biastree.check(DIE)
    for i, load in enumerate(data["loads"]):
        if abs(result.conditions.worst_error[i]) >= np.abs(result.error[i]).max():
            assert load["margin"] == pytest.approx(float(result.margin[i]), abs=1e-12)
            assert load["verdict"] == ("pass" if result.passed[i] else "fail")


def test_sweep_solves_both_endpoints() -> None:
    # -40C:125C:25C steps to 110 °C; the stop value 125 °C must be solved too.
    kelvin = parse_range("-40C:125C:25C", "C")
    assert kelvin[0] == pytest.approx(233.15) and kelvin[-1] == pytest.approx(398.15) and len(kelvin) == 8
    assert parse_range("3.0V:3.6V:0.25V", "V") == pytest.approx([3.0, 3.25, 3.5, 3.6])
    assert parse_range("3.0V:3.6V:0.2V", "V")[-1] == 3.6  # on the grid: not doubled
    assert len(parse_range("3.0V:3.6V:0.2V", "V")) == 4
    out = runner.invoke(app, ["sweep", str(DIE), "--temperature=-40C:125C:25C", "--json", "--nominal-only"])
    data = json.loads(out.stdout)
    assert data["temperature"][0] == pytest.approx(233.15) and data["temperature"][-1] == pytest.approx(398.15)
    tree = biastree.load(DIE)
    alone = solve(tree, sweep_columns(tree, [398.15]), output_resistance=False).l_current[:, 0]
    assert [l["current"][-1] for l in data["loads"]] == pytest.approx(alone.tolist(), rel=1e-12)


def test_sweep_judges_like_check(tmp_path: Path) -> None:
    """Oracle: `check` itself.  A load whose output leaves its active region only at one end of its
    voltage range fails `check`; a sweep through the plan's own temperature must fail it too (by
    default every end of the range is judged, as check does)."""
    text = (ROOT / "samples" / "failing_budgets.yaml").read_text()
    plan = tmp_path / "hot.yaml"
    plan.write_text(text)
    result = biastree.check(plan)
    hot = result.tree.loads.index("hot_node")
    assert not result.passed[hot] and result.compliance[hot] < 0
    out = runner.invoke(app, ["sweep", str(plan), "--temperature=-40C:125C:5C", "--json"])
    assert out.exit_code == 1
    data = json.loads(out.stdout)
    verdict = {l["name"]: l["verdict"] for l in data["loads"]}
    assert verdict["hot_node"] == "fail"
    assert {n for n, v in verdict.items() if v == "fail"} >= {result.tree.loads[i] for i in np.flatnonzero(~result.passed)}


# --- spread -----------------------------------------------------------------------------------


def test_required_yield_default_is_k_sigma() -> None:
    # Oracle: the normal distribution, P(|x| ≤ 3σ) = 99.73 %, P(|x| ≤ 2σ) = 95.45 %.
    assert required_yield(3.0) == pytest.approx(0.9973, abs=1e-4)
    assert required_yield(2.0) == pytest.approx(0.9545, abs=1e-4)


def _bank_plan(write_plan, tolerance: str = "0.4%") -> Path:  # type: ignore[no-untyped-def]
    # One huge input device (10,000 units: σ 1 % of an output's) and sixteen unit outputs:
    # the copies are all but independent.  β and V_A large: no systematic error to speak of.
    return write_plan(f"""
title: a bank of sixteen copies (invented)
supply: 5V
devices:
  q: {{kind: npn, is: 1e-16A, beta: 1000000, early: 100000V, area: 10um^2, a_is_pair: 1%*um}}
reference: {{current: 10uA, feeds: m}}
mirrors:
  m: {{device: q, input_size: 10000, branches: [{{to: bank, ratio: 0.0001, count: 16}}]}}
loads:
  bank: {{current: 1nA, tolerance: {tolerance}, voltage: 2V}}
""")


def test_per_die_yield_counts_every_copy(write_plan) -> None:  # type: ignore[no-untyped-def]
    # Oracle: product rule for independent events — a die passes when all 16 copies do, so
    # its yield is p^16 for a per-copy yield p (within sampling error).
    tree = biastree.load(_bank_plan(write_plan))
    dy = die_yield(tree, 4000, seed=3, include_reference=False, include_process=False)
    assert dy.per_copy and len(dy.copies[0]) == 16
    p = float(dy.mc.passes()[dy.copies[0]].mean())
    die = float(dy.load_yield()[0])
    assert 0.85 < p < 0.97
    assert die == pytest.approx(p**16, abs=0.03)
    assert die < p - 0.3
    # the expanded tree gives every copy the plan's nominal current (no mismatch)
    big, origin = expanded_plan(tree.plan)
    assert sorted(set(origin.values())) == ["bank"] and len(big.loads) == 16
    assert np.allclose(solve(biastree.build(big)).l_current, solve(tree).l_current[0, 1], rtol=1e-12)


def test_spread_exit_status_follows_the_required_yield(write_plan) -> None:  # type: ignore[no-untyped-def]
    path = str(_bank_plan(write_plan, "1%"))  # 1 % ≈ 4.5σ of one copy: every die passes
    ok = runner.invoke(app, ["spread", path, "--samples", "500", "--no-reference", "--no-process"])
    assert ok.exit_code == 0, ok.output
    assert "required 99.73% per load" in ok.stdout
    tight = str(_bank_plan(write_plan, "0.4%"))
    out = runner.invoke(app, ["spread", tight, "--samples", "500", "--no-reference", "--no-process", "--json"])
    assert out.exit_code == 1
    data = json.loads(out.stdout)
    assert data["loads"][0]["verdict"] == "fail" and data["loads"][0]["yield"] < data["loads"][0]["yield_instance"]
    lenient = runner.invoke(app, ["spread", tight, "--samples", "500", "--no-reference", "--no-process",
                                  "--required-yield", "1%"])
    assert lenient.exit_code == 0
    bad = runner.invoke(app, ["spread", tight, "--required-yield", "abc"])
    assert bad.exit_code == 2 and bad.output.startswith("error: --required-yield")
    assert runner.invoke(app, ["spread", tight, "--required-yield", "150%"]).exit_code == 2


TRIODE = """
title: output in triode (invented)
supply: 3.3V
devices:
  mn: {kind: nmos, kp: 200uA/V^2, vth: 0.5V, lambda: 0.02/V, w: 20um, l: 5um, a_vt_pair: 5mV*um}
reference: {current: 10uA, feeds: m}
mirrors:
  m: {device: mn, branches: [{to: low, ratio: 1}, {to: fine, ratio: 1}]}
loads:
  low: {current: 10uA, tolerance: 50%, voltage: 0.1V}
  fine: {current: 10uA, tolerance: 50%, voltage: 1.0V}
"""


def test_saturated_output_does_not_pass(write_plan) -> None:  # type: ignore[no-untyped-def]
    # The nmos output sits at 0.1 V, below its V_ov ≈ 0.16 V (square law, Razavi ch. 3: triode
    # when V_DS < V_GS − V_T); its current is still within the 50 % budget, but the output is
    # not a current source: check fails it, and the Monte Carlo counts no die as good.
    path = write_plan(TRIODE)
    result = biastree.check(path)
    low = result.tree.loads.index("low")
    assert result.compliance[low] < 0 and abs(result.error[low, 1]) < 0.5 and not result.passed[low]
    out = runner.invoke(app, ["spread", str(path), "--samples", "300", "--json"])
    assert out.exit_code == 1
    loads = {l["name"]: l for l in json.loads(out.stdout)["loads"]}
    assert loads["low"]["yield"] == 0.0 and loads["low"]["saturated"] == 1.0
    assert loads["fine"]["yield"] == 1.0 and loads["fine"]["saturated"] == 0.0


def test_spread_refuses_samples_that_do_not_fit() -> None:
    out = runner.invoke(app, ["spread", str(DIE), "--samples", str(10**13)])
    assert out.exit_code == 2 and "GB" in out.output and out.output.count("\n") == 1


def test_spread_interrupts_cleanly(tmp_path: Path) -> None:
    # A long run interrupted with Ctrl-C: one line, exit 130, no output file, no traceback.
    from biastree.input.generate import random_plan

    plan = random_plan(2000, seed=5)
    for dev in plan["devices"].values():
        dev.update(area="10um^2", a_is_pair="2%*um") if dev["kind"] in ("npn", "pnp") else \
            dev.update(a_vt_pair="5mV*um")
    src = tmp_path / "big.json"
    src.write_text(json.dumps(plan))
    target = tmp_path / "out.txt"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-m", "biastree", "spread", str(src), "--samples", "10000",
                             "-o", str(target)], cwd=tmp_path, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    time.sleep(5.0)  # past start-up and loading, into the sampling (the whole run takes about half a minute)
    assert proc.poll() is None, "the run finished before it could be interrupted"
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "Traceback" not in err and re.search(r"interrupted( after \d+ of 10000 samples)?: nothing written", err)
    assert not target.exists()


# --- verify -----------------------------------------------------------------------------------


@pytest.mark.ngspice
def test_verify_says_why_it_disagrees(ngspice, write_plan) -> None:  # type: ignore[no-untyped-def]
    # Oracle: ngspice 39 on the exported netlist.  The pnp output at 3.2 V on a 3.3 V supply is
    # driven into saturation (its base-collector junction forward-biased by ≈ 0.6 V); its
    # sibling on the same base line moves with it; the npn branch elsewhere still agrees.
    path = write_plan("""
title: saturating pnp output (invented)
supply: 3.3V
devices:
  qn: {kind: npn, is: 1e-17A, beta: 150, early: 70V}
  qp: {kind: pnp, is: 2e-17A, beta: 40, early: 40V}
reference: {current: 10uA, tolerance: 1%, feeds: n_top}
mirrors:
  n_top: {device: qn, branches: [{to: p_fan}, {to: n_load}]}
  p_fan: {device: qp, branches: [{to: near_rail}, {to: sibling, ratio: 2}]}
loads:
  n_load: {current: 10uA, tolerance: 10%, voltage: 1.5V}
  near_rail: {current: 10uA, tolerance: 50%, voltage: 3.2V}
  sibling: {current: 20uA, tolerance: 10%, voltage: 1.0V}
""")
    out = runner.invoke(app, ["verify", str(path)])
    assert out.exit_code == 1
    text = out.stdout
    assert re.search(r"near_rail \(nominal\): check reports this output out of compliance \(-5\d\d\.?\d* mV\)", text)
    assert re.search(r"qp_fan_o0: base-collector forward-biased by 5\d\d mV", text)
    assert "sibling (nominal): a sibling output of p_fan is out of its active region" in text
    assert "so this load moved too" in text
    assert not any(l.startswith("  n_load") for l in text.splitlines())
    assert "6 of 6 disagreements have a known cause" in text


@pytest.mark.ngspice
def test_verify_names_a_mos_output_in_triode(ngspice, write_plan) -> None:  # type: ignore[no-untyped-def]
    # Oracle: ngspice 39 (level-1 MOSFET) biases the output at V_DS = 0.1 V below V_GS − V_T
    # ≈ 0.16 V: triode (Razavi ch. 3), so its current falls; the sibling at 1 V agrees
    # (no gate current: nothing couples the siblings at DC).
    out = runner.invoke(app, ["verify", str(write_plan(TRIODE))])
    assert out.exit_code == 1
    assert re.search(r"low \(nominal\): check reports this output out of compliance .*mm_o0: in triode: "
                     r"\|VDS\| 100 mV below VGS − VT 15\d mV", out.stdout)
    assert not any(l.startswith("  fine") for l in out.stdout.splitlines())
    assert "3 of 3 disagreements have a known cause" in out.stdout


def test_verdict_only_audit_names_no_term() -> None:
    """An audit solved for verdicts only (no error terms) must not name the plan's ratio term as
    the largest of an error it does not explain; with terms, the named term is the deciding case's
    largest (oracle: the exact split of test_deciding_terms_compound_to_the_deciding_error)."""
    from biastree.analysis.pipeline import check_tree

    tree = biastree.load(ROOT / "samples" / "failing_budgets.yaml")
    quick = check_tree(tree, detail=False)
    full = check_tree(tree)
    i = tree.loads.index("fine_trim")
    assert not quick.passed[i] and not full.passed[i]
    budget_quick = next(r for r in quick.reasons(i) if r.startswith("budget:"))
    budget_full = next(r for r in full.reasons(i) if r.startswith("budget:"))
    assert "largest term" not in budget_quick
    top = full.deciding(i)["terms"][0]
    assert f"largest term there: {top['label']} at {top['stage']}" in budget_full
