"""Computed hints against the audit they explain: generated plans of 1k, 10k
and 100k loads (invented data, ``biastree.input.generate``), the audit
(``check_tree``: solve, error terms, output resistances, verdicts) and the
hints for every failing load, timed back to back in one process.

    python benchmarks/bench_hints.py                      # 1k, 10k, 100k loads, simple mirrors
    python benchmarks/bench_hints.py 10000 --topologies all --conditions --mismatch

Times are CPU seconds of this process (numpy runs single-threaded here, so on
a quiet machine they are the wall time) and wall seconds, best of --repeat;
the garbage collector is paused as ``biastree check`` pauses it.
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import time

import biastree
from biastree.analysis.advise import hints
from biastree.analysis.pipeline import check_tree
from biastree.input.generate import Ranges, random_plan
from biastree.physics.topologies import TOPOLOGIES


def timed(fn, repeat: int):  # type: ignore[no-untyped-def]
    best = None
    for _ in range(repeat):
        c, w = time.process_time(), time.perf_counter()
        out = fn()
        cpu, wall = time.process_time() - c, time.perf_counter() - w
        best = (cpu, wall, out) if best is None or cpu < best[0] else best
    return best


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("sizes", nargs="*", type=int, default=[1_000, 10_000, 100_000])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--topologies", default="simple", help="comma-separated, or 'all'")
    parser.add_argument("--conditions", action="store_true", help="add 3 temperatures × 2 supplies × 1 corner")
    parser.add_argument("--mismatch", action="store_true", help="add matching coefficients to every device")
    args = parser.parse_args()
    names = tuple(TOPOLOGIES) if args.topologies == "all" else tuple(args.topologies.split(","))
    print(f"topologies {', '.join(names)}; conditions {'yes' if args.conditions else 'no'}; "
          f"mismatch {'yes' if args.mismatch else 'no'}; load average {os.getloadavg()[0]:.1f}")
    print(f"{'loads':>8} {'mirrors':>8} {'failing':>8} {'hinted':>8} {'audit CPU':>10} {'wall':>7} "
          f"{'hints CPU':>10} {'wall':>7} {'hints/audit':>12}")
    gc.disable()
    for n in args.sizes:
        plan = random_plan(n, seed=n, ranges=Ranges(topologies=names))
        if args.conditions:
            plan["conditions"] = {"temperatures": ["-40C", "27C", "125C"], "supplies": ["3.0V", "3.6V"],
                                  "corners": {"weak": {"beta": "-20%", "vth": "30mV"}}}
        if args.mismatch:
            d = plan["devices"]
            d["qn"].update(area="40um^2", a_is_pair="1%*um")
            d["qp"].update(area="60um^2", a_is_pair="1.5%*um")
            for k in ("mn", "mp"):
                d[k].update(a_vt_pair="5mV*um", a_beta_pair="1%*um")
        tree = biastree.loads(json.dumps(plan), f"generated {n}", "json")
        a_cpu, a_wall, result = timed(lambda: check_tree(tree), args.repeat)  # noqa: B023
        h_cpu, h_wall, got = timed(lambda: hints(result), args.repeat)  # noqa: B023
        failing = int((~result.passed).sum())
        print(f"{n:>8} {len(tree.mirrors):>8} {failing:>8} {len(got):>8} {a_cpu:>9.2f}s {a_wall:>6.2f}s "
              f"{h_cpu:>9.2f}s {h_wall:>6.2f}s {h_cpu / a_cpu:>11.2f}×", flush=True)
        gc.collect()
    print(f"({os.cpu_count()} cores; best of {args.repeat} by CPU time; load average now {os.getloadavg()[0]:.1f})")


if __name__ == "__main__":
    main()
