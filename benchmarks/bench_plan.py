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


def main() -> None:
    quick = "--quick" in sys.argv
    print("failures on random feasible block lists (confirmed by check on the written text):")
    for n, seeds in ((10, 30), (100, 10), (1000, 3)) if not quick else ((10, 5),):
        fails = lists = 0
        for seed in range(seeds):
            o = plan_blocks(BlockList.model_validate(random_blocks(n, seed)))
            lists += 1
            fails += 0 if o.ok else 1
        print(f"  {n:>6} blocks: {lists} lists, {fails} not passing")
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
    print(f"  one mirror per block: {min(per_block):.2f}–{max(per_block):.2f}× the planner's overhead power")
    print(f"  one flat mirror per polarity: fails {sum(flat_fail)} of {6 * len(flat_fail)} blocks")
    print("times (2 cores):")
    for n in ((1000, 10000) if not quick else (1000,)):
        data = random_blocks(n, 7)
        t = time.perf_counter()
        o = plan_blocks(BlockList.model_validate(data))
        print(f"  plan {n} blocks: {time.perf_counter() - t:.1f} s, {o.figures.passed} pass, {o.figures.failed} fail, "
              f"{o.figures.mirrors} mirrors")
    # repair of a 1,000-load failing plan: the planned plan with every mirror made simple and ratios ideal
    o = plan_blocks(BlockList.model_validate(random_blocks(1000, 8)), search=False)
    from biastree.analysis.pipeline import check_tree
    from biastree.planner.repair import repair
    tree = o.tree
    t = time.perf_counter()
    fixed = repair(tree, check_tree(tree, detail=False))
    print(f"  repair 1000-load plan with {o.figures.failed} failing: {time.perf_counter() - t:.1f} s, "
          f"{len(fixed.changes)} changes, {fixed.after.failed} still failing")


if __name__ == "__main__":
    main()
