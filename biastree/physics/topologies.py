"""Mirror topologies: a registry of exact DC solutions.

Every entry solves one group of mirrors of one device family at once
(numpy; first axis = mirrors or branches, trailing axes broadcast): given
each mirror's input current and each output's distance from the mirror's
rail, it returns the input voltage, every output's current, the smallest
rail distance at which each output device stays active, and any current
the topology draws besides its outputs (helper devices, bias sources).

Equations: Gummel–Poon without parasitics for bipolar devices
(IC = IS·A·e^(VBE/VT)·(1 + VCB/VAF), IB = IS·A·e^(VBE/VT)/BF) and the
level-1 square law with λ for MOS devices — the models the exported
netlists are simulated with.  Extra devices' base currents are drawn where
the circuit draws them.  Voltages are distances from the mirror's own rail
(ground for npn/nmos, the supply for pnp/pmos), so one set of equations
serves both polarities.

The solver splits each output's gain into terms generically: the gain with
ideal output devices (V_A → ∞, λ = 0) against the size ratio is the "β"
term; what the finite V_A or λ adds on top is the "Early"/"λ" term.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np

from biastree.physics import devices, gp_mirrors, gummel_poon, tables
from biastree.physics.devices import Array

TERM_LABELS = {
    "beta": "β loading",
    "early": "Early effect",
    "lambda": "channel-length modulation",
    "gradient": "die gradient",
}
FAMILY_TERMS = {"bjt": ("beta", "early", "gradient"), "mos": ("lambda", "gradient")}
_TOL = 1e-15
_ITER = 200


@dataclass(frozen=True)
class DeviceArrays:
    """Device parameters (SI floats) at the operating temperature, one row per mirror."""

    family: str  # "bjt", "mos" (or "mixed" for a whole tree)
    vt: Array
    is_in: Array  # BJT: IS of the input device = IS(T)·input_size
    beta: Array
    early: Array  # VAF (inf allowed)
    k_in: Array  # MOS: KP·W/L of the input device (W = w·input_size)
    vth: Array
    lam: Array
    size_in: Array  # input_size (unit devices)
    # Bipolar devices given by Gummel–Poon cards: their full DC parameters per row
    # (every bipolar row of a plan that has any such card; None otherwise)
    gp: gummel_poon.GummelPoon | None = None
    # MOS devices given by cards: their characterisation tables per (row, column), or None
    tables: tables.TableSet | None = None

    def take(self, index: Array, family: str | None = None) -> "DeviceArrays":
        """Rows ``index`` of every parameter (optionally relabelled as one family)."""
        arrays = (getattr(self, f)[index] for f in self.__dataclass_fields__ if f not in ("family", "gp", "tables"))
        return DeviceArrays(family or self.family, *arrays, gp=None if self.gp is None else self.gp.take(index),
                            tables=None if self.tables is None else self.tables.take(index))

    def ideal_outputs(self) -> "DeviceArrays":
        """The same devices with infinite output resistance (V_A → ∞, λ = 0)."""
        return replace(self, early=np.full_like(self.early, np.inf), lam=np.zeros_like(self.lam),
                       gp=None if self.gp is None else self.gp.ideal_outputs(),
                       tables=None if self.tables is None else replace(self.tables, ideal=True))


@dataclass(frozen=True)
class GroupInput:
    """What a topology needs to solve its mirrors (k mirrors, nb branches)."""

    dev: DeviceArrays  # (k, 1) rows
    params: dict[str, Array]  # per-mirror topology parameters, (k, 1)
    i_in: Array  # (k, C) input current of one instance
    row: Array  # (nb,) mirror row of each branch
    ratio: Array  # (nb, 1)
    count: Array  # (nb, 1)
    distance: Array  # (nb, C) output node distance from the mirror's rail
    supply: float
    is_scale: Array | None = None  # (nb, 1|C) output/input IS ratio error (bipolar mismatch)
    vt_shift: Array | None = None  # (nb, 1|C) VT(output) − VT(input), V (MOS mismatch)
    k_scale: Array | None = None  # (nb, 1|C) KP(output)/KP(input) (MOS mismatch)

    def mos_mismatch(self) -> tuple[Array | float, Array | float]:
        return (0.0 if self.vt_shift is None else self.vt_shift, 1.0 if self.k_scale is None else self.k_scale)

    def fanout(self, scale: Array | float = 1.0) -> Array:
        """Σ ratio·count over each mirror's branches; with ``scale``, each output
        device weighted by its IS scale (its base current scales with it)."""
        weights = np.asarray(self.ratio * self.count * scale)
        out = np.zeros((self.i_in.shape[0], weights.shape[1]))
        np.add.at(out, self.row, weights)
        return out

    def segment_sum(self, per_branch: Array) -> Array:
        """Σ over each mirror's branches (count copies included)."""
        out = np.zeros((self.i_in.shape[0],) + per_branch.shape[1:])
        np.add.at(out, self.row, per_branch * self.count)
        return out


