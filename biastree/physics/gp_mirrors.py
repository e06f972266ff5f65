"""Bipolar mirrors solved exactly with the full Gummel–Poon DC model.

Each function takes a group (``biastree.physics.topologies.GroupInput``) and
solves it of mirrors of one topology at once, like the
entries of ``biastree.physics.topologies`` (first axis mirrors or branches,
trailing axes conditions), but with every device given by
``biastree.physics.gummel_poon``: current-dependent β (ISE/NE, IKF, NKF),
reverse Early effect, RB/IRB/RBM, RE, RC.  Sizes are numbers of unit devices
in parallel (SPICE's ``m=``).  The unknown node voltages are found by a
vectorised, bracketed Newton iteration on each mirror's KCL, nested where a
topology has more than one unknown node.

Voltages are distances from the mirror's rail (the npn view).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from biastree.physics import gummel_poon as gp
from biastree.physics.devices import Array

# (input voltage, output currents, smallest output distance, extra current) — the fields
# of biastree.physics.topologies.GroupOutput, which wraps them
Solution = tuple[Array, Array, Array, Array]


def _rows(p: gp.GummelPoon, row: Array, scale: Array | float | None) -> gp.GummelPoon:
    # taken once per parameter set and row index (a group is solved again at every sweep)
    kept = p.scratch.get("rows")
    if kept is None or kept[0] is not row:
        kept = (row, p.take(row))  # the row array is kept: its id cannot be reused meanwhile
        p.scratch["rows"] = kept
    out = kept[1]
    return out if scale is None else out.with_is_scale(scale)


def _segment_sum(g: Any, per_branch: Array) -> Array:
    """Σ over each mirror's branches (count copies included), (k, C): ``g.segment_sum``
    with ``np.bincount`` per column, which adds in the same order as ``np.add.at``
    (the same sums) and is many times faster."""
    x = np.asarray(per_branch * g.count, dtype=float)
    k = g.i_in.shape[0]
    if x.ndim == 1:
        return np.bincount(g.row, x, k)
    return _segment_sum_flat(g.row, x, k)


def _segment_sum_flat(row: Array, x: Array, k: int) -> Array:
    """Σ of the rows of a (nb, n) array into k segments, one ``np.bincount`` per column."""
    out = np.empty((k, x.shape[1]))
    for j in range(x.shape[1]):
        out[:, j] = np.bincount(row, x[:, j], k)
    return out


def diode_current(v: Array, p: gp.GummelPoon) -> Array:
    """Terminal current I_C + I_B of a diode-connected unit device at V_BE = ``v``."""
    ic, ib = gp.terminal(v, np.zeros_like(v), p)
    return ic + ib


def _diode_g(v: Array, p: gp.GummelPoon) -> tuple[Array, Array]:
    """I_C + I_B of a diode-connected unit device at V_BE = ``v`` (collector on the base:
    V_BC = 0) and its slope d/dv."""
    ic, ib, (a, b, c, d) = gp.terminal_g(v, np.zeros_like(v), p)
    return ic + ib, a + c  # V_BC stays 0 as v moves: only the V_BE conductances count


def diode_voltage(current: Array, p: gp.GummelPoon) -> Array:
    """V_BE of a diode-connected unit device carrying ``current``."""
    def resid(v: Array) -> tuple[Array, Array]:
        i, g = _diode_g(v, p)
        return i - current, g

    return gp.solve_increasing(resid, gp.vbe_guess(current, p), slope=True)


def emitter_voltage_for(base: Array, collector: Array, emitter_current: Array, p: gp.GummelPoon) -> Array:
    """Emitter voltage of a unit device whose base and collector sit at ``base`` and
    ``collector`` and whose emitter carries ``emitter_current`` (an emitter follower)."""
    def resid(ve: Array) -> tuple[Array, Array]:
        ic, ib, (a, _, c, _) = gp.terminal_g(base - ve, base - collector, p)
        # falls as V_E rises: negated for an increasing residual (dV_BE/dV_E = −1)
        return emitter_current - (ic + ib), a + c

    start = base - gp.vbe_guess(emitter_current, p)
    return gp.solve_increasing(resid, start, slope=True)


def simple(g: Any, p: gp.GummelPoon) -> Solution:
    """Simple mirror: diode-connected input (A0 units), outputs of m_k·A0 units on its base line.

    KCL at the input node:  I_in = A0·(I_C1 + I_B1)(V) + Σ_k count_k·m_k·A0·I_B,k(V, V − d_k).
    V and every device's two internal junction voltages are solved together by one Newton
    iteration (``_simple_joint``); where that does not settle, V alone by a bracketed Newton
    iteration with each device's internal nodes solved inside it (``_simple_nested``).
    """
    r = g.row
    a0 = g.dev.size_in
    out_p = _rows(p, r, g.is_scale)
    units = g.ratio * a0[r]
    v, current = _simple_joint(g, p, out_p, units)
    if v is None:
        v = _simple_nested(g, p, out_p, units)
        ic, _ = gp.terminal(v[r], v[r] - g.distance, out_p)
        current = units * ic
    return v, current, np.broadcast_to(v[r], current.shape).copy(), np.zeros_like(g.i_in)


def _simple_joint(g: Any, p: gp.GummelPoon, out_p: gp.GummelPoon, units: Array,
                  iters: int = 60) -> tuple[Array | None, Array]:
    """Newton's method on (V, internal nodes of the input device, internal nodes of every
    output) at once.  Each device's internal equations are linear in its own step once
    linearised, so they are eliminated device by device (2×2, ``gp.Linear``) and what
    remains is one scalar equation per mirror and column for δV:

        R + Σ ∂I/∂(terminals)·(e·δV − f) = 0,  e = (1, 0) for the diode, (1, 1) for an output.

    Steps are limited to 0.1 V as SPICE limits junction voltages.  Returns (None, …) when
    it has not converged (the caller then uses the nested iteration)."""
    r, a0, d = g.row, g.dev.size_in, g.distance
    zero = np.zeros_like(g.i_in)
    last = p.scratch.get("simple")
    if last is not None and last[0] is r and last[1].shape == zero.shape and last[4].shape == d.shape:
        # the same mirrors solved again (next sweep, output-resistance steps): start from there
        v, x0, y0, xk, yk = (a.copy() for a in last[1:])
    else:
        v = gp.vbe_guess(g.i_in / a0, p)
        x0, y0 = v.copy(), zero.copy()
        xk = np.broadcast_to(v[r], d.shape).copy()
        yk = xk - d
    previous = np.inf
    for _ in range(iters):
        vb = v[r]
        lin_in = gp.linearise(x0, y0, v, zero, p)
        lin_out = gp.linearise(xk, yk, vb, vb - d, out_p)
        a, b, c, e = lin_in.g
        ga, gb, gc, gd = lin_out.g
        resid = (a0 * (lin_in.ic + lin_in.ib) + _segment_sum(g, units * lin_out.ib) - g.i_in
                 - a0 * ((a + c) * lin_in.f1 + (b + e) * lin_in.f2)
                 - _segment_sum(g, units * (gc * lin_out.f1 + gd * lin_out.f2)))
        slope = a0 * (a + c) + _segment_sum(g, units * (gc + gd))
        dv = np.clip(-resid / slope, -0.1, 0.1)
        dx0, dy0 = lin_in.delta(dv, 0.0 * dv)
        dxk, dyk = lin_out.delta(dv[r], dv[r])
        steps = [np.clip(s_, -0.1, 0.1) for s_ in (dx0, dy0, dxk, dyk)]
        v = v + dv
        x0, y0, xk, yk = x0 + steps[0], y0 + steps[1], xk + steps[2], yk + steps[3]
        if not np.all(np.isfinite(dv)):
            break
        largest = max(float(np.max(np.abs(dv), initial=0.0)), *(float(np.max(np.abs(s_), initial=0.0)) for s_ in steps))
        if _converged(largest, previous, 1e-14):
            p.scratch["simple"] = (r, v, x0, y0, xk, yk)
            ic, _ = gp.intrinsic(xk, yk, out_p)
            return v, units * ic
        previous = largest
    return None, zero


def _simple_nested(g: Any, p: gp.GummelPoon, out_p: gp.GummelPoon, units: Array) -> Array:
    r = g.row
    a0 = g.dev.size_in

    def resid(v: Array) -> tuple[Array, Array]:
        vb = v[r]
        _, ib, (_, _, gbe, gbc) = gp.terminal_g(vb, vb - g.distance, out_p)
        i_d, g_d = _diode_g(v, p)
        return (a0 * i_d + _segment_sum(g, units * ib) - g.i_in,
                a0 * g_d + _segment_sum(g, units * (gbe + gbc)))

    return gp.solve_increasing(resid, gp.vbe_guess(g.i_in / a0, p), slope=True)


def newton_system(residual, x0: Array, tol: float = 1e-13, iters: int = 100,  # type: ignore[no-untyped-def]
                  jacobian: bool = False, settled=None) -> Array:
    """Solve residual(x) = 0 for x of shape (..., n), every leading index its own small
    system: Newton's method with steps limited to 0.1 V, as SPICE limits junction
    voltages.  With ``jacobian``, ``residual`` returns (f, ∂f/∂x) with ∂f_i/∂x_j at
    [..., i, j]; otherwise the Jacobian is a finite difference.  ``settled()`` (if given)
    must also hold to stop: the devices' internal nodes have converged too."""
    x = np.array(x0, dtype=float)
    n = x.shape[-1]
    h = 1e-8
    previous = np.inf
    for _ in range(iters):
        if jacobian:
            f, jac = residual(x)
        else:
            f = residual(x)
            jac = np.empty(x.shape + (n,))
            for j in range(n):
                xp = x.copy()
                xp[..., j] += h
                jac[..., :, j] = (residual(xp) - f) / h
        step = np.linalg.solve(jac, f[..., None])[..., 0]
        step = np.clip(step, -0.1, 0.1)
        x = x - step
        largest = float(np.max(np.abs(step), initial=0.0))
        inner = settled is None or settled()  # asked every iteration: it tracks its own steps
        if _converged(largest, previous, tol) and inner:
            break
        previous = largest
    return x


