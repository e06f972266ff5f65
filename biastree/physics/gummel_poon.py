"""The Gummel–Poon bipolar model at DC, as SPICE computes it, over numpy arrays.

Sources: ngspice manual (BJT chapter) and ngspice's model code (``bjtload.c``,
``bjttemp.c``); Massobrio & Antognetti, *Semiconductor Device Modeling with
SPICE*, 2nd ed., ch. 2.  With V_BE, V_BC the intrinsic junction voltages,
V_T = kT/q:

    I_BE = IS·(e^(V_BE/(NF·V_T)) − 1)          I_BC = IS·(e^(V_BC/(NR·V_T)) − 1)
    q_1 = 1/(1 − V_BC/VAF − V_BE/VAR)          q_2 = I_BE/IKF + I_BC/IKR
    q_b = q_1·(1 + (1 + 4·q_2)^NKF)/2          (NKF = ½ by default: the square root)
    I_C = (I_BE − I_BC)/q_b − I_BC/BR − I_BCn
    I_B = I_BE/BF + I_BEn + I_BC/BR + I_BCn
    I_BEn = ISE·(e^(V_BE/(NE·V_T)) − 1) + GMIN·V_BE,  I_BCn = ISC·(e^(V_BC/(NC·V_T)) − 1) + GMIN·V_BC

Base resistance r_bb = RBM + (RB − RBM)/q_b, or with IRB
r_bb = RBM + 3(RB − RBM)(tan z − z)/(z·tan² z), z = (−1 + √(1 + 14.59·I_B/IRB))/(2.43·√(I_B/IRB));
RE and RC in series.  A reverse-biased junction below −3·N·V_T follows SPICE's
cubic continuation.  Every parameter is per unit device (area 1): a device of
``m`` copies carries m times the current of one at the same terminal voltages,
which is what SPICE's ``m=`` does.

Voltages here are distances from the device's rail (the npn view); a pnp is
the same equations with every voltage and current reversed.

>>> p = from_card({"is": 1e-16, "bf": 100.0}, 300.15)
>>> ic, ib = intrinsic(np.array(0.7), np.array(0.0), p)
>>> round(float(ic / ib), 6)
100.0
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, replace
from typing import Mapping

import numpy as np

from biastree.physics.devices import Array, thermal_voltage

ZERO_CELSIUS = 273.15
GMIN = 0.0  # conductance across every junction, S (SPICE puts gmin there; our netlists set it to 1e-18)

# DC parameters the solution uses, with SPICE's defaults (None: not given = absent).
DC_DEFAULTS: dict[str, float | None] = {
    "is": 1e-16, "ibe": None, "ibc": None, "bf": 100.0, "nf": 1.0, "vaf": None, "ikf": None, "nkf": 0.5,
    "ise": 0.0, "ne": 1.5, "br": 1.0, "nr": 1.0, "var": None, "ikr": None, "isc": 0.0, "nc": 2.0,
    "rb": 0.0, "irb": None, "rbm": None, "re": 0.0, "rc": 0.0,
    "xtb": 0.0, "xti": 3.0, "eg": 1.11, "tnom": 27.0, "tlev": 0.0,
}
ALIASES = {"va": "vaf", "ik": "ikf", "c2": "ise", "vb": "var", "c4": "isc", "nk": "nkf", "tref": "tnom",
           "trb": "trb1", "trc": "trc1", "tre": "tre1"}
# first/second-order temperature coefficients: (1 + t1·ΔT + t2·ΔT²) on the parameter
TEMP_COEFFS = ("bf", "br", "ikf", "ikr", "irb", "nc", "ne", "nf", "nr", "rb", "rc", "re", "vaf", "var")
TEMP_PARAMS = {f"t{p}{k}" for p in TEMP_COEFFS for k in (1, 2)} | {"trm1", "trm2", "tis1", "tis2", "tise1",
                                                                   "tise2", "tisc1", "tisc2"}
# Parameters with no effect on the DC solution of a mirror (charge storage, transit
# times, excess phase, noise, substrate junction with ISS = 0, limits, layout); accepted silently.
DC_IRRELEVANT = frozenset("""
level cje vje pe mje me tf xtf vtf itf ptf cjc vjc pc mjc mc xcjc tr cjs csub ccs vjs ps mjs ms fc kf af
subs iss ns tns1 tns2 tiss1 tiss2 tlevc ctc cte cts tvjc tvje tvjs titf1 titf2 ttf1 ttf2 ttr1 ttr2
tmje1 tmje2 tmjc1 tmjc2 tmjs1 tmjs2 dcap gap1 gap2 areab areac area m
vbe_max vbc_max vce_max pd_max ic_max ib_max te_max rth0 quasimod vg cn d npn pnp type
""".split())


def known(name: str) -> bool:
    """Whether a card parameter is one the DC solution reads, or one it may ignore."""
    key = ALIASES.get(name, name)
    return key in DC_DEFAULTS or key in TEMP_PARAMS or key in DC_IRRELEVANT


# intrinsic-collector (quasi-saturation) parameters change the DC solution; not modelled: refused
UNSUPPORTED = frozenset({"rco", "vo", "gamma", "qco"})


@dataclass(frozen=True)
class GummelPoon:
    """DC parameters of one unit device at its operating temperature (arrays broadcast)."""

    vt: Array
    is_be: Array  # saturation current of the B-E transport diode (IS, or IBE when IBE and IBC are given)
    is_bc: Array
    bf: Array
    br: Array
    nf: Array
    nr: Array
    ise: Array
    ne: Array
    isc: Array
    nc: Array
    inv_vaf: Array  # 0 = no forward Early effect
    inv_var: Array
    inv_ikf: Array  # 0 = no high injection
    inv_ikr: Array
    nkf: Array
    rb: Array
    rbm: Array
    irb: Array  # 0 = r_bb from q_b
    re: Array
    rc: Array
    gmin: Array

    def take(self, index: Array) -> GummelPoon:
        return GummelPoon(**{f.name: np.asarray(getattr(self, f.name))[index] for f in fields(self)})

    def with_is_scale(self, scale: Array | float) -> GummelPoon:
        """The same device with its IS scaled (mismatch of an output device)."""
        return replace(self, is_be=self.is_be * scale, is_bc=self.is_bc * scale)

    def ideal_outputs(self) -> GummelPoon:
        """No Early effect (VAF, VAR → ∞): the gain's β part alone."""
        return replace(self, inv_vaf=np.zeros_like(self.inv_vaf), inv_var=np.zeros_like(self.inv_var))

    @property
    def has_resistance(self) -> bool:
        return bool(np.any(self.rb) or np.any(self.rbm) or np.any(self.re) or np.any(self.rc))


