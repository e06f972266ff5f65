"""Mutation fuzzer over the shipped samples (hypothesis).

Each case takes one sample plan, breaks it in one to three ways (keys
removed, renamed, misspelt; wrong types; null, NaN, inf, huge, zero, negative
values; wrong and garbage units; aliases, merge keys, alias bombs; cycles,
self-loops, dangling names, double feeds, polarity mistakes; extreme physics;
truncated text, binary garbage, BOM, CRLF, tabs, deep nesting), writes it as
YAML or JSON and runs ``biastree check`` in-process.  Every case must end in

* exit 2 with one ``error: FILE[:LINE]: …`` line per problem (short, printable), or
* exit 0/1 with a result whose every number is finite;

never a traceback, exit 3, a numpy warning (warnings are errors here) or a
hang (an alarm per case), and the plan file is left byte for byte as it was.
Half the cases list every section under ``allow_unusual`` so that extreme
values get past the input ranges and reach the solver and the plausibility
check of its result.

When the plan is accepted (exit 0/1; about one case in six), the case also
runs one other command on it in-process, picked by a checksum of the plan
text (so a replayed case runs the same one): ``draw`` to a .dot file (no Graphviz needed), ``report`` to an
HTML file, ``corners``, ``sweep`` over a short temperature range and
``spread`` with few samples.  They must end in exit 0/1 with their output
written whole, or exit 2 with located one-line errors and no output file;
never exit 3 or a numpy warning.

CI runs ``BIASTREE_FUZZ_CASES`` cases (default 150, derandomised so a CI
failure reproduces); set it higher for a long run, e.g.
``BIASTREE_FUZZ_CASES=5000 python3 -m pytest tests/test_fuzz.py``.
"""

from __future__ import annotations

import copy
import json
import os
import re
import signal
import zlib
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

import biastree
from biastree.cli import app

SAMPLES = sorted((Path(__file__).resolve().parent.parent / "samples").glob("*.yaml"))
DATA = [yaml.safe_load(p.read_text()) for p in SAMPLES]
CASES = int(os.environ.get("BIASTREE_FUZZ_CASES", "150"))
CASE_SECONDS = 30  # a case running longer than this counts as a hang
SECTIONS = ["devices", "mirrors", "loads", "reference", "supply", "temperature", "conditions",
            "spread", "floorplan", "compliance", "matched"]

VALUES: list[Any] = [
    None, "", "nan", "NaN", ".nan", "inf", "-inf", ".inf", float("nan"), float("inf"), 10**400, "1" * 400,
    0, -1, "-5uA", "0V", "1e-30A", "1e3A", "1e-320A", "1e9", "1e-12", "1e12", "1e-6", True, False, "yes", [], {},
    [1, 2, 3], {"a": 1}, "abc", "10V", "10uF", "5MA", "1MEGV", "20MA", "1e6V", "-300C", "1e6K", "1mK", "0777",
    "a\x01b", "x" * 5000, "20", "5", 5, 0.5, "5%", "500%", "-100%", "1e307", "1e-9V", "2K", "50ppm/K", "1kohm",
    "27", 27, -500, "1e400", "0x10", "1_000", "   ", "~", "null",
]
NAMES = ["nowhere", "reference", "m", "qn", "", "a" * 300]