def _converged(step: float, previous: float, tol: float) -> bool:
    """Whether a Newton iteration whose last step was ``step`` (the one before: ``previous``)
    has converged.  Below ``tol``; or small (1e-8 V) and far below the step before, the
    quadratic regime: the error left is then about K·step² with K = f''/2f' ≈ 1/(2·n·V_T)
    ≈ 20 /V for these exponentials (with a finite-difference Jacobian, the error of its
    slope, ~1e-6, times the step), of order 1e-15 V, so no further evaluation is needed
    to confirm it."""
    return step <= tol or (step <= 1e-8 and step <= 1e-3 * previous)


def _current(base: Array, collector: Array, emitter: Array, p: gp.GummelPoon) -> tuple[Array, Array]:
    """(I_C, I_B) of a unit device with its terminals at these distances from the rail."""
    return gp.terminal(base - emitter, base - collector, p)



class _Internal:
    """The internal junction voltages of a topology's devices, carried from one Newton
    iteration of its nodes to the next, so that nodes and internal nodes are solved
    jointly: each evaluation linearises a device once at its internal voltages (moved
    first by the Newton step that follows the terminals' latest move) and returns the
    currents that step predicts, I − G·f, with the terminal conductances G — instead
    of solving the internal nodes to convergence at every trial of the nodes."""

    def __init__(self) -> None:
        self.state: dict[str, tuple[Array, Array, Array, Array, gp.Linear]] = {}
        self.moved = np.inf  # largest internal step of the last evaluations
        self.before = np.inf  # the same, one Newton iteration earlier

    def settled(self) -> bool:
        done = _converged(self.moved, self.before, 1e-13)
        self.moved, self.before = 0.0, self.moved
        return done

    def terminal(self, key: str, vbe: Array, vbc: Array, p: gp.GummelPoon) -> tuple[Array, Array, tuple[Array, ...]]:
        if not p.flags["res"]:
            return gp.terminal_g(vbe, vbc, p)
        old = self.state.get(key)
        if old is None or old[0].shape != np.shape(vbe):
            x, y = np.array(vbe, dtype=float), np.array(vbc, dtype=float)
            self.moved = np.inf
        else:
            x, y, vbe0, vbc0, lin = old
            dx, dy = lin.delta(vbe - vbe0, vbc - vbc0)
            dx, dy = np.clip(dx, -0.1, 0.1), np.clip(dy, -0.1, 0.1)
            x, y = x + dx, y + dy
            self.moved = max(self.moved, float(np.max(np.abs(dx), initial=0.0)), float(np.max(np.abs(dy), initial=0.0)))
        lin = gp.linearise(x, y, vbe, vbc, p)
        self.state[key] = (x, y, vbe, vbc, lin)
        ic, ib = lin.currents_at(0.0, 0.0)
        return ic, ib, lin.g


