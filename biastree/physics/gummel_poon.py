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

import functools
import math
from dataclasses import dataclass, fields, replace
from typing import Any, Mapping

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

    @functools.cached_property
    def scratch(self) -> dict[str, Any]:
        """Working space of the mirror solvers for this one parameter set (a group's devices
        within one solve): rows already taken, the last solution as the next start."""
        return {}

    @property
    def has_resistance(self) -> bool:
        return self.flags["res"]

    @functools.cached_property
    def n_vt(self) -> dict[str, Array]:
        """N·V_T of the four junction diodes (F, R, E, C), formed once."""
        return {"f": self.nf * self.vt, "r": self.nr * self.vt, "e": self.ne * self.vt, "c": self.nc * self.vt}

    @functools.cached_property
    def flags(self) -> dict[str, bool]:
        """Which optional terms any row uses (looked up once, not at every evaluation)."""
        rb = bool(np.any(self.rb) or np.any(self.rbm))
        return {"ise": bool(np.any(self.ise)), "isc": bool(np.any(self.isc)),
                "q2": bool(np.any(self.inv_ikf) or np.any(self.inv_ikr)), "rb": rb,
                "irb": bool(np.any(self.irb > 0)), "gmin": bool(np.any(self.gmin)),
                "nkf_half": bool(np.all(self.nkf == 0.5)),
                "res": rb or bool(np.any(self.re) or np.any(self.rc))}


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
    return _diode_g(v, sat, n_vt)[0]


def _diode_g(v: Array, sat: Array, n_vt: Array) -> tuple[Array, Array]:
    """The diode current and its conductance d/dv (ngspice ``bjtload.c``: below −3·nV_T,
    I = −sat·(1 + a), a = (3nV_T/(v·e))³, g = 3·sat·a/v)."""
    x = v / n_vt
    rev = x < -3.0
    if not rev.any():  # the usual case: no junction reverse-biased beyond 3·nV_T
        with np.errstate(over="ignore"):
            em1 = np.expm1(x)
        return sat * em1, sat * (em1 + 1.0) / n_vt
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        t = 3.0 / (math.e * x)
        a = t * t * t  # not t ** 3: pow of a negative base is ~100× slower in numpy
        i_rev, g_rev = -sat * (1.0 + a), 3.0 * sat * a / v
        if rev.all():  # an output's base-collector junction: reverse-biased everywhere
            return i_rev, g_rev
        em1 = np.expm1(x)
        return np.where(rev, i_rev, sat * em1), np.where(rev, g_rev, sat * (em1 + 1.0) / n_vt)


def _junctions(vbe: Array, vbc: Array, p: GummelPoon) -> tuple[Array, Array, Array, Array]:
    """(I_C, I_B, q_b, I_BE) of the intrinsic device."""
    ic, ib, qb, cbe = _junctions_g(vbe, vbc, p)[:4]
    return ic, ib, qb, cbe


