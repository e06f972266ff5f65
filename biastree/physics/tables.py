"""MOS devices from characterisation tables: interpolation and the mirrors.

A table holds ln I_D of one unit device on a rectangular grid of V_GS × V_DS
magnitudes (source and bulk on the rail), or of V_GS × V_DS × V_SB magnitudes
(the bulk V_SB beyond the source: the body effect of a stacked device), from
simulator sweeps of the designer's own model
(``biastree.analysis.characterize``).  ln I_D is interpolated by a bicubic
spline (scipy's ``RectBivariateSpline``, k = 3 in both directions) or, with
V_SB, a tricubic tensor-product spline (``NdBSpline``, not-a-knot ends),
smooth with continuous first and second derivatives; on a grid of
12.5 mV × 25 mV (× 50–100 mV in V_SB) it reproduces the simulator within about
1e-5 (see the tests and the notes).  Ratios are copies of the unit device, so
a device of m units carries m times the table's current.

Compliance rule (stated, ours): an output device is taken as active while
its current stays within 1 % of its value at V_DS = V_GS (the diode's own
operating point); the smallest such V_DS is its compliance limit.  Output
resistance comes from the spline's derivative ∂ln I_D/∂V_DS.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from biastree.physics.devices import Array

ACTIVE_FRACTION = 0.01  # an output is active while within 1 % of its saturation line (see saturation_limit)


@dataclass(frozen=True)
class Table:
    """ln I_D(V_GS, V_DS[, V_SB]) of one unit device at one condition (magnitudes, V and A).
    A table with V_SB also holds ln I_S, the current out of the source (I_D plus the bulk
    terminal's current: impact ionisation, junction leakage), which is what the device
    under a stacked one carries."""

    vgs: Array  # (n,)
    vds: Array  # (m,)
    ln_id: Array  # (n, m), or (n, m, p) with vsb
    vsb: Array | None = None  # (p,): the table spans the body effect
    ln_is: Array | None = None  # (n, m, p) with vsb
    _spline: dict[bool, Any] = field(default_factory=dict, compare=False, repr=False)

    def spline(self, source: bool = False) -> Any:
        source = source and self.ln_is is not None
        if source not in self._spline:
            if self.vsb is None:
                from scipy.interpolate import RectBivariateSpline  # lazy: import biastree stays light

                self._spline[source] = RectBivariateSpline(self.vgs, self.vds, self.ln_id, kx=3, ky=3)
            else:
                values = self.ln_is if source else self.ln_id
                self._spline[source] = _tensor_spline((self.vgs, self.vds, self.vsb), values)
        return self._spline[source]

    def log_current(self, vgs: Array, vds: Array, vsb: Array | float = 0.0,
                    dvgs: int = 0, dvds: int = 0, dvsb: int = 0, source: bool = False) -> Array:
        """ln I_D (or ln I_S, or a derivative) at each (V_GS, V_DS, V_SB), clipped to the grid
        (a table without V_SB is the device with its source on the bulk: V_SB = 0)."""
        vgs, vds, vsb = np.broadcast_arrays(np.asarray(vgs, dtype=float), np.asarray(vds, dtype=float),
                                            np.asarray(vsb, dtype=float))
        x = np.clip(vgs, self.vgs[0], self.vgs[-1])
        y = np.clip(vds, self.vds[0], self.vds[-1])
        if self.vsb is None:
            if dvsb:
                return np.zeros(vgs.shape)
            return self.spline().ev(x.ravel(), y.ravel(), dx=dvgs, dy=dvds).reshape(vgs.shape)
        z = np.clip(vsb, self.vsb[0], self.vsb[-1])
        points = np.stack([x.ravel(), y.ravel(), z.ravel()], axis=-1)
        return self.spline(source)(points, nu=(dvgs, dvds, dvsb)).reshape(vgs.shape)


def _tensor_spline(grids: tuple[Array, ...], values: Array) -> Any:
    """The interpolating tensor-product cubic spline (not-a-knot ends) of gridded values:
    one-dimensional interpolation along each axis in turn gives its coefficients."""
    from scipy.interpolate import NdBSpline, make_interp_spline

    coef, knots = values, []
    for axis, grid in enumerate(grids):
        one = make_interp_spline(grid, coef, k=3, axis=axis)
        coef = np.moveaxis(one.c, 0, axis)
        knots.append(one.t)
    return NdBSpline(tuple(knots), coef, 3)


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

    def filled(self) -> TableSet:
        """Every (row, column) served by some table (rows without one borrow the first):
        a group solved through the tables has numbers everywhere, its rows without
        tables are then replaced by the square law."""
        return replace(self, which=np.where(self.which >= 0, self.which, 0))

    def log_current(self, vgs: Array, vds: Array, vsb: Array | float = 0.0,
                    dvgs: int = 0, dvds: int = 0, dvsb: int = 0, source: bool = False) -> Array:
        vgs, vds, vsb, which = np.broadcast_arrays(np.asarray(vgs, dtype=float), np.asarray(vds, dtype=float),
                                                   np.asarray(vsb, dtype=float), self.which)
        out = np.full(vgs.shape, np.nan)
        for k, table in enumerate(self.tables):
            mask = which == k
            if mask.any():
                out[mask] = table.log_current(vgs[mask], vds[mask], vsb[mask], dvgs, dvds, dvsb, source)
        return out

    def grad(self, vgs: Array, vds: Array, vsb: Array | float = 0.0,
             source: bool = False) -> tuple[Array, Array, Array, Array]:
        """ln I_D (ln I_S with ``source``) and its derivatives in V_GS, V_DS, V_SB."""
        return (self.log_current(vgs, vds, vsb, source=source), self.log_current(vgs, vds, vsb, dvgs=1, source=source),
                self.log_current(vgs, vds, vsb, dvds=1, source=source),
                self.log_current(vgs, vds, vsb, dvsb=1, source=source))


def diode_vgs(current: Array, t: TableSet, iters: int = 80, vsb: Array | float = 0.0) -> Array:
    """V_GS of a diode-connected unit device (V_DS = V_GS) carrying ``current``, its
    source V_SB above the bulk: Newton's method on ln I_D, kept inside the table by bisection."""
    target = np.log(current)
    lo = np.full(target.shape, min(tb.vgs[0] for tb in t.tables) if t.tables else 0.0)
    hi = np.full(target.shape, max(tb.vgs[-1] for tb in t.tables) if t.tables else 1.0)
    v = 0.5 * (lo + hi)
    for _ in range(iters):
        f = t.log_current(v, v, vsb) - target
        slope = t.log_current(v, v, vsb, dvgs=1) + t.log_current(v, v, vsb, dvds=1)
        lo = np.where(f < 0, v, lo)
        hi = np.where(f > 0, v, hi)
        new = v - f / np.where(slope > 0, slope, np.inf)
        new = np.where((new <= lo) | (new >= hi) | ~np.isfinite(new), 0.5 * (lo + hi), new)
        if np.all(np.abs(new - v) < 1e-13):
            v = new
            break
        v = new
    return v


def compliance(vgs: Array, t: TableSet, iters: int = 50, vsb: Array | float = 0.0) -> Array:
    """Smallest V_DS at which an output is active: its current within ACTIVE_FRACTION of its
    saturation line (``saturation_limit``).  Comparing with the current at V_DS = V_GS instead
    would count channel-length modulation as leaving the active region (λ = 0.05/V: 0.2 V)."""
    return saturation_limit(vgs, t, vsb, iters)


def saturation_limit(vgs: Array, t: TableSet, vsb: Array | float = 0.0, iters: int = 50) -> Array:
    """Smallest V_DS at which a device of a stack is still saturated: its current within
    ACTIVE_FRACTION of its saturation line, the tangent of ln I_D(V_DS) at V_DS = V_GS
    (channel-length modulation moves along that line; leaving saturation falls below it).
    Unlike ``compliance`` (the simple mirror's rule), a device held well below V_GS — the
    bottom device of a wide-swing cascode — counts as active while it is saturated."""
    vgs = np.asarray(vgs, dtype=float)
    ref = t.log_current(vgs, vgs, vsb)
    slope = t.log_current(vgs, vgs, vsb, dvds=1)
    drop = np.log1p(-ACTIVE_FRACTION)
    lo = np.full(np.shape(ref), min(tb.vds[0] for tb in t.tables))
    hi = np.maximum(np.broadcast_to(vgs, ref.shape), lo)
    for _ in range(iters):  # bisection: below the line by more and more as V_DS falls
        mid = 0.5 * (lo + hi)
        above = t.log_current(vgs, mid, vsb) >= ref + slope * (mid - vgs) + drop
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


def _bracketed_newton(x: Array, lo: Array, hi: Array, residual, iters: int = 80, tol: float = 1e-14) -> Array:  # type: ignore[no-untyped-def]
    """Root of an increasing residual(x) → (f, df/dx) inside [lo, hi], by Newton's method
    kept inside the shrinking bracket (a step that leaves it is a bisection instead)."""
    x = np.clip(x, lo, hi)
    for _ in range(iters):
        f, slope = residual(x)
        lo = np.where(f < 0, x, lo)
        hi = np.where(f > 0, x, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            new = x - f / np.where(slope > 0, slope, np.inf)
        new = np.where((new <= lo) | (new >= hi) | ~np.isfinite(new), 0.5 * (lo + hi), new)
        new = np.where(f == 0, x, new)
        done = np.all(np.abs(new - x) <= tol)
        x = new
        if done:
            break
    return x


def stack_node(t: TableSet, vg_bot: Array, vg_top: Array, d: Array, start: Array,
               log_scale: Array | float = 0.0) -> Array:
    """Middle node V_x of an output stack (distances from the rail): the bottom device
    (gate vg_bot, drain V_x, source and bulk on the rail, its current scaled by
    e^log_scale) carries what leaves the source of the device above it (gate vg_top,
    source V_x, drain d, bulk on the rail: V_SB = V_x).  The residual
      f(V_x) = log_scale + ln I_D(vg_bot, V_x, 0) − ln I_S(vg_top − V_x, d − V_x, V_x)
    rises with V_x (the bottom device carries more, the top one less), so its root in
    [0, min(d, vg_top)] is unique; Newton's method, bracketed."""
    shape = np.broadcast(vg_bot, vg_top, d, start).shape

    def residual(x: Array) -> tuple[Array, Array]:
        lb, _, lb_ds, _ = t.grad(vg_bot, x, 0.0)
        lt, lt_gs, lt_ds, lt_sb = t.grad(vg_top - x, d - x, x, source=True)
        return log_scale + lb - lt, lb_ds + lt_gs + lt_ds - lt_sb

    lo = np.zeros(shape)
    hi = np.broadcast_to(np.maximum(np.minimum(d, vg_top), 1e-6), shape).copy()
    return _bracketed_newton(np.broadcast_to(start, shape).astype(float), lo, hi, residual)


def wide_swing_input(current: Array, vg: Array, t: TableSet) -> tuple[Array, Array, Array]:
    """Input stack of a wide-swing cascode (unit devices): M3 (gate vg, source V_x1, drain
    V_N, V_SB = V_x1) carries ``current`` into its drain, M1 (gate V_N, drain V_x1) what
    leaves M3's source.  For each V_x1, M1 fixes V_N (ln I_D(V_N, V_x1, 0) = ln I_S of M3);
    the residual of M3,
      r(V_x1) = ln I − ln I_D(vg − V_x1, V_N(V_x1) − V_x1, V_x1),
    rises with V_x1, with dV_N/dV_x1 = −(∂ln I_D/∂V_DS)/(∂ln I_D/∂V_GS) of M1 (M3's
    source-to-drain ratio, ~1e-4 at most, is held at its last value: two outer rounds).
    Returns (V_N, V_x1, M1's current)."""
    target = np.log(current)
    vn = diode_vgs(current, t)  # start: M1 at V_DS = V_GS
    lo_g = np.full(target.shape, min(tb.vgs[0] for tb in t.tables))
    hi_g = np.full(target.shape, max(tb.vgs[-1] for tb in t.tables))
    state = {"vn": vn, "m1": target}

    def gate_of_m1(x1: Array) -> tuple[Array, Array]:
        def r1(v: Array) -> tuple[Array, Array]:
            l1, l1_gs, _, _ = t.grad(v, x1, 0.0)
            return l1 - state["m1"], l1_gs

        v = _bracketed_newton(state["vn"], lo_g, hi_g, r1)
        state["vn"] = v
        _, l1_gs, l1_ds, _ = t.grad(v, x1, 0.0)
        return v, -l1_ds / l1_gs

    def residual(x1: Array) -> tuple[Array, Array]:
        v, dv = gate_of_m1(x1)
        l3, l3_gs, l3_ds, l3_sb = t.grad(vg - x1, v - x1, x1)
        return target - l3, l3_gs - l3_ds * (dv - 1.0) - l3_sb

    x1 = stack_node(t, vn, vg, vn, 0.5 * vn)  # M1 at the V_GS of a diode: close to the answer
    for _ in range(2):
        x1 = _bracketed_newton(x1, np.zeros(target.shape), np.broadcast_to(np.maximum(vg, 1e-6), target.shape).copy(),
                               residual)
        vn, _ = gate_of_m1(x1)
        args = (vg - x1, vn - x1, x1)
        state["m1"] = target + t.log_current(*args, source=True) - t.log_current(*args)
    vn, _ = gate_of_m1(x1)
    return vn, x1, np.exp(state["m1"])