def _warm_start(p: gp.GummelPoon, key: str, g: Any, inner: _Internal) -> Array | None:
    """The last solution of the same mirrors (same parameter set and rows: the next sweep,
    the output-resistance steps), with its devices' internal nodes, as the start; None if none."""
    last = p.scratch.get(key)
    if last is None or last[0] is not g.row or last[1].shape[:-1] != g.i_in.shape or last[2] != g.distance.shape:
        return None
    inner.state = dict(last[3])
    return last[1].copy()


def _keep(p: gp.GummelPoon, key: str, g: Any, x: Array, inner: _Internal) -> None:
    p.scratch[key] = (g.row, x, g.distance.shape, dict(inner.state))


def _device(x: Array, base: Any, collector: Any, emitter: Any, p: gp.GummelPoon,
            rows: Array | None = None, internal: tuple[_Internal, str] | None = None) -> tuple[Array, Array, Array, Array]:
    """(I_C, I_B) of a unit device and their gradients with respect to the unknowns x
    (last axis), each terminal an unknown's index or a fixed voltage; ``rows`` picks the
    mirror of each branch.  V_BE = B − E and V_BC = B − C, so ∂/∂B = g_be + g_bc,
    ∂/∂C = −g_bc, ∂/∂E = −g_be (the terminal conductances).  With ``internal`` the
    device's internal nodes take one joint Newton step (``_Internal``); without, they
    are solved to convergence (``gp.terminal_g``)."""
    xs = x if rows is None else x[rows]
    val = lambda node: xs[..., node] if isinstance(node, int) else node  # noqa: E731
    vb, vc, ve = val(base), val(collector), val(emitter)
    vbe, vbc = np.broadcast_arrays(vb - ve, vb - vc)
    if internal is None:
        ic, ib, (a, b, c, d) = gp.terminal_g(vbe, vbc, p)
    else:
        ic, ib, (a, b, c, d) = internal[0].terminal(internal[1], vbe, vbc, p)
    dic = np.zeros(ic.shape + (x.shape[-1],))
    dib = np.zeros_like(dic)
    for node, w_be, w_bc in ((base, 1.0, 1.0), (collector, 0.0, -1.0), (emitter, -1.0, 0.0)):
        if isinstance(node, int):
            dic[..., node] += w_be * a + w_bc * b
            dib[..., node] += w_be * c + w_bc * d
    return ic, ib, dic, dib