@dataclass(frozen=True)
class GroupOutput:
    v_in: Array  # (k, C) input voltage (distance of the input node from the rail)
    current: Array  # (nb, C) current of one copy of each output
    min_distance: Array  # (nb, C) smallest distance keeping every output device active
    extra: Array  # (k, C) current drawn besides the outputs (helpers, bias), per instance
    internal_margin: Array | None = None  # (nb, C) saturation margin of devices under the output one, V


@dataclass(frozen=True)
class Topology:
    name: str
    kinds: frozenset[str]  # "bjt", "mos"
    summary: str
    solve: Callable[[GroupInput], GroupOutput]
    params: tuple[str, ...] = ()  # plan keys this topology accepts
    single_output: bool = False  # only one branch with count 1 (Wilson)
    coupled_outputs: bool = False  # one output's voltage moves the others (affects Rout)
    stacks_mos: bool = False  # a MOS device's source sits above its bulk: tables span V_SB
    terms: dict[str, tuple[str, ...]] = field(default_factory=lambda: dict(FAMILY_TERMS))
    # unit devices of one mirror: (input size, fan-out Σ ratio·count, parameters) → units
    units: Callable[[float, float, dict[str, float]], float] = lambda a0, fan, p: a0 * (1.0 + fan)


def _converged(new: Array, old: Array) -> bool:
    return bool(np.all(np.abs(new - old) <= _TOL * np.abs(new) + 1e-300))


def _vbe(current: Array, is_area: Array, vt: Array) -> Array:
    return vt * np.log(current / is_area)


def _x_at_vcb(total_emitter: Array, vcb_of_x: Callable[[Array], Array], va: Array, beta: Array) -> Array:
    """Per-device X = IS·A·e^(VBE/VT) from its emitter current IE = X·(1 + VCB/VA + 1/β),
    where VCB itself depends (weakly) on X.  Fixed point: converges at ~V_T/V_A per step."""
    x = total_emitter / (1.0 + 1.0 / beta)
    for _ in range(_ITER):
        new = total_emitter / (1.0 + vcb_of_x(x) / va + 1.0 / beta)
        if _converged(new, x):
            return new
        x = new
    return x


# --- simple ------------------------------------------------------------------


def _simple(g: GroupInput) -> GroupOutput:
    """Diode-connected input device; outputs share its base (gate).

    BJT: I_in = X·A0·(1 + (1 + Σm)/β), output k: X·m_k·A0·(1 + VCB_k/VA),
    VCB_k = d_k − VBE.  MOS: I_in sets V_GS through the diode's square law;
    output k: I_in·m_k·(1 + λd_k)/(1 + λV_GS); active while d_k ≥ V_GS − V_T.
    """
    d, r = g.dev, g.row
    scale = 1.0 if g.is_scale is None else g.is_scale
    if d.family == "bjt" and d.gp is not None:
        return GroupOutput(*gp_mirrors.simple(g, d.gp))
    if d.family == "bjt":
        x_in = g.i_in / (1.0 + (1.0 + g.fanout(scale)) / d.beta)  # IS·A0·e^(VBE/VT)
        vbe = _vbe(x_in, d.is_in, d.vt)
        current = x_in[r] * g.ratio * scale * devices.early_factor(g.distance - vbe[r], d.early[r])
        return GroupOutput(vbe, current, np.broadcast_to(vbe[r], current.shape), np.zeros_like(g.i_in))
    vgs = devices.mos_vgs(g.i_in, d.k_in, d.vth, d.lam)
    dvt, ks = g.mos_mismatch()
    vov_in = vgs - d.vth
    mismatch = ks * ((vov_in[r] - dvt) / vov_in[r]) ** 2
    current = (g.i_in[r] * g.ratio * mismatch * devices.clm_factor(g.distance, d.lam[r])
               / devices.clm_factor(vgs[r], d.lam[r]))
    vmin = np.broadcast_to(vov_in[r] - dvt, current.shape)
    if d.tables is not None and d.tables.any():
        return _simple_tables(g, vgs, current, vmin)
    return GroupOutput(vgs, current, vmin, np.zeros_like(g.i_in))


