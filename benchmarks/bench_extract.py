"""Time `extract` on netlists biastree writes from generated plans (invented data).

    python benchmarks/bench_extract.py            # 100, 1k, 10k loads
    python benchmarks/bench_extract.py 5000       # one size

Each size: a random plan (biastree.generate) → its ngspice netlist → read and
flatten, recognise and build the plan, write the YAML; best of --repeat runs
(time.perf_counter).  The extracted plan is loaded back to show it is valid.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import biastree
from biastree.input.generate import random_plan, to_text
from biastree.input.netlist.annotate import Annotations, Defaults
from biastree.input.netlist.extract import extract
from biastree.input.netlist.flatten import read_netlist
from biastree.input.netlist.to_plan import to_plan_yaml
from biastree.output.spice import to_spice


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("sizes", nargs="*", type=int, default=[100, 1_000, 10_000])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    notes = Annotations(defaults=Defaults(tolerance=0.05))
    print(f"{'loads':>7} {'devices':>8} {'flatten':>9} {'recognise+plan':>15} {'write':>7} {'total':>7}")
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            tree = biastree.loads(to_text(random_plan(n, seed=1), "yaml"), "generated")
            path = Path(tmp) / f"g{n}.cir"
            path.write_text(to_spice(tree, "nominal").text, encoding="utf-8")
            best = [float("inf")] * 3
            for _ in range(args.repeat):
                t0 = time.perf_counter()
                flat = read_netlist(path)
                t1 = time.perf_counter()
                ext = extract(flat, notes)
                t2 = time.perf_counter()
                text = to_plan_yaml(ext)
                t3 = time.perf_counter()
                best = [min(b, t) for b, t in zip(best, (t1 - t0, t2 - t1, t3 - t2))]
            back = biastree.loads(text, "extracted")
            assert len(back.loads) == len(tree.loads)
            print(f"{len(tree.loads):>7} {len(flat.devices):>8} {best[0]:>8.3f}s {best[1]:>14.3f}s "
                  f"{best[2]:>6.3f}s {sum(best):>6.3f}s")


if __name__ == "__main__":
    main()
