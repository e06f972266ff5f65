"""The HTML review report in a real browser (headless Chromium driven by
selenium): what a reviewer would see and do, on the samples and on a
generated 2,000-load plan.  One browser session for the whole module."""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import pytest
from conftest import SAMPLES
from helpers import tree_of

import biastree
from biastree.input.generate import random_plan
from biastree.output.breakdown import breakdown
from biastree.output.html import to_html

pytestmark = pytest.mark.browser

FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run")
BIG = "random2000"


@pytest.fixture(scope="module")
def reports(tmp_path_factory) -> dict[str, tuple[Path, biastree.Audit]]:  # type: ignore[no-untyped-def]
    """Report pages of the samples and of a 2,000-load plan (built once)."""
    folder = tmp_path_factory.mktemp("reports")
    out = {}
    for sample in SAMPLES:
        result = biastree.check(sample)
        path = folder / f"{sample.stem}.html"
        path.write_text(to_html(result, None, str(sample)), encoding="utf-8")
        out[sample.stem] = (path, result)
    result = biastree.check(tree_of(random_plan(2000, seed=1)))
    path = folder / f"{BIG}.html"
    path.write_text(to_html(result), encoding="utf-8")
    out[BIG] = (path, result)
    return out


@pytest.fixture(scope="module")
def browser(chromium):  # type: ignore[no-untyped-def]
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = chromium
    for flag in FLAGS:
        options.add_argument(flag)
    options.add_argument("--window-size=1400,900")
    profile = tempfile.TemporaryDirectory(prefix="biastree-chromium-")
    options.add_argument(f"--user-data-dir={profile.name}")
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    import shutil

    driver = webdriver.Chrome(service=Service(shutil.which("chromedriver")), options=options)
    driver.set_page_load_timeout(60)
    yield driver
    driver.quit()
    profile.cleanup()


def open_page(browser, path: Path) -> None:  # type: ignore[no-untyped-def]
    browser.get(path.as_uri())
    assert browser.execute_script("return document.body.dataset.ready") == "1"


def errors(browser) -> list[str]:  # type: ignore[no-untyped-def]
    return [e["message"] for e in browser.get_log("browser") if e["level"] == "SEVERE"]


def shown_loads(browser) -> list[str]:  # type: ignore[no-untyped-def]
    """Names in every page of the load table (by stepping its pager, as a reader would)."""
    names = []
    script = "return Array.from(document.querySelectorAll('#load-table tbody tr')).map(r => r.cells[0].textContent)"
    while True:
        names += browser.execute_script(script)
        nxt = browser.find_elements("css selector", "#load-table [data-page=next]")
        if not nxt or not nxt[0].is_enabled():
            return names
        nxt[0].click()


def set_rows(browser, n: int) -> None:  # type: ignore[no-untyped-def]
    from selenium.webdriver.support.ui import Select

    pick = browser.find_elements("css selector", "#load-table .pager select")
    if pick:
        Select(pick[0]).select_by_visible_text(str(n))


CASES = [s.stem for s in SAMPLES] + [BIG]


@pytest.mark.parametrize("name", CASES)
def test_summary_is_visible_without_scrolling(browser, reports, name) -> None:  # type: ignore[no-untyped-def]
    path, result = reports[name]
    open_page(browser, path)
    verdict = browser.find_element("css selector", "#summary .verdict")
    assert verdict.is_displayed()
    bottom = browser.execute_script("return arguments[0].getBoundingClientRect().bottom", verdict)
    assert bottom < browser.execute_script("return window.innerHeight")
    s = result.summary()
    assert (f"{s['failed']} of {s['loads']}" if s["failed"] else "PASS") in verdict.text
    # the worst load is the first row of the worst-loads table, also on the first screen
    first = browser.find_element("css selector", "#worst-table tbody tr")
    worst = min(range(len(result.tree.loads)), key=lambda i: (bool(result.passed[i]), result.margin[i]))
    assert first.text.split()[0] == result.tree.loads[worst]
    assert errors(browser) == []