def stack(cards: list[GummelPoon]) -> GummelPoon:
    """Rows of several devices as one (rows first)."""
    return GummelPoon(**{f.name: np.concatenate([np.atleast_2d(getattr(c, f.name)) for c in cards])
                         for f in fields(GummelPoon)})


def concat_columns(parts: list[GummelPoon]) -> GummelPoon:
    """Columns of several parameter sets side by side (last axis)."""
    return GummelPoon(**{f.name: np.concatenate([np.atleast_2d(getattr(c, f.name)) for c in parts], axis=-1)
                         for f in fields(GummelPoon)})


def _value(values: Mapping[str, float], key: str) -> float | None:
    if key in values:
        return values[key]
    for alias, target in ALIASES.items():
        if target == key and alias in values:
            return values[alias]
    return DC_DEFAULTS.get(key)


def from_card(values: Mapping[str, float], kelvin: float | Array, gmin: float = GMIN) -> GummelPoon:
    """DC parameters at ``kelvin`` from a card's values (lower-case names, SI; TNOM in °C),
    with the temperature laws of ngspice's ``bjttemp.c`` (TLEV 0, 1 or 3).

    >>> p = from_card({"is": 1e-16, "xti": 3, "eg": 1.11}, 310.15)
    >>> round(float(p.is_be / 1e-16), 4)  # IS(T)/IS 10 K above TNOM = 27 °C
    4.4018
    """
    v = {k.lower(): float(x) for k, x in values.items()}
    get = lambda key: _value(v, key)  # noqa: E731
    t = np.asarray(kelvin, dtype=float)
    tnom = float(get("tnom")) + ZERO_CELSIUS
    dt = t - tnom
    vt = thermal_voltage(t)
    coeff = lambda name: 1.0 + v.get(f"t{name}1", 0.0) * dt + v.get(f"t{name}2", 0.0) * dt * dt  # noqa: E731
    tlev = int(get("tlev"))
    if tlev not in (0, 1, 3):
        raise ValueError(f"TLEV={tlev} is not supported (0, 1 or 3)")
    nf, nr = float(get("nf")), float(get("nr"))
    factlog = (t / tnom - 1.0) * float(get("eg")) / vt + float(get("xti")) * np.log(t / tnom)
    is_nom = float(get("is"))
    ibe, ibc = get("ibe"), get("ibc")
    both = ibe is not None and ibc is not None
    if tlev == 3:
        power = 1.0 + v.get("tis1", 0.0) * dt + v.get("tis2", 0.0) * dt * dt
        is_t = is_nom ** power
        is_be = ibe ** power if both else is_t
        is_bc = ibc ** power if both else is_t
    else:
        is_t = is_nom * np.exp(factlog)
        is_be = ibe * np.exp(factlog / nf) if both else is_t
        is_bc = ibc * np.exp(factlog / nr) if both else is_t
    xtb = float(get("xtb"))
    bfactor = np.exp(np.log(t / tnom) * xtb) if tlev == 0 else (1.0 + xtb * dt if tlev == 1 else 1.0)
    bf = float(get("bf")) * (coeff("bf") if ("tbf1" in v or "tbf2" in v) else bfactor)
    br = float(get("br")) * (coeff("br") if ("tbr1" in v or "tbr2" in v) else bfactor)
    ise, isc = float(get("ise")), float(get("isc"))
    ne, nc = float(get("ne")), float(get("nc"))
    if tlev == 3:
        ise_t = ise ** (1.0 + v.get("tise1", 0.0) * dt + v.get("tise2", 0.0) * dt * dt) if ise else 0.0 * dt
        isc_t = isc ** (1.0 + v.get("tisc1", 0.0) * dt + v.get("tisc2", 0.0) * dt * dt) if isc else 0.0 * dt
    else:
        ise_t = ise * np.exp(factlog / ne) / bfactor
        isc_t = isc * np.exp(factlog / nc) / bfactor

    def inverse(key: str) -> Array:
        given = get(key)
        if given is None or given == 0:
            return np.zeros_like(t)
        return 1.0 / (given * coeff(key))

    rb = float(get("rb"))
    rbm_given = get("rbm")
    rbm = rb if rbm_given is None else float(rbm_given)
    irb = get("irb")
    re_, rc = float(get("re")), float(get("rc"))
    shape = np.shape(t)
    full = lambda x: np.broadcast_to(np.asarray(x, dtype=float), shape).astype(float)  # noqa: E731
    return GummelPoon(
        vt=full(vt), is_be=full(is_be), is_bc=full(is_bc), bf=full(bf), br=full(br),
        nf=full(nf * coeff("nf")), nr=full(nr * coeff("nr")), ise=full(ise_t), ne=full(ne * coeff("ne")),
        isc=full(isc_t), nc=full(nc * coeff("nc")), inv_vaf=full(inverse("vaf")), inv_var=full(inverse("var")),
        inv_ikf=full(inverse("ikf")), inv_ikr=full(inverse("ikr")), nkf=full(float(get("nkf"))),
        rb=full(rb * coeff("rb")), rbm=full(rbm * (1.0 + v.get("trm1", 0.0) * dt + v.get("trm2", 0.0) * dt * dt)),
        irb=full(0.0 if irb is None else irb * coeff("irb")),
        re=full(re_ * coeff("re") if re_ else 0.0), rc=full(rc * coeff("rc") if rc else 0.0), gmin=full(gmin),
    )


