"""Device equations as pure functions over numpy arrays.

All functions broadcast: parameters and currents may carry extra trailing
axes (cases, samples, corners).  Conventions follow the SPICE models the
netlists are checked against (ngspice's Gummel–Poon BJT without parasitics,
and the level-1 MOSFET).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

BOLTZMANN = 1.380649e-23  # J/K, exact (SI 2019)
CHARGE = 1.602176634e-19  # C, exact (SI 2019)

Array = NDArray[np.float64]


def thermal_voltage(kelvin: ArrayLike) -> Array:
    """V_T = kT/q.

    >>> round(float(thermal_voltage(300.15)) * 1e3, 3)
    25.865
    """
    return np.asarray(kelvin, dtype=float) * (BOLTZMANN / CHARGE)


def bjt_is_at(is_nom: ArrayLike, kelvin: ArrayLike, tnom: ArrayLike, xti: ArrayLike, eg: ArrayLike) -> Array:
    """IS(T) = IS·exp[(T/TNOM − 1)·EG/V_T + XTI·ln(T/TNOM)] (SPICE Gummel–Poon, TLEV = 0)."""
    ratio = np.asarray(kelvin, dtype=float) / np.asarray(tnom, dtype=float)
    vt = thermal_voltage(kelvin)
    return np.asarray(is_nom) * np.exp((ratio - 1.0) * np.asarray(eg) / vt + np.asarray(xti) * np.log(ratio))


def bjt_beta_at(beta_nom: ArrayLike, kelvin: ArrayLike, tnom: ArrayLike, xtb: ArrayLike) -> Array:
    """BF(T) = BF·(T/TNOM)^XTB."""
    return np.asarray(beta_nom) * (np.asarray(kelvin, dtype=float) / np.asarray(tnom)) ** np.asarray(xtb)


def bjt_vbe(ic: ArrayLike, is_area: ArrayLike, vt: ArrayLike) -> Array:
    """Base-emitter voltage carrying collector current ``ic`` at VCB = 0."""
    return np.asarray(vt) * np.log(np.asarray(ic) / np.asarray(is_area))


def early_factor(vcb: ArrayLike, early: ArrayLike) -> Array:
    """Collector current factor (1 + VCB/VAF) of the simulator's Early model."""
    return 1.0 + np.asarray(vcb) / np.asarray(early)


def mos_vgs(i_d: ArrayLike, beta: ArrayLike, vth: ArrayLike, lam: ArrayLike) -> Array:
    """Gate-source voltage of a diode-connected square-law device.

    Solves  i_d = ½·beta·(VGS − VT)²·(1 + λ·VGS)  for VGS > VT, where
    beta = KP·W/L.  Newton's method from the λ = 0 solution; the function
    is monotone and convex above VT so it converges in a few steps.
    """
    i_d, beta, vth, lam = (np.asarray(x, dtype=float) for x in (i_d, beta, vth, lam))
    vov = np.sqrt(2.0 * i_d / (beta * (1.0 + lam * vth)))
    for _ in range(60):
        vgs = vth + vov
        f = 0.5 * beta * vov**2 * (1.0 + lam * vgs) - i_d
        df = beta * vov * (1.0 + lam * vgs) + 0.5 * beta * vov**2 * lam
        step = f / df
        vov = vov - step
        if np.all(np.abs(step) <= 1e-15 * np.maximum(vov, 1e-3)):
            break
    return vth + vov


def clm_factor(vds: ArrayLike, lam: ArrayLike) -> Array:
    """Drain current factor (1 + λ·VDS) of the level-1 MOS model."""
    return 1.0 + np.asarray(lam) * np.asarray(vds)