def _simple_tables(g: GroupInput, vgs: Array, current: Array, vmin: Array) -> GroupOutput:
    """Rows with characterisation tables replace the square law (see biastree.physics.tables)."""
    d, r = g.dev, g.row
    t = d.tables
    assert t is not None
    t_out = t.take(r)
    dvt, ks = g.mos_mismatch()
    vgs_t = tables.diode_vgs(g.i_in / d.size_in, t)
    vg_out = vgs_t[r] - dvt  # a threshold mismatch shifts the output's effective V_GS
    vds = np.broadcast_to(vgs_t[r], g.distance.shape) if t.ideal else g.distance
    cur_t = g.ratio * d.size_in[r] * ks * np.exp(t_out.log_current(vg_out, vds))
    vmin_t = tables.compliance(np.broadcast_to(vg_out, cur_t.shape), t_out)
    in_rows, out_rows = t.which >= 0, t_out.which >= 0
    return GroupOutput(np.where(in_rows, vgs_t, vgs), np.where(out_rows, cur_t, current),
                       np.where(out_rows, vmin_t, vmin), np.zeros_like(g.i_in))


# --- beta helper ---------------------------------------------------------------


def _beta_helper(g: GroupInput) -> GroupOutput:
    """Emitter-follower helper QB supplies every base current.

    The input device Q1 (area A0) has its collector at the input node and its
    base on the base line; QB (area helper_size) has its base at the input
    node, its emitter on the base line and its collector on the opposite rail.
    An optional bleed current flows from the base line to the rail.
      base line:  IE_B = X·A0·(1 + Σm)/β + I_bleed,   IE_B = X_B·(1 + VCB_B/VA + 1/β)
      input node: I_in = X·A0·(1 + VBE_B/VA) + X_B/β     (Q1 sits at VCB = VBE_B)
    with X = IS·e^(VBE/VT) per unit and VCB_B = supply − VBE − VBE_B.
    """
    d, r = g.dev, g.row
    if d.gp is not None:
        return GroupOutput(*gp_mirrors.beta_helper(g, d.gp))
    scale = 1.0 if g.is_scale is None else g.is_scale
    a0 = d.size_in
    is_unit = d.is_in / a0
    is_b = is_unit * g.params["helper_size"]
    bleed = g.params["bleed"]
    fan = g.fanout(scale)
    x = g.i_in / a0
    for _ in range(_ITER):
        vbe = _vbe(x, is_unit, d.vt)
        ie_b = x * a0 * (1.0 + fan) / d.beta + bleed
        x_b = _x_at_vcb(ie_b, lambda xb: g.supply - vbe - _vbe(xb, is_b, d.vt), d.early, d.beta)
        vbe_b = _vbe(x_b, is_b, d.vt)
        new = (g.i_in - x_b / d.beta) / (a0 * devices.early_factor(vbe_b, d.early))
        if _converged(new, x):
            x = new
            break
        x = new
    vbe = _vbe(x, is_unit, d.vt)
    current = x[r] * a0[r] * g.ratio * scale * devices.early_factor(g.distance - vbe[r], d.early[r])
    helper_collector = x_b * devices.early_factor(g.supply - vbe - vbe_b, d.early)
    return GroupOutput(vbe + vbe_b, current, np.broadcast_to(vbe[r], current.shape), helper_collector + bleed)


# --- Wilson (3 devices) and improved Wilson (4 devices) ------------------------


def _wilson_core(g: GroupInput, four: bool) -> GroupOutput:
    """Wilson mirror, one output of ratio m.

    Q1 (A0): collector at the input node (three devices) or, through the
    diode-connected Q4 (A0), one V_BE below it (four devices); Q2 (m·A0):
    diode-connected, bases of Q1 and Q2 together; Q3 (m·A0): base at the
    input node, emitter on Q2, collector is the output.
      Q2/Q1 line:  IE3 = X·m·A0 + X·(A0 + m·A0)/β
      input node:  I_in = IC1 + IB3,   IC1 = X·A0·(1 + VCB1/VA)
    VCB1 = VBE3 (three devices) or VBE3 − VBE4 (four devices: Q4 carries IC1).
    """
    d = g.dev  # one branch per mirror: branch rows and mirror rows coincide
    if d.gp is not None:
        return GroupOutput(*gp_mirrors.wilson(g, d.gp, four))
    scale = 1.0 if g.is_scale is None else g.is_scale
    a0 = d.size_in
    is_unit = d.is_in / a0
    m = g.ratio
    dist = g.distance
    x = g.i_in / a0
    for _ in range(_ITER):
        v2 = _vbe(x, is_unit, d.vt)
        ie3 = x * m * a0 * scale + x * (a0 + m * a0 * scale) / d.beta  # Q2 carries the mismatch of the pair
        is3 = is_unit * m * a0
        x3 = _x_at_vcb(ie3, lambda x3_: dist - v2 - _vbe(x3_, is3, d.vt), d.early, d.beta)
        vbe3 = _vbe(x3, is3, d.vt)
        ic1 = g.i_in - x3 / d.beta
        if four:
            vbe4 = _vbe(ic1 / (1.0 + 1.0 / d.beta), is_unit * a0, d.vt)
            vcb1 = vbe3 - vbe4
        else:
            vcb1 = vbe3
        new = ic1 / (a0 * devices.early_factor(vcb1, d.early))
        if _converged(new, x):
            x = new
            break
        x = new
    v2 = _vbe(x, is_unit, d.vt)
    v_in = v2 + vbe3
    current = x3 * devices.early_factor(dist - v_in, d.early)
    return GroupOutput(v_in, current, np.broadcast_to(v_in, current.shape), np.zeros_like(g.i_in))


