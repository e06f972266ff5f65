"""Time `check` on generated plans: load+validate, build, solve, audit, table.

    python benchmarks/bench_check.py            # 1k, 10k, 100k loads
    python benchmarks/bench_check.py 5000       # one size

Plans are random and invented (biastree.generate); each phase is timed on
its own with time.perf_counter, best of --repeat runs.  "load" is read +
parse + validate + build; "(build)" is the tree build alone (inside load);
"CLI wall" is one `python -m biastree check PLAN` run, interpreter start-up
and table printing included.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import biastree
from biastree.input.generate import random_plan, to_text
from biastree.input.loader import load_document, validate
from biastree.output.table import to_table


def best(fn, repeat: int):  # type: ignore[no-untyped-def]
    times, value = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        value = fn()
        times.append(time.perf_counter() - start)
    return min(times), value


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("sizes", nargs="*", type=int, default=[1_000, 10_000, 100_000])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--format", choices=["yaml", "json"], default="yaml")
    args = parser.parse_args()
    print(f"{'loads':>8} {'mirrors':>8} {'load':>8} {'(build)':>8} {'solve':>8} {'audit':>8} {'table':>8} {'total':>8} {'CLI wall':>9}")
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            path = Path(tmp) / f"plan{n}.{args.format}"
            path.write_text(to_text(random_plan(n, seed=n), args.format))
            # load = read + parse + validate + build (what biastree.load does)
            t_load, tree = best(lambda: biastree.load(path), args.repeat)
            plan = validate(load_document(path))
            t_build, _ = best(lambda: biastree.build(plan), args.repeat)
            t_solve, op = best(lambda: biastree.solve(tree), args.repeat)
            t_audit, result = best(lambda: biastree.audit(op), args.repeat)
            t_table, _ = best(lambda: to_table(result), args.repeat)
            total = t_load + t_solve + t_audit + t_table
            t_cli, _ = best(lambda: subprocess.run([sys.executable, "-m", "biastree", "check", str(path)],
                                                   stdout=subprocess.DEVNULL, check=False), 1)
            print(f"{n:>8} {len(tree.mirrors):>8} {t_load:>7.3f}s {t_build:>7.3f}s {t_solve:>7.3f}s "
                  f"{t_audit:>7.3f}s {t_table:>7.3f}s {total:>7.3f}s {t_cli:>8.3f}s")
    print(f"({os.cpu_count()} cores; best of {args.repeat})")


if __name__ == "__main__":
    main()