def _junctions_g(vbe: Array, vbc: Array, p: GummelPoon) -> tuple[Array, ...]:
    """(I_C, I_B, q_b, I_BE) of the intrinsic device and the partial derivatives
    (∂I_C/∂V_BE, ∂I_C/∂V_BC, ∂I_B/∂V_BE, ∂I_B/∂V_BC, ∂q_b/∂V_BE, ∂q_b/∂V_BC), analytic
    as ngspice's ``bjtload.c`` computes them."""
    nvt = p.n_vt
    cbe, gbe = _diode_g(vbe, p.is_be, nvt["f"])
    cbc, gbc = _diode_g(vbc, p.is_bc, nvt["r"])
    if p.flags["gmin"]:
        cben, gben = p.gmin * vbe, p.gmin
        cbcn, gbcn = p.gmin * vbc, p.gmin
    else:
        cben = cbcn = gben = gbcn = 0.0
    if p.flags["ise"]:
        i, g = _diode_g(vbe, p.ise, nvt["e"])
        cben, gben = cben + i, gben + g
    if p.flags["isc"]:
        i, g = _diode_g(vbc, p.isc, nvt["c"])
        cbcn, gbcn = cbcn + i, gbcn + g
    # q_b = q_1·(1 + (1 + 4q_2)^NKF)/2
    q1 = 1.0 / (1.0 - p.inv_vaf * vbc - p.inv_var * vbe)
    if p.flags["q2"]:
        q2 = p.inv_ikf * cbe + p.inv_ikr * cbc
        arg = np.maximum(0.0, 1.0 + 4.0 * q2)
        with np.errstate(divide="ignore", invalid="ignore"):
            power = np.sqrt(arg) if p.flags["nkf_half"] else arg ** p.nkf  # NKF = ½ (the default): a square root
            sq = np.where(arg != 0, power, 1.0)
            dsq = np.where(arg != 0, 4.0 * p.nkf * sq / arg, 0.0)  # d sq / d q_2
        half = (1.0 + sq) / 2.0
        qb = q1 * half
        dqb_be = q1 * q1 * p.inv_var * half + q1 / 2.0 * dsq * p.inv_ikf * gbe
        dqb_bc = q1 * q1 * p.inv_vaf * half + q1 / 2.0 * dsq * p.inv_ikr * gbc
    else:
        qb = q1
        dqb_be = q1 * q1 * p.inv_var
        dqb_bc = q1 * q1 * p.inv_vaf
    it = (cbe - cbc) / qb
    ic = it - cbc / p.br - cbcn
    ib = cbe / p.bf + cben + cbc / p.br + cbcn
    gic_be = gbe / qb - it / qb * dqb_be
    gic_bc = -gbc / qb - it / qb * dqb_bc - gbc / p.br - gbcn
    gib_be = gbe / p.bf + gben
    gib_bc = gbc / p.br + gbcn
    return ic, ib, qb, cbe, gic_be, gic_bc, gib_be, gib_bc, dqb_be, dqb_bc


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


def _rbb_by_current(ib: Array, p: GummelPoon) -> Array:
    spread = p.rb - p.rbm
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.maximum(ib / np.where(p.irb > 0, p.irb, 1.0), 1e-9)
        z = (-1.0 + np.sqrt(1.0 + 14.59025 * x)) / 2.4317 / np.sqrt(x)
        tz = np.tan(z)
        return p.rbm + 3.0 * spread * (tz - z) / z / tz / tz


def base_resistance(ib: Array, qb: Array, p: GummelPoon) -> Array:
    """r_bb between RBM and RB: from q_b, or from the base current when IRB is given."""
    spread = p.rb - p.rbm
    if not p.flags["irb"]:
        return p.rbm + spread / qb
    return np.where(p.irb > 0, _rbb_by_current(ib, p), p.rbm + spread / qb)


def _base_resistance_g(ib: Array, qb: Array, p: GummelPoon) -> tuple[Array, Array, Array]:
    """r_bb and its derivatives with respect to I_B and to q_b."""
    spread = p.rb - p.rbm
    by_qb = p.rbm + spread / qb
    d_qb = -spread / (qb * qb)
    if not p.flags["irb"]:
        return by_qb, 0.0 * qb, d_qb
    # IRB: r_bb(I_B) is a smooth scalar function; its slope by a central difference of it alone
    h = np.maximum(np.abs(ib), 1e-30) * 1e-6
    by_ib = _rbb_by_current(ib, p)
    slope = (_rbb_by_current(ib + h, p) - _rbb_by_current(ib - h, p)) / (2.0 * h)
    use = p.irb > 0
    return np.where(use, by_ib, by_qb), np.where(use, slope, 0.0), np.where(use, 0.0, d_qb)


def _terminal_residual(vbe_i: Array, vbc_i: Array, vbe: Array, vbc: Array, p: GummelPoon) -> tuple[Array, ...]:
    """Residual of the internal-node equations, the currents, and the 2×2 Jacobian in
    the internal junction voltages and the intrinsic conductances."""
    ic, ib, qb, _, gic_be, gic_bc, gib_be, gib_bc, dqb_be, dqb_bc = _junctions_g(vbe_i, vbc_i, p)
    if p.flags["rb"]:
        rbb, drbb_ib, drbb_qb = _base_resistance_g(ib, qb, p)
        drop_b = ib * rbb
        dd_be = gib_be * rbb + ib * (drbb_ib * gib_be + drbb_qb * dqb_be)
        dd_bc = gib_bc * rbb + ib * (drbb_ib * gib_bc + drbb_qb * dqb_bc)
    else:
        drop_b = dd_be = dd_bc = 0.0
    f1 = vbe_i + drop_b + (ic + ib) * p.re - vbe
    f2 = vbc_i + drop_b - ic * p.rc - vbc
    j11 = 1.0 + dd_be + (gic_be + gib_be) * p.re
    j12 = dd_bc + (gic_bc + gib_bc) * p.re
    j21 = dd_be - gic_be * p.rc
    j22 = 1.0 + dd_bc - gic_bc * p.rc
    return f1, f2, ic, ib, (j11, j12, j21, j22), (gic_be, gic_bc, gib_be, gib_bc)


