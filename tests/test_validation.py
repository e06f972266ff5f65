"""Bad input: one clear line per problem with file, line and key path; exit 2."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from typer.testing import CliRunner

import biastree
from biastree.cli import app

GOOD = """\
title: validation base plan (invented)
supply: 3.3V
devices:
  qn: {kind: npn, is: 1e-17A, beta: 120, early: 60V}
  qp: {kind: pnp, is: 5e-18A, beta: 40, early: 35V}
  mn: {kind: nmos, kp: 200uA/V^2, vth: 0.5V, lambda: 0.05/V, w: 4um, l: 1um}
reference: {current: 10uA, tolerance: 1%, feeds: m_top}
mirrors:
  m_top:
    device: qn
    branches:
      - {to: m_left, ratio: 2}
      - {to: adc_bias, ratio: 4, count: 3}
  m_left: {device: qp, branches: [{to: amp_tail, ratio: 1, count: 2}]}
loads:
  adc_bias: {current: 40uA, tolerance: 30%, voltage: 1.5V}
  amp_tail: {current: 20uA, tolerance: 30%, voltage: [0.8V, 2.4V]}
"""

runner = CliRunner()


def run_check(path: Path) -> tuple[int, str]:
    result = runner.invoke(app, ["check", str(path)])
    return result.exit_code, result.output


def test_base_plan_is_valid(write_plan) -> None:  # type: ignore[no-untyped-def]
    code, out = run_check(write_plan(GOOD))
    assert code == 0, out


CASES = [
    # (what is replaced, by what, expected message, line)
    ("beta: 120", "betta: 120", r"plan.yaml:4: devices.qn.betta: unknown key \(did you mean 'beta'\? it is required and missing\)", 4),
    ("beta: 120, ", "", r"plan.yaml:4: devices.qn.beta: required key is missing", 4),
    ("current: 10uA", "current: 10V", r"plan.yaml:7: reference.current: '10V' has unit V, expected A", 7),
    ("current: 40uA", "current: -40uA", r"plan.yaml:16: loads.adc_bias.current: must be > 0", 16),
    ("ratio: 4, count: 3", "ratio: 0, count: 3", r"plan.yaml:13: mirrors.m_top.branches\[1\].ratio: must be > 0", 13),
    ("ratio: 4, count: 3", "ratio: 4, count: 0", r"plan.yaml:13: mirrors.m_top.branches\[1\].count: must be > 0", 13),
    ("count: 2}", "count: 2.5}", r"mirrors.m_left.branches\[0\].count: must be a whole number", 14),
    ("{to: m_left, ratio: 2}", "{to: m_lfet, ratio: 2}", r"branches\[0\].to: no mirror or load named 'm_lfet' \(did you mean 'm_left'\?\)", 12),
    ("{to: adc_bias, ratio: 4, count: 3}", "{to: m_left, ratio: 4, count: 3}", r"'m_left' is already fed by mirrors.m_top.branches\[0\].to", 13),
    ("feeds: m_top", "feeds: m_left", r"mirrors.m_top: never fed", 9),
    ("device: qp,", "device: qn,", r"polarity: npn mirror 'm_top' sinks current, so it can feed a pnp/pmos mirror or a load, not npn mirror 'm_left'", 12),
    ("device: qp,", "device: mn,", r"polarity: npn mirror 'm_top' sinks current", 12),
    ("early: 35V}", "early: 35V, kp: 1}", r"devices.qp.kp: 'kp' is a parameter of MOS devices, not of a pnp", 5),
    ("lambda: 0.05/V,", "lambda: 0.05/V, beta: 100,", r"devices.mn.beta: 'beta' is a parameter of bipolar devices, not of a nmos", 6),
    ("kind: pnp", "kind: jfet", r"devices.qp.kind: must be one of npn, pnp, nmos, pmos", 5),
    ("voltage: [0.8V, 2.4V]", "voltage: [2.4V, 0.8V]", r"loads.amp_tail.voltage: range \[2.4, 0.8\] V must be written \[min, max\]", 17),
    ("voltage: 1.5V", "voltage: 4V", r"loads.adc_bias.voltage: node voltage must lie between 0 V and the supply", 16),
    ("device: qn\n", "device: qq\n", r"mirrors.m_top.device: no device model named 'qq'", 10),
    ("topology", "topology", "", 0),  # placeholder replaced below
]
CASES[-1] = ("device: qn\n", "device: qn\n    topology: wilsen\n", r"mirrors.m_top.topology: unknown topology 'wilsen'", 11)


@pytest.mark.parametrize(("old", "new", "message", "line"), CASES)
def test_each_error_names_its_place(write_plan, old: str, new: str, message: str, line: int) -> None:  # type: ignore[no-untyped-def]
    assert old in GOOD
    path = write_plan(GOOD.replace(old, new, 1))
    before = path.read_bytes()
    code, out = run_check(path)
    assert code == 2
    assert "Traceback" not in out
    assert any(__import__("re").search(message, l) for l in out.splitlines()), out
    assert f"plan.yaml:{line}:" in out
    assert path.read_bytes() == before  # input files are never modified


def test_cycle_printed_as_path(write_plan) -> None:  # type: ignore[no-untyped-def]
    text = GOOD + "  x: {current: 1uA, tolerance: 5%, voltage: 1V}\n"
    text = text.replace(
        "mirrors:\n",
        "mirrors:\n  c1: {device: qn, branches: [{to: c2}]}\n  c2: {device: qp, branches: [{to: c1}, {to: x}]}\n",
    )
    code, out = run_check(write_plan(text))
    assert code == 2
    assert "mirrors.c1: cycle: c1 -> c2 -> c1" in out


def test_several_errors_all_reported(write_plan) -> None:  # type: ignore[no-untyped-def]
    text = GOOD.replace("beta: 120", "betta: 120").replace("current: 40uA", "current: 40V").replace("count: 2}", "count: -1}")
    code, out = run_check(write_plan(text))
    assert code == 2
    errors = [l for l in out.splitlines() if l.startswith("error:")]
    assert len(errors) >= 3  # betta for the required beta (one slip, one line), wrong unit, count


def test_yaml_syntax_error(write_plan) -> None:  # type: ignore[no-untyped-def]
    code, out = run_check(write_plan("supply: 3.3V\ndevices: {a: 1\n"))
    assert code == 2
    assert "plan.yaml:3: YAML syntax error" in out


def test_json_syntax_error(write_plan) -> None:  # type: ignore[no-untyped-def]
    code, out = run_check(write_plan('{"supply": "3.3V",\n "devices": }', "plan.json"))
    assert code == 2
    assert "plan.json:2: JSON syntax error" in out


def test_duplicate_key(write_plan) -> None:  # type: ignore[no-untyped-def]
    code, out = run_check(write_plan(GOOD.replace("supply: 3.3V\n", "supply: 3.3V\nsupply: 5V\n")))
    assert code == 2
    assert "plan.yaml:3: supply: duplicate key" in out


def test_not_a_mapping(write_plan) -> None:  # type: ignore[no-untyped-def]
    code, out = run_check(write_plan("- just\n- a list\n"))
    assert code == 2 and "a plan must be a mapping" in out


def test_missing_file(tmp_path: Path) -> None:
    code, out = run_check(tmp_path / "nope.yaml")
    assert code == 2 and "nope.yaml: file not found" in out


def test_yaml11_pitfalls_do_not_bite(write_plan) -> None:  # type: ignore[no-untyped-def]
    # YAML 1.1 reads 1e-17 (no dot) as a string and `no` as a boolean key.
    text = GOOD.replace("is: 1e-17A", "is: 1e-17").replace("adc_bias", "no").replace("current: 10uA", "current: 1e-5")
    tree = biastree.load(write_plan(text))
    assert "no" in tree.loads
    assert tree.plan.devices["qn"].is_ == 1e-17
    assert tree.plan.reference.current == 1e-5


def test_misspelt_key_rejected_everywhere(write_plan) -> None:  # type: ignore[no-untyped-def]
    # A strictness setting nobody tests can silently do nothing: check each level.
    for old, new in [("title:", "titel:"), ("tolerance: 1%", "tolerence: 1%"), ("ratio: 2}", "ration: 2}"),
                     ("current: 40uA", "curent: 40uA"), ("device: qn\n", "devise: qn\n")]:
        with pytest.raises(biastree.PlanError, match="unknown key"):
            biastree.load(write_plan(GOOD.replace(old, new, 1)))


def test_json_plan_equivalent(write_plan) -> None:  # type: ignore[no-untyped-def]
    import json

    import yaml

    data = yaml.safe_load(GOOD)
    a = biastree.check(write_plan(GOOD))
    b = biastree.check(write_plan(json.dumps(data), "plan.json"))
    assert (a.delivered == b.delivered).all()


def test_voltage_union_errors_name_one_problem(write_plan) -> None:  # type: ignore[no-untyped-def]
    # A voltage is a value or a [min, max] pair: each mistake gets one message, not one per alternative.
    text = GOOD.replace("voltage: 1.5V", "voltage: [1V]").replace("voltage: [0.8V, 2.4V]", "voltage: [0.8A, 2.4V]")
    code, out = run_check(write_plan(text))
    errors = [l.split("/")[-1] for l in out.splitlines() if l.startswith("error:")]
    assert code == 2
    assert errors == [
        "plan.yaml:16: loads.adc_bias.voltage: must be a value or a [min, max] pair (got 1 values)",
        "plan.yaml:17: loads.amp_tail.voltage[0]: '0.8A' has unit A, expected V",
    ]


def test_null_section_is_a_clear_error(write_plan) -> None:  # type: ignore[no-untyped-def]
    code, out = run_check(write_plan(GOOD.replace("reference: {current: 10uA, tolerance: 1%, feeds: m_top}", "reference:")))
    assert code == 2 and "plan.yaml:7: reference: must be a mapping of keys" in out


def test_field_and_name_errors_in_one_run(write_plan) -> None:  # type: ignore[no-untyped-def]
    # A misspelt key and a branch to a misspelt load: both in the same run, in file order.
    text = GOOD.replace("beta: 120", "betta: 120").replace("{to: amp_tail, ratio: 1, count: 2}", "{to: amp_tial, ratio: 1, count: 2}")
    code, out = run_check(write_plan(text))
    errors = [l for l in out.splitlines() if l.startswith("error:")]
    assert code == 2
    assert any("devices.qn.betta: unknown key" in e for e in errors)
    assert any("mirrors.m_left.branches[0].to: no mirror or load named 'amp_tial' (did you mean 'amp_tail'?)" in e
               for e in errors)
    lines = [int(e.split(".yaml:")[1].split(":")[0]) for e in errors]
    assert lines == sorted(lines)


def test_out_of_range_value_needs_allow_unusual(write_plan) -> None:  # type: ignore[no-untyped-def]
    # a 200 mA load is beyond the plausible range (1 pA … 100 mA) unless the plan says it means it
    text = GOOD.replace("current: 40uA", "current: 200mA")
    code, out = run_check(write_plan(text))
    assert code == 2
    assert "plan.yaml:16: loads.adc_bias.current: 200 mA is outside the plausible range for an on-chip bias network " \
           "(1 pA … 100 mA); if you mean it, list 'loads.adc_bias.current' under allow_unusual" in out
    code, out = run_check(write_plan(text + "allow_unusual: [loads.adc_bias.current]\n"))
    assert code in (0, 1) and "plausible" not in out
    code, out = run_check(write_plan(text + "allow_unusual: [loads]\n"))  # a whole section
    assert code in (0, 1) and "plausible" not in out


def test_percent_field_plain_number_hint(write_plan) -> None:  # type: ignore[no-untyped-def]
    code, out = run_check(write_plan(GOOD.replace("tolerance: 30%, voltage: 1.5V", "tolerance: 5, voltage: 1.5V")))
    assert code == 2 and "loads.adc_bias.tolerance: '5' — did you mean 5%?" in out
    code, out = run_check(write_plan(GOOD.replace("tolerance: 30%, voltage: 1.5V", "tolerance: 0.3, voltage: 1.5V")))
    assert code == 0, out  # a plain fraction ≤ 1 stays valid SI


def test_usage_errors_are_one_line() -> None:
    result = runner.invoke(app, ["check", "samples/bipolar_small.yaml", "--k-sigma", "abc"])
    assert result.exit_code == 2
    assert re.fullmatch(r"error: --k-sigma: 'abc' is not a number \(see '\S+ check --help'\)\n", result.stderr)
    result = runner.invoke(app, ["check", "samples/bipolar_small.yaml", "--nope"])
    assert result.exit_code == 2 and result.stderr.count("\n") == 1 and "No such option: --nope" in result.stderr


def test_json_is_a_flag_in_help() -> None:
    result = runner.invoke(app, ["check", "--help"])
    lines = [line for line in result.output.splitlines()
             if line.split()[:1] in (["--json"], ["--failing"])]
    assert len(lines) == 2 and not any("<bool>" in line or "--no-json" in line for line in lines), lines


def test_misspelt_required_key_is_one_line(write_plan) -> None:  # type: ignore[no-untyped-def]
    """A misspelling of a required key is one slip: one line at the misspelling, not a second
    'required key is missing' for the key it was meant to be."""
    code, out = run_check(write_plan(GOOD.replace("tolerance: 30%, voltage: 1.5V", "tolerence: 30%, voltage: 1.5V")))
    errors = [line for line in out.splitlines() if line.startswith("error:")]
    assert code == 2 and len(errors) == 1, out
    assert "loads.adc_bias.tolerence: unknown key (did you mean 'tolerance'? it is required and missing)" in errors[0]
