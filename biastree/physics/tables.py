"""MOS devices from characterisation tables: interpolation and the simple mirror.

A table holds ln I_D of one unit device (source and bulk on the rail) on a
rectangular grid of V_GS × V_DS magnitudes, from simulator sweeps of the
designer's own model (``biastree.analysis.characterize``).  ln I_D is
interpolated by a bicubic spline (scipy's ``RectBivariateSpline``, k = 3 in
both directions), smooth with continuous first and second derivatives; on a
grid of 12.5 mV × 25 mV it reproduces the simulator within a few 1e-6 (see the
tests).  Ratios are copies of the unit device, so a device of m units carries
m times the table's current.

Compliance rule (stated, ours): an output device is taken as active while
its current stays within 1 % of its value at V_DS = V_GS (the diode's own
operating point); the smallest such V_DS is its compliance limit.  Output
resistance comes from the spline's derivative ∂ln I_D/∂V_DS.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from biastree.physics.devices import Array

ACTIVE_FRACTION = 0.01  # an output is active while within 1 % of its current at V_DS = V_GS


@dataclass(frozen=True)
class Table:
    """ln I_D(V_GS, V_DS) of one unit device at one condition (magnitudes, V and A)."""

    vgs: Array  # (n,)
    vds: Array  # (m,)
    ln_id: Array  # (n, m)
    _spline: list[Any] = field(default_factory=list, compare=False, repr=False)

    def spline(self) -> Any:
        if not self._spline:
            from scipy.interpolate import RectBivariateSpline  # lazy: import biastree stays light

            self._spline.append(RectBivariateSpline(self.vgs, self.vds, self.ln_id, kx=3, ky=3))
        return self._spline[0]

    def log_current(self, vgs: Array, vds: Array, dvgs: int = 0, dvds: int = 0) -> Array:
        """ln I_D (or a derivative) at each (V_GS, V_DS), clipped to the grid."""
        vgs, vds = np.broadcast_arrays(np.asarray(vgs, dtype=float), np.asarray(vds, dtype=float))
        x = np.clip(vgs, self.vgs[0], self.vgs[-1])
        y = np.clip(vds, self.vds[0], self.vds[-1])
        return self.spline().ev(x.ravel(), y.ravel(), dx=dvgs, dy=dvds).reshape(vgs.shape)


@dataclass(frozen=True)
class TableSet:
    """Which table serves each (row, column) of a group of devices (−1: none)."""

    tables: tuple[Table, ...]
    which: Array  # (rows, C) int
    ideal: bool = False  # outputs taken at V_DS = V_GS: the gain without output conductance

    def take(self, index: Array) -> TableSet:
        return TableSet(self.tables, self.which[index], self.ideal)

    def any(self) -> bool:
        return bool(np.any(self.which >= 0))

    def log_current(self, vgs: Array, vds: Array, dvgs: int = 0, dvds: int = 0) -> Array:
        vgs, vds, which = np.broadcast_arrays(np.asarray(vgs, dtype=float), np.asarray(vds, dtype=float), self.which)
        out = np.full(vgs.shape, np.nan)
        for k, table in enumerate(self.tables):
            mask = which == k
            if mask.any():
                out[mask] = table.log_current(vgs[mask], vds[mask], dvgs, dvds)
        return out


def diode_vgs(current: Array, t: TableSet, iters: int = 80) -> Array:
    """V_GS of a diode-connected unit device (V_DS = V_GS) carrying ``current``:
    Newton's method on ln I_D, kept inside the table by bisection."""
    target = np.log(current)
    lo = np.full(target.shape, min(tb.vgs[0] for tb in t.tables) if t.tables else 0.0)
    hi = np.full(target.shape, max(tb.vgs[-1] for tb in t.tables) if t.tables else 1.0)
    v = 0.5 * (lo + hi)
    for _ in range(iters):
        f = t.log_current(v, v) - target
        slope = t.log_current(v, v, dvgs=1) + t.log_current(v, v, dvds=1)
        lo = np.where(f < 0, v, lo)
        hi = np.where(f > 0, v, hi)
        new = v - f / np.where(slope > 0, slope, np.inf)
        new = np.where((new <= lo) | (new >= hi) | ~np.isfinite(new), 0.5 * (lo + hi), new)
        if np.all(np.abs(new - v) < 1e-13):
            v = new
            break
        v = new
    return v


def compliance(vgs: Array, t: TableSet, iters: int = 60) -> Array:
    """Smallest V_DS at which the current is within ACTIVE_FRACTION of its value at V_DS = V_GS."""
    goal = t.log_current(vgs, vgs) + np.log1p(-ACTIVE_FRACTION)
    lo = np.full(np.shape(vgs), min(tb.vds[0] for tb in t.tables))
    hi = np.asarray(vgs, dtype=float).copy()
    for _ in range(iters):  # bisection: the current rises with V_DS
        mid = 0.5 * (lo + hi)
        above = t.log_current(vgs, mid) >= goal
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return hi


def simple_mirror(i_in: Array, size_in: Array, row: Array, units: Array, distance: Array,
                  t: TableSet, t_out: TableSet) -> tuple[Array, Array, Array]:
    """Simple MOS mirror from tables: (V_GS, output currents, compliance limits).
    The input (A0 units) is a diode: I_in/A0 = I_D(V_GS, V_GS); output k of m_k·A0 units
    carries m_k·A0·I_D(V_GS, d_k).  No gate current: outputs do not load the input."""
    vgs = diode_vgs(i_in / size_in, t)
    current = units * np.exp(t_out.log_current(vgs[row], distance))
    vmin = compliance(vgs[row], t_out)
    return vgs, current, vmin
