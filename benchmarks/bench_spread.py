"""Monte Carlo speed: biastree on a generated plan of 10,000 loads, and
biastree against ngspice on the same small plan (same number of op runs).

    python benchmarks/bench_spread.py [--loads 10000] [--samples 1000] [--repeat 3]

The 10,000-load run is timed with the one-pass solver (simple mirrors: the
generated plans) and with the general solver; CPU time is printed beside
wall time because the machine is shared.

Invented data (biastree.generate, with matching coefficients added).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import time
import tracemalloc

import biastree
from biastree.analysis.spread import analytic, monte_carlo
from biastree.input.generate import Ranges, random_plan


def with_matching(plan: dict) -> dict:
    for dev in plan["devices"].values():
        if dev["kind"] in ("npn", "pnp"):
            dev.update(area="10um^2", a_is_pair="2%*um")
        else:
            dev.update(a_vt_pair="5mV*um", a_beta_pair="1%*um")
    return plan


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--loads", type=int, default=10_000)
    parser.add_argument("--samples", type=int, default=1000)
    parser.add_argument("--small-samples", type=int, default=1000)
    parser.add_argument("--same-loads", type=int, default=1000, help="loads of the tree both tools sample")
    parser.add_argument("--ngspice-samples", type=int, default=10, help="ngspice Monte Carlo samples on that tree")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--skip-general", action="store_true", help="time only the one-pass solver")
    args = parser.parse_args()

    tree = biastree.loads(json.dumps(with_matching(random_plan(args.loads, seed=7))), "bench", "json")
    n_sl = args.samples * len(tree.loads)
    print(f"Monte Carlo: {args.loads} loads ({len(tree.mirrors)} mirrors, {len(tree.b_parent)} branches), "
          f"{args.samples} samples, {os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} "
          f"(best of {args.repeat}; CPU time: about a quiet machine's wall time for this single-threaded work)")
    for label, fast in (("one-pass solver", True), ("general solver", False)):
        if not fast and args.skip_general:
            continue
        wall = cpu = math.inf
        for _ in range(args.repeat):
            start, c0 = time.perf_counter(), time.process_time()
            mc = monte_carlo(tree, args.samples, seed=1, fast=fast)
            wall, cpu = min(wall, time.perf_counter() - start), min(cpu, time.process_time() - c0)
            del mc
        tracemalloc.start()  # one more run, not timed: numpy reports its arrays to tracemalloc
        mc = monte_carlo(tree, args.samples, seed=1, fast=fast)
        peak = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
        del mc
        print(f"  {label}: {wall:.2f} s wall, {cpu:.2f} s CPU ({cpu / n_sl * 1e9:.0f} ns per sample-load), "
              f"peak memory of the run {peak:.0f} MB (results alone "
              f"{len(tree.loads) * args.samples * 9 / 2**20:.0f} MB)")
    print(f"  process peak RSS {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")
    start = time.perf_counter()
    analytic(tree)
    print(f"first-order σ of every load: {time.perf_counter() - start:.2f} s")

    # same small plan, same number of op runs, both tools (simple bipolar mirrors: what the
    # ngspice Monte Carlo writer supports)
    from biastree.sim.verify import ngspice_monte_carlo

    small = biastree.loads(json.dumps(with_matching(random_plan(12, seed=3, ranges=Ranges(families=("bjt",))))),
                           "small", "json")
    n = args.small_samples
    start = time.perf_counter()
    monte_carlo(small, n, seed=1, include_reference=False, include_process=False)
    ours = time.perf_counter() - start
    start = time.perf_counter()
    ngspice_monte_carlo(small, n, seed=1)
    theirs = time.perf_counter() - start
    print(f"small plan ({len(small.loads)} loads, {len(small.mirrors)} mirrors), {n} samples: biastree {ours:.3f} s, "
          f"ngspice {theirs:.2f} s: ngspice takes {theirs / ours:.0f}× as long")

    # a larger tree, the same for both: ngspice's own Monte Carlo loop runs fewer
    # samples (each is a full operating point); compared per sample
    big = biastree.loads(json.dumps(with_matching(random_plan(args.same_loads, seed=5,
                                                              ranges=Ranges(families=("bjt",))))), "same", "json")
    ours = math.inf
    for _ in range(args.repeat):
        start = time.perf_counter()
        monte_carlo(big, args.samples, seed=1, include_reference=False, include_process=False)
        ours = min(ours, (time.perf_counter() - start) / args.samples)
    start = time.perf_counter()
    ngspice_monte_carlo(big, args.ngspice_samples, seed=1)
    theirs = (time.perf_counter() - start) / args.ngspice_samples
    print(f"same tree ({len(big.loads)} loads, {len(big.mirrors)} mirrors): biastree {ours * 1e3:.3f} ms per sample "
          f"({args.samples} samples), ngspice {theirs * 1e3:.0f} ms per sample ({args.ngspice_samples} samples of its "
          f"own .control loop: alter every device, op): ngspice takes {theirs / ours:.0f}× as long (both wall time)")


if __name__ == "__main__":
    main()