def _paths(node: Any, path: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    out = [path] if path else []
    if isinstance(node, dict):
        for key, value in node.items():
            out += _paths(value, path + (key,))
    elif isinstance(node, list):
        for i, value in enumerate(node):
            out += _paths(value, path + (i,))
    return out


def _parent(data: Any, path: tuple[Any, ...]) -> Any:
    for key in path[:-1]:
        data = data[key]
    return data


def _branches(data: dict[str, Any]) -> list[dict[str, Any]]:
    mirrors = data.get("mirrors")
    if not isinstance(mirrors, dict):
        return []
    return [b for m in mirrors.values() if isinstance(m, dict) for b in m.get("branches", []) if isinstance(b, dict)]


def _mutate_data(draw: Any, data: dict[str, Any]) -> None:
    op = draw(st.sampled_from(["delete", "rename", "value", "value", "value", "name", "cycle", "self",
                               "double", "polarity", "reverse", "chain", "fan", "extreme"]))
    paths = _paths(data)
    if op in ("delete", "rename", "value") and paths:
        path = draw(st.sampled_from(paths))
        parent = _parent(data, path)
        key = path[-1]
        if op == "delete":
            del parent[key]
        elif op == "rename" and isinstance(parent, dict):
            new = draw(st.sampled_from([f"{key}x", str(key)[:-1] or "k", str(key).upper(), f"{key} ", "<<"]))
            parent[new] = parent.pop(key)
        else:
            parent[key] = copy.deepcopy(draw(st.sampled_from(VALUES)))
    elif op == "name":
        branches = _branches(data)
        if branches:
            draw(st.sampled_from(branches))["to"] = draw(st.sampled_from(NAMES))
        elif isinstance(data.get("reference"), dict):
            data["reference"]["feeds"] = draw(st.sampled_from(NAMES))
    elif op in ("cycle", "self", "double", "polarity") and isinstance(data.get("mirrors"), dict) and data["mirrors"]:
        names = list(data["mirrors"])
        name = draw(st.sampled_from(names))
        mirror = data["mirrors"][name]
        if not isinstance(mirror, dict) or not isinstance(mirror.get("branches"), list) or not mirror["branches"]:
            return
        branch = mirror["branches"][0]
        if not isinstance(branch, dict):
            return
        if op == "cycle":
            branch["to"] = names[0]
        elif op == "self":
            branch["to"] = name
        elif op == "double":
            mirror["branches"].append(dict(branch))
        else:
            devices = list(data.get("devices") or {})
            if devices:
                mirror["device"] = draw(st.sampled_from(devices))
    elif op == "reverse" and isinstance(data.get("loads"), dict) and data["loads"]:
        load = data["loads"][draw(st.sampled_from(list(data["loads"])))]
        if isinstance(load, dict):
            load["voltage"] = ["2.5V", "0.5V"]
    elif op in ("chain", "fan"):
        # bounded scale: a deep chain or a wide mirror (the full 2,000 / 50,000 sizes belong to the scale tests)
        size = draw(st.integers(1, 200 if op == "chain" else 2000))
        data["devices"] = {"qn": {"kind": "npn", "is": "1e-17A", "beta": 150, "early": "70V"},
                           "qp": {"kind": "pnp", "is": "1e-17A", "beta": 60, "early": "40V"}}
        data["reference"] = {"current": "10uA", "feeds": "m0"}
        data["loads"] = {"l0": {"current": "10uA", "tolerance": "20%", "voltage": "1V"}}
        for key in ("conditions", "floorplan", "matched", "spread"):
            data.pop(key, None)
        if op == "chain":
            data["mirrors"] = {f"m{i}": {"device": "qn" if i % 2 == 0 else "qp",
                                         "branches": [{"to": f"m{i + 1}" if i + 1 < size else "l0"}]}
                               for i in range(size)}
            if size % 2 == 0:  # the last mirror must sink into the load: make the chain odd
                data["mirrors"][f"m{size}"] = {"device": "qn", "branches": [{"to": "l0"}]}
                data["mirrors"][f"m{size - 1}"]["branches"] = [{"to": f"m{size}"}]
        else:
            data["loads"] = {f"l{i}": {"current": "10uA", "tolerance": "20%", "voltage": "1V"} for i in range(size)}
            data["mirrors"] = {"m0": {"device": "qn", "branches": [{"to": f"l{i}"} for i in range(size)]}}
    elif op == "extreme":
        devices = [d for d in (data.get("devices") or {}).values() if isinstance(d, dict)]
        field, value = draw(st.sampled_from([
            ("beta", "1e-6"), ("beta", "1e9"), ("early", "1e-9V"), ("is", "1A"), ("supply", "0V"),
            ("supply", "1e6V"), ("temperature", "-300C"), ("temperature", "1mK"), ("ratio", "1e-12"),
            ("ratio", "1e12"), ("count", 10**9), ("current", "1e-30A"), ("current", "1e3A"), ("kp", "1e3A/V^2"),
            ("vth", "100V"), ("tolerance", "1e307"), ("lambda", "1e6/V"),
        ]))
        if field in ("supply", "temperature"):
            data[field] = value
        elif field in ("ratio", "count"):
            branches = _branches(data)
            if branches:
                draw(st.sampled_from(branches))[field] = value
        elif field in ("current", "tolerance") and isinstance(data.get("loads"), dict) and data["loads"]:
            load = data["loads"][draw(st.sampled_from(list(data["loads"])))]
            if isinstance(load, dict):
                load[field] = value
        elif devices:
            draw(st.sampled_from(devices))[field] = value


def _mutate_text(draw: Any, text: str) -> bytes:
    op = draw(st.sampled_from(["none", "none", "none", "truncate", "garbage", "bom", "crlf", "tab", "merge",
                               "bomb", "deep", "duplicate"]))
    if op == "truncate":
        return text[: draw(st.integers(0, max(0, len(text) - 1)))].encode()
    if op == "garbage":
        at = draw(st.integers(0, len(text)))
        return text[:at].encode() + draw(st.binary(min_size=1, max_size=20)) + text[at:].encode()
    if op == "bom":
        return b"\xef\xbb\xbf" + text.encode()
    if op == "crlf":
        return text.replace("\n", "\r\n").encode()
    if op == "tab":
        return text.replace("\n  ", "\n\t", 1).encode()
    if op == "merge":
        return ("base: &b {kind: npn, is: 1e-17A}\n" + text.replace("devices:\n", "devices:\n  qm: {<<: *b, beta: 50}\n", 1)).encode()
    if op == "bomb":
        lines = ["x0: &x0 [a, a, a, a, a, a, a, a, a, a]"]
        lines += [f"x{i}: &x{i} [{', '.join([f'*x{i - 1}'] * 10)}]" for i in range(1, 8)]
        return ("\n".join(lines) + "\n" + text).encode()
    if op == "deep":
        depth = draw(st.integers(10, 3000))
        return text.replace("title:", "title: " + "[" * depth + "]" * depth + "\nold_title:", 1).encode()
    if op == "duplicate":
        return (text + "\nsupply: 2V\n").encode()
    return text.encode()


def _finite(result: biastree.Audit) -> bool:
    arrays = [result.delivered, result.error, result.margin, result.compliance, result.op.b_current,
              result.op.m_v_in, np.array([result.reference_headroom])]
    return all(bool(np.all(np.isfinite(np.asarray(a, dtype=float)))) for a in arrays)


class Hang(Exception):
    pass


def _alarm(signum: int, frame: object) -> None:
    raise Hang()


runner = CliRunner()
LINE = re.compile(r"^error: (?P<file>.+?)(:(?P<line>\d+))?: (?P<rest>.+)$")


def run_case(path: Path, body: bytes, command: list[str]) -> tuple[int, list[str], str]:
    path.write_bytes(body)
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(CASE_SECONDS)
    try:
        result = runner.invoke(app, [command[0], str(path), *command[1:]])
    except Hang:
        pytest.fail(f"hang: check ran longer than {CASE_SECONDS} s on\n{body[:2000]!r}")
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    assert path.read_bytes() == body, "the plan file was modified"
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise AssertionError(f"exception {result.exception!r} on\n{body[:2000]!r}") from result.exception
    errors = [line for line in result.stderr.splitlines() if line]
    return result.exit_code, errors, result.stdout


def _record(code: int, errors: list[str], command: str = "check") -> None:
    """With BIASTREE_FUZZ_REPORT=FILE, append each case's exit status and first message (for the counts in notes)."""
    report = os.environ.get("BIASTREE_FUZZ_REPORT")
    if report:
        first = LINE.match(errors[0])["rest"] if errors and LINE.match(errors[0]) else ""
        with open(report, "a", encoding="utf-8") as handle:
            handle.write(f"{code}\t{len(errors)}\t{command}\t{first[:160]}\n")


def _clean_errors(path: Path, errors: list[str], body: bytes) -> None:
    assert errors, f"exit 2 without a message on {body[:2000]!r}"
    for line in errors:
        match = LINE.match(line)
        assert match and match["file"] == str(path), f"not 'error: FILE[:LINE]: message': {line[:300]!r}"
        assert len(line) <= 700 and line.isprintable(), f"message too long or not printable: {line[:300]!r}"


EXTRA_COMMANDS = {  # name → (arguments after the plan, output file the command must write whole, or None)
    "draw": (["-o", "{out}.dot"], "{out}.dot"),
    "report": (["-o", "{out}.html"], "{out}.html"),
    "corners": ([], None),
    "sweep": (["--temperature", "-40C:125C:55C", "--json"], None),
    "spread": (["--samples", "20", "--seed", "3"], None),
}


def run_extra(path: Path, body: bytes, name: str) -> None:
    """One of the other commands on an accepted plan: exit 0/1 with its output whole, or clean errors."""
    args, out = EXTRA_COMMANDS[name]
    stem = str(path.with_name("out"))
    args = [a.format(out=stem) for a in args]
    code, errors, stdout = run_case(path, body, [name, *args])
    _record(code, errors, name)
    assert code in (0, 1, 2), f"{name}: exit {code}: {errors}\non {body[:2000]!r}"
    written = Path(out.format(out=stem)) if out else None
    if code == 2:
        _clean_errors(path, errors, body)
        assert written is None or not written.exists(), f"{name}: output written although it failed"
    else:
        # notes (what draw fitted, model card parameters ignored) are fine; nothing else on stderr
        assert all(line.startswith("note: ") for line in errors), f"{name}: {errors}"
        if written is not None:
            text = written.read_text(encoding="utf-8")
            assert text.rstrip().endswith("}" if name == "draw" else "</html>"), f"{name}: output not whole"
        if name == "sweep":
            json.loads(stdout, parse_constant=lambda c: pytest.fail(f"{c} in the sweep JSON"))


@settings(max_examples=CASES, deadline=None, database=None, derandomize=os.environ.get("CI", "").lower() == "true",
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.function_scoped_fixture])
@given(st.data())
def test_broken_plans_fail_cleanly(tmp_path_factory: pytest.TempPathFactory, data: st.DataObject) -> None:
    draw = data.draw
    plan = copy.deepcopy(DATA[draw(st.integers(0, len(DATA) - 1))])
    for _ in range(draw(st.integers(1, 3))):
        _mutate_data(draw, plan)
    if isinstance(plan, dict) and draw(st.booleans()):
        plan["allow_unusual"] = SECTIONS
    fmt = draw(st.sampled_from(["yaml", "json"]))
    text = json.dumps(plan, indent=1) if fmt == "json" else yaml.safe_dump(plan, allow_unicode=True, sort_keys=False)
    body = _mutate_text(draw, text) if fmt == "yaml" else (b"\xef\xbb\xbf" + text.encode() if draw(st.booleans()) else text.encode())
    path = tmp_path_factory.mktemp("fuzz") / f"plan.{fmt}"
    command = draw(st.sampled_from([["check"], ["check"], ["check"], ["check", "--json"], ["netlist"]]))
    code, errors, out = run_case(path, body, command)
    _record(code, errors)
    assert code in (0, 1, 2), f"exit {code}: {errors}\non {body[:2000]!r}"
    if code == 2:
        _clean_errors(path, errors, body)
    else:
        assert all(line.startswith("note: ") for line in errors), errors  # e.g. card parameters ignored
        if "--json" in command:
            json.loads(out, parse_constant=lambda c: pytest.fail(f"{c} in the JSON results"))
        if command[0] == "netlist":
            cards = "\n".join(line for line in out.splitlines() if not line.startswith("*"))  # not the comments
            assert not re.search(r"\b(nan|inf)\b", cards, re.IGNORECASE), "non-finite number in the netlist"
        result = biastree.check(str(path))
        assert _finite(result), f"non-finite numbers in the verdict of {body[:2000]!r}"
        names = sorted(EXTRA_COMMANDS)
        run_extra(path, body, names[zlib.crc32(body) % len(names)])
