"""One test per defect class of issue 15 (the outside fuzz corpus), each over
several members of its class.  Every bad input must end in exit 2 with one
short ``file:line: key.path: message`` line per problem; the input file is
never modified."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from biastree.cli import app

ROOT = Path(__file__).resolve().parent.parent

BASE = """\
title: defect base plan (invented)
supply: 3.3V
temperature: 27C
devices:
  qn: {kind: npn, is: 1e-17A, beta: 120, early: 60V}
  qp: {kind: pnp, is: 5e-18A, beta: 40, early: 35V}
reference: {current: 10uA, tolerance: 1%, feeds: m_top}
mirrors:
  m_top: {device: qn, branches: [{to: m_left, ratio: 2}, {to: adc, ratio: 4, count: 3}]}
  m_left: {device: qp, branches: [{to: amp, ratio: 1, count: 2}]}
loads:
  adc: {current: 40uA, tolerance: 30%, voltage: 1.5V}
  amp: {current: 20uA, tolerance: 30%, voltage: [0.8V, 2.4V]}
"""

BASE_JSON = {
    "title": "defect base plan (invented)",
    "supply": "3.3V",
    "devices": {"qn": {"kind": "npn", "is": "1e-17A", "beta": 120, "early": "60V"},
                "qp": {"kind": "pnp", "is": "5e-18A", "beta": 40, "early": "35V"}},
    "reference": {"current": "10uA", "tolerance": "1%", "feeds": "m_top"},
    "mirrors": {"m_top": {"device": "qn", "branches": [{"to": "m_left", "ratio": 2}, {"to": "adc", "ratio": 4, "count": 3}]},
                "m_left": {"device": "qp", "branches": [{"to": "amp", "ratio": 1, "count": 2}]}},
    "loads": {"adc": {"current": "40uA", "tolerance": "30%", "voltage": "1.5V"},
              "amp": {"current": "20uA", "tolerance": "30%", "voltage": ["0.8V", "2.4V"]}},
}

runner = CliRunner()


def run(args: list[str]) -> tuple[int, list[str]]:
    result = runner.invoke(app, args)
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception)
    return result.exit_code, [line for line in result.stderr.splitlines() if line]


def refused(path: Path, *expected: str, command: str = "check") -> list[str]:
    """Run the command; assert exit 2, clean one-line messages, each expected text present, input unchanged."""
    before = path.read_bytes()
    code, lines = run([command, str(path)])
    assert code == 2, lines
    assert path.read_bytes() == before
    for line in lines:
        assert re.match(rf"^error: {re.escape(str(path))}(:\d+)?: \S", line), line
        assert len(line) < 600 and line.isprintable(), line[:200]
    text = "\n".join(lines)
    for want in expected:
        assert re.search(want, text), f"{want!r} not in\n{text}"
    return lines


def write(tmp_path: Path, text: str | bytes, name: str = "plan.yaml") -> Path:
    path = tmp_path / name
    path.write_bytes(text.encode("utf-8") if isinstance(text, str) else text)
    return path


def as_json(tmp_path: Path, data: object, name: str = "plan.json") -> Path:
    return write(tmp_path, json.dumps(data, indent=1), name)


# --- 1. data loss ---------------------------------------------------------------


@pytest.mark.parametrize("args", [
    ["check", "{plan}", "-o", "{plan}"],
    ["check", "{plan}", "--json", "-o", "{plan}"],
    ["netlist", "{plan}", "-o", "{plan}"],
    ["report", "{plan}", "-o", "{dir}/r.md", "--csv", "{plan}"],
    ["sweep", "{plan}", "--temperature", "27C", "-o", "{dir}/./plan.yaml"],
])
def test_no_command_writes_over_its_input(tmp_path: Path, args: list[str]) -> None:
    plan = write(tmp_path, BASE)
    before = plan.read_bytes()
    code, lines = run([a.format(plan=plan, dir=tmp_path) for a in args])
    assert code == 2 and len(lines) == 1 and "never writes over a file it reads" in lines[0], lines
    assert plan.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.yaml"]


def test_output_extension_refused_like_draw(tmp_path: Path) -> None:
    plan = write(tmp_path, BASE)
    code, lines = run(["report", str(plan), "-o", str(tmp_path / "x.docx")])
    assert code == 2 and lines == [f"error: -o {tmp_path / 'x.docx'}: cannot write a '.docx' file; use .html or .htm or .md or .markdown"]
    assert not (tmp_path / "x.docx").exists()


INTERRUPT_DURING_WRITE = """
import os, signal, sys
real = os.replace
SIG = getattr(signal, sys.argv[1])
def interrupted(a, b):  # the signal arrives while the output is being written
    os.kill(os.getpid(), SIG)
    real(a, b)