def _wilson(g: GroupInput) -> GroupOutput:
    return _wilson_core(g, four=False)


def _wilson4(g: GroupInput) -> GroupOutput:
    return _wilson_core(g, four=True)


# --- cascode -----------------------------------------------------------------


def _cascode(g: GroupInput) -> GroupOutput:
    """Cascode mirror: a stack of two diode-connected input devices, and per
    output a mirror device under a cascode device whose base (gate) sits at
    the input node.

    BJT (Q1, Q3 input stack of area A0; Q2_k, Q4_k of area m_k·A0):
      base line of Q1/Q2:  IE3 = X1·A0·(1 + (1 + Σm)/β)   (Q3 diode on top of Q1)
      input node:          I_in = IE3 + Σ IB4_k
      output k:            IE4_k = IC2_k = X1·m_k·A0·(1 + (VBE3 − VBE4_k)/VA)
    MOS (M1, M3 input stack; M2_k, M4_k): no gate current, so both input
    devices carry I_in; each output's middle node V_x solves
      ½k2(V_GS1 − V_T)²(1 + λV_x) = ½k4(V_GS1 + V_GS3 − V_x − V_T)²(1 + λ(d − V_x)).
    Active while both output devices are: d ≥ V_x + V_GS4 − V_T and V_x ≥ V_GS1 − V_T.
    """
    d, r = g.dev, g.row
    scale = 1.0 if g.is_scale is None else g.is_scale
    a0 = d.size_in
    if d.family == "bjt" and d.gp is not None:
        return GroupOutput(*gp_mirrors.cascode(g, d.gp))
    if d.family == "bjt":
        is_unit = d.is_in / a0
        fan = g.fanout(scale)
        ib4_sum = np.zeros_like(g.i_in)
        for _ in range(_ITER):
            ie3 = g.i_in - ib4_sum
            x1 = ie3 / (a0 * (1.0 + (1.0 + fan) / d.beta))
            v1 = _vbe(x1, is_unit, d.vt)
            vbe3 = _vbe(ie3 / (1.0 + 1.0 / d.beta), d.is_in, d.vt)
            v_in = v1 + vbe3
            is2 = is_unit[r] * a0[r] * g.ratio * scale
            vcb4 = g.distance - v_in[r]
            # IE4 = IC2 = X1·A2·(1 + (VBE3 − VBE4)/VA); IE4 = X4·(1 + VCB4/VA + 1/β)
            x4 = x1[r] * a0[r] * g.ratio
            for _ in range(_ITER):
                vbe4 = _vbe(x4, is2, d.vt[r])
                ic2 = x1[r] * (is2 / is_unit[r]) * devices.early_factor(vbe3[r] - vbe4, d.early[r])
                new4 = ic2 / (1.0 + vcb4 / d.early[r] + 1.0 / d.beta[r])
                if _converged(new4, x4):
                    x4 = new4
                    break
                x4 = new4
            new_sum = g.segment_sum(x4 / d.beta[r])
            if _converged(new_sum, ib4_sum):
                ib4_sum = new_sum
                break
            ib4_sum = new_sum
        current = x4 * devices.early_factor(vcb4, d.early[r])
        return GroupOutput(v_in, current, np.broadcast_to(v_in[r], current.shape), np.zeros_like(g.i_in))
    if d.tables is not None and d.tables.any():
        return _with_tables(g, _cascode_square, _cascode_tables)
    return _cascode_square(g)


