"""Operating point of a bias tree, vectorised stage by stage.

The tree is walked one generation of mirrors at a time (numpy over all
mirrors of a generation and topology).  A branch that feeds a child mirror
sits at that child's input voltage, which depends on the child's current;
the whole tree is therefore swept top-down repeatedly until every input
voltage moves by less than ``VOLTAGE_TOL``.  Each sweep shrinks the error by
roughly V_T/V_A (≈ 1e-3), so a handful of sweeps suffice.

Trailing axis of every result array: the load-voltage *case* — (min,
nominal, max) of each load's voltage range.  Everything broadcasts, so the
same code runs over samples or corners by giving the parameters more columns.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import devices
from .devices import Array
from .errors import SolveError
from .plan import BjtModel
from .topologies import TOPOLOGIES, DeviceArrays, GroupInput
from .tree import Tree

VOLTAGE_TOL = 1e-12  # V: sweeps stop when no input voltage moves more than this
MAX_SWEEPS = 200
CASES = ("min", "nominal", "max")


@dataclass(frozen=True)
class OperatingPoint:
    """Currents and voltages of every mirror and branch (one instance each).

    Shapes: mirror arrays (n_mirrors, n_cases), branch arrays
    (n_branches, n_cases).  The gain factors multiply exactly to the branch
    current:  b_current = m_i_in[parent] · ratio · Π b_factors.
    """

    tree: Tree
    i_ref: Array
    m_i_in: Array
    m_v_in: Array  # input voltage, from the mirror's own rail
    m_extra: Array  # current drawn besides the outputs (helper devices, bias sources), per instance
    b_current: Array
    b_distance: Array  # output node's distance from the parent's rail, V
    b_min_distance: Array  # distance below which the output leaves the active region
    b_internal_margin: Array  # saturation margin of the devices under the output device, V (inf: none)
    b_factors: dict[str, Array]
    b_rout: Array  # small-signal output resistance of each branch, Ω
    sweeps: int
    cases: tuple[str, ...] = field(default=CASES)

    @property
    def b_compliance(self) -> Array:
        """Compliance margin of each branch, V (negative = an output device not active)."""
        return np.minimum(self.b_distance - self.b_min_distance, self.b_internal_margin)

    @property
    def l_current(self) -> Array:
        return self.b_current[self.tree.l_branch]


def device_arrays(tree: Tree, temperature: float | None = None) -> DeviceArrays:
    """Per-mirror device parameters (shape (n_mirrors, 1)) at ``temperature`` (K)."""
    plan = tree.plan
    kelvin = plan.temperature if temperature is None else temperature
    n = len(tree.mirrors)
    names = ("is_in", "beta", "early", "k_in", "vth", "lam", "size_in")
    cols = {k: np.full(n, np.nan) for k in names}
    for i, name in enumerate(tree.mirrors):
        mirror = plan.mirrors[name]
        dev = plan.devices[mirror.device]
        cols["size_in"][i] = mirror.input_size
        if isinstance(dev, BjtModel):
            cols["is_in"][i] = float(devices.bjt_is_at(dev.is_, kelvin, dev.tnom, dev.xti, dev.eg)) * mirror.input_size
            cols["beta"][i] = float(devices.bjt_beta_at(dev.beta, kelvin, dev.tnom, dev.xtb))
            cols["early"][i] = dev.vaf
        else:
            cols["k_in"][i] = dev.kp * dev.w * mirror.input_size / dev.l
            cols["vth"][i] = dev.vth
            cols["lam"][i] = dev.lambda_
    vt = np.full(n, float(devices.thermal_voltage(kelvin)))
    return DeviceArrays("mixed", vt[:, None], *(cols[k][:, None] for k in names))


def topology_params(tree: Tree) -> dict[str, Array]:
    """Per-mirror topology parameters, (n_mirrors, 1), with defaults filled in."""
    plan = tree.plan
    ideal = tree.m_ideal_in
    out = {k: np.zeros((len(tree.mirrors), 1)) for k in ("helper_size", "bleed", "r_emitter", "bias_current", "swing_n")}
    for i, name in enumerate(tree.mirrors):
        m = plan.mirrors[name]
        out["helper_size"][i] = m.helper_size
        out["bleed"][i] = m.bleed
        if m.degeneration is not None:
            out["r_emitter"][i] = m.degeneration
        elif m.degeneration_drop is not None:
            out["r_emitter"][i] = m.degeneration_drop / ideal[i]
        out["bias_current"][i] = m.bias_current if m.bias_current is not None else ideal[i]
        out["swing_n"][i] = m.swing_n
    return out


def load_voltages(tree: Tree) -> Array:
    """(n_loads, 3): each load's node voltage at (min, nominal, max)."""
    plan = tree.plan
    loads = plan.loads
    return np.array([loads[name].v_range for name in tree.loads], dtype=float).reshape(-1, 3)


