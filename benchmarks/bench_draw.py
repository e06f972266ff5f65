"""Time the diagram and the report on a generated plan (default 2,000 loads).

    python benchmarks/bench_draw.py [N]

Needs the Graphviz `dot` program.  Invented data (biastree.generate).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import biastree
from biastree.input.generate import random_plan, to_text
from biastree.output.dot import to_dot
from biastree.output.html import to_html
from biastree.output.render import render, svg_body


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 2000
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "plan.yaml"
        path.write_text(to_text(random_plan(n, seed=n)))
        result = biastree.check(path)
        t0 = time.perf_counter()
        diagram = to_dot(result)
        t1 = time.perf_counter()
        svg = render(diagram.text, "svg", diagram.nodes)
        t2 = time.perf_counter()
        page = to_html(result, svg_body(svg), str(path))
        t3 = time.perf_counter()
    print(f"{n} loads, {len(result.tree.mirrors)} mirrors: {diagram.nodes} nodes drawn"
          + (f" ({diagram.notes[0]})" if diagram.notes else ""))
    print(f"DOT text {t1 - t0:.3f} s, dot -Tsvg {t2 - t1:.3f} s ({len(svg) / 1e6:.1f} MB), "
          f"HTML report {t3 - t2:.3f} s ({len(page) / 1e6:.1f} MB)")


if __name__ == "__main__":
    main()