def _sum_branches(g: Any, per_branch: Array) -> Array:
    """Σ over each mirror's branches (count copies) of an array with a trailing gradient axis."""
    x = per_branch * g.count[..., None]
    flat = _segment_sum_flat(g.row, x.reshape(x.shape[0], -1), g.i_in.shape[0])
    return flat.reshape((g.i_in.shape[0],) + x.shape[1:])


def beta_helper(g: Any, p: gp.GummelPoon) -> Solution:
    """β-helper mirror: Q1 (A0) collector at the input node N, base on the base line B;
    helper QB (helper_size units) base at N, emitter on B, collector on the opposite rail;
    outputs (m_k·A0) on B; an optional bleed current from B to the rail.
    Unknowns V_B, V_N:  KCL at N: I_in = A0·I_C1 + I_B,QB;  at B: I_E,QB = A0·I_B1 + Σ I_B,k + I_bleed
    (Newton's method with the analytic Jacobian)."""
    r = g.row
    a0 = g.dev.size_in
    hs = g.params["helper_size"]
    bleed = g.params["bleed"]
    out_p = _rows(p, r, g.is_scale)
    units = g.ratio * a0[r]
    top = np.broadcast_to(g.supply, g.i_in.shape)
    zero = np.zeros_like(g.i_in)
    B, N = 0, 1  # noqa: N806 (node names)

    inner = _Internal()

    def resid(x: Array) -> tuple[Array, Array]:
        ic1, ib1, dic1, dib1 = _device(x, B, N, zero, p, internal=(inner, "q1"))
        ich, ibh, dich, dibh = _device(x, N, top, B, p, internal=(inner, "helper"))
        _, ibk, _, dibk = _device(x, B, g.distance, 0.0 * g.distance, out_p, rows=r, internal=(inner, "out"))
        f_n = a0 * ic1 + hs * ibh - g.i_in
        f_b = hs * (ich + ibh) - a0 * ib1 - _segment_sum(g, units * ibk) - bleed
        j_n = a0[..., None] * dic1 + hs[..., None] * dibh
        j_b = hs[..., None] * (dich + dibh) - a0[..., None] * dib1 - _sum_branches(g, units[..., None] * dibk)
        return np.stack([f_n, f_b], axis=-1), np.stack([j_n, j_b], axis=-2)

    start = _warm_start(p, "beta_helper", g, inner)
    if start is None:
        vb0 = gp.vbe_guess(g.i_in / a0, p)
        vn0 = vb0 + gp.vbe_guess(np.maximum(g.i_in / a0 * 0.05 + bleed / hs, 1e-12), p)
        start = np.stack([vb0, vn0], axis=-1)
    x = newton_system(resid, start, jacobian=True, settled=inner.settled)
    _keep(p, "beta_helper", g, x, inner)
    vb, vn = x[..., 0], x[..., 1]
    ic, _ = _current(vb[r], g.distance, 0.0 * g.distance, out_p)
    ich, _ = _current(vn, top, vb, p)
    current = units * ic
    return vn, current, np.broadcast_to(vb[r], current.shape).copy(), hs * ich + bleed


