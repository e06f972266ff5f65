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
from .topologies import TOPOLOGIES, DeviceArrays
from .tree import Tree

VOLTAGE_TOL = 1e-12  # V: sweeps stop when no input voltage moves more than this
MAX_SWEEPS = 200
CASES = ("min", "nominal", "max")


@dataclass(frozen=True)
class OperatingPoint:
    """Currents and voltages of every mirror and branch (one instance each).

    Shapes: mirror arrays (n_mirrors, n_cases), branch arrays
    (n_branches, n_cases).  Gain factors multiply exactly to the branch
    current:  b_current = m_i_in[parent] · ratio · Π m_factors · Π b_factors.
    """

    tree: Tree
    i_ref: Array
    m_i_in: Array
    m_v_in: Array  # input voltage, from the mirror's own rail
    m_factors: dict[str, Array]
    b_current: Array
    b_distance: Array  # output node's distance from the parent's rail, V
    b_min_distance: Array  # distance below which the output device leaves the active region
    b_factors: dict[str, Array]
    sweeps: int
    cases: tuple[str, ...] = field(default=CASES)

    @property
    def b_compliance(self) -> Array:
        """Compliance margin of each branch, V (negative = output device not active)."""
        return self.b_distance - self.b_min_distance

    @property
    def l_current(self) -> Array:
        return self.b_current[self.tree.l_branch]


def device_arrays(tree: Tree, temperature: float | None = None) -> DeviceArrays:
    """Per-mirror device parameters (shape (n_mirrors, 1)) at ``temperature`` (K)."""
    plan = tree.plan
    kelvin = plan.temperature if temperature is None else temperature
    n = len(tree.mirrors)
    cols = {k: np.full(n, np.nan) for k in ("is_in", "beta", "early", "k_in", "vth", "lam")}
    for i, name in enumerate(tree.mirrors):
        mirror = plan.mirrors[name]
        dev = plan.devices[mirror.device]
        if isinstance(dev, BjtModel):
            cols["is_in"][i] = float(devices.bjt_is_at(dev.is_, kelvin, dev.tnom, dev.xti, dev.eg)) * mirror.input_size
            cols["beta"][i] = float(devices.bjt_beta_at(dev.beta, kelvin, dev.tnom, dev.xtb))
            cols["early"][i] = dev.vaf
        else:
            cols["k_in"][i] = dev.kp * dev.w * mirror.input_size / dev.l
            cols["vth"][i] = dev.vth
            cols["lam"][i] = dev.lambda_
    vt = np.full(n, float(devices.thermal_voltage(kelvin)))
    return DeviceArrays("mixed", vt[:, None], *(cols[k][:, None] for k in ("is_in", "beta", "early", "k_in", "vth", "lam")))


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
                    groups.append(_Group(family, name, sel, branches))
        out.append(groups)
    return out


def solve(tree: Tree, dev: DeviceArrays | None = None, i_ref: float | Array | None = None) -> OperatingPoint:
    """Solve the operating point of every mirror and branch.

    >>> import biastree
    >>> op = biastree.solve(biastree.load("samples/bipolar_small.yaml"))
    >>> op.sweeps < 10
    True
    """
    plan = tree.plan
    dev = device_arrays(tree) if dev is None else dev
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
    m_factors: dict[str, Array] = {}
    b_factors: dict[str, Array] = {}
    b_current = np.zeros((n_b, n_c))
    b_min = np.zeros((n_b, n_c))
    groups = _groups(tree)
    root = tree.generations[0]

    for sweep in range(1, MAX_SWEEPS + 1):
        previous = m_v_in.copy()
        m_i_in[root] = i_ref
        for generation in groups:
            for g in generation:
                topo = TOPOLOGIES[g.topology]
                d = dev.take(g.mirrors, g.family)
                state = topo.input(d, m_i_in[g.mirrors], tree.m_fanout[g.mirrors][:, None])
                m_v_in[g.mirrors] = state.v_in
                gain = np.ones((len(g.mirrors), n_c))
                for key, value in state.factors.items():
                    m_factors.setdefault(key, np.ones((n_m, n_c)))[g.mirrors] = value
                    gain = gain * value
                # branch side: map each branch to its row in this group
                row = np.searchsorted(g.mirrors, tree.b_parent[g.branches])
                b = g.branches
                child_mirror = ~tree.b_to_load[b]
                dist = distance[b]
                dist[child_mirror] = supply - m_v_in[tree.b_child[b[child_mirror]]]
                distance[b] = dist
                out = topo.output(d.take(row), state.take(row), dist, m_v_in[g.mirrors][row])
                current = m_i_in[g.mirrors][row] * tree.b_ratio[b][:, None] * gain[row]
                for key, value in out.factors.items():
                    b_factors.setdefault(key, np.ones((n_b, n_c)))[b] = value
                    current = current * value
                b_current[b] = current
                b_min[b] = out.min_distance
                m_i_in[tree.b_child[b[child_mirror]]] = current[child_mirror]
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
    return OperatingPoint(
        tree=tree,
        i_ref=np.full(n_c, i_ref, dtype=float),
        m_i_in=m_i_in,
        m_v_in=m_v_in,
        m_factors=m_factors,
        b_current=b_current,
        b_distance=distance,
        b_min_distance=b_min,
        b_factors=b_factors,
        sweeps=sweep,
    )