def _cascode_square(g: GroupInput) -> GroupOutput:
    d, r = g.dev, g.row
    vgs1 = devices.mos_vgs(g.i_in, d.k_in, d.vth, d.lam)
    vgs3 = devices.mos_vgs(g.i_in, d.k_in, d.vth, d.lam)  # top diode: V_DS = V_GS too (γ = 0: no body effect)
    v_in = vgs1 + vgs3
    dvt, ks = g.mos_mismatch()
    k_out = d.k_in[r] * g.ratio * ks
    vth_out = d.vth[r] + dvt  # the output mirror device's threshold (cascode device nominal)
    vx = _mos_cascode_node(k_out, d.k_in[r] * g.ratio, vgs1[r] - dvt, v_in[r], g.distance, d.vth[r], d.lam[r])
    current = 0.5 * k_out * (vgs1[r] - vth_out) ** 2 * (1.0 + d.lam[r] * vx)
    # cascode device active while d − V_x ≥ V_GS4 − V_T, i.e. d ≥ V_in − V_T (= V_T + 2·V_ov)
    top = np.broadcast_to(v_in[r] - d.vth[r], current.shape)
    bottom = vx - (vgs1[r] - d.vth[r])
    return GroupOutput(v_in, current, top, np.zeros_like(g.i_in), bottom)


def _mos_cascode_node(k2: Array, k4: Array, vg2: Array, vg4: Array, d: Array, vth: Array, lam: Array) -> Array:
    """Middle node V_x of an output stack: bottom device (gate vg2, drain V_x) and
    cascode device (gate vg4, source V_x, drain d) carry the same current.

    f(V_x) = I_bottom − I_cascode is increasing and concave on [0, vg4 − V_T],
    so Newton's method from a point left of the root climbs to it without
    overshooting; the iterate is kept inside a shrinking bracket (Newton from
    its left end, else a bisection) down to machine precision — a handful of
    steps where a plain bisection took about 55."""
    shape = np.broadcast(k2, k4, vg2, vg4, d, vth, lam).shape
    a = 0.5 * k2 * (vg2 - vth) ** 2  # bottom current at λ = 0

    def f_and_slope(x: Array) -> tuple[Array, Array]:
        vov4 = np.maximum(vg4 - x - vth, 0.0)
        f = a * (1.0 + lam * x) - 0.5 * k4 * vov4**2 * (1.0 + lam * (d - x))
        return f, a * lam + 0.5 * k4 * (2.0 * vov4 * (1.0 + lam * (d - x)) + lam * vov4**2)

    lo = np.zeros(shape)
    hi = np.broadcast_to(vg4 - vth, shape).copy()
    f_lo, s_lo = f_and_slope(lo)
    end = f_lo >= 0  # the bottom device carries more even at V_x = 0: the answer is 0
    with np.errstate(invalid="ignore", divide="ignore"):
        x = np.clip(vg4 - vth - np.sqrt(a / (0.5 * k4)), lo, hi)  # the λ = 0 root
    x = np.where(np.isfinite(x) & ~end, x, np.where(end, lo, 0.5 * (lo + hi)))
    for _ in range(100):
        f, slope = f_and_slope(x)
        positive = f > 0
        hi = np.where(positive, x, hi)
        lo = np.where(positive, lo, x)
        f_lo = np.where(positive, f_lo, f)
        s_lo = np.where(positive, s_lo, slope)
        with np.errstate(invalid="ignore", divide="ignore"):
            step, step_lo = f / slope, f_lo / s_lo
        at_x = np.abs(step) <= 4e-16 * np.maximum(np.abs(x), 1.0)  # x is the root to the last bits
        at_lo = np.abs(step_lo) <= 4e-16 * np.maximum(np.abs(lo), 1.0)  # so is the bracket's left end
        new, from_lo = x - step, lo - step_lo
        new = np.where((new > lo) & (new < hi), new,
                       np.where((from_lo > lo) & (from_lo < hi), from_lo, 0.5 * (lo + hi)))
        new = np.where(end | at_x, x, np.where(at_lo, lo, new))
        done = end | at_x | at_lo | (hi - lo <= 1e-16 * np.maximum(np.abs(hi), 1.0))
        x = new
        if np.all(done):
            break
    return x


# --- wide-swing cascode (MOS) -----------------------------------------------------


def _wide_swing(g: GroupInput) -> GroupOutput:
    """Wide-swing (low-voltage) cascode, sized as in Johns & Martin §6.3 (from
    memory): all mirror and cascode devices W/L, the bias device
    (W/L)/(n + 1)² carrying the bias current, which sets the cascode gate line
    at V_T + (n + 1)·V_ov.  The input node is one V_GS from the rail (M1's
    gate, M3's drain); outputs need only about 2·V_ov.
    The bias current comes from an ideal source (parameter bias_current,
    default: the mirror's ideal input current) and is counted as overhead.
    """
    if g.dev.tables is not None and g.dev.tables.any():
        return _with_tables(g, _wide_swing_square, _wide_swing_tables)
    return _wide_swing_square(g)


