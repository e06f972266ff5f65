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
    out = p.take(row)
    return out if scale is None else out.with_is_scale(scale)


def diode_current(v: Array, p: gp.GummelPoon) -> Array:
    """Terminal current I_C + I_B of a diode-connected unit device at V_BE = ``v``."""
    ic, ib = gp.terminal(v, np.zeros_like(v), p)
    return ic + ib


def diode_voltage(current: Array, p: gp.GummelPoon) -> Array:
    """V_BE of a diode-connected unit device carrying ``current``."""
    return gp.solve_increasing(lambda v: diode_current(v, p) - current, gp.vbe_guess(current, p))


def emitter_voltage_for(base: Array, collector: Array, emitter_current: Array, p: gp.GummelPoon) -> Array:
    """Emitter voltage of a unit device whose base and collector sit at ``base`` and
    ``collector`` and whose emitter carries ``emitter_current`` (an emitter follower)."""
    def resid(ve: Array) -> Array:
        ic, ib = gp.terminal(base - ve, base - collector, p)
        return emitter_current - (ic + ib)  # falls as V_E rises: negate for an increasing residual

    start = base - gp.vbe_guess(emitter_current, p)
    return gp.solve_increasing(resid, start)


def simple(g: Any, p: gp.GummelPoon) -> Solution:
    """Simple mirror: diode-connected input (A0 units), outputs of m_k·A0 units on its base line.

    KCL at the input node:  I_in = A0·(I_C1 + I_B1)(V) + Σ_k count_k·m_k·A0·I_B,k(V, V − d_k).
    """
    r = g.row
    a0 = g.dev.size_in
    out_p = _rows(p, r, g.is_scale)
    units = g.ratio * a0[r]

    def resid(v: Array) -> Array:
        vb = v[r]
        _, ib = gp.terminal(vb, vb - g.distance, out_p)
        return a0 * diode_current(v, p) + g.segment_sum(units * ib) - g.i_in

    start = gp.vbe_guess(g.i_in / a0, p)
    v = gp.solve_increasing(resid, start)
    ic, _ = gp.terminal(v[r], v[r] - g.distance, out_p)
    current = units * ic
    return v, current, np.broadcast_to(v[r], current.shape).copy(), np.zeros_like(g.i_in)
