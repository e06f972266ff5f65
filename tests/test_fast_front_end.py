"""The fast plan readers give the full readers' data (issue 13).

Oracle: the loader's full path itself — libyaml's events walked by
``loader._build`` (YAML) and the standard library's ``json`` with a
duplicate-key hook (JSON), both kept as the fallback.  The fast reader of
the plain YAML subset must give exactly the same data (same values, same
key order, strings stay strings) for every text it accepts, and must refuse
(return None, so the full path runs and gives its message with its line)
every text the full path reports a problem in.  Texts: the samples,
generated plans (invented data), the samples re-written by PyYAML in each
style, and hypothesis mutations of them.
"""

from __future__ import annotations

import json
import os

import pytest
import yaml
from conftest import SAMPLES
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import biastree
from biastree.errors import PlanError
from biastree.input import fast_yaml
from biastree.input.generate import random_plan
from biastree.input.loader import _fast_json, parse_text
from biastree.output.json import to_json


def _full(text: str, fmt: str = "yaml") -> object:
    """The full path's data, or the PlanError text when it refuses the text."""
    try:
        doc = parse_text(text, "plan", fmt, fast=False)
    except PlanError as exc:
        return ("error", str(exc))
    if doc.problems:
        return ("problems", [str(p) for p in doc.problems])
    return doc.data


def _same(a: object, b: object) -> bool:
    """Equal with the same key order and the same types (a str is not a float)."""
    return json.dumps(a) == json.dumps(b) and a == b


def _generated_yaml(n: int, seed: int, tmp_path) -> str:  # type: ignore[no-untyped-def]
    from typer.testing import CliRunner

    from biastree.cli import app

    path = tmp_path / f"plan{n}_{seed}.yaml"
    result = CliRunner().invoke(app, ["generate", str(n), "--seed", str(seed), "-o", str(path)])
    assert result.exit_code == 0, result.output
    return path.read_text(encoding="utf-8")


@pytest.mark.parametrize("path", SAMPLES, ids=lambda p: p.name)
def test_samples_read_fast_to_the_same_data(path) -> None:  # type: ignore[no-untyped-def]
    text = path.read_text(encoding="utf-8")
    fast = fast_yaml.read(text)
    assert fast is not None, "a sample left the fast subset"
    assert _same(fast, _full(text))


@pytest.mark.parametrize("n,seed", [(20, 1), (500, 4), (3000, 9)])
def test_generated_plans_read_fast_to_the_same_data(n: int, seed: int, tmp_path) -> None:  # type: ignore[no-untyped-def]
    text = _generated_yaml(n, seed, tmp_path)
    fast = fast_yaml.read(text)
    assert fast is not None
    assert _same(fast, _full(text))


@pytest.mark.parametrize("flow", [False, True, None])
@pytest.mark.parametrize("path", SAMPLES[:4], ids=lambda p: p.name)
def test_pyyaml_styles_read_to_the_same_data(path, flow) -> None:  # type: ignore[no-untyped-def]
    data = yaml.safe_load(path.read_text(encoding="utf-8"))
    for text in (yaml.safe_dump(data, default_flow_style=flow, sort_keys=False, width=70),
                 yaml.safe_dump(data, default_flow_style=flow, sort_keys=False, indent=4, allow_unicode=True)):
        fast = fast_yaml.read(text)
        if fast is not None:
            assert _same(fast, _full(text))


# texts at the edge of the subset: each either read to the full path's data or refused
EDGES = [
    "a: 1\n", "a:\n", "a: ~\n", "a: null\n", "a: 'null'\n", 'a: "~"\n', "a: [x, ~, null]\n", "a: {b: ~}\n",
    "a: 0777\n", "a: no\n", "a: 1e-17\n", "a: -40C\n", "a: x:y\n", "a: http://x\n", "a: x#y\n", "a: x #y\n",
    "a: [x, [y, z]]\n", "a: {b: [1, 2], c: {d: e}}\n", "a: []\n", "a: {}\n", "a: [x,]\n", "a: {b: c,}\n",
    "a: [a: b]\n", "a: {b:c}\n", "a: {b: c: d}\n", "- a\n", "a\n", "a: b\na: c\n", "<<: {a: b}\n",
    "a: b\n  c\n", "a:\n  - x\n  - y\n", "a:\n- x\n- y\nb: 1\n", "a:\n  - b: 1\n    c: 2\n  - d\n",
    "a:\n  - b: 1\n   c: 2\n", "a:\n  -\n    b: 1\n", "a:\n  - - x\n    - y\n", "a:\n    b: 1\n  c: 2\n",
    "---\na: 1\n", "a: 1\n---\nb: 2\n", "a: 1\n...\n", "%YAML 1.1\n---\na: 1\n", "a: &x 1\nb: *x\n",
    "a: !!str 1\n", "a: |\n  x\n", "a: >\n  x\n", "a: 'it''s'\n", 'a: "x\\ty"\n', 'a: "x #y"\n',
    "a: {b: 1,\n  c: 2}\n", "a: {b: 1,\n\n  c: 2}\n", "a: {b: 1\n  , c: 2}\n", "a: {b: 1,\nc: 2}\n",
    "a: [1,\n  2]\n", "a: b c\n", "a: b  c\n", "a b: c\n", "a : b\n", "? a\n: b\n", "a: - b\n", "a: -\n",
    "a: %x\n", "a: @x\n", "a: `x`\n", "a: ,x\n", "a: x,y\n", "a: [x y, z]\n", "a: µA\n", "a: 10\u00b5A\n",
    "a: x\u00a0y\n", "a: x\u2028y\n", "a: x\x85y\n", "a: x\x07\n", "a:\tb\n", "a: b\r\nc: d\r\n", "  a: 1\n",
    "a:\n  b: 1\n c: 2\n", "a: 1 # c\n# d\nb: 2\n", "a: [x, y] # c\n", "a: *x\n", "a: [*x]\n", "a: x]\n",
    "a: {b: [c, d], e: f}\n", "'a': b\n", "a: \"x\"\n", "a: 'x' y\n", "a: \"x\" # c\n", "a: b\n-\n",
    "a:\n  b:\n  c: 1\n", "a:\n-\nb: 1\n", "~: 1\n", "null: 1\n", "a: {~: 1}\n", "a: {<<: b}\n",
]