def wilson(g: Any, p: gp.GummelPoon, four: bool = False) -> Solution:
    """Wilson mirror (one output, ratio m): Q1 (A0) collector at N (three devices) or at X
    under the diode Q4 (A0) from N (four devices), base on B; Q2 (m·A0) diode on B (it
    carries the pair's mismatch); Q3 (m·A0) base at N, emitter on B, collector the output.
    Unknowns V_B, V_N (and V_X): KCL at N, at B (I_E3 = I_C2 + I_B2 + I_B1) and at X
    (Newton's method with the analytic Jacobian)."""
    a0 = g.dev.size_in
    m = g.ratio
    d = g.distance
    q2 = p if g.is_scale is None else p.with_is_scale(g.is_scale)
    zero = np.zeros_like(g.i_in)
    B, N, X = 0, 1, (2 if four else 1)  # noqa: N806 (node names; the three-device X is N)

    inner = _Internal()

    def resid(x: Array) -> tuple[Array, Array]:
        ic1, ib1, dic1, dib1 = _device(x, B, X, zero, p, internal=(inner, "q1"))
        ic2, ib2, dic2, dib2 = _device(x, B, B, zero, q2, internal=(inner, "q2"))
        ic3, ib3, dic3, dib3 = _device(x, N, d, B, p, internal=(inner, "q3"))
        ma, a = (m * a0)[..., None], a0[..., None]
        f_b = m * a0 * (ic3 + ib3) - m * a0 * (ic2 + ib2) - a0 * ib1
        j_b = ma * (dic3 + dib3) - ma * (dic2 + dib2) - a * dib1
        if four:
            ic4, ib4, dic4, dib4 = _device(x, N, N, X, p, internal=(inner, "q4"))
            f_n = a0 * (ic4 + ib4) + m * a0 * ib3 - g.i_in
            f_x = a0 * ic1 - a0 * (ic4 + ib4)
            j_n = a * (dic4 + dib4) + ma * dib3
            j_x = a * dic1 - a * (dic4 + dib4)
            return np.stack([f_b, f_n, f_x], axis=-1), np.stack([j_b, j_n, j_x], axis=-2)
        f_n = a0 * ic1 + m * a0 * ib3 - g.i_in
        j_n = a * dic1 + ma * dib3
        return np.stack([f_b, f_n], axis=-1), np.stack([j_b, j_n], axis=-2)

    vb0 = gp.vbe_guess(g.i_in / a0, p) - p.nf * p.vt * np.log(np.maximum(m, 1e-9))
    vn0 = vb0 + gp.vbe_guess(g.i_in / a0, p)
    start = [vb0, vn0] + ([vn0 - gp.vbe_guess(g.i_in / a0, p)] if four else [])
    key = "wilson4" if four else "wilson"
    warm = _warm_start(p, key, g, inner)
    x = newton_system(resid, np.stack(start, axis=-1) if warm is None else warm, jacobian=True,
                      settled=inner.settled)
    _keep(p, key, g, x, inner)
    vb, vn = x[..., 0], x[..., 1]
    ic3, _ = _current(vn, d, vb, p)
    current = m * a0 * ic3
    return vn, current, np.broadcast_to(vn, current.shape).copy(), zero


