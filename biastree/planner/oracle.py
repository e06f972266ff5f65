"""Exhaustive reference for small block lists: every grouping of the blocks.

For each polarity every set partition of its blocks (Bell number many:
52 for 5 blocks, 203 for 6) that respects the planner's hard limits (blocks
of one mirror within ``group_radius``) is built with the same levels, ratios
and search as the planner, and checked; the least overhead power among the
passing plans is the optimum the planner's grouping is measured against.
"""

from __future__ import annotations

import itertools
import math
from typing import Iterator

from biastree.input.blocks import BlockList, devices_for
from biastree.planner.costs import Figures, figures
from biastree.planner.grouping import Leaf, _position
from biastree.planner.search import Search
from biastree.planner.synthesis import rules_for, skeleton


def partitions(items: list[str]) -> Iterator[list[list[str]]]:
    """Every set partition of ``items``.

    >>> sum(1 for _ in partitions(list("abcd")))
    15
    """
    if not items:
        yield []
        return
    first, rest = items[0], items[1:]
    for p in partitions(rest):
        for k in range(len(p)):
            yield p[:k] + [[first] + p[k]] + p[k + 1:]
        yield [[first]] + p


def exhaustive(blocks: BlockList, objective: str = "power") -> Figures | None:
    """Figures of the best passing plan over every grouping (None: none passes)."""
    by_dir: dict[str, list[str]] = {}
    for n in sorted(blocks.blocks):
        by_dir.setdefault(blocks.blocks[n].direction, []).append(n)

    def fits(group: list[str]) -> bool:
        pts = [blocks.blocks[n].position for n in group]
        if any(p is None for p in pts):
            return True
        return all(math.dist(a, b) <= blocks.limits.group_radius for a in pts for b in pts)  # type: ignore[arg-type]

    parts = {d: [p for p in partitions(v) if all(fits(g) for g in p)] for d, v in by_dir.items()}
    best: Figures | None = None
    for combo in itertools.product(*parts.values()):
        leaves = [Leaf(d, devices_for(blocks, d)[0], tuple(g), _position(blocks, tuple(g)))
                  for d, p in zip(parts, combo) for g in p]
        data, _ = skeleton(blocks, leaves, objective)
        result = Search(data, rules_for(blocks)).run()
        f = figures(result)
        if f.failed == 0 and (best is None or f.key(objective) < best.key(objective)):
            best = f
    return best
