"""Ratios built from whole unit devices.

A mirror's input device has ``n_in`` unit devices and output k has ``u_k``,
so its ratio is u_k / n_in; both are whole numbers within the limits.  The
smallest ``n_in`` whose rounding keeps every ratio within its allowance is
chosen (a larger input device costs area; rounding costs budget).
"""

from __future__ import annotations

import math


def realise(ratios: list[float], allowed: list[float], max_units: int, start: int = 1,
            max_ratio: float = math.inf) -> tuple[int, list[int]] | None:
    """(n_in, [u_k]) with |u_k/n_in / ratio_k − 1| ≤ allowed_k, every size ≤ max_units and
    every ratio u_k/n_in within [1/max_ratio, max_ratio].

    Returns the best found (least worst relative rounding over allowance) when
    no ``n_in`` meets every allowance, or None when even one unit per output
    does not fit, or no whole ratios within max_ratio do.

    >>> realise([17.0], [0.01], 64, max_ratio=16) is None
    True

    >>> realise([2.0, 0.5], [0.01, 0.01], 64)
    (2, [4, 1])
    >>> realise([1.03], [0.001], 64)
    (33, [34])
    """
    best: tuple[float, int, list[int]] | None = None
    for n_in in range(max(1, start), max_units + 1):
        units = [max(1, round(r * n_in)) for r in ratios]
        if max(units) > max_units:
            break
        if any(not 1.0 / max_ratio - 1e-12 <= u / n_in <= max_ratio + 1e-12 for u in units):
            continue
        worst = max(abs(u / n_in / r - 1.0) / a for u, r, a in zip(units, ratios, allowed))
        if worst <= 1.0:
            return n_in, units
        if best is None or worst < best[0] - 1e-12:
            best = (worst, n_in, units)
    if best is None:
        return None
    return best[1], best[2]


def whole(x: float) -> bool:
    return abs(x - round(x)) < 1e-9 and round(x) >= 1


def units_of(ratio: float, input_size: float) -> float:
    return ratio * input_size


def ceil_scale(factor: float, limit: int) -> int:
    """Whole scale factor ≥ factor, at most ``limit`` (at least 2: a change must change)."""
    return max(2, min(limit, math.ceil(factor - 1e-9)))