def terminal(vbe: Array, vbc: Array, p: GummelPoon, tol: float = 1e-13) -> tuple[Array, Array]:
    """Collector and base current of one unit device at terminal voltages V_BE, V_BC
    (RB, RE, RC included: the internal nodes are solved by Newton's method)."""
    ic, ib, _ = terminal_g(vbe, vbc, p, tol)
    return ic, ib


def terminal_g(vbe: Array, vbc: Array, p: GummelPoon, tol: float = 1e-13) -> tuple[Array, Array, tuple[Array, ...]]:
    """``terminal`` with the conductances (∂I_C/∂V_BE, ∂I_C/∂V_BC, ∂I_B/∂V_BE, ∂I_B/∂V_BC)
    at the terminals.  The two internal junction voltages are solved jointly by Newton's
    method with the analytic Jacobian; the terminal conductances follow from the intrinsic
    ones by the implicit-function theorem, G_ext = G_int·J⁻¹ (J = ∂(terminal voltages)/∂(internal))."""
    vbe, vbc = np.broadcast_arrays(np.asarray(vbe, dtype=float), np.asarray(vbc, dtype=float))
    if not p.flags["res"]:
        ic, ib, _, _, gic_be, gic_bc, gib_be, gib_bc, _, _ = _junctions_g(vbe, vbc, p)
        return ic, ib, (gic_be, gic_bc, gib_be, gib_bc)
    x, y = vbe.copy(), vbc.copy()
    for _ in range(100):
        f1, f2, ic, ib, (j11, j12, j21, j22), g = _terminal_residual(x, y, vbe, vbc, p)
        det = j11 * j22 - j12 * j21
        dx = (f1 * j22 - f2 * j12) / det
        dy = (j11 * f2 - j21 * f1) / det
        # limit each step as SPICE limits junction voltages (a few V_T)
        dx = np.clip(dx, -0.1, 0.1)
        dy = np.clip(dy, -0.1, 0.1)
        x, y = x - dx, y - dy
        if np.all(np.abs(dx) <= tol) and np.all(np.abs(dy) <= tol):
            break
    _, _, ic, ib, (j11, j12, j21, j22), (gic_be, gic_bc, gib_be, gib_bc) = _terminal_residual(x, y, vbe, vbc, p)
    det = j11 * j22 - j12 * j21
    inv = (j22 / det, -j12 / det, -j21 / det, j11 / det)
    cond = (gic_be * inv[0] + gic_bc * inv[2], gic_be * inv[1] + gic_bc * inv[3],
            gib_be * inv[0] + gib_bc * inv[2], gib_be * inv[1] + gib_bc * inv[3])
    return ic, ib, cond


@dataclass
class Linear:
    """One device linearised at its internal junction voltages (x = V_B'E', y = V_B'C'):
    currents, the residual f = terminal voltages implied − terminal voltages applied,
    J⁻¹ (internal ← terminal) and the terminal conductances G = G_int·J⁻¹."""

    ic: Array
    ib: Array
    f1: Array
    f2: Array
    inv: tuple[Array, Array, Array, Array]
    g: tuple[Array, Array, Array, Array]  # ∂I_C/∂V_BE, ∂I_C/∂V_BC, ∂I_B/∂V_BE, ∂I_B/∂V_BC

    def delta(self, dvbe: Array, dvbc: Array) -> tuple[Array, Array]:
        """Newton step of the internal voltages when the terminals move by (dvbe, dvbc)."""
        r1, r2 = dvbe - self.f1, dvbc - self.f2
        i11, i12, i21, i22 = self.inv
        return i11 * r1 + i12 * r2, i21 * r1 + i22 * r2

    def currents_at(self, dvbe: Array | float, dvbc: Array | float) -> tuple[Array, Array]:
        """(I_C, I_B) to first order after that step: I + G·(dV − f)."""
        r1, r2 = dvbe - self.f1, dvbc - self.f2
        a, b, c, d = self.g
        return self.ic + a * r1 + b * r2, self.ib + c * r1 + d * r2