def _wide_swing_square(g: GroupInput) -> GroupOutput:
    d, r = g.dev, g.row
    n = g.params["swing_n"]
    i_bias = g.params["bias_current"]
    k5 = d.k_in / (n + 1.0) ** 2
    vg = devices.mos_vgs(i_bias, k5, d.vth, d.lam)  # cascode gate line
    # input stack: M1 (gate = drain of M3 = input node VN), M3 (gate vg, source Vx1)
    vn = devices.mos_vgs(g.i_in, d.k_in, d.vth, np.zeros_like(d.lam))  # start: λ = 0
    for _ in range(_ITER):
        vx1 = _mos_cascode_node(d.k_in, d.k_in, vn, vg, vn, d.vth, d.lam)
        # M1 must carry I_in at V_DS = vx1: solve its V_GS in closed form
        new = d.vth + np.sqrt(2.0 * g.i_in / (d.k_in * (1.0 + d.lam * vx1)))
        if _converged(new, vn):
            vn = new
            break
        vn = new
    dvt, ks = g.mos_mismatch()
    k_out = d.k_in[r] * g.ratio * ks
    vx = _mos_cascode_node(k_out, d.k_in[r] * g.ratio, vn[r] - dvt, vg[r], g.distance, d.vth[r], d.lam[r])
    current = 0.5 * k_out * (vn[r] - d.vth[r] - dvt) ** 2 * (1.0 + d.lam[r] * vx)
    top = np.broadcast_to(vg[r] - d.vth[r], current.shape)  # cascode device: d ≥ (n + 1)·V_ov
    bottom = vx - (vn[r] - d.vth[r])
    # the input stack must be active too (M3: V_DS ≥ V_GS − V_T, M1: V_DS ≥ V_ov)
    input_margin = np.minimum(vn - (vg - d.vth), vx1 - (vn - d.vth))
    internal = np.minimum(bottom, input_margin[r])
    return GroupOutput(vn, current, top, np.broadcast_to(i_bias, g.i_in.shape).copy(), internal)


# --- stacked MOS mirrors from characterisation tables -------------------------------


def _with_tables(g: GroupInput, square: Callable[[GroupInput], GroupOutput],
                 table: Callable[[GroupInput, tables.TableSet], GroupOutput]) -> GroupOutput:
    """Rows with characterisation tables solved by ``table``; a group that also has
    square-law rows solves those by ``square`` and takes each row from its own law."""
    t = g.dev.tables
    assert t is not None
    if bool(np.all(t.which >= 0)):
        return table(g, t)
    with np.errstate(all="ignore"):  # the card rows have no square-law parameters
        sq = square(g)
    tb = table(g, t.filled())
    in_rows, out_rows = t.which >= 0, t.take(g.row).which >= 0

    def pick(a: Array | None, b: Array | None, rows: Array) -> Array | None:
        if a is None and b is None:
            return None
        a = np.full(rows.shape, np.inf) if a is None else a
        b = np.full(rows.shape, np.inf) if b is None else b
        return np.where(rows, a, b)

    return GroupOutput(np.where(in_rows, tb.v_in, sq.v_in), np.where(out_rows, tb.current, sq.current),
                       np.where(out_rows, tb.min_distance, sq.min_distance), np.where(in_rows, tb.extra, sq.extra),
                       pick(tb.internal_margin, sq.internal_margin, out_rows))


def _stack_outputs(g: GroupInput, t: tables.TableSet, vg_bot: Array, vg_top: Array, ideal_d: Array,
                   start: Array) -> tuple[Array, Array, Array, Array]:
    """Every output stack of a group from the tables: bottom device (m_k·A0 units, gate
    vg_bot, mismatch on it as in the square-law solution) under the cascode device
    (m_k·A0 units, gate vg_top, bulk on the rail).  Returns (current, V_x, the cascode
    device's compliance limit, the bottom device's saturation margin)."""
    r = g.row
    t_out = t.take(r)
    dvt, ks = g.mos_mismatch()
    vb = vg_bot[r] - dvt  # a threshold mismatch shifts the bottom device's effective V_GS
    d = np.broadcast_to(ideal_d[r], g.distance.shape) if t.ideal else g.distance
    log_ks = np.log(ks)
    vx = tables.stack_node(t_out, vb, vg_top[r], d, start[r], log_ks)
    top_args = (vg_top[r] - vx, d - vx, vx)  # the output is the cascode device's drain current:
    # the bottom device's plus the cascode device's bulk current (its drain-over-source ratio)
    ratio = t_out.log_current(*top_args) - t_out.log_current(*top_args, source=True)
    current = g.ratio * g.dev.size_in[r] * np.exp(log_ks + t_out.log_current(vb, vx, 0.0) + ratio)
    top = vx + tables.saturation_limit(vg_top[r] - vx, t_out, vsb=vx)  # the cascode device, at its own V_SB
    bottom = vx - tables.saturation_limit(np.broadcast_to(vb, vx.shape), t_out)
    return current, vx, top, bottom