@dataclass(frozen=True)
class _Group:
    family: str
    topology: str
    mirrors: np.ndarray
    branches: np.ndarray
    row: np.ndarray  # mirror row (within the group) of each branch
    position: np.ndarray  # index of each branch within its mirror


def _groups(tree: Tree) -> list[list[_Group]]:
    """Per generation: mirrors and their branches grouped by (family, topology)."""
    plan = tree.plan
    topo = np.array([plan.mirrors[m].topology for m in tree.mirrors], dtype=object)
    out = []
    for gen in tree.generations:
        groups = []
        for family, bip in (("bjt", True), ("mos", False)):
            for name in TOPOLOGIES:
                sel = gen[(tree.m_bipolar[gen] == bip) & (topo[gen] == name)]
                if sel.size:
                    branches = np.flatnonzero(np.isin(tree.b_parent, sel))
                    row = np.searchsorted(sel, tree.b_parent[branches])
                    groups.append(_Group(family, name, sel, branches, row, tree.b_index[branches]))
        out.append(groups)
    return out


def _group_input(tree: Tree, g: _Group, dev: DeviceArrays, params: dict[str, Array], i_in: Array,
                 distance: Array, is_scale: Array | None = None) -> GroupInput:
    b = g.branches
    return GroupInput(
        dev=dev.take(g.mirrors, g.family),
        params={k: v[g.mirrors] for k, v in params.items()},
        i_in=i_in[g.mirrors],
        row=g.row,
        ratio=tree.b_ratio[b][:, None],
        count=tree.b_count[b][:, None],
        distance=distance,
        supply=tree.plan.supply,
        is_scale=None if is_scale is None else is_scale[b],
    )


def solve(
    tree: Tree,
    dev: DeviceArrays | None = None,
    i_ref: float | Array | None = None,
    is_scale: Array | None = None,
    output_resistance: bool = True,
) -> OperatingPoint:
    """Solve the operating point of every mirror and branch.

    ``is_scale`` (n_branches, 1) multiplies each output device's IS (for
    mismatch studies); ``output_resistance=False`` skips the small-signal pass.

    >>> import biastree
    >>> op = biastree.solve(biastree.load("samples/bipolar_small.yaml"))
    >>> op.sweeps < 10
    True
    """
    plan = tree.plan
    dev = device_arrays(tree) if dev is None else dev
    params = topology_params(tree)
    i_ref = plan.reference.current if i_ref is None else i_ref
    supply = plan.supply
    n_m, n_b = len(tree.mirrors), len(tree.b_parent)
    n_c = len(CASES)

    # Output nodes that feed loads sit at fixed voltages.
    rail = np.where(tree.m_sink, 0.0, supply)[:, None]
    v_load = load_voltages(tree)
    distance = np.zeros((n_b, n_c))
    lb = tree.l_branch
    distance[lb] = np.abs(v_load - rail[tree.b_parent[lb]])
    to_mirror = np.flatnonzero(~tree.b_to_load)

    m_i_in = np.zeros((n_m, n_c))
    m_v_in = np.where(tree.m_bipolar, 0.7, np.nan_to_num(dev.vth[:, 0]) + 0.2)[:, None] * np.ones((1, n_c))
    m_extra = np.zeros((n_m, n_c))
    b_current = np.zeros((n_b, n_c))
    b_min = np.zeros((n_b, n_c))
    b_internal = np.full((n_b, n_c), np.inf)
    groups = _groups(tree)
    root = tree.generations[0]

    for sweep in range(1, MAX_SWEEPS + 1):
        previous = m_v_in.copy()
        m_i_in[root] = i_ref
        for generation in groups:
            for g in generation:
                b = g.branches
                child_mirror = ~tree.b_to_load[b]
                dist = distance[b]
                dist[child_mirror] = supply - m_v_in[tree.b_child[b[child_mirror]]]
                distance[b] = dist
                out = TOPOLOGIES[g.topology].solve(_group_input(tree, g, dev, params, m_i_in, dist, is_scale))
                m_v_in[g.mirrors] = out.v_in
                m_extra[g.mirrors] = out.extra
                b_current[b] = out.current
                b_min[b] = out.min_distance
                if out.internal_margin is not None:
                    b_internal[b] = out.internal_margin
                m_i_in[tree.b_child[b[child_mirror]]] = out.current[child_mirror]
        if not np.all(np.isfinite(m_v_in)) or not np.all(np.isfinite(b_current)):
            bad = [tree.mirrors[i] for i in np.flatnonzero(~np.all(np.isfinite(m_v_in), axis=1))][:3]
            raise SolveError(
                "no operating point: currents became invalid"
                + (f" at mirror(s) {', '.join(bad)}" if bad else "")
                + " (an output pushed far out of its active region, or the supply is too low)"
            )
        if np.max(np.abs(m_v_in - previous)) < VOLTAGE_TOL:
            break
    else:
        raise SolveError(f"operating point did not converge in {MAX_SWEEPS} sweeps")

    # Distances into child mirrors with the final input voltages.
    distance[to_mirror] = supply - m_v_in[tree.b_child[to_mirror]]
    if plan.compliance.bjt_forward_bias:
        b_min = b_min - np.where(tree.m_bipolar[tree.b_parent], plan.compliance.bjt_forward_bias, 0.0)[:, None]
    factors = _factors(tree, groups, dev, params, m_i_in, distance, b_current, is_scale)
    rout = _rout(tree, groups, dev, params, m_i_in, distance, is_scale) if output_resistance else np.full((n_b, n_c), np.nan)
    return OperatingPoint(
        tree=tree,
        i_ref=np.full(n_c, i_ref, dtype=float),
        m_i_in=m_i_in,
        m_v_in=m_v_in,
        m_extra=m_extra,
        b_current=b_current,
        b_distance=distance,
        b_min_distance=b_min,
        b_internal_margin=b_internal,
        b_factors=factors,
        b_rout=rout,
        sweeps=sweep,
    )