os.replace = interrupted
from biastree.cli import main
sys.argv = ["biastree", "check", sys.argv[2], "-o", sys.argv[3]]
main()
"""


@pytest.mark.parametrize("sig", ["SIGTERM", "SIGINT"])
def test_interrupt_leaves_no_partial_file_and_one_line(tmp_path: Path, sig: str) -> None:
    plan = write(tmp_path, BASE)
    out = tmp_path / "table.txt"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.run([sys.executable, "-c", INTERRUPT_DURING_WRITE, sig, str(plan), str(out)],
                          capture_output=True, text=True, env=env, timeout=120)
    assert proc.returncode == 130, proc.stderr
    assert "Traceback" not in proc.stderr and proc.stderr.strip() == "interrupted: nothing written"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.yaml"]  # no output, no .table.txt.biastree-partial-*


def test_temporary_file_is_recognisable(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from biastree import files

    seen = []
    real = os.replace

    def spy(a: str, b: str) -> None:
        seen.append(Path(a).name)
        real(a, b)

    monkeypatch.setattr(files.os, "replace", spy)
    files.write_atomic(tmp_path / "out.txt", "x")
    assert seen[0].startswith(".out.txt.biastree-partial-")


# --- 2. internal errors from input ----------------------------------------------


def test_inputs_that_crashed_are_clean_errors(tmp_path: Path) -> None:
    huge = "9" * 400
    refused(write(tmp_path, BASE.replace("supply: 3.3V", f"supply: {huge}")), r":2: supply: .*not a finite number")
    refused(write(tmp_path, BASE.replace("count: 3", f"count: {huge}")), r"count: .*too large for a count")
    data = json.loads(json.dumps(BASE_JSON))
    data["supply"] = int(huge)
    data["mirrors"]["m_top"]["branches"][1]["count"] = int(huge)
    refused(as_json(tmp_path, data), r"supply: .*too large for a number", r"count: .*too large for a count")
    deep = json.dumps(BASE_JSON)[:-1] + ', "x": ' + "[" * 1000 + "]" * 1000 + "}"
    refused(write(tmp_path, deep, "deep.json"), r"nested too deeply|unknown key")
    refused(write(tmp_path, json.dumps({**BASE_JSON, "title": "a"}).replace('"a"', '"\\ud800"'), "s.json"),
            "lone surrogate")
    refused(write(tmp_path, BASE.replace("(invented)", "x" * 20000)), r"title: .*at most 200 characters")
    tiny = json.loads(json.dumps(BASE_JSON))
    tiny["loads"]["adc"]["current"] = 1e-320
    refused(as_json(tmp_path, tiny), r"loads.adc.current: .1e-320. is too small to compute with")


# --- 3. absurd values ---------------------------------------------------------------


MOS = "  mn: {kind: nmos, kp: 200uA/V^2, vth: 0.5V, w: 4um, l: 1um, mobility_exp: nan}\n"


def test_absurd_values_refused(tmp_path: Path) -> None:
    refused(write(tmp_path, BASE.replace("devices:\n", "devices:\n" + MOS)), r"mobility_exp: 'nan' is not a finite number")
    refused(write(tmp_path, BASE.replace("feeds: m_top", "feeds: m_top, tempco2: inf")), r"tempco2: 'inf' is not a finite")
    data = json.loads(json.dumps(BASE_JSON))
    data["mirrors"]["m_top"]["branches"][1]["count"] = True
    data["temperature"] = -500
    data["devices"]["qn"]["tnom"] = -1000
    data["devices"]["qp"]["beta"] = float("nan")
    refused(as_json(tmp_path, data), r"count: 'True' is a boolean", r"temperature: '-500' needs a unit",
            r"tnom: '-1000' needs a unit", r"qp.beta: 'nan' is not a finite number")
    refused(write(tmp_path, BASE.replace("temperature: 27C", "temperature: 0777")), r"temperature: '0777' needs a unit")
    refused(write(tmp_path, BASE.replace("is: 1e-17A", "is: 1A")), r"devices.qn.is: 1 A is outside the plausible range")
    refused(write(tmp_path, BASE.replace("temperature: 27C", "temperature: 1e6K")), r"temperature: .*plausible range")
    refused(write(tmp_path, BASE.replace("early: 60V", "early: 1e-9V")), r"devices.qn.early: 1 nV is outside")
    refused(write(tmp_path, BASE.replace("tolerance: 1%", "tolerance: 1e307")), r"reference.tolerance: '1e307' — did you mean")


def test_solved_nonsense_refused_even_when_the_plan_means_its_values(tmp_path: Path) -> None:
    unusual = "allow_unusual: [devices]\n"
    # IS of 1 A per unit device: V_BE = VT·ln(I/IS) is negative for 10 µA
    refused(write(tmp_path, BASE.replace("is: 1e-17A", "is: 1A") + unusual),
            r":9: mirrors.m_top.device: implausible result: input voltage V_BE of mirror 'm_top' is -")
    # V_A of 1 nV: the Early factor (1 + V_CB/V_A) multiplies the current by ~1e9
    refused(write(tmp_path, BASE.replace("early: 60V", "early: 1e-9V") + unusual),
            r"mirrors.m_top.branches\[\d\]: implausible result: this branch of 'm_top' carries .* more than 10× the .* its ratio makes")


# --- 4. errors with a place and in one line -----------------------------------------


def test_solve_failures_name_file_mirror_and_quantity(tmp_path: Path) -> None:
    lines = refused(write(tmp_path, BASE.replace("temperature: 27C", "temperature: 0.001K") + "allow_unusual: [temperature]\n"),
                    r"mirrors.m_top: no operating point: the input voltage \(V_BE\) of mirror 'm_top'")
    assert re.match(rf"error: {re.escape(str(tmp_path))}/plan.yaml:9: ", lines[0])
    refused(write(tmp_path, BASE + "conditions: {corners: {bad: {beta: -100%}}}\n"), r"corners.bad.beta: must be > -1")
    refused(write(tmp_path, BASE.replace("device: qn,", "device: qn, input_size: 1e-12,")), r"input_size: .*plausible")


def test_messages_are_one_short_line(tmp_path: Path) -> None:
    data = json.dumps(BASE_JSON).replace('"supply": "3.3V"', '"supply": "3.3V",\n "supply": "2V"')
    refused(write(tmp_path, data, "dup.json"), r"dup.json:2: supply: duplicate key")
    refused(write(tmp_path, BASE.replace("(invented)", "(\x01)")), r":1: control character U\+0001 is not allowed")
    lines = refused(write(tmp_path, BASE.replace("current: 40uA", "current: " + "7" * 100_000 + "uQ")),
                    r"loads.adc.current: .*… \(100002 characters\)")
    assert max(len(line) for line in lines) < 300
    refused(write(tmp_path, BASE.replace("\n  qp:", "\n\tqp:")), r"tab")


# --- 5. every problem at once ----------------------------------------------------------


def test_structural_problems_beside_field_errors(tmp_path: Path) -> None:
    text = (BASE.replace("device: qp,", "device: qn,")                          # polarity
                .replace("voltage: 1.5V", "voltage: 5V")                        # above the supply
                .replace("beta: 40", "betta: 40")                               # field error
                .replace("tolerance: 30%, voltage: [0.8V", "tolerance: 5, voltage: [0.8V")  # field error
            + "  adc: {current: 1uA, tolerance: 1%, voltage: 1V}\n")            # duplicate key
    refused(write(tmp_path, text), r":6: devices.qp.betta: unknown key", r":9: mirrors.m_top.branches\[0\].to: polarity",
            r":12: loads.adc.voltage: node voltage must lie between", r":13: loads.amp.tolerance: '5' — did you mean 5%\?",
            r":14: loads.adc: duplicate key")


def test_field_errors_do_not_invent_structural_ones(tmp_path: Path) -> None:
    # a broken supply says nothing about the load voltages; a broken device kind nothing about polarity;
    # a broken branch target nothing about which loads are fed
    lines = refused(write(tmp_path, BASE.replace("supply: 3.3V", "supply: 3.3A")
                          .replace("kind: pnp", "kind: pnpx").replace("{to: amp,", "{to: [amp],")),
                    r"supply: '3.3A' has unit A", r"devices.qp.kind: must be one of", r"branches\[0\].to: must be text")
    assert len(lines) == 3, lines


# --- 6. misleading messages, a valid file refused --------------------------------------


def test_merge_keys_feeds_and_bom(tmp_path: Path) -> None:
    merged = BASE.replace("devices:\n", "base: &q {kind: npn, is: 1e-17A}\ndevices:\n  qm: {<<: *q, beta: 50}\n")
    refused(write(tmp_path, merged), r"devices.qm.<<: YAML merge keys \(<<\) are not supported")
    lines = refused(write(tmp_path, BASE.replace("feeds: m_top", "feeds: m0")), r"reference.feeds: no mirror named 'm0'",
                    r"mirrors.m_top: never fed.*reference.feeds names 'm0'", r"m_left: not reachable .*'m_top' above it")
    assert not any("cycle" in line for line in lines)
    for name in ("bom.json", "bom.yaml"):
        body = json.dumps(BASE_JSON) if name.endswith("json") else BASE
        code, lines = run(["check", str(write(tmp_path, b"\xef\xbb\xbf" + body.encode(), name))])
        assert code == 0, lines


# --- extreme values under allow_unusual (the systematic sweep of issue 15) ------------

SECTIONS = ["devices", "mirrors", "loads", "reference", "supply", "temperature", "conditions", "spread",
            "floorplan", "compliance", "matched"]


def sample_with(tmp_path: Path, sample: str, path: tuple[object, ...], value: object) -> Path:
    """A shipped sample with one value set to an extreme, every section under allow_unusual, as JSON."""
    import yaml

    data = yaml.safe_load((ROOT / "samples" / f"{sample}.yaml").read_text())
    node = data
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    data["allow_unusual"] = SECTIONS
    return as_json(tmp_path, data, f"{sample}.json")


@pytest.mark.parametrize("path, value, mirror", [
    (("devices", "mn", "kp"), 1e30, "m_dac"),      # KP·W/L so large that V_GS − V_th is below a float's resolution
    (("devices", "mn", "l"), 1e-59, "m_dac"),      # the same through W/L
    (("devices", "mp", "lambda"), 1e300, "p_ota"),  # λ·V_GS overflows the square law
    (("mirrors", "n_master", "branches", 1, "ratio"), 1e-59, "p_ota"),  # an input current of 1e-64 A
])
def test_mos_square_law_beyond_the_numbers_is_refused(tmp_path: Path, path: tuple[object, ...], value: float,
                                                       mirror: str) -> None:
    # these ended in exit 3 (a numpy warning from the audit's regulation) before
    plan = sample_with(tmp_path, "mixed_topologies", path, value)
    for command in ("check", "report"):
        code, lines = run([command, str(plan), *(["-o", str(tmp_path / "r.html")] if command == "report" else [])])
        assert code == 2, lines
        assert re.match(rf"^error: {re.escape(str(plan))}:\d+: mirrors\.{mirror}\.device: implausible result: "
                        rf"the square law of mirror '{mirror}' has no V_GS", lines[0]), lines
    assert not (tmp_path / "r.html").exists()


def test_regulation_with_no_nominal_current_is_guarded() -> None:
    """A load the model extrapolates to exactly no current: ΔI/I_nominal is 0, not 0/0 (no warning);
    a nominal of exactly 0 with current at the ends of the range is refused with the load's place."""
    import dataclasses

    import numpy as np

    import biastree
    from biastree.analysis.plausible import check_result
    from biastree.errors import SolveError

    result = biastree.check(str(ROOT / "samples" / "bipolar_small.yaml"))
    delivered = result.delivered.copy()
    delivered[0] = 0.0
    none = dataclasses.replace(result, delivered=delivered)
    delta, fraction, per_volt = none.regulation
    assert (delta[0], fraction[0], per_volt[0]) == (0.0, 0.0, 0.0)
    assert np.array_equal(fraction[1:], result.regulation[1][1:])
    check_result(none)  # no current anywhere is a (failing) verdict, not nonsense
    delivered[0] = [1e-6, 0.0, 2e-6]
    with pytest.raises(SolveError, match=r"receives exactly no current at its nominal voltage") as info:
        check_result(dataclasses.replace(result, delivered=delivered))
    assert info.value.path == ("loads", result.tree.loads[0])


@pytest.mark.parametrize("command", [
    ["corners"], ["sweep", "--temperature", "-40C:125C:55C"], ["spread", "--samples", "20"]])
@pytest.mark.parametrize("path, value", [
    (("devices", "qn", "a_is_pair"), 1e300),      # σ squared overflows
    (("floorplan", "rail_gradient"), 1e30),
    (("devices", "mn", "kp"), 1e30),
])
def test_condition_commands_refuse_what_check_refuses(tmp_path: Path, command: list[str], path: tuple[object, ...],
                                                      value: float) -> None:
    # corners, sweep and spread solve outside check_tree: they run the same plausibility checks
    plan = sample_with(tmp_path, "die_spread", path, value)
    code, lines = run(["check", str(plan)])
    assert code == 2 and re.search("implausible result|no operating point", lines[0]), lines
    code, lines = run([command[0], str(plan), *command[1:]])
    assert code == 2, lines
    assert re.match(rf"^error: {re.escape(str(plan))}:\d+: (loads|mirrors)\.\S+: (implausible result|no operating "
                    "point): ", lines[0]), lines
