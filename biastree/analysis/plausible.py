"""Plausibility of a solved result, checked before anything reports it.

The input ranges (``biastree.input.checks.check_plausible``) keep most
nonsense out, but a plan may list values under ``allow_unusual``, and
extreme combinations can still drive the equations somewhere no circuit
goes.  A result that is not physical is refused with the place it concerns
(``mirrors.m2: input voltage -0.30 V …``) instead of being reported as a
pass or a fail:

* any number that is not finite (NaN, ±inf) in currents, voltages, errors or margins;
* a mirror input voltage (V_BE or V_GS) that is not positive or exceeds the supply;
* a MOS mirror whose square law has no V_GS carrying its input current within
  the range of a float: a device so strong (huge KP·W/L) that the overdrive
  V_GS − V_th is below the numbers' resolution, or a λ so large that
  λ·V_GS overflows, so every output current computed from it is zero or noise;
* a load whose delivered current is exactly zero at its nominal voltage but
  not at the ends of its range (relative regulation has no meaning there);
* a compliance margin or reference headroom larger than the supply;
* a branch current more than ``OVERDRIVE`` times its ratio times its own
  mirror's input current (no mirror stage multiplies its input by more than
  its ratio plus an Early/λ term of a few tens of percent; a deep chain may
  compound such terms, so the check is per stage, not against the reference).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from biastree.analysis.audit import Audit
from biastree.analysis.solve import OperatingPoint
from biastree.errors import SolveError
from biastree.physics.devices import mos_vgs
from biastree.units import format_si

OVERDRIVE = 10.0  # a branch current above 10× its ideal value is not a mirror at work


def _first(mask: np.ndarray) -> int | None:
    rows = np.flatnonzero(np.any(mask.reshape(mask.shape[0], -1), axis=1)) if mask.size else []
    return int(rows[0]) if len(rows) else None


def _finite_loads(tree: Any, arrays: tuple[tuple[Any, str], ...]) -> None:
    for values, what in arrays:
        k = _first(~np.isfinite(np.asarray(values, dtype=float)))
        if k is not None:
            _fail(("loads", tree.loads[k]), f"the {what} of load '{tree.loads[k]}' is not a finite number")


def _fail(path: tuple[Any, ...], message: str) -> None:
    raise SolveError(f"implausible result: {message}; check the values this depends on "
                     "(device parameters, ratios, conditions)", path)


def check_operating_point(op: OperatingPoint) -> OperatingPoint:
    """The checks of ``check_result`` that need only the solved operating point
    (finite currents and voltages, input voltages within the supply, a square law
    that can carry each MOS mirror's input current); shared by the condition
    matrix of ``corners`` and ``sweep``."""
    tree = op.tree
    mirrors = tree.mirrors
    supply = op.columns.supply[None, :] if op.columns is not None else np.array([[tree.plan.supply]])

    for name, values, what in (
        ("m_i_in", op.m_i_in, "input current"),
        ("m_v_in", op.m_v_in, "input voltage"),
    ):
        m = _first(~np.isfinite(values))
        if m is not None:
            _fail(("mirrors", mirrors[m]), f"the {what} of mirror '{mirrors[m]}' is not a finite number")
    for values, what in ((op.b_current, "output current"), (op.b_distance, "output voltage")):
        b = _first(~np.isfinite(values))
        if b is not None:
            parent = mirrors[int(tree.b_parent[b])]
            _fail(("mirrors", parent, "branches", int(tree.b_index[b])),
                  f"the {what} of this branch of '{parent}' is not a finite number")

    m = _first((op.m_v_in <= 0) | (op.m_v_in > supply))
    if m is not None:
        kind = "V_BE" if tree.m_bipolar[m] else "V_GS"
        v = float(op.m_v_in[m][np.argmax((op.m_v_in[m] <= 0) | (op.m_v_in[m] > supply[0]))])
        _fail(("mirrors", mirrors[m], "device"),
              f"input voltage {kind} of mirror '{mirrors[m]}' is {format_si(v, 'V')}, outside 0 … the supply")

    dev = op.devices
    if dev is not None and dev.tables is None and np.shape(dev.vth) == op.m_v_in.shape:
        mos = ~tree.m_bipolar[:, None] & np.isfinite(np.asarray(dev.vth, dtype=float))
        with np.errstate(all="ignore"):  # the residual of extreme values may overflow: then it is refused
            vgs = mos_vgs(op.m_i_in, dev.k_in, dev.vth, dev.lam)
            vov = vgs - dev.vth
            back = 0.5 * dev.k_in * vov**2 * (1.0 + dev.lam * vgs)
            off = ~(np.abs(back / op.m_i_in - 1.0) <= 1e-3)
        lost = mos & (~(op.m_v_in - dev.vth > 0) | ~(vov > 0) | off)
        m = _first(lost)
        if m is not None:
            _fail(("mirrors", mirrors[m], "device"),
                  f"the square law of mirror '{mirrors[m]}' has no V_GS carrying its input current within the "
                  "range of the numbers (overdrive V_GS − V_th below their resolution, or λ·V_GS overflowing)")

    return op


def check_result(result: Audit) -> Audit:
    """Raise ``SolveError`` (with the key path of the mirror or load) when the
    solved result is not physical; return the result unchanged otherwise.

    >>> import biastree
    >>> result = biastree.check("samples/bipolar_small.yaml")
    >>> check_result(result) is result
    True
    """
    op, tree = result.op, result.tree
    mirrors, loads = tree.mirrors, tree.loads
    supply = op.columns.supply[None, :] if op.columns is not None else np.array([[tree.plan.supply]])
    check_operating_point(op)
    _finite_loads(tree, ((result.delivered, "delivered current"), (result.error, "error"),
                         (result.margin, "margin"), (result.compliance, "compliance margin")))

    nominal = np.asarray(result.delivered, dtype=float)
    if nominal.ndim == 2 and nominal.shape[1] == 3:
        k = _first((nominal[:, 1] == 0) & ((nominal[:, 0] != 0) | (nominal[:, 2] != 0)))
        if k is not None:
            _fail(("loads", loads[k]), f"load '{loads[k]}' receives exactly no current at its nominal voltage "
                                       "but some at the ends of its range")

    top = float(np.max(supply))
    k = _first(np.asarray(result.compliance) > top)
    if k is not None:
        _fail(("loads", loads[k]), f"compliance margin {format_si(float(result.compliance[k]), 'V')} of load "
                                   f"'{loads[k]}' is larger than the supply ({format_si(top, 'V')})")
    if not result.reference_headroom <= top:
        _fail(("reference",), f"reference headroom {format_si(result.reference_headroom, 'V')} is larger than "
                              f"the supply ({format_si(top, 'V')})")

    # per stage: a deep chain may compound small Early gains into a large total, which is real
    ideal = op.m_i_in[tree.b_parent] * tree.b_ratio[:, None]
    over = op.b_current > OVERDRIVE * ideal
    b = _first(over)
    if b is not None:
        parent = mirrors[int(tree.b_parent[b])]
        col = int(np.argmax(over[b]))
        _fail(("mirrors", parent, "branches", int(tree.b_index[b])),
              f"this branch of '{parent}' carries {format_si(float(op.b_current[b, col]), 'A')}, more than "
              f"{OVERDRIVE:g}× the {format_si(float(ideal[b, col]), 'A')} its ratio makes of the mirror's input")
    return result


def check_conditions(result: Any) -> Any:
    """The same checks on a condition matrix (``analysis.corners.ConditionResult``:
    ``corners``, ``sweep``): raise ``SolveError`` or return the result unchanged."""
    check_operating_point(result.op)
    _finite_loads(result.tree, ((result.op.l_current, "delivered current"),
                                (result.op.b_compliance[result.tree.l_branch], "compliance margin")))
    return result


SIGMA_LIMIT = 1e6  # a relative σ above a million: the first-order (linear) model means nothing there


def check_sigma(tree: Any, sigma: Any) -> Any:
    """Refuse a first-order mismatch σ (relative, per load) that is not finite or
    beyond ``SIGMA_LIMIT``; return it."""
    _finite_loads(tree, ((sigma, "mismatch σ"),))
    k = _first(np.asarray(sigma, dtype=float) > SIGMA_LIMIT)
    if k is not None:
        _fail(("loads", tree.loads[k]), f"the first-order mismatch σ of load '{tree.loads[k]}' is "
                                        f"{float(sigma[k]):.3g} (relative), where the first-order model means nothing")
    return sigma


def check_samples(tree: Any, currents: Any) -> Any:
    """Refuse Monte Carlo currents (per load × sample) that are not finite; return them."""
    _finite_loads(tree, ((currents, "current in some Monte Carlo sample"),))
    return currents
