"""Repair benchmark: generated failing plans (the planner's tree with its search switched
off: ideal ratios, first-guess topologies), loads failing before and after, changes,
plans checked, and time (best of 3; CPU and wall — the machine is shared).

    python benchmarks/bench_repair.py [--quick]
"""

from __future__ import annotations

import sys
import time

from biastree.analysis.pipeline import check_tree
from biastree.input.blocks import BlockList
from biastree.planner.random_blocks import random_blocks
from biastree.planner.repair import repair
from biastree.planner.synthesis import plan_blocks


def main() -> None:
    cases = ((1000, 8), (1000, 9), (200, 3)) if "--quick" not in sys.argv else ((200, 3),)
    for n, seed in cases:
        tree = plan_blocks(BlockList.model_validate(random_blocks(n, seed)), search=False).tree
        result = check_tree(tree, detail=False)
        best = None
        for _ in range(3):
            t, c = time.perf_counter(), time.process_time()
            fixed = repair(tree, result)
            wall, cpu = time.perf_counter() - t, time.process_time() - c
            best = (cpu, wall) if best is None or cpu < best[0] else best
        print(f"{n} loads (seed {seed}): {int((~result.passed).sum())} failing → {fixed.after.failed}; "
              f"{len(fixed.changes)} changes, {fixed.checks} plans checked; best of 3: {best[0]:.1f} s CPU, {best[1]:.1f} s wall; "
              f"overhead {fixed.before.overhead_power * 1e6:.0f} → {fixed.after.overhead_power * 1e6:.0f} µW, "
              f"{fixed.before.device_units:.0f} → {fixed.after.device_units:.0f} unit devices")


if __name__ == "__main__":
    main()