def _factors(tree: Tree, groups: list[list[_Group]], dev: DeviceArrays, params: dict[str, Array], i_in: Array,
             distance: Array, current: Array, is_scale: Array | None) -> dict[str, Array]:
    """Split each branch's gain into terms: the gain with ideal output devices
    (V_A → ∞, λ = 0) over the size ratio, and what the real ones add to it."""
    n_b, n_c = current.shape
    ideal_gain = np.ones((n_b, n_c))
    ideal_dev = dev.ideal_outputs()
    for generation in groups:
        for g in generation:
            b = g.branches
            out = TOPOLOGIES[g.topology].solve(_group_input(tree, g, ideal_dev, params, i_in, distance[b], is_scale))
            ideal_gain[b] = out.current / (i_in[tree.b_parent[b]] * tree.b_ratio[b][:, None])
    real_gain = current / (i_in[tree.b_parent] * tree.b_ratio[:, None])
    bip = tree.m_bipolar[tree.b_parent][:, None]
    return {
        "beta": np.where(bip, ideal_gain, 1.0),
        "early": np.where(bip, real_gain / ideal_gain, 1.0),
        "lambda": np.where(bip, 1.0, real_gain / ideal_gain),
    }


ROUT_STEP = 1e-3  # V: central difference of the output current


def _rout(tree: Tree, groups: list[list[_Group]], dev: DeviceArrays, params: dict[str, Array], i_in: Array,
          distance: Array, is_scale: Array | None) -> Array:
    """Output resistance of every branch: 1/(∂I_out/∂V_out) with the input
    current held, by a central difference of the exact DC solution (the
    small-signal model is the derivative of the same equations).  Where one
    output's voltage moves the others (bipolar cascode: base currents), the
    branches of a mirror are stepped one position at a time."""
    rout = np.full(distance.shape, np.inf)
    for generation in groups:
        for g in generation:
            topo = TOPOLOGIES[g.topology]
            b = g.branches
            rounds = np.unique(g.position) if topo.coupled_outputs else [None]
            for position in rounds:
                step = np.full((len(b), 1), ROUT_STEP)
                if position is not None:
                    step = np.where((g.position == position)[:, None], ROUT_STEP, 0.0)
                hi = topo.solve(_group_input(tree, g, dev, params, i_in, distance[b] + step, is_scale)).current
                lo = topo.solve(_group_input(tree, g, dev, params, i_in, distance[b] - step, is_scale)).current
                with np.errstate(divide="ignore"):
                    r = 2.0 * ROUT_STEP / (hi - lo)
                sel = slice(None) if position is None else (g.position == position)
                rout[b[sel]] = np.where(r[sel] > 0, r[sel], np.inf)
    return rout
