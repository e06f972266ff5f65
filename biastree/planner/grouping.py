"""Which blocks share a mirror.

Blocks share a mirror only when they need the same polarity and the same
device model, allow the same topologies, and sit close together on the die
(hierarchical clustering of their positions, complete linkage, cut at the
limits' ``group_radius``: scipy.cluster.hierarchy).  Matched blocks (a
``group`` or a ``matched`` pair) always share one.  Inside a cluster the
blocks are sorted by budget (tight ones together, so that an upgrade of their
mirror is not paid for loose blocks) and by current, and cut into mirrors of
at most ``max_outputs`` branches, ``max_fanout`` fan-out, and a current spread
that whole-unit ratios within ``max_ratio`` can reach.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from biastree.input.blocks import Block, BlockList, devices_for


@dataclass(frozen=True)
class Leaf:
    """A group of blocks that one mirror will feed."""

    direction: str
    device: str
    blocks: tuple[str, ...]
    position: tuple[float, float] | None


def _unit_key(blocks: BlockList, name: str) -> tuple[object, ...]:
    b = blocks.blocks[name]
    device = (b.devices or devices_for(blocks, b.direction))[0]
    return (b.direction, device, tuple(sorted(b.topologies)) if b.topologies is not None else None)


def _units(blocks: BlockList) -> list[tuple[str, ...]]:
    """Blocks that must share a mirror (matched groups), each a tuple of names; sorted names."""
    parent = {n: n for n in blocks.blocks}

    def find(x: str) -> str:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    by_group: dict[str, str] = {}
    for n in sorted(blocks.blocks):
        g = blocks.blocks[n].group
        if g is not None:
            if g in by_group:
                parent[find(n)] = find(by_group[g])
            else:
                by_group[g] = n
    for m in blocks.matched.values():
        a, b = m.loads
        parent[find(a)] = find(b)
    out: dict[str, list[str]] = {}
    for n in sorted(blocks.blocks):
        out.setdefault(find(n), []).append(n)
    return sorted(tuple(v) for v in out.values())


def _position(blocks: BlockList, names: tuple[str, ...]) -> tuple[float, float] | None:
    pts = [blocks.blocks[n].position for n in names if blocks.blocks[n].position is not None]
    if not pts:
        return None
    a = np.array(pts, dtype=float)
    return float(a[:, 0].mean()), float(a[:, 1].mean())


def _clusters(blocks: BlockList, units: list[tuple[str, ...]]) -> list[list[tuple[str, ...]]]:
    """Units split by position (complete-linkage clusters of diameter ≤ group_radius)."""
    placed = [u for u in units if _position(blocks, u) is not None]
    loose = [u for u in units if _position(blocks, u) is None]
    out: list[list[tuple[str, ...]]] = [loose] if loose else []
    if len(placed) == 1:
        out.append(placed)
    elif placed:
        from scipy.cluster.hierarchy import fcluster, linkage

        pts = np.array([_position(blocks, u) for u in placed])
        if len(placed) > 2000:  # linkage is quadratic: pre-cut into square tiles of the radius
            r = blocks.limits.group_radius
            tiles: dict[tuple[int, int], list[tuple[str, ...]]] = {}
            for u, (x, y) in zip(placed, pts):
                tiles.setdefault((int(x // r), int(y // r)), []).append(u)
            out.extend(tiles[k] for k in sorted(tiles))
        else:
            labels = fcluster(linkage(pts, method="complete"), t=blocks.limits.group_radius, criterion="distance")
            for label in sorted(set(labels.tolist())):
                out.append([u for u, lab in zip(placed, labels.tolist()) if lab == label])
    return out


def group(blocks: BlockList, split_all: bool = False) -> list[Leaf]:
    """Leaves (groups of blocks for one mirror each), in a stable order.

    ``split_all`` gives every unit its own mirror (the one-mirror-per-block baseline).
    """
    lim = blocks.limits
    units = _units(blocks)
    by_key: dict[tuple[object, ...], list[tuple[str, ...]]] = {}
    for u in units:
        by_key.setdefault(_unit_key(blocks, u[0]), []).append(u)
    leaves: list[Leaf] = []
    for key in sorted(by_key, key=repr):
        direction, device = str(key[0]), str(key[1])
        for cluster in _clusters(blocks, by_key[key]):
            def sort_key(u: tuple[str, ...]) -> tuple[float, float, str]:
                b: Block = blocks.blocks[u[0]]
                return (min(blocks.blocks[n].tolerance for n in u), b.current, u[0])

            current: list[str] = []
            fan = 0.0
            lo = hi = 0.0
            for u in sorted(cluster, key=sort_key):
                cur = [blocks.blocks[n].current for n in u]
                u_lo, u_hi = min(cur), max(cur)
                u_fan = sum(blocks.blocks[n].count for n in u)
                new_lo = min(lo, u_lo) if current else u_lo
                new_hi = max(hi, u_hi) if current else u_hi
                full = (len(current) + len(u) > lim.max_outputs or fan + u_fan > lim.max_fanout / 2
                        or new_hi / new_lo > lim.max_ratio or split_all)
                if current and full:
                    leaves.append(Leaf(direction, device, tuple(current), _position(blocks, tuple(current))))
                    current, fan = [], 0.0
                    new_lo, new_hi = u_lo, u_hi
                current.extend(u)
                fan += u_fan
                lo, hi = new_lo, new_hi
            if current:
                leaves.append(Leaf(direction, device, tuple(current), _position(blocks, tuple(current))))
    return leaves


def chunks(items: list[int], positions: list[tuple[float, float] | None], size: int) -> list[list[int]]:
    """Cut items into runs of at most ``size``, neighbours on the die together (sorted in strips)."""
    if len(items) <= size:
        return [items]
    pts = np.array([p if p is not None else (0.0, 0.0) for p in positions])
    n_strips = max(1, int(round(np.sqrt(len(items) / size))))
    if np.ptp(pts[:, 1]) > 0:
        strip = np.minimum((n_strips * (pts[:, 1] - pts[:, 1].min()) / np.ptp(pts[:, 1])).astype(int), n_strips - 1)
    else:
        strip = np.zeros(len(items), dtype=int)
    x = np.where(strip % 2 == 0, pts[:, 0], -pts[:, 0])  # boustrophedon: neighbours across strip ends too
    order = np.lexsort((np.arange(len(items)), x, strip))
    ordered = [items[k] for k in order.tolist()]
    n = -(-len(ordered) // size)
    per = -(-len(ordered) // n)
    return [ordered[k:k + per] for k in range(0, len(ordered), per)]