@pytest.mark.parametrize("text", EDGES)
def test_edge_texts_read_to_the_same_data_or_are_refused(text: str) -> None:
    fast = fast_yaml.read(text)
    full = _full(text)
    if fast is not None:
        assert _same(fast, full), (text, fast, full)


ALPHABET = [" ", "  ", "\n", ":", ": ", "-", "- ", "#", " #", ",", "{", "}", "[", "]", "~", "'", '"', "&a", "*a",
            "!", "|", ">", "%", "null", "x", "1", "\t", "<<", "?", ".", "\n  ", "\n- "]


@settings(max_examples=int(os.environ.get("FAST_READER_CASES", "300")), deadline=None, database=None,
          derandomize=os.environ.get("CI", "").lower() == "true", suppress_health_check=[HealthCheck.too_slow])
@given(st.data())
def test_mutated_texts_read_to_the_same_data_or_are_refused(data: st.DataObject) -> None:
    draw = data.draw
    text = SAMPLES[draw(st.integers(0, len(SAMPLES) - 1))].read_text(encoding="utf-8")
    for _ in range(draw(st.integers(1, 4))):
        at = draw(st.integers(0, len(text)))
        cut = draw(st.integers(0, 3))
        text = text[:at] + draw(st.sampled_from(ALPHABET)) * draw(st.integers(0, 2)) + text[at + cut:]
    fast = fast_yaml.read(text)
    if fast is not None:
        full = _full(text)
        assert _same(fast, full), (text, fast, full)


def test_json_plans_read_by_orjson_to_the_same_data() -> None:
    for path in SAMPLES:
        text = json.dumps(yaml.load(path.read_text(encoding="utf-8"), Loader=yaml.BaseLoader), indent=1)
        fast = _fast_json(text)
        assert fast is not None
        assert _same(fast, _full(text, "json"))
    # a duplicate key (here inside a string-free text) sends the text the full way, for its message
    assert _fast_json('{"a": 1, "a": 2}') is None
    assert _fast_json('{"a": {"b": 1, "b": 2}}') is None
    assert _fast_json('{"a": NaN}') is None
    assert _fast_json('{"a": "x\\": y", "b": 1}') is None  # a key-like string: refused, never misread
    assert "duplicate key" in parse_text('{"a": 1, "a": 2}', "plan", "json").problems[0].message