def linearise(x: Array, y: Array, vbe: Array, vbc: Array, p: GummelPoon) -> Linear:
    """The device at internal voltages (x, y) against terminal voltages (vbe, vbc): one
    evaluation of the model, for a joint Newton step of a circuit's nodes and every
    device's internal nodes together."""
    if not p.flags["res"]:
        ic, ib, _, _, a, b, c, d, _, _ = _junctions_g(x, y, p)
        return Linear(ic, ib, x - vbe, y - vbc, (1.0, 0.0, 0.0, 1.0), (a, b, c, d))  # type: ignore[arg-type]
    f1, f2, ic, ib, (j11, j12, j21, j22), (a, b, c, d) = _terminal_residual(x, y, vbe, vbc, p)
    det = j11 * j22 - j12 * j21
    inv = (j22 / det, -j12 / det, -j21 / det, j11 / det)
    g = (a * inv[0] + b * inv[2], a * inv[1] + b * inv[3], c * inv[0] + d * inv[2], c * inv[1] + d * inv[3])
    return Linear(ic, ib, f1, f2, inv, g)


def vbe_guess(current: Array, p: GummelPoon) -> Array:
    """V_BE of a diode-connected unit device carrying ``current`` (ideal terms only): a start."""
    return p.nf * p.vt * np.log1p(np.maximum(current, 1e-30) * (1.0 + 1.0 / p.bf) / p.is_be)


def solve_increasing(residual, x0: Array, step0: float = 0.02, tol: float = 1e-14, iters: int = 200,  # type: ignore[no-untyped-def]
                     slope: bool = False) -> Array:
    """Root of an increasing function, elementwise: Newton kept inside a bracket that the
    iterates grow (robust from a rough start).  With ``slope``, ``residual`` returns
    (value, derivative); otherwise the slope is a finite difference."""
    x = np.array(x0, dtype=float)
    lo = np.full_like(x, -np.inf)
    hi = np.full_like(x, np.inf)
    h = 1e-8
    for _ in range(iters):
        if slope:
            f, df = residual(x)
        else:
            f = residual(x)
            df = (residual(x + h) - f) / h
        lo = np.where(f < 0, np.maximum(lo, x), lo)
        hi = np.where(f > 0, np.minimum(hi, x), hi)
        step = np.where(df > 0, f / np.where(df > 0, df, 1.0), np.sign(f) * step0)
        step = np.clip(step, -0.1, 0.1)
        new = x - step
        # outside the bracket: bisect (or step out of it while it is open).  Strictly outside:
        # a converged element's step rounds to zero and lands on its own bracket end, and
        # bisecting it from there would undo the convergence (halving the error per step).
        outside = (new < lo) | (new > hi)
        mid = np.where(np.isfinite(lo) & np.isfinite(hi), 0.5 * (lo + hi), new)
        new = np.where(outside, mid, new)
        done = np.abs(new - x) <= tol * np.maximum(1.0, np.abs(x))
        x = new
        if np.all(done | (f == 0)):
            break
    return x


def beta_at(ic: Array, p: GummelPoon) -> Array:
    """DC current gain I_C/I_B of a unit device carrying collector current ``ic``, with
    V_B'C' = 0 and the Early effect aside (VAF, VAR → ∞: the β part of a mirror's gain,
    as the "β loading" term takes it).  With ISE/NE the gain falls at low current, with
    IKF at high current: β is a function of I_C, not the constant BF.

    >>> p = from_card({"is": 1e-16, "bf": 100.0, "ikf": 1e-3}, 300.15)
    >>> round(float(beta_at(np.array(1e-3), p)), 6)  # at I_C = IKF: q_2 = q_b, q_b = 2, β = BF/q_b
    50.0
    """
    q = p.ideal_outputs()
    ic = np.asarray(ic, dtype=float)
    zero = np.zeros_like(ic)

    def residual(v: Array) -> tuple[Array, Array]:
        got = _junctions_g(v, zero, q)
        return got[0] - ic, got[4]

    start = q.nf * q.vt * np.log1p(np.maximum(ic, 1e-30) / q.is_be)
    vbe = solve_increasing(residual, start, slope=True)
    c, b = intrinsic(vbe, zero, q)
    return c / b