def cascode(g: Any, p: gp.GummelPoon) -> Solution:
    """Cascode mirror: Q1 (A0) diode on B, Q3 (A0) diode from N down to B; per output a
    mirror device Q2_k (m_k·A0, base B, collector X_k) under a cascode device Q4_k
    (m_k·A0, base N, emitter X_k, collector the output).  For given V_B, V_N each X_k
    solves I_C2 = I_E4 (inner Newton, analytic slope); V_B, V_N solve KCL at B and at N
    (outer Newton, analytic Jacobian: X_k's dependence on V_B, V_N by the implicit-function
    theorem, ∂X/∂V = −(∂h/∂V)/(∂h/∂X) with h = I_C2 − I_E4)."""
    r = g.row
    a0 = g.dev.size_in
    out_p = _rows(p, r, g.is_scale)
    p_r = p.take(r)
    units = g.ratio * a0[r]
    d = g.distance
    zero = np.zeros_like(g.i_in)
    state: dict[str, Array | None] = {"x": None}
    B, N, X = 0, 1, 2  # noqa: N806 (node names; X is a per-branch unknown)

    def branch_devices(vb: Array, vn: Array, vx: Array) -> tuple[Array, ...]:
        y = np.stack([vb[r], vn[r], vx], axis=-1)
        ic2, ib2, dic2, dib2 = _device(y, B, X, 0.0 * vx, out_p)
        ic4, ib4, dic4, dib4 = _device(y, N, d, X, p_r)
        return ic2, ib2, dic2, dib2, ic4, ib4, dic4, dib4

    def middle(vb: Array, vn: Array) -> Array:
        def f(x: Array) -> tuple[Array, Array]:
            ic2, _, dic2, _, ic4, ib4, dic4, dib4 = branch_devices(vb, vn, x[..., 0])
            return (ic2 - (ic4 + ib4))[..., None], (dic2 - dic4 - dib4)[..., X][..., None, None]

        old = state["x"]
        start = old if old is not None and old.shape == d.shape + (1,) else (0.5 * (vb[r] + 0.0 * d))[..., None]
        vx = newton_system(f, start, jacobian=True)
        state["x"] = vx
        return vx[..., 0]

    def resid(x: Array) -> tuple[Array, Array]:
        vb, vn = x[..., 0], x[..., 1]
        vx = middle(vb, vn)
        ic2, ib2, dic2, dib2, ic4, ib4, dic4, dib4 = branch_devices(vb, vn, vx)
        dh = dic2 - dic4 - dib4  # h = I_C2 − I_E4 = 0 along the solution
        dx_dv = -dh[..., :2] / dh[..., X:X + 1]  # (∂X/∂V_B, ∂X/∂V_N)
        # total derivatives of the branch currents with respect to (V_B, V_N)
        tot = lambda grad: grad[..., :2] + grad[..., X:X + 1] * dx_dv  # noqa: E731
        ic1, ib1, dic1, dib1 = _device(x, B, B, zero, p)
        ic3, ib3, dic3, dib3 = _device(x, N, N, B, p)
        a = a0[..., None]
        f_b = a0 * (ic3 + ib3) - a0 * (ic1 + ib1) - _segment_sum(g, units * ib2)
        f_n = a0 * (ic3 + ib3) + _segment_sum(g, units * ib4) - g.i_in
        j_b = a * (dic3 + dib3) - a * (dic1 + dib1) - _sum_branches(g, units[..., None] * tot(dib2))
        j_n = a * (dic3 + dib3) + _sum_branches(g, units[..., None] * tot(dib4))
        return np.stack([f_b, f_n], axis=-1), np.stack([j_b, j_n], axis=-2)

    vb0 = gp.vbe_guess(g.i_in / a0, p)
    x = newton_system(resid, np.stack([vb0, 2.0 * vb0], axis=-1), jacobian=True)
    vb, vn = x[..., 0], x[..., 1]
    vx = middle(vb, vn)
    ic4, _ = _current(vn[r], d, vx, p_r)
    current = units * ic4
    return vn, current, np.broadcast_to(vn[r], current.shape).copy(), zero