def _diode(v: Array, sat: Array, n_vt: Array) -> Array:
    """sat·(e^(v/nV_T) − 1), continued below −3·nV_T by SPICE's cubic form."""
    x = v / n_vt
    if np.all(x >= -3.0):  # the usual case: no junction reverse-biased beyond 3·nV_T
        return sat * np.expm1(x)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        reverse = -sat * (1.0 + (3.0 / (x * math.e)) ** 3)
        return np.where(x >= -3.0, sat * np.expm1(x), reverse)


def _junctions(vbe: Array, vbc: Array, p: GummelPoon) -> tuple[Array, Array, Array, Array]:
    """(I_C, I_B, I_BE, I_BC) of the intrinsic device."""
    cbe = _diode(vbe, p.is_be, p.nf * p.vt)
    cbc = _diode(vbc, p.is_bc, p.nr * p.vt)
    cben = p.gmin * vbe
    cbcn = p.gmin * vbc
    if np.any(p.ise):
        cben = cben + _diode(vbe, p.ise, p.ne * p.vt)
    if np.any(p.isc):
        cbcn = cbcn + _diode(vbc, p.isc, p.nc * p.vt)
    qb = base_charge(vbe, vbc, cbe, cbc, p)
    ic = (cbe - cbc) / qb - cbc / p.br - cbcn
    ib = cbe / p.bf + cben + cbc / p.br + cbcn
    return ic, ib, qb, cbe


def intrinsic(vbe: Array, vbc: Array, p: GummelPoon) -> tuple[Array, Array]:
    """Collector and base current of the intrinsic device (no RB, RE, RC)."""
    ic, ib, _, _ = _junctions(vbe, vbc, p)
    return ic, ib


def base_charge(vbe: Array, vbc: Array, cbe: Array, cbc: Array, p: GummelPoon) -> Array:
    """q_b: Early effect (q_1) and high injection (q_2)."""
    q1 = 1.0 / (1.0 - p.inv_vaf * vbc - p.inv_var * vbe)
    q2 = p.inv_ikf * cbe + p.inv_ikr * cbc
    arg = np.maximum(0.0, 1.0 + 4.0 * q2)
    sq = np.where(arg != 0, arg ** p.nkf, 1.0)
    return q1 * (1.0 + sq) / 2.0