@pytest.mark.parametrize("path", SAMPLES, ids=lambda p: p.name)
def test_results_equal_on_both_readers(path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    fast = to_json(biastree.check(str(path)))
    monkeypatch.setattr(fast_yaml, "read", lambda text: None)
    assert to_json(biastree.check(str(path))) == fast


def test_generated_results_equal_on_both_readers(tmp_path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    text = _generated_yaml(1500, 2, tmp_path)
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    fast = to_json(biastree.check(str(path)))
    monkeypatch.setattr(fast_yaml, "read", lambda text: None)
    assert to_json(biastree.check(str(path))) == fast


def test_bulk_plausible_check_says_what_the_visit_says(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """Oracle: the one-by-one visit (the bulk check only skips sections with nothing to report)."""
    from biastree.input import checks
    from biastree.input.model import Plan

    plan = random_plan(400, seed=3)
    for case in range(4):
        raw = json.loads(json.dumps(plan))
        names = list(raw["loads"])
        if case >= 1:
            raw["loads"][names[7]]["current"] = "20A"  # out of range
        if case >= 2:
            mirror = next(iter(raw["mirrors"].values()))
            mirror["branches"][0]["ratio"] = "1e9"
            raw["loads"][names[9]]["voltage"] = ["0V", "500V"]
        if case == 3:
            raw["allow_unusual"] = [f"loads.{names[7]}"]
        model = Plan.model_validate(raw)
        bulk = checks.check_plausible(model)
        monkeypatch.setattr(checks, "_BULK", 10**9)
        one_by_one = checks.check_plausible(model)
        monkeypatch.setattr(checks, "_BULK", 64)
        assert bulk == one_by_one
        assert len(bulk) == (0, 1, 3, 2)[case]


def _tree_fields(tree) -> dict:  # type: ignore[no-untyped-def]
    import dataclasses

    out = {}
    for f in dataclasses.fields(tree):
        value = getattr(tree, f.name)
        if f.name == "generations":
            value = [g.tolist() for g in value]
        elif hasattr(value, "dtype"):
            value = (str(value.dtype), value.tolist())
        elif f.name == "plan":
            continue
        out[f.name] = value
    return out


@pytest.mark.parametrize("n,seed", [(300, 1), (2500, 8), (40, 2)])
def test_bulk_layout_gives_the_walks_tree(n: int, seed: int, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """Oracle: ``build``'s walk over levels (the bulk layout must give the same arrays, dtypes included)."""
    from biastree.input.model import Plan
    from biastree.tree import arrays

    plan = Plan.model_validate(random_plan(n, seed=seed))
    monkeypatch.setattr(arrays, "_BULK_FROM", 0)
    bulk = arrays.build(plan)
    monkeypatch.setattr(arrays, "_BULK_FROM", 10**12)
    assert _tree_fields(bulk) == _tree_fields(arrays.build(plan))


BROKEN = [
    ("loads.load3.voltage", ["0V", "9V"]),  # above the supply
    ("loads.load3.current", "20A"),  # implausible
    ("mirrors.m1.branches.0.to", "nowhere"),
    ("mirrors.m2.branches.0.to", "m2"),
    ("mirrors.m3.branches.0.count", "100000000"),
    ("reference.feeds", "m1"),
    ("mirrors.m1.device", "zz"),
    ("mirrors.m0.topology", "wilson"),
    ("mirrors.m1.bleed", "1uA"),
]


@pytest.mark.parametrize("where,value", BROKEN)
def test_bulk_layout_refuses_what_the_checks_report(where: str, value: object, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """Oracle: ``check_structure``: a plan it finds a problem in is never laid out in bulk."""
    from biastree.input import checks
    from biastree.input.model import Plan

    raw = random_plan(300, seed=1)
    node = raw
    keys = where.split(".")
    for key in keys[:-1]:
        node = node[int(key)] if key.isdigit() else node[key]
    node[keys[-1]] = value
    plan = Plan.model_validate(raw)
    assert checks.check_structure(plan)
    assert checks.clean_layout(plan) is None


def test_bulk_layout_refuses_second_feeds_cycles_and_polarity() -> None:
    from biastree.input import checks
    from biastree.input.model import Plan

    def plan_with(change) -> Plan:  # type: ignore[no-untyped-def]
        raw = random_plan(300, seed=1)
        change(raw)
        return Plan.model_validate(raw)

    def second_feed(raw: dict) -> None:
        first, second = list(raw["mirrors"])[:2]
        raw["mirrors"][second]["branches"].append(dict(raw["mirrors"][first]["branches"][0]))

    def cycle(raw: dict) -> None:  # a mirror low in the tree feeds one above it: that one is fed twice
        names = list(raw["mirrors"])
        raw["mirrors"][names[-1]]["branches"].append({"to": names[1]})

    def polarity(raw: dict) -> None:
        for spec in raw["mirrors"].values():
            spec["device"] = "qn"

    for change in (second_feed, cycle, polarity):
        plan = plan_with(change)
        assert checks.check_structure(plan)
        assert checks.clean_layout(plan) is None


def _results() -> list[biastree.Audit]:
    from helpers import tree_of

    out = [biastree.check(path) for path in SAMPLES]
    out += [biastree.check(tree_of(random_plan(n, seed=seed))) for n, seed in ((60, 5), (700, 11))]
    return out


def test_bulk_column_texts_equal_the_per_load_texts() -> None:
    """Oracle: each column's per-load ``text`` (the table's former code)."""
    from biastree.output.columns import BULK_TEXT, COLUMNS, texts

    assert set(BULK_TEXT) == {c.key for c in COLUMNS}
    for result in _results():
        n = len(result.tree.loads)
        loads = list(range(n))[::-1] + [0]
        for col in COLUMNS:
            assert texts(result, col, loads) == [col.text(result, i) for i in loads], col.key


def test_format_si_list_equals_format_si() -> None:
    import numpy as np

    from biastree.units import format_si, format_si_list

    rng = np.random.default_rng(1)
    values = (10.0 ** rng.uniform(-20, 14, 4000) * rng.choice([-1, 1], 4000)).tolist()
    values += [0.0, -0.0, float("inf"), float("nan"), 999.96e-6, 999.4999e-3, 1e-18, 1e15, 1e-21]
    for digits in (3, 4):
        assert format_si_list(values, "A", digits) == [format_si(v, "A", digits) for v in values]
        assert format_si_list(values, "", digits) == [format_si(v, "", digits) for v in values]
