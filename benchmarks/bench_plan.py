"""Planner benchmark: failures on random feasible block lists, cost against an
exhaustive oracle and two baselines, and times (2 cores).

    python benchmarks/bench_plan.py [--quick]
"""

from __future__ import annotations

import sys
import time

from biastree.input.blocks import BlockList
from biastree.planner.costs import figures
from biastree.planner.oracle import exhaustive
from biastree.planner.random_blocks import random_blocks
from biastree.planner.synthesis import finish, plan_blocks, skeleton


def oracle(blocks: BlockList) -> float | None:
    best = exhaustive(blocks)
    return None if best is None else best.overhead_power


def flat(blocks: BlockList) -> tuple[int, float]:
    """One simple mirror per polarity, no search: (failures, overhead power)."""
    import biastree.planner.grouping as g
    leaves = []
    from biastree.input.blocks import devices_for
    for d in ("sink", "source"):
        names = tuple(n for n in sorted(blocks.blocks) if blocks.blocks[n].direction == d)
        if names:
            leaves.append(g.Leaf(d, devices_for(blocks, d)[0], names, None))
    data, _ = skeleton(blocks, leaves)
    for m in data["mirrors"].values():
        m["topology"] = "simple"
    _, _, res = finish(data, "flat")
    f = figures(res)
    return f.failed, f.overhead_power


def _load() -> str:
    import os

    return "load average " + " ".join(f"{x:.2f}" for x in os.getloadavg())


def main() -> None:
    quick = "--quick" in sys.argv
    print("failures on random feasible block lists (blocks failing as check judges the written text):")
    sizes = ((10, 30), (100, 10), (200, 5), (1000, 5), (10000, 2)) if not quick else ((10, 5), (100, 2))
    times: dict[int, list[tuple[float, float]]] = {}
    per_block_big: list[float] = []
    for n, seeds in sizes:
        fails = blocks_failing = 0
        for seed in range(seeds):
            b = BlockList.model_validate(random_blocks(n, seed))
            t, c = time.perf_counter(), time.process_time()
            o = plan_blocks(b)
            times.setdefault(n, []).append((time.perf_counter() - t, time.process_time() - c))
            fails += 0 if o.ok else 1
            blocks_failing += o.figures.failed if o.figures is not None else n
            for bad in o.infeasible:
                print(f"    n={n} seed={seed}: {bad.text()}")
            if n == 100 and o.ok:
                one = plan_blocks(b, split_all=True)
                if one.ok:
                    per_block_big.append(one.figures.overhead_power / o.figures.overhead_power)
        wall = [w for w, _ in times[n]]
        cpu = [c for _, c in times[n]]
        print(f"  {n:>6} blocks: {seeds} lists, {fails} not passing, {blocks_failing} blocks failing; "
              f"plan time {min(wall):.2f}–{max(wall):.2f} s wall, {min(cpu):.2f}–{max(cpu):.2f} s CPU ({_load()})")
    print("cost against the exhaustive oracle (least overhead power over every grouping) and baselines:")
    ratios, per_block, flat_fail, found = [], [], [], 0
    for seed in range(12 if not quick else 3):
        b = BlockList.model_validate(random_blocks(6, 100 + seed))
        o = plan_blocks(b)
        best = oracle(b)
        one = plan_blocks(b, split_all=True)
        ff, _ = flat(b)
        flat_fail.append(ff)
        if best and o.ok:
            r = o.figures.overhead_power / best
            ratios.append(r)
            found += r <= 1 + 1e-9
        if one.ok and o.ok:
            per_block.append(one.figures.overhead_power / o.figures.overhead_power)
    print(f"  oracle: optimum found in {found} of {len(ratios)}; worst excess {max(ratios) - 1:+.1%}; mean ratio {sum(ratios) / len(ratios):.3f}")
    print(f"  one mirror per block, 6 blocks: {min(per_block):.2f}–{max(per_block):.2f}× the planner's overhead power")
    if per_block_big:
        print(f"  one mirror per block, 100 blocks: {min(per_block_big):.2f}–{max(per_block_big):.2f}× the planner's overhead power")
    print(f"  one flat simple mirror per polarity: fails {sum(flat_fail)} of {6 * len(flat_fail)} blocks")
    # repair of a 1,000-load failing plan: the planned plan with its search switched off
    o = plan_blocks(BlockList.model_validate(random_blocks(1000 if not quick else 100, 8)), search=False)
    from biastree.analysis.pipeline import check_tree
    from biastree.planner.repair import repair
    tree = o.tree
    t, c = time.perf_counter(), time.process_time()
    fixed = repair(tree, check_tree(tree, detail=False))
    print(f"  repair {len(tree.loads)}-load plan with {o.figures.failed} failing: {time.perf_counter() - t:.1f} s wall, "
          f"{time.process_time() - c:.1f} s CPU, {len(fixed.changes)} changes, {fixed.after.failed} still failing ({_load()})")


if __name__ == "__main__":
    main()