def _cascode_tables(g: GroupInput, t: tables.TableSet) -> GroupOutput:
    """Cascode mirror from the tables (see ``_cascode``): M1 a diode on the rail carries
    I_in/A0 per unit at V_GS1; M3, a diode on top of it, at V_SB = V_GS1; every output
    stack solves its middle node V_x (biastree.physics.tables.stack_node).  Compliance:
    each device of the stack saturated (biastree.physics.tables.saturation_limit; the
    cascode device at its own V_GS and V_SB; the bottom device's margin is the internal
    margin), as the square-law solution asks V_DS ≥ V_GS − V_T of each.  With ideal outputs the output
    node sits at the input node (the output stack then copies the input stack)."""
    unit = g.i_in / g.dev.size_in
    vgs1 = tables.diode_vgs(unit, t)
    for _ in range(2):  # M1 carries what leaves M3's source (M3's bulk current: ~1e-9 of it)
        vgs3 = tables.diode_vgs(unit, t, vsb=vgs1)
        ratio = t.log_current(vgs3, vgs3, vgs1, source=True) - t.log_current(vgs3, vgs3, vgs1)
        vgs1 = tables.diode_vgs(unit * np.exp(ratio), t)
    v_in = vgs1 + tables.diode_vgs(unit, t, vsb=vgs1)
    current, _, top, bottom = _stack_outputs(g, t, vgs1, v_in, v_in, vgs1)
    return GroupOutput(v_in, current, top, np.zeros_like(g.i_in), bottom)


def _wide_swing_tables(g: GroupInput, t: tables.TableSet) -> GroupOutput:
    """Wide-swing cascode from the tables (see ``_wide_swing``): the bias device
    (A0/(n + 1)² units, as many copies as the netlist writes) is a diode carrying the
    bias current and sets the cascode gate line V_G; the input stack M1 (gate at the
    input node V_N, drain V_x1) under M3 (gate V_G, V_SB = V_x1, drain V_N) carries
    I_in (biastree.physics.tables.wide_swing_input); outputs as in the cascode, bottom
    gate V_N, cascode gate V_G.  With ideal outputs the output node sits at V_N."""
    r = g.row
    a0 = g.dev.size_in
    i_bias = np.broadcast_to(g.params["bias_current"], g.i_in.shape)
    vg = tables.diode_vgs(i_bias * (g.params["swing_n"] + 1.0) ** 2 / a0, t)
    vn, x1, _ = tables.wide_swing_input(g.i_in / a0, vg, t)
    current, _, top, bottom = _stack_outputs(g, t, vn, vg, vn, x1)
    # the input stack must be active too: M3 at V_SB = V_x1, M1 on the rail
    input_margin = np.minimum((vn - x1) - tables.saturation_limit(vg - x1, t, vsb=x1),
                              x1 - tables.saturation_limit(vn, t))
    return GroupOutput(vn, current, top, i_bias.copy(), np.minimum(bottom, input_margin[r]))


# --- emitter degeneration ---------------------------------------------------------


_DEGENERATED_STEP = 4e-16  # relative: Newton steps on V_BE stop at the last bits (0: always 100 steps)
_DEGENERATED_NOISE = 1e-13  # V: below this a base-line step that stops shrinking is rounding noise (0: off)


