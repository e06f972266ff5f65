"""Diagrams and review reports: golden DOT text, rendering with Graphviz, and
the same numbers in every format as in `check --json`."""

from __future__ import annotations

import csv
import io
import json
import os
import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser

import numpy as np
import pytest
from conftest import ROOT, SAMPLES
from helpers import one_stage, tree_of
from typer.testing import CliRunner

import biastree
from biastree.cli import app
from biastree.input.generate import random_plan
from biastree.output.columns import visible
from biastree.output.csv import to_csv
from biastree.output.dot import to_dot
from biastree.output.html import to_html
from biastree.output.markdown import to_markdown

runner = CliRunner()
GOLDEN = ROOT / "tests" / "golden"
PREFIX = {"p": 1e-12, "n": 1e-9, "µ": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3}


def si(text: str) -> float:
    """'9.855 µA' → 9.855e-06 (parses what format_si prints)."""
    m = re.fullmatch(r"(-?[\d.]+(?:e[+-]?\d+)?) ?([pnµmk]?)[AVW]", text.strip())
    assert m, text
    return float(m.group(1)) * PREFIX[m.group(2)]


def json_of(sample) -> dict:  # type: ignore[no-untyped-def]
    return json.loads(runner.invoke(app, ["check", str(sample), "--json"]).stdout)


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_golden_dot(sample) -> None:  # type: ignore[no-untyped-def]
    text = to_dot(biastree.check(sample)).text
    golden = GOLDEN / f"{sample.stem}.dot"
    if os.environ.get("UPDATE_GOLDEN"):
        golden.write_text(text)
    assert text == golden.read_text(), "DOT changed: check it, then UPDATE_GOLDEN=1 pytest"


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_dot_numbers_match_json(sample) -> None:  # type: ignore[no-untyped-def]
    text = to_dot(biastree.check(sample)).text
    data = json_of(sample)
    for load in data["loads"]:
        node = re.search(r'"l:' + re.escape(load["name"]) + r'" \[.*', text)
        assert node, load["name"]
        delivered = re.search(r"delivered ([^<]+)<", node.group(0)).group(1)
        assert si(delivered) == pytest.approx(load["delivered"], rel=5e-4)  # 4 significant digits
        error = re.search(r"error ([+-][\d.]+)%", node.group(0)).group(1)
        assert float(error) / 100 == pytest.approx(load["error"], abs=5e-5)
        assert ("FAIL" in node.group(0)) == (load["verdict"] == "fail")
    for mirror in biastree.load(sample).mirrors:
        assert f'"m:{mirror}"' in text


def _dot_nodes(text: str) -> tuple[set[str], set[str]]:
    loads = set(re.findall(r'^  "l:([^"#]+)(?:#\d+)?" \[', text, re.M))
    mirrors = set(re.findall(r'^  "m:([^"]+)" \[', text, re.M))
    return loads, mirrors


def test_only_failing_keeps_exactly_the_failing_paths() -> None:
    result = biastree.check(ROOT / "samples" / "failing_budgets.yaml")
    loads, mirrors = _dot_nodes(to_dot(result, only_failing=True).text)
    failing = {result.tree.loads[i] for i in range(len(result.tree.loads)) if not result.passed[i]}
    on_paths = {result.tree.mirrors[m] for i in range(len(result.tree.loads)) if not result.passed[i]
                for m in result.tree.path(i)}
    assert loads == failing
    assert mirrors == on_paths
    all_loads, _ = _dot_nodes(to_dot(result).text)
    assert all_loads == set(result.tree.loads)


def test_depth_cut_sums_up_the_rest() -> None:
    result = biastree.check(ROOT / "samples" / "bipolar_small.yaml")
    text = to_dot(result, depth=1).text
    loads, mirrors = _dot_nodes(text)
    assert mirrors == {"m_master"}
    assert '"more:m_master"' in text and "1 mirror(s), 7 load(s) below" in text