def degenerated(g: Any, p: gp.GummelPoon) -> Solution:
    """Simple mirror with emitter resistors: R_E on the input device (A0 units), R_E/m_k on
    output k (m_k·A0 units), so every unit device sees R_E·A0.  For a given base-line
    voltage V_N each device's emitter node E solves E = R_E·A0·I_E (inner Newton); V_N
    solves KCL at the input node (outer Newton)."""
    r = g.row
    a0 = g.dev.size_in
    r_unit = g.params["r_emitter"] * a0  # the resistance one unit device sees
    out_p = _rows(p, r, g.is_scale)
    units = g.ratio * a0[r]
    d = g.distance
    state: dict[str, Array | None] = {"in": None, "out": None}

    def emitter(vn: Array, collector: Array, q: gp.GummelPoon, res: Array, key: str) -> Array:
        def f(e: Array) -> Array:
            ic, ib = _current(vn, collector, e[..., 0], q)
            return (e[..., 0] - res * (ic + ib))[..., None]

        old = state[key]
        start = old if old is not None and old.shape == vn.shape + (1,) else np.zeros(vn.shape + (1,))
        e = newton_system(f, start)
        state[key] = e
        return e[..., 0]

    def currents(vn: Array) -> tuple[Array, Array, Array, Array]:
        e1 = emitter(vn, vn, p, r_unit, "in")
        ic1, ib1 = _current(vn, vn, e1, p)
        ek = emitter(vn[r], d, out_p, r_unit[r], "out")
        ick, ibk = _current(vn[r], d, ek, out_p)
        return ic1, ib1, ick, ibk

    def resid(x: Array) -> Array:
        ic1, ib1, _, ibk = currents(x[..., 0])
        return (a0 * (ic1 + ib1) + _segment_sum(g, units * ibk) - g.i_in)[..., None]

    start = gp.vbe_guess(g.i_in / a0, p) + r_unit * g.i_in / a0
    vn = newton_system(resid, start[..., None])[..., 0]
    _, _, ick, _ = currents(vn)
    current = units * ick
    return vn, current, np.broadcast_to(vn[r], current.shape).copy(), np.zeros_like(g.i_in)