@pytest.mark.parametrize("name", ["bipolar_small", BIG])
def test_search_shows_the_load(browser, reports, name) -> None:  # type: ignore[no-untyped-def]
    path, result = reports[name]
    open_page(browser, path)
    target = result.tree.loads[len(result.tree.loads) // 2]
    box = browser.find_element("id", "search")
    box.send_keys(target)
    names = shown_loads(browser)
    assert target in names
    assert all(target in n or target in result.tree.mirrors[int(result.tree.b_parent[result.tree.l_branch[
        result.tree.loads.index(n)]])] for n in names)
    assert browser.find_element("id", "count").text.startswith(f"showing {len(names)} of")
    assert errors(browser) == []


@pytest.mark.parametrize("name", CASES)
def test_filter_to_failing_shows_exactly_the_failing_loads(browser, reports, name) -> None:  # type: ignore[no-untyped-def]
    from selenium.webdriver.support.ui import Select

    path, result = reports[name]
    open_page(browser, path)
    Select(browser.find_element("id", "verdict")).select_by_value("fail")
    set_rows(browser, 500)
    names = shown_loads(browser)
    failing = [result.tree.loads[i] for i in range(len(result.tree.loads)) if not result.passed[i]]
    assert len(names) == len(set(names))
    assert set(names) == set(failing)
    assert errors(browser) == []


_CLICK_ALL = """
// Click every FAIL link of the (failing-only) load table, page by page, and
// report the loads whose click did not show their explanation.
var bad = [], seen = 0;
function page() {
  document.querySelectorAll('#load-table a[data-why]').forEach(function (a) {
    var name = a.closest('tr').cells[0].textContent, box = document.getElementById('why');
    a.click(); seen += 1;
    if (box.hidden || box.dataset.load !== name || box.textContent.indexOf(name + ' fails') < 0 ||
        !box.querySelector('li')) bad.push(name);
  });
}
page();
var next = document.querySelector('#load-table [data-page=next]');
while (next && !next.disabled) { next.click(); page(); next = document.querySelector('#load-table [data-page=next]'); }
return [seen, bad];
"""


@pytest.mark.parametrize("name", CASES)
def test_every_fail_link_leads_to_an_explanation(browser, reports, name) -> None:  # type: ignore[no-untyped-def]
    from selenium.webdriver.support.ui import Select

    path, result = reports[name]
    open_page(browser, path)
    n_fail = int((~result.passed).sum())
    Select(browser.find_element("id", "verdict")).select_by_value("fail")
    set_rows(browser, 500)
    seen, bad = browser.execute_script(_CLICK_ALL)
    assert (seen, bad) == (n_fail, [])
    if n_fail:  # one real click, then the explanation's numbers against the audit's
        Select(browser.find_element("id", "verdict")).select_by_value("fail")
        link = browser.find_element("css selector", "#load-table a[data-why]")
        i = int(link.get_attribute("data-why"))
        browser.execute_script("arguments[0].scrollIntoView({block: 'center'})", link)
        link.click()
        box = browser.find_element("id", "why")
        assert box.is_displayed()
        rows = box.find_elements("css selector", "table.terms tr")
        terms = breakdown(result, i)
        assert len(rows) == len(terms)
        for row, (stage, label, value) in zip(rows, terms):
            cells = [c.text for c in row.find_elements("tag name", "td")]
            assert cells[0] == stage and cells[1] == label
            assert float(cells[2].rstrip("%")) == pytest.approx(value * 100, abs=6e-4)
        for reason in result.reasons(i):
            assert reason in box.text
    assert errors(browser) == []


def _column(browser, table: str = "load-table") -> list[int]:  # type: ignore[no-untyped-def]
    return [int(x) for x in browser.execute_script(
        f"return Array.from(document.querySelectorAll('#{table} tbody tr')).map(r => r.dataset.row)")]


@pytest.mark.parametrize("name", ["cmos_soc", BIG])
def test_sorting_a_column_orders_it(browser, reports, name) -> None:  # type: ignore[no-untyped-def]
    path, result = reports[name]
    open_page(browser, path)
    heads = browser.find_elements("css selector", "#load-table th")
    by_head = {h.text.strip(" ↕▲▼"): h for h in heads}
    by_head["delivered"].click()
    rows = _column(browser)
    values = [float(result.delivered[i, 1]) for i in rows]
    assert values == sorted(values) and len(rows) == min(50, len(result.tree.loads))
    assert rows[0] == int(result.delivered[:, 1].argmin())
    by_head["delivered"].click()
    values = [float(result.delivered[i, 1]) for i in _column(browser)]
    assert values == sorted(values, reverse=True)
    by_head["load"].click()
    names = [result.tree.loads[i] for i in _column(browser)]
    assert names == sorted(result.tree.loads)[: len(names)]
    assert errors(browser) == []


def test_subtree_and_outline(browser, reports) -> None:  # type: ignore[no-untyped-def]
    path, result = reports[BIG]
    open_page(browser, path)
    tree = result.tree
    before = len(browser.find_elements("css selector", "#outline li"))
    browser.find_element("id", "expand").click()
    after = len(browser.find_elements("css selector", "#outline li"))
    assert after > before
    # click the first child mirror of the root in the outline: only its subtree's loads remain
    link = browser.find_elements("css selector", "#outline ul ul > li > a[data-sub]")[0]
    m = int(link.get_attribute("data-sub"))
    browser.execute_script("arguments[0].scrollIntoView({block: 'center'})", link)
    link.click()
    set_rows(browser, 500)
    names = set(shown_loads(browser))
    under = {tree.loads[i] for i in range(len(tree.loads)) if m in tree.path(i)}
    assert names == under and names
    assert errors(browser) == []


def test_condition_filter_and_tempco(browser, reports) -> None:  # type: ignore[no-untyped-def]
    from selenium.webdriver.support.ui import Select

    path, result = reports["die_spread"]
    if result.conditions is None:
        path, result = next((p, r) for p, r in reports.values() if r.conditions is not None)
    open_page(browser, path)
    pick = Select(browser.find_element("id", "condition"))
    value = pick.options[1].get_attribute("value")
    pick.select_by_value(value)
    names = set(shown_loads(browser))
    k = int(value)
    want = {result.tree.loads[i] for i in range(len(result.tree.loads)) if int(result.conditions.worst_index[i]) == k}
    assert names == want and names
    assert errors(browser) == []


def test_page_data_is_the_json_result(reports) -> None:
    """The numbers the page shows come from the same floats as check --json."""
    path, result = reports["failing_budgets"]
    page = path.read_text(encoding="utf-8")
    start = page.index('<script type="application/json" id="data">') + len('<script type="application/json" id="data">')
    data = json.loads(page[start: page.index("</script>", start)])
    full = result.to_dict()
    for k, load in enumerate(full["loads"]):
        assert data["loads"]["name"][k] == load["name"]
        assert data["loads"]["delivered"][k] == load["delivered"]
        assert data["loads"]["margin"][k] == load["margin"]
        assert bool(data["loads"]["pass"][k]) == (load["verdict"] == "pass")
    assert set(data["explain"]) == {str(k) for k, load in enumerate(full["loads"]) if load["verdict"] == "fail"}


def test_screenshots(browser, reports, tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Screenshots of the first screen (kept under BIASTREE_SHOTS when set, for a person to look at)."""
    import os

    folder = Path(os.environ.get("BIASTREE_SHOTS", tmp_path))
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("failing_budgets", BIG):
        open_page(browser, reports[name][0])
        shot = folder / f"{name}.png"
        assert browser.save_screenshot(str(shot))
        assert shot.read_bytes().startswith(b"\x89PNG")
    assert errors(browser) == []




@pytest.mark.parametrize("name", ["bipolar_small", "planned_sensor_hub"])
def test_fitted_diagram_fills_its_box(browser, tmp_path, name) -> None:  # type: ignore[no-untyped-def]
    """The fitted drawing starts at the top of its box and leaves no blank band below it (open or folded at first)."""
    from biastree.output.dot import to_dot
    from biastree.output.render import render, svg_body

    sample = next(s for s in SAMPLES if s.stem == name)
    result = biastree.check(sample)
    picture = to_dot(result)
    path = tmp_path / f"{name}.html"
    path.write_text(to_html(result, svg_body(render(picture.text, "svg", picture.nodes)), str(sample)), "utf-8")
    size = browser.get_window_size()
    browser.set_window_size(1400, 2000)  # a tall window: the box must shrink to the drawing, not leave a band
    try:
        open_page(browser, path)
        browser.execute_script("document.getElementById('diagram-box').open = true")
        box, drawn = browser.execute_script(
            "var b = document.getElementById('diagram'), g = b.querySelector('svg g');"
            "var r = b.getBoundingClientRect(), d = g.getBoundingClientRect();"
            "return [[r.top, r.bottom, r.height], [d.top, d.bottom, d.height]];")
    finally:
        browser.set_window_size(size["width"], size["height"])
    assert drawn[2] > 100
    assert drawn[0] - box[0] < 20  # no blank band above the drawing
    # the drawing fills the box's height, or the box is as tall as 75 % of the window allows
    assert box[1] - drawn[1] < 20 or box[2] >= 0.74 * browser.execute_script("return window.innerHeight")
    assert errors(browser) == []