def test_expand_draws_each_copy() -> None:
    result = biastree.check(ROOT / "samples" / "bipolar_small.yaml")
    text = to_dot(result, expand=True).text
    assert len(re.findall(r'^  "l:adc_cmp#\d+" \[', text, re.M)) == 4
    assert "adc_cmp [2/4]" in text


def _rows_tall(text: str) -> int:
    """Nodes at the right-hand edge of a left-to-right DOT drawing (its height in nodes):
    the nodes that no edge leaves."""
    nodes = set(re.findall(r'^  "([^"]+)" \[', text, re.M))
    sources = set(re.findall(r'^  (?:"([^"]+)"|reference) -> ', text, re.M))
    return len(nodes - sources)


def test_large_plan_is_fitted_and_says_so() -> None:
    from biastree.output.dot import AUTO_NODE_LIMIT, ROW_LIMIT

    for n in (2000, 6000):
        result = biastree.check(tree_of(random_plan(n, seed=5)))
        diagram = to_dot(result)
        assert diagram.notes and "summary node" in diagram.notes[0]
        assert _rows_tall(diagram.text) <= ROW_LIMIT
        # every load is still counted in the summary nodes of what is drawn and cut
        counted = sum(int(x) for x in re.findall(r'label=<<TABLE[^>]*><TR><TD[^>]*><B><FONT[^>]*>(\d+) loads<', diagram.text))
        counted += sum(int(x) for x in re.findall(r"mirror\(s\), (\d+) load\(s\) below", diagram.text))
        assert counted == n
    full = to_dot(result, fit=False)
    assert full.nodes <= AUTO_NODE_LIMIT + 1000 and "too many to draw" in full.notes[0]
    small = to_dot(biastree.check(tree_of(random_plan(60, seed=5))))
    assert not small.notes  # a small plan is drawn whole


def test_summary_nodes_break_lines() -> None:
    """The summary of a depth cut is two lines in Graphviz (DOT's \\n), not a printed backslash-n."""
    text = to_dot(biastree.check(ROOT / "samples" / "bipolar_small.yaml"), depth=1).text
    line = next(l for l in text.splitlines() if l.startswith('  "more:'))
    assert 'below\\nFAIL' in line or 'below\\nPASS' in line
    assert "\\\\n" not in text


def test_subtree_draws_one_part() -> None:
    result = biastree.check(ROOT / "samples" / "bipolar_small.yaml")
    tree = result.tree
    part = tree.mirrors[1]
    loads, mirrors = _dot_nodes(to_dot(result, subtree=part).text)
    m = tree.mirrors.index(part)
    assert loads == {tree.loads[i] for i in range(len(tree.loads)) if m in tree.path(i)}
    assert part in mirrors and tree.mirrors[0] not in mirrors
    assert f"via {tree.mirrors[0]}" in to_dot(result, subtree=part).text
    with pytest.raises(biastree.BiasTreeError, match="no mirror named"):
        to_dot(result, subtree="nowhere")


def test_one_flat_mirror_of_many_branches_is_capped() -> None:
    """Issue 15 item 7 (there 50,000 branches; 20,000 show the same): a flat mirror must not send every branch to Graphviz."""
    from biastree.output.dot import AUTO_NODE_LIMIT

    plan = one_stage({"kind": "npn", "is": "1e-16A", "beta": 100, "early": "50V"},
                     [{"to": f"l{k}", "ratio": 1} for k in range(20_000)],
                     {f"l{k}": {"current": "1uA", "tolerance": "50%", "voltage": "1V"} for k in range(20_000)},
                     current="1uA", supply="3V")
    result = biastree.check(tree_of(plan), detail=False)
    for fit in (True, False):
        diagram = to_dot(result, fit=fit)
        assert diagram.nodes <= min(AUTO_NODE_LIMIT, 10)
        assert "20000 loads" in diagram.text


