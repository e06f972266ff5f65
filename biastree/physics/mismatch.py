"""Transconductance efficiency g_m/I_D from strong to weak inversion, for the
threshold part of MOS current mismatch.

A device's current deviation is σ(ΔI/I)² = (g_m/I_D)²·σ²(V_T) + σ²(Δβ/β)
(Lakshmikumar et al., IEEE JSSC SC-21(6), 1986; Kinget, IEEE JSSC 40(6),
2005).  The square law gives g_m/I_D = 2/V_ov, which grows without bound as
V_ov → 0; a real device stops at the weak-inversion value 1/(n·U_T).  The
interpolation used here is the EKV charge-based one (Enz and Vittoz,
*Charge-Based MOS Transistor Modeling*, Wiley 2006, saturation, from
memory):

    g_m·n·U_T/I_D = 2/(1 + √(1 + 4·IC)),  IC = I_D/I_spec,

written with the square-law overdrive V_ov = √(2·I_D/(KP·W/L)) so that it
tends to exactly 2/V_ov in strong inversion (biastree's level-1 model) by
taking √(4·IC) = V_ov/(n·U_T):

    g_m/I_D = 2/(n·U_T + √((n·U_T)² + V_ov²)).

The slope factor n is 1.3–1.5 in bulk CMOS (common practice; Tsividis,
*Operation and Modeling of the MOS Transistor*, from memory); 1.4 is used.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from biastree.physics.devices import Array

SLOPE_FACTOR = 1.4  # n, weak-inversion slope factor (common practice: 1.3–1.5)


def gm_over_id(vov: ArrayLike, ut: ArrayLike, n: float = SLOPE_FACTOR) -> Array:
    """g_m/I_D (1/V) from the square-law overdrive, strong to weak inversion (EKV).

    >>> round(float(gm_over_id(1.0, 0.025865)), 3)  # strong inversion: close to 2/V_ov
    1.929
    >>> round(float(gm_over_id(0.0, 0.025865) * 1.4 * 0.025865), 12)  # weak: 1/(n·U_T)
    1.0
    """
    nut = n * np.asarray(ut, dtype=float)
    return 2.0 / (nut + np.sqrt(nut**2 + np.asarray(vov, dtype=float) ** 2))


def square_law_share(vov: ArrayLike, ut: ArrayLike, n: float = SLOPE_FACTOR) -> Array:
    """(g_m/I_D) over the square law's 2/V_ov: the factor (≤ 1) by which a threshold
    deviation fed to a square-law solver must be scaled to move the current as a real
    device's would.  1 at V_ov → ∞, V_ov/(2·n·U_T) at V_ov → 0.

    >>> round(float(square_law_share(0.5, 0.025865)), 4)
    0.9302
    """
    vov = np.asarray(vov, dtype=float)
    return gm_over_id(vov, ut, n) * vov / 2.0


__all__ = ["SLOPE_FACTOR", "gm_over_id", "square_law_share"]
