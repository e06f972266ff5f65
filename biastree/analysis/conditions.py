"""Operating conditions as columns: every array the solver walks carries a
trailing axis of conditions (load-voltage ends, temperatures, supplies,
process corners, Monte Carlo samples), so one vectorised solve covers them
all.

Temperature laws (REFERENCES.md, ngspice ``bjttemp.c``, TLEV = 0):
IS(T) = IS·exp[(T/TNOM − 1)·EG/V_T + XTI·ln(T/TNOM)], BF(T) = BF·(T/TNOM)^XTB.
MOS: |VT|(T) = |VT| + vth_tc·(T − TNOM), KP(T) = KP·(T/TNOM)^mobility_exp
(the exporter writes MOS cards evaluated at the temperature, because the
level-1 model has no linear VT tempco).  Reference:
I(T) = I·(1 + tc1·ΔT + tc2·ΔT²), ΔT = T − tnom.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace

import numpy as np

from biastree.analysis import cards as model_cards
from biastree.analysis import characterize
from biastree.analysis.floorplan import remote_offsets
from biastree.input.cards import CardModel
from biastree.input.model import BjtModel, Corner, Plan
from biastree.physics import devices
from biastree.physics import gummel_poon as gp
from biastree.physics.devices import Array
from biastree.physics.tables import Table, TableSet
from biastree.physics.topologies import DeviceArrays
from biastree.tree.arrays import Tree
from biastree.units import ZERO_CELSIUS

ENDS = ("min", "nominal", "max")


@dataclass(frozen=True)
class Columns:
    """One solve's conditions, one column each."""

    names: tuple[str, ...]
    temperature: Array  # (C,) K
    supply: Array  # (C,) V
    i_ref: Array  # (C,) A
    v_load: Array  # (n_loads, C) V
    corner: tuple[str, ...]  # process corner of each column ("" = nominal)
    shifts: dict[str, Array] = field(default_factory=dict)  # global shifts per column: beta, early, is, kp, vth, lambda
    is_scale: Array | None = None  # (n_branches, C) output/input IS ratio error (mismatch)
    vt_shift: Array | None = None  # (n_branches, C) V
    k_scale: Array | None = None  # (n_branches, C)
    remote: object | None = None  # floorplan offsets of remote output devices (biastree.floorplan.Remote)

    @property
    def size(self) -> int:
        return len(self.names)

    def take(self, index: np.ndarray) -> "Columns":
        """A subset of the columns (e.g. one chunk of Monte Carlo samples)."""
        pick = lambda a: None if a is None else a[..., index]  # noqa: E731
        return replace(
            self,
            names=tuple(self.names[i] for i in index),
            temperature=self.temperature[index],
            supply=self.supply[index],
            i_ref=self.i_ref[index],
            v_load=self.v_load[:, index],
            corner=tuple(self.corner[i] for i in index),
            shifts={k: v[index] for k, v in self.shifts.items()},
            is_scale=pick(self.is_scale),
            vt_shift=pick(self.vt_shift),
            k_scale=pick(self.k_scale),
        )


def load_voltages(tree: Tree) -> Array:
    """(n_loads, 3): each load's node voltage at (min, nominal, max)."""
    loads = tree.plan.loads
    return np.array([loads[name].v_range for name in tree.loads], dtype=float).reshape(-1, 3)


def reference_current(plan: Plan, kelvin: Array) -> Array:
    ref = plan.reference
    dt = np.asarray(kelvin, dtype=float) - ref.tnom
    return ref.current * (1.0 + ref.tempco * dt + ref.tempco2 * dt**2)


def default_columns(tree: Tree) -> Columns:
    """The three ends of every load's voltage range at the plan's own conditions."""
    plan = tree.plan
    n = len(ENDS)
    temperature = np.full(n, plan.temperature)
    return Columns(
        names=ENDS,
        temperature=temperature,
        supply=np.full(n, plan.supply),
        i_ref=reference_current(plan, temperature),
        v_load=load_voltages(tree),
        corner=("",) * n,
        remote=remote_offsets(tree),
    )