def base_resistance(ib: Array, qb: Array, p: GummelPoon) -> Array:
    """r_bb between RBM and RB: from q_b, or from the base current when IRB is given."""
    spread = p.rb - p.rbm
    if not np.any(p.irb > 0):
        return p.rbm + spread / qb
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.maximum(ib / np.where(p.irb > 0, p.irb, 1.0), 1e-9)
        z = (-1.0 + np.sqrt(1.0 + 14.59025 * x)) / 2.4317 / np.sqrt(x)
        tz = np.tan(z)
        by_current = p.rbm + 3.0 * spread * (tz - z) / z / tz / tz
    return np.where(p.irb > 0, by_current, p.rbm + spread / qb)


def _terminal_residual(vbe_i: Array, vbc_i: Array, vbe: Array, vbc: Array, p: GummelPoon) -> tuple[Array, Array, Array, Array]:
    ic, ib, qb, _ = _junctions(vbe_i, vbc_i, p)
    drop_b = ib * base_resistance(ib, qb, p) if (np.any(p.rb) or np.any(p.rbm)) else 0.0
    f1 = vbe_i + drop_b + (ic + ib) * p.re - vbe
    f2 = vbc_i + drop_b - ic * p.rc - vbc
    return f1, f2, ic, ib


def terminal(vbe: Array, vbc: Array, p: GummelPoon, tol: float = 1e-13) -> tuple[Array, Array]:
    """Collector and base current of one unit device at terminal voltages V_BE, V_BC
    (RB, RE, RC included: the internal nodes are solved by Newton's method)."""
    vbe, vbc = np.broadcast_arrays(np.asarray(vbe, dtype=float), np.asarray(vbc, dtype=float))
    if not p.has_resistance:
        return intrinsic(vbe, vbc, p)
    x, y = vbe.copy(), vbc.copy()
    h = 1e-7
    for _ in range(100):
        f1, f2, ic, ib = _terminal_residual(x, y, vbe, vbc, p)
        a1, a2, _, _ = _terminal_residual(x + h, y, vbe, vbc, p)
        b1, b2, _, _ = _terminal_residual(x, y + h, vbe, vbc, p)
        j11, j21 = (a1 - f1) / h, (a2 - f2) / h
        j12, j22 = (b1 - f1) / h, (b2 - f2) / h
        det = j11 * j22 - j12 * j21
        dx = (f1 * j22 - f2 * j12) / det
        dy = (j11 * f2 - j21 * f1) / det
        # limit each step as SPICE limits junction voltages (a few V_T)
        dx = np.clip(dx, -0.1, 0.1)
        dy = np.clip(dy, -0.1, 0.1)
        x, y = x - dx, y - dy
        if np.all(np.abs(dx) <= tol) and np.all(np.abs(dy) <= tol):
            break
    return intrinsic(x, y, p)


def vbe_guess(current: Array, p: GummelPoon) -> Array:
    """V_BE of a diode-connected unit device carrying ``current`` (ideal terms only): a start."""
    return p.nf * p.vt * np.log1p(np.maximum(current, 1e-30) * (1.0 + 1.0 / p.bf) / p.is_be)


def solve_increasing(residual, x0: Array, step0: float = 0.02, tol: float = 1e-14, iters: int = 200) -> Array:  # type: ignore[no-untyped-def]
    """Root of an increasing function, elementwise: Newton with a finite-difference slope,
    kept inside a bracket that the iterates grow (robust from a rough start)."""
    x = np.array(x0, dtype=float)
    lo = np.full_like(x, -np.inf)
    hi = np.full_like(x, np.inf)
    h = 1e-8
    for _ in range(iters):
        f = residual(x)
        lo = np.where(f < 0, np.maximum(lo, x), lo)
        hi = np.where(f > 0, np.minimum(hi, x), hi)
        slope = (residual(x + h) - f) / h
        step = np.where(slope > 0, f / np.where(slope > 0, slope, 1.0), np.sign(f) * step0)
        step = np.clip(step, -0.1, 0.1)
        new = x - step
        # outside the bracket: bisect (or step out of it while it is open)
        outside = (new <= lo) | (new >= hi)
        mid = np.where(np.isfinite(lo) & np.isfinite(hi), 0.5 * (lo + hi), new)
        new = np.where(outside, mid, new)
        done = np.abs(new - x) <= tol * np.maximum(1.0, np.abs(x))
        x = new
        if np.all(done | (f == 0)):
            break
    return x