def test_annotations() -> None:
    result = biastree.check(ROOT / "samples" / "failing_budgets.yaml")
    assert 'label="1 × 6"' in to_dot(result, annotate="ratio").text
    assert re.search(r'label="-2\d\.\d\d%"', to_dot(result, annotate="error").text)
    with pytest.raises(ValueError):
        to_dot(result, annotate="colour")


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_svg_renders_with_every_load(dot, sample, tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "tree.svg"
    result = runner.invoke(app, ["draw", str(sample), "-o", str(out)])
    assert result.exit_code == 0, result.output
    root = ET.parse(out).getroot()
    text = " ".join(t.text or "" for t in root.iter() if t.tag.endswith("text"))
    for name in biastree.load(sample).loads:
        assert name in text


def test_png_and_pdf_render(dot, tmp_path) -> None:  # type: ignore[no-untyped-def]
    for suffix, magic in ((".png", b"\x89PNG"), (".pdf", b"%PDF")):
        out = tmp_path / f"tree{suffix}"
        assert runner.invoke(app, ["draw", str(SAMPLES[0]), "-o", str(out)]).exit_code == 0
        assert out.read_bytes().startswith(magic)


def test_wide_png_is_refused(dot, tmp_path) -> None:  # type: ignore[no-untyped-def]
    plan = tmp_path / "big.yaml"
    assert runner.invoke(app, ["generate", "800", "-o", str(plan)]).exit_code == 0
    result = runner.invoke(app, ["draw", str(plan), "-o", str(tmp_path / "big.png"), "--full"])
    assert result.exit_code == 2 and "would be unreadable" in result.output
    assert not (tmp_path / "big.png").exists()


def test_missing_dot_is_one_clear_line(tmp_path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setenv("PATH", str(tmp_path))  # no `dot` anywhere
    result = runner.invoke(app, ["draw", str(SAMPLES[0]), "-o", str(tmp_path / "t.svg")])
    assert result.exit_code == 2
    assert result.output.strip().startswith("error: the Graphviz `dot` program is not installed")
    assert runner.invoke(app, ["draw", str(SAMPLES[0]), "-o", str(tmp_path / "t.dot")]).exit_code == 0


class _Collect(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):  # type: ignore[no-untyped-def]
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):  # type: ignore[no-untyped-def]
        self.text.append(data)


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_html_report_is_self_contained(dot, sample, tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "review.html"
    result = runner.invoke(app, ["report", str(sample), "-o", str(out)])
    assert result.exit_code == 0, result.output
    page = out.read_text()
    parser = _Collect()
    parser.feed(page)
    tags = [t for t, _ in parser.tags]
    assert "svg" in tags and "table" in tags
    for tag, attrs in parser.tags:  # nothing is fetched from anywhere
        assert tag not in ("link", "iframe", "img")
        assert not attrs.get("src")
        href = attrs.get("href") or attrs.get("xlink:href") or ""
        assert href == "" or href.startswith("#"), href
    body = " ".join(parser.text)
    for name in biastree.load(sample).loads:
        assert name in body
    assert "sign-off belongs to the foundry" in body
    if biastree.load(sample).plan.conditions.temperatures:  # plots and the ppm/K column
        assert "<figure" in page and '"tempco"' in page


def _page_data(page: str) -> dict:  # type: ignore[type-arg]
    head = '<script type="application/json" id="data">'
    start = page.index(head) + len(head)
    return json.loads(page[start: page.index("</script>", start)])


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_report_numbers_match_json(sample) -> None:  # type: ignore[no-untyped-def]
    result = biastree.check(sample)
    data = {l["name"]: l for l in json_of(sample)["loads"]}
    # CSV: the very same floats
    for row in csv.DictReader(io.StringIO(to_csv(result))):
        load = data[row["load"]]
        assert float(row["delivered_A"]) == load["delivered"]
        assert float(row["error"]) == load["error"]
        if row["error_range_low"]:
            assert [float(row["error_range_low"]), float(row["error_range_high"])] == sorted(load["error_range"])
        assert float(row["margin"]) == load["margin"]
        conditions = load["conditions"]["compliance_margin"] if load["conditions"] else load["compliance_margin"]
        assert float(row["compliance_V"]) == min(load["compliance_margin"], conditions)
        assert row["verdict"] == load["verdict"]
    # HTML: the page's embedded data carries the exact numbers
    page = _page_data(to_html(result))["loads"]
    for k, name in enumerate(page["name"]):
        assert page["delivered"][k] == data[name]["delivered"]
        assert page["error"][k] == data[name]["error"]
        assert page["margin"][k] == data[name]["margin"]
        assert ("pass" if page["pass"][k] else "fail") == data[name]["verdict"]
    # Markdown: the shared columns, delivered printed to 4 significant digits
    titles = [c.title for c in visible(result)]
    seen = 0
    for line in to_markdown(result).splitlines():
        cells = [c.strip() for c in line.strip("|").split("|")]
        if cells and cells[0] in data and len(cells) == len(titles):
            assert si(cells[titles.index("delivered")]) == pytest.approx(data[cells[0]]["delivered"], rel=5e-4)
            assert ("FAIL" in cells[-1]) == (data[cells[0]]["verdict"] == "fail")
            seen += 1
    assert seen == len(data)
    assert len(page["name"]) == len(data)


def test_markdown_and_csv_cli(tmp_path) -> None:  # type: ignore[no-untyped-def]
    md, table = tmp_path / "r.md", tmp_path / "loads.csv"
    result = runner.invoke(app, ["report", str(ROOT / "samples" / "failing_budgets.yaml"), "-o", str(md), "--csv", str(table)])
    assert result.exit_code == 0, result.output
    text = md.read_text()
    assert "## Why loads fail" in text and "### hot_node" in text and "β loading" in text
    assert len(table.read_text().splitlines()) == 1 + 5


@pytest.mark.graphviz
def test_markdown_report_carries_diagram_plots_and_diff(tmp_path, dot) -> None:  # type: ignore[no-untyped-def]
    """The Markdown review holds what the HTML one does: the tree diagram and the condition plots
    as SVG files beside it (linked), and with --against the plan's changes and the loads they moved."""
    md = tmp_path / "r.md"
    result = runner.invoke(app, ["report", str(ROOT / "samples" / "die_spread.yaml"), "-o", str(md),
                                 "--against", str(ROOT / "samples" / "cmos_soc.yaml")])
    assert result.exit_code == 0, result.output
    text = md.read_text()
    links = re.findall(r"!\[[^]]*\]\((r_figures/[^)]+\.svg)\)", text)
    assert links and links[0] == "r_figures/tree.svg" and len(links) == 3  # tree, temperature, supply
    for link in links:
        ET.fromstring((tmp_path / link).read_text())  # each is a whole SVG document
    assert "## What changed" in text and "newly failing" in text and "| what | key | old | new |" in text


# --- diff ------------------------------------------------------------------


def _edited(tmp_path, sample: str, *edits: tuple[str, str]):  # type: ignore[no-untyped-def]
    text = (ROOT / "samples" / sample).read_text()
    for old, new in edits:
        assert old in text, old
        text = text.replace(old, new)
    path = tmp_path / f"new_{sample}"
    path.write_text(text)
    return path


def test_diff_of_a_plan_with_itself_is_empty() -> None:
    sample = ROOT / "samples" / "bipolar_small.yaml"
    result = runner.invoke(app, ["diff", str(sample), str(sample)])
    assert result.exit_code == 0, result.output
    assert "0 change(s)" in result.output and "10 load(s): 0 changed, 10 the same" in result.output


def test_diff_names_each_change_and_every_load_matches_check(tmp_path) -> None:  # type: ignore[no-untyped-def]
    old = ROOT / "samples" / "bipolar_small.yaml"
    new = _edited(tmp_path, "bipolar_small.yaml", ("beta: 200", "beta: 40"),
                  ("{to: adc_ref, ratio: 1}", "{to: adc_ref, ratio: 1.1}"),
                  ("  osc_bias:", "  osc_spare: {current: 5uA, tolerance: 10%, voltage: 2V}\n  osc_bias:"),
                  ("{to: osc_bias, ratio: 0.25}", "{to: osc_bias, ratio: 0.25}\n      - {to: osc_spare, ratio: 0.25}"))
    result = runner.invoke(app, ["diff", str(old), str(new), "--json"])
    assert result.exit_code == 1, result.output  # loads that passed now fail
    data = json.loads(result.stdout)
    paths = {c["path"]: c for c in data["changes"]}
    assert paths["devices.qn.beta"]["old"] == 200 and paths["devices.qn.beta"]["new"] == 40
    assert paths["mirrors.m_adc.branches[0].ratio"]["new"] == 1.1
    assert paths["loads.osc_spare"]["kind"] == "added"
    before, after = json_of(old), json_of(new)
    a = {l["name"]: l for l in before["loads"]}
    b = {l["name"]: l for l in after["loads"]}
    rows = {r["name"]: r for r in data["loads"]}
    assert set(rows) == set(a) | set(b)
    assert rows["osc_spare"]["status"] == "added" and rows["osc_spare"]["old"] is None
    for name in a:
        for key in ("delivered", "error", "margin", "verdict"):
            assert rows[name]["old"][key] == a[name][key]
            assert rows[name]["new"][key] == b[name][key]
    assert set(data["regressions"]) == {n for n in b if b[n]["verdict"] == "fail" and a.get(n, {}).get("verdict") != "fail"}
    table = runner.invoke(app, ["diff", str(old), str(new)]).output
    assert "changed  devices.qn.beta: 200 → 40" in table and "pass → fail" in table


def test_report_against_an_older_plan(dot, tmp_path) -> None:  # type: ignore[no-untyped-def]
    old = ROOT / "samples" / "failing_budgets.yaml"
    new = _edited(tmp_path, "failing_budgets.yaml", ("tolerance: 2%", "tolerance: 4%"))
    out = tmp_path / "r.html"
    result = runner.invoke(app, ["report", str(new), "-o", str(out), "--against", str(old)])
    assert result.exit_code == 0, result.output
    page = out.read_text()
    assert 'id="diff"' in page and "tolerance" in page and "fine_trim" in page.split('id="diff"')[1]


# --- plots and temperature coefficients --------------------------------------------


def test_sweep_and_spread_plots(tmp_path) -> None:  # type: ignore[no-untyped-def]
    sample = ROOT / "samples" / "die_spread.yaml"
    svg = tmp_path / "sweep.svg"
    result = runner.invoke(app, ["sweep", str(sample), "--temperature", "-40C:125C:55C", "--plot", str(svg),
                                 "--load", "amp_far", "-o", str(tmp_path / "t.txt")])
    assert result.exit_code in (0, 1), result.output  # 1: a load fails somewhere in the sweep (a verdict)
    root = ET.parse(svg).getroot()
    text = " ".join(t.text or "" for t in root.iter() if t.tag.endswith("text"))
    assert "amp_far" in text and "temperature (°C)" in text and "budget" in text
    bad = runner.invoke(app, ["sweep", str(sample), "--temperature", "0C:50C:25C", "--plot", str(svg), "--load", "nope"])
    assert bad.exit_code == 2 and "no load named 'nope'" in bad.output
    hist = tmp_path / "spread.svg"
    result = runner.invoke(app, ["spread", str(sample), "--samples", "300", "--plot", str(hist), "-o", str(tmp_path / "s.txt")])
    assert result.exit_code in (0, 1), result.output  # 1: a yield below the required yield (a verdict)
    text = " ".join(t.text or "" for t in ET.parse(hist).getroot().iter() if t.tag.endswith("text"))
    assert "300 samples" in text and "inside" in text


def test_tempco_is_the_end_point_slope() -> None:
    """ppm/K = ΔI / (Ī·ΔT) between the coldest and hottest solved temperature (definition of an
    average temperature coefficient, e.g. Razavi, Design of Analog CMOS ICs, 2nd ed., §12.1, from memory)."""
    from biastree.analysis.corners import evaluate, sweep_columns
    from biastree.output.breakdown import tempco_ppm

    tree = biastree.load(ROOT / "samples" / "cmos_soc.yaml")
    cond = evaluate(tree, sweep_columns(tree, [233.15, 300.15, 398.15]))
    tc = tempco_ppm(cond)
    i_lo, i_hi = cond.op.l_current[:, 0], cond.op.l_current[:, 2]
    assert tc == pytest.approx((i_hi - i_lo) / ((i_hi + i_lo) / 2 * 165.0) * 1e6)
    assert tempco_ppm(evaluate(tree, sweep_columns(tree, [300.0]))) is None


def test_tempco_column_in_every_table() -> None:
    """The ppm/K column (end-point slope, as in test_tempco_is_the_end_point_slope) is one of the
    shared columns: terminal, CSV and Markdown carry the same value for a plan with temperatures."""
    from biastree.output.columns import BY_KEY
    from biastree.output.csv import to_csv
    from biastree.output.table import to_table

    result = biastree.check(ROOT / "samples" / "die_spread.yaml")
    tc = result.conditions.tempco_ppm
    assert tc is not None and np.all(np.isfinite(tc))
    assert "ppm/K" in to_table(result).splitlines()[0]
    rows = list(csv.DictReader(io.StringIO(to_csv(result))))
    assert [float(r["tempco"]) for r in rows] == [float(x) for x in tc]
    assert BY_KEY["tempco"].text(result, 0) == f"{tc[0]:+.4g}"
    plain = biastree.check(ROOT / "samples" / "bipolar_small.yaml")  # no temperatures: no column
    assert "ppm/K" not in to_table(plain).splitlines()[0]


def test_diagram_node_explains_the_deciding_case() -> None:
    """A failing load's node quotes the case that decides it (issue: the nominal terms were shown
    while the load failed in a corner): its error, kσ and reference terms, where, and the largest
    term there with its value — the same numbers as Audit.deciding (the oracle is the audit's own
    exact split, checked against brute force in test_verdicts.py)."""
    result = biastree.check(ROOT / "samples" / "die_spread.yaml")
    i = result.tree.loads.index("amp_far")
    d = result.deciding(i)
    assert d["condition"] is not None  # with conditions, a corner decides this load
    text = to_dot(result).text
    node = next(line for line in text.splitlines() if line.lstrip().startswith('"l:amp_far" ['))
    assert f"at {result.deciding_text(i, d)}" in node
    assert f"= {d['used'] * 100:.3g}%" in node
    stage, label, value = result.largest_term(i)
    assert f"{label} at {stage} {value * 100:+.2f}%" in node


def test_diff_shows_values_in_their_units(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Plan values are SI inside; the diff shows them as the plan file writes them (10% not 0.1)."""
    text = (ROOT / "samples" / "bipolar_small.yaml").read_text()
    old, new = tmp_path / "old.yaml", tmp_path / "new.yaml"
    old.write_text(text)
    new.write_text(text.replace("cmp_tail: {current: 10uA, tolerance: 10%", "cmp_tail: {current: 10uA, tolerance: 4%")
                   .replace("reference: {current: 20uA", "reference: {current: 25uA"))
    out = runner.invoke(app, ["diff", str(old), str(new)]).output
    assert "loads.cmp_tail.tolerance: 10% → 4%" in out
    assert "reference.current: 20 µA → 25 µA" in out


def test_device_table_shows_parameters_in_designer_units() -> None:
    """The reports' device table writes each parameter with its SI prefix and unit
    (the plan's own units), and leaves out entries the plan did not give."""
    from biastree.output.breakdown import device_parameters

    plan = biastree.load(ROOT / "samples" / "die_spread.yaml").plan
    mn = device_parameters(plan.devices["mn"])
    assert "kp=200 µA/V²" in mn and "w=20 µm" in mn and "l=5 µm" in mn
    assert "vth_tc=-1 mV/K" in mn and "a_vt_pair=5 mV·µm" in mn and "a_beta_pair=1 %·µm" in mn
    qn = device_parameters(plan.devices["qn"])
    assert "is=10 aA" in qn and "early=80 V" in qn and "area=40 µm²" in qn
    assert "e-" not in mn + qn  # no raw exponent left