def _corner_shifts(plan: Plan, corners: list[str]) -> dict[str, Array]:
    keys = ("beta", "early", "is", "kp", "vth", "lambda")
    out = {k: np.zeros(len(corners)) for k in keys}
    for j, name in enumerate(corners):
        c: Corner = plan.conditions.corners[name] if name else Corner()
        out["beta"][j], out["early"][j], out["is"][j] = c.beta, c.early, c.is_
        out["kp"][j], out["vth"][j], out["lambda"][j] = c.kp, c.vth, c.lambda_
    return out


def condition_columns(tree: Tree, temperatures: list[float] | None = None, supplies: list[float] | None = None,
                      corners: list[str] | None = None, ends: tuple[str, ...] = ENDS) -> Columns:
    """Every combination of temperature × supply × corner × load-voltage end."""
    plan = tree.plan
    cond = plan.conditions
    temps = temperatures or cond.temperatures or [plan.temperature]
    sups = supplies or cond.supplies or [plan.supply]
    cors = corners if corners is not None else (list(cond.corners) or [""])
    combos = list(itertools.product(temps, sups, cors, ends))
    v = load_voltages(tree)
    names = tuple(
        f"{t - ZERO_CELSIUS:g}C {s:g}V{(' ' + c) if c else ''} {e}" for t, s, c, e in combos
    )
    temperature = np.array([c[0] for c in combos], dtype=float)
    return Columns(
        names=names,
        temperature=temperature,
        supply=np.array([c[1] for c in combos], dtype=float),
        i_ref=reference_current(plan, temperature),
        v_load=v[:, [ENDS.index(c[3]) for c in combos]],
        corner=tuple(c[2] for c in combos),
        shifts=_corner_shifts(plan, [c[2] for c in combos]),
        remote=remote_offsets(tree),
    )


def device_arrays(tree: Tree, cols: Columns) -> DeviceArrays:
    """Per-mirror device parameters, (n_mirrors, n_columns), at each column's
    temperature and process corner."""
    plan = tree.plan
    n = len(tree.mirrors)
    base = {k: np.full((n, 1), np.nan) for k in ("is", "beta", "early", "kp_w_l", "vth", "lam", "size", "tnom", "xti",
                                                  "eg", "xtb", "vth_tc", "mu")}
    for i, name in enumerate(tree.mirrors):
        mirror = plan.mirrors[name]
        dev = plan.devices[mirror.device]
        base["size"][i] = mirror.input_size
        if isinstance(dev, CardModel):
            continue  # its parameters come from the card (gp below, or a characterisation table)
        base["tnom"][i] = dev.tnom
        if isinstance(dev, BjtModel):
            base["is"][i], base["beta"][i], base["early"][i] = dev.is_, dev.beta, dev.vaf
            base["xti"][i], base["eg"][i], base["xtb"][i] = dev.xti, dev.eg, dev.xtb
        else:
            base["kp_w_l"][i] = dev.kp * dev.w / dev.l
            base["vth"][i], base["lam"][i] = dev.vth, dev.lambda_
            base["vth_tc"][i], base["mu"][i] = dev.vth_tc, dev.mobility_exp
    t = cols.temperature[None, :]
    sh = {k: cols.shifts.get(k, np.zeros(cols.size))[None, :] for k in ("beta", "early", "is", "kp", "vth", "lambda")}
    with np.errstate(invalid="ignore"):
        is_t = devices.bjt_is_at(base["is"], t, base["tnom"], base["xti"], base["eg"]) * (1.0 + sh["is"])
        beta_t = devices.bjt_beta_at(base["beta"], t, base["tnom"], base["xtb"]) * (1.0 + sh["beta"])
        ratio = t / base["tnom"]
        kp_t = base["kp_w_l"] * ratio ** base["mu"] * (1.0 + sh["kp"])
        vth_t = base["vth"] + base["vth_tc"] * (t - base["tnom"]) + sh["vth"]
    shape = (n, cols.size)
    return DeviceArrays(
        family="mixed",
        vt=np.broadcast_to(devices.thermal_voltage(t), shape).copy(),
        is_in=is_t * base["size"],
        beta=np.broadcast_to(beta_t, shape).copy(),
        early=np.broadcast_to(base["early"] * (1.0 + sh["early"]), shape).copy(),
        k_in=kp_t * base["size"],
        vth=np.broadcast_to(vth_t, shape).copy(),
        lam=np.broadcast_to(base["lam"] * (1.0 + sh["lambda"]), shape).copy(),
        size_in=np.broadcast_to(base["size"], shape).copy(),
        gp=bipolar_cards(tree, cols, sh),
        tables=mos_tables(tree, cols),
    )


