"""Size of the HTML review report and its load time in headless Chromium.

    python benchmarks/bench_report.py [N ...]      (default: 2000 10000)

Generated plans (invented data, biastree.input.generate).  For each size it
prints the time to build the page, its size, the time until the page's
script has built the tables (selenium ``get`` returns after the load event;
the page sets ``data-ready`` at the end of its script), and the time to
filter to the failing loads.  Needs /usr/bin/chromium and chromedriver.
Numbers, not an assertion: this shared machine's timings vary.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

import biastree
from biastree.input.generate import random_plan, to_text
from biastree.output.dot import to_dot
from biastree.output.html import to_html
from biastree.output.plots import report_plots
from biastree.output.render import render, svg_body

FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--window-size=1400,900")


def browser(profile: str):  # type: ignore[no-untyped-def]
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = shutil.which("chromium") or "/usr/bin/chromium"
    for flag in FLAGS:
        options.add_argument(flag)
    options.add_argument(f"--user-data-dir={profile}")
    return webdriver.Chrome(service=Service(shutil.which("chromedriver")), options=options)


def main() -> None:
    sizes = [int(a) for a in sys.argv[1:]] or [2000, 10000]
    with tempfile.TemporaryDirectory() as tmp:
        driver = browser(str(Path(tmp) / "profile"))
        try:
            for n in sizes:
                plan = Path(tmp) / f"plan{n}.yaml"
                plan.write_text(to_text(random_plan(n, seed=n)))
                result = biastree.check(plan)
                t0 = time.perf_counter()
                picture = to_dot(result)
                svg = svg_body(render(picture.text, "svg", picture.nodes))
                t1 = time.perf_counter()
                page = to_html(result, svg, str(plan), plots=report_plots(result))
                t2 = time.perf_counter()
                out = Path(tmp) / f"review{n}.html"
                out.write_text(page, encoding="utf-8")
                best = []
                for _ in range(3):
                    t = time.perf_counter()
                    driver.get(out.as_uri())
                    assert driver.execute_script("return document.body.dataset.ready") == "1"
                    best.append(time.perf_counter() - t)
                t = time.perf_counter()
                driver.execute_script("var s = document.getElementById('verdict'); s.value = 'fail';"
                                      "s.dispatchEvent(new Event('change'));")
                shown = driver.execute_script("return document.getElementById('count').textContent")
                t_filter = time.perf_counter() - t
                failing = int((~result.passed).sum())
                print(f"{n:>7} loads, {len(result.tree.mirrors)} mirrors, {failing} failing: diagram {t1 - t0:.2f} s "
                      f"({picture.nodes} nodes), page built in {t2 - t1:.2f} s, {len(page.encode()) / 1e6:.1f} MB; "
                      f"opens in {min(best):.2f} s (best of 3); filter to failing {t_filter:.2f} s ({shown})")
        finally:
            driver.quit()


if __name__ == "__main__":
    main()