def _degenerated(g: GroupInput) -> GroupOutput:
    """Simple BJT mirror with emitter resistors: R_E on the input device and
    R_E/m_k on output k (same drop at the ideal ratio).  With the base line at
    V_B from the rail, every device solves V_BE + R·IE(V_BE) = V_B; the base
    line then satisfies the input node's KCL,
      I_in = IC1 + IB1 + Σ IB_k,
    solved by Newton's method on V_B (the residual is monotone in V_B)."""
    d, r = g.dev, g.row
    if d.gp is not None:
        return GroupOutput(*gp_mirrors.degenerated(g, d.gp))
    scale = 1.0 if g.is_scale is None else g.is_scale
    r1 = g.params["r_emitter"]
    is_out = d.is_in[r] * g.ratio * scale
    r_out = r1[r] / g.ratio

    def device(vb: Array, is_a: Array, res: Array, beta: Array, vt: Array, vcb: Array | None) -> tuple[Array, Array, Array]:
        """(x = IS·A·e^(VBE/VT), VBE, dx/dVB) of one degenerated device."""
        vbe = np.minimum(vb, vt * np.log(np.maximum(vb, 1e-3) / np.maximum(res, 1e-300) / is_a + 1.0))
        for _ in range(100):
            x = is_a * np.exp(vbe / vt)
            ie = x * ((1.0 if vcb is None else devices.early_factor(vcb, d.early[r])) + 1.0 / beta)
            fval = vbe + res * ie - vb
            dfd = 1.0 + res * ie / vt
            step = fval / dfd
            vbe = vbe - step
            # converged to the last bits of V_BE (an absolute 1e-16 V is below the
            # spacing of floats near 0.7 V, so that test alone ran all 100 steps)
            if np.all(np.abs(step) <= _DEGENERATED_STEP * np.maximum(np.abs(vbe), 0.25)):
                break
        x = is_a * np.exp(vbe / vt)
        ie = x * ((1.0 if vcb is None else devices.early_factor(vcb, d.early[r])) + 1.0 / beta)
        dx = x / vt / (1.0 + res * ie / vt)
        return x, vbe, dx

    # start from the undegenerated solution plus the drop
    x0 = g.i_in / (1.0 + (1.0 + g.fanout()) / d.beta)
    vb = _vbe(x0, d.is_in, d.vt) + r1 * x0 * (1.0 + 1.0 / d.beta)
    previous = np.full(np.shape(vb), np.inf)
    for _ in range(100):
        x1, vbe1, dx1 = device(vb, d.is_in, r1, d.beta, d.vt, None)
        # output base currents; collector Early factor uses VCB = d − V_B
        xk, vbek, dxk = device(vb[r], is_out, r_out, d.beta[r], d.vt[r], g.distance - vb[r])
        resid = x1 * (1.0 + 1.0 / d.beta) + g.segment_sum(xk / d.beta[r]) - g.i_in
        slope = dx1 * (1.0 + 1.0 / d.beta) + g.segment_sum(dxk / d.beta[r])
        step = resid / slope
        vb = vb - step
        # done at 1e-15 V, or where Newton's step no longer shrinks: the residual is
        # rounding noise there (with large R_E about 1.5e-15 V, so 1e-15 alone ran 100 steps)
        size = np.abs(step)
        if np.all((size <= 1e-15) | ((size < _DEGENERATED_NOISE) & (size >= 0.5 * previous))):
            break
        previous = size
    xk, vbek, _ = device(vb[r], is_out, r_out, d.beta[r], d.vt[r], g.distance - vb[r])
    current = xk * devices.early_factor(g.distance - vb[r], d.early[r])
    return GroupOutput(vb, current, np.broadcast_to(vb[r], current.shape), np.zeros_like(g.i_in))


TOPOLOGIES: dict[str, Topology] = {
    t.name: t
    for t in (
        Topology("simple", frozenset({"bjt", "mos"}), "diode-connected input device, outputs share its base/gate", _simple),
        Topology(
            "beta_helper", frozenset({"bjt"}), "emitter-follower helper supplies the base currents (β² error)",
            _beta_helper, params=("helper_size", "bleed"), units=lambda a0, fan, p: a0 * (1.0 + fan) + p["helper_size"],
        ),
        Topology("wilson", frozenset({"bjt"}), "3-device Wilson: feedback, one output, Rout ≈ β·ro/2", _wilson,
                 single_output=True, units=lambda a0, fan, p: a0 * (1.0 + 2.0 * fan)),
        Topology("wilson4", frozenset({"bjt"}), "4-device improved Wilson: equal V_CE on the mirror pair", _wilson4,
                 single_output=True, units=lambda a0, fan, p: a0 * (2.0 + 2.0 * fan)),
        Topology("cascode", frozenset({"bjt", "mos"}), "stacked mirror with cascode outputs, Rout ≈ β·ro (BJT), gm·ro² (MOS)",
                 _cascode, coupled_outputs=True, stacks_mos=True, units=lambda a0, fan, p: 2.0 * a0 * (1.0 + fan)),
        Topology("wide_swing", frozenset({"mos"}), "low-voltage cascode, outputs down to about 2·V_ov",
                 _wide_swing, params=("bias_current", "swing_n"), stacks_mos=True,
                 units=lambda a0, fan, p: 2.0 * a0 * (1.0 + fan) + a0 / (p["swing_n"] + 1.0) ** 2),
        Topology("degenerated", frozenset({"bjt"}), "emitter resistors (R_E on the input, R_E/ratio on outputs)",
                 _degenerated, params=("degeneration", "degeneration_drop")),
    )
}