def mos_tables(tree: Tree, cols: Columns) -> TableSet | None:
    """Characterisation tables of every MOS mirror given by a card, per column (its temperature
    and corner section); simulated on first use and cached (biastree.analysis.characterize)."""
    plan = tree.plan
    rows = [i for i, name in enumerate(tree.mirrors)
            if isinstance(plan.devices[plan.mirrors[name].device], CardModel)
            and not plan.devices[plan.mirrors[name].device].is_bipolar]
    if not rows:
        return None
    vmax = characterize.table_vmax(plan, (float(np.max(cols.supply)),))
    stacked = characterize.stacked_devices(plan)  # their tables span V_SB (and serve every mirror of the device)
    which = np.full((len(tree.mirrors), cols.size), -1, dtype=np.int64)
    found: list[Table] = []
    index: dict[tuple[str, str, float], int] = {}
    for i in rows:
        device = plan.mirrors[tree.mirrors[i]].device
        dev = plan.devices[device]
        for j in range(cols.size):
            key = (device, cols.corner[j], float(cols.temperature[j]))
            if key not in index:
                index[key] = len(found)
                found.append(characterize.table_for(dev, cols.corner[j], float(cols.temperature[j]), vmax,
                                                    body=device in stacked))
            which[i, j] = index[key]
    return TableSet(tuple(found), which)


def _simple_card(dev: BjtModel) -> dict[str, float]:
    """A simple bipolar model as the Gummel–Poon card it stands for."""
    values = {"is": dev.is_, "bf": dev.beta, "xti": dev.xti, "eg": dev.eg, "xtb": dev.xtb,
              "tnom": dev.tnom - ZERO_CELSIUS}
    if dev.early is not None:
        values["vaf"] = dev.early
    return values


def bipolar_cards(tree: Tree, cols: Columns, sh: dict[str, Array]) -> gp.GummelPoon | None:
    """Full Gummel–Poon parameters of every bipolar mirror, (n_mirrors, C), when the plan
    has any bipolar card (simple models then join as the cards they stand for); else None.
    Each device model is evaluated once for all its columns (once per corner section present),
    and its mirrors share that one parameter set."""
    plan = tree.plan
    if not any(isinstance(d, CardModel) and d.is_bipolar for d in plan.devices.values()):
        return None
    t = cols.temperature[None, :]
    corners = sorted(set(cols.corner))
    sets: list[gp.GummelPoon] = [gp.from_card({}, t * 0 + 300.15)]  # row 0: not bipolar (never read)
    index: dict[str, int] = {}
    which = np.zeros(len(tree.mirrors), dtype=np.int64)
    for i, name in enumerate(tree.mirrors):
        device = plan.mirrors[name].device
        if device not in index:
            dev = plan.devices[device]
            if isinstance(dev, CardModel) and dev.is_bipolar:
                # one parameter set per corner's library section, at that corner's columns' temperatures
                by_corner = {c: model_cards.gummel_poon(dev, c, t) for c in corners}
                picks = [by_corner[c].take((slice(None), slice(j, j + 1))) for j, c in enumerate(cols.corner)]
                sets.append(by_corner[corners[0]] if len(corners) == 1 else gp.concat_columns(picks))
            elif isinstance(dev, BjtModel):
                sets.append(gp.from_card(_simple_card(dev), t, gmin=0.0))
            else:
                sets.append(sets[0])
            index[device] = len(sets) - 1
        which[i] = index[device]
    p = gp.stack(sets).take(which)
    # the plan's own corner shifts apply on top of the cards
    return replace(p, is_be=p.is_be * (1.0 + sh["is"]), is_bc=p.is_bc * (1.0 + sh["is"]),
                    bf=p.bf * (1.0 + sh["beta"]), inv_vaf=p.inv_vaf / (1.0 + sh["early"]))
