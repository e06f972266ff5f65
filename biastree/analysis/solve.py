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

from dataclasses import dataclass, field, replace

import numpy as np

from biastree.analysis.conditions import ENDS as CASES  # the ends of each load's voltage range
from biastree.analysis.conditions import Columns, default_columns, device_arrays
from biastree.errors import SolveError
from biastree.physics import devices
from biastree.physics.devices import Array
from biastree.physics.topologies import TOPOLOGIES, DeviceArrays, GroupInput
from biastree.tree.arrays import Tree

VOLTAGE_TOL = 1e-12  # V: sweeps stop when no input voltage moves more than this
MAX_SWEEPS = 200
DEEP_TREE = 24  # generations: deeper trees are solved with a local fixed point per generation


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
    columns: Columns | None = None
    devices: DeviceArrays | None = None  # device parameters per mirror and column (they do not depend on topology)

    @property
    def b_compliance(self) -> Array:
        """Compliance margin of each branch, V (negative = an output device not active)."""
        return np.minimum(self.b_distance - self.b_min_distance, self.b_internal_margin)

    @property
    def l_current(self) -> Array:
        return self.b_current[self.tree.l_branch]


def topology_params(tree: Tree, index: Array | None = None, specs: list | None = None) -> dict[str, Array]:  # type: ignore[type-arg]
    """Per-mirror topology parameters, (n_mirrors, 1), with defaults filled in;
    with ``index`` (mirror indices) one row per entry only, from ``specs``
    (one mirror spec per entry, e.g. with another topology) when given."""
    plan = tree.plan
    ideal = tree.m_ideal_in
    rows = range(len(tree.mirrors)) if index is None else [int(i) for i in index]
    out = {k: np.zeros((len(rows), 1)) for k in ("helper_size", "bleed", "r_emitter", "bias_current", "swing_n")}
    for i, mirror in enumerate(rows):
        m = plan.mirrors[tree.mirrors[mirror]] if specs is None else specs[i]
        out["helper_size"][i] = m.helper_size
        out["bleed"][i] = m.bleed
        if m.degeneration is not None:
            out["r_emitter"][i] = m.degeneration
        elif m.degeneration_drop is not None:
            out["r_emitter"][i] = m.degeneration_drop / ideal[mirror]
        out["bias_current"][i] = m.bias_current if m.bias_current is not None else ideal[mirror]
        out["swing_n"][i] = m.swing_n
    return out


@dataclass(frozen=True)
class _Group:
    family: str
    topology: str
    mirrors: np.ndarray
    branches: np.ndarray
    row: np.ndarray  # mirror row (within the group) of each branch
    position: np.ndarray  # index of each branch within its mirror


def _branches_of(tree: Tree, sel: np.ndarray) -> np.ndarray:
    """Branches of the mirrors ``sel`` (sorted), in order.  The build lists
    branches mirror by mirror, so each mirror's branches are one run."""
    start = np.searchsorted(tree.b_parent, sel, "left")
    count = np.searchsorted(tree.b_parent, sel, "right") - start
    offsets = np.cumsum(count) - count
    return np.repeat(start - offsets, count) + np.arange(int(count.sum()))


def _group(tree: Tree, family: str, name: str, sel: np.ndarray) -> _Group:
    branches = _branches_of(tree, sel)
    row = np.searchsorted(sel, tree.b_parent[branches])
    return _Group(family, name, sel, branches, row, tree.b_index[branches])


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
                    groups.append(_group(tree, family, name, sel))
        out.append(groups)
    return out


def _restrict(tree: Tree, groups: list[list[_Group]], only: np.ndarray) -> list[list[_Group]]:
    """The groups cut down to the mirrors of ``only``; empty generations dropped."""
    out = []
    for generation in groups:
        kept = []
        for g in generation:
            sel = g.mirrors[only[g.mirrors]]
            if sel.size == g.mirrors.size:
                kept.append(g)
            elif sel.size:
                kept.append(_group(tree, g.family, g.topology, sel))
        if kept:
            out.append(kept)
    return out


@dataclass(frozen=True)
class _Context:
    tree: Tree
    dev: DeviceArrays
    params: dict[str, Array]
    cols: Columns
    cache: dict = field(default_factory=dict)  # type: ignore[type-arg]

    def _static(self, g: _Group, dev: DeviceArrays | None) -> tuple:  # type: ignore[type-arg]
        """What does not change from sweep to sweep: taken once per group."""
        key = (id(g), id(dev))
        got = self.cache.get(key)
        if got is None:
            b = g.branches
            c = self.cols
            pick = lambda a: None if a is None else a[b]  # noqa: E731
            got = ((dev or self.dev).take(g.mirrors, g.family), {k: v[g.mirrors] for k, v in self.params.items()},
                   self.tree.b_ratio[b][:, None], self.tree.b_count[b][:, None],
                   pick(c.is_scale), pick(c.vt_shift), pick(c.k_scale), g, dev)  # g, dev: keep the ids alive
            self.cache[key] = got
        return got

    def group_input(self, g: _Group, i_in: Array, distance: Array, dev: DeviceArrays | None = None,
                    b_current: Array | None = None) -> GroupInput:
        c = self.cols
        taken, params, ratio, count, is_scale, vt_shift, k_scale, _, _ = self._static(g, dev)
        if c.remote is not None and b_current is not None:
            is_scale, vt_shift, k_scale = self._remote(g, b_current[g.branches], distance, is_scale, vt_shift, k_scale)
        return GroupInput(
            dev=taken,
            params=params,
            i_in=i_in[g.mirrors],
            row=g.row,
            ratio=ratio,
            count=count,
            distance=distance,
            supply=c.supply[None, :],
            is_scale=is_scale,
            vt_shift=vt_shift,
            k_scale=k_scale,
        )

    def _remote(self, g: _Group, current: Array, distance: Array, is_scale: Array | None, vt_shift: Array | None,
                k_scale: Array | None) -> tuple[Array | None, Array | None, Array | None]:
        """Fold a remote output device's temperature and rail offset into its
        mismatch inputs (exact at convergence; see biastree.floorplan)."""
        remote = self.cols.remote
        b = g.branches
        dt, dv = remote.delta_t[b][:, None], remote.delta_v[b][:, None]
        if not (np.any(dt) or np.any(dv)):
            return is_scale, vt_shift, k_scale
        dev = self.dev.take(self.tree.b_parent[b])
        t = self.cols.temperature[None, :]
        if g.family == "bjt":
            plan = self.tree.plan
            models = [plan.devices[plan.mirrors[self.tree.mirrors[p]].device] for p in self.tree.b_parent[b]]
            xti = np.array([m.xti for m in models])[:, None]
            eg = np.array([m.eg for m in models])[:, None]
            vt, vt_hot = dev.vt, devices.thermal_voltage(t + dt)
            is_ratio = devices.bjt_is_at(1.0, t + dt, t, xti, eg)
            # the warm device's real V_BE, from its current in the previous sweep
            # (its own IS and V_T; the first sweep starts from 0.7 V)
            is_hot = dev.is_in * self.tree.b_ratio[b][:, None] * is_ratio  # IS of the output device, warm
            with np.errstate(divide="ignore", invalid="ignore"):
                vbe = np.where(current > 0, vt_hot * np.log(current / is_hot), 0.7)
                early = 1.0 + np.maximum(distance - vbe - dv, 0.0) / dev.early  # its collector at the output node
                vbe = np.where(current > 0, vt_hot * np.log(current / (is_hot * early)), 0.7)
            factor = is_ratio * np.exp(vbe / vt_hot - vbe / vt) * np.exp(-dv / vt)
            return (factor if is_scale is None else is_scale * factor), vt_shift, k_scale
        plan = self.tree.plan
        models = [plan.devices[plan.mirrors[self.tree.mirrors[p]].device] for p in self.tree.b_parent[b]]
        tc = np.array([m.vth_tc for m in models])[:, None]
        mu = np.array([m.mobility_exp for m in models])[:, None]
        shift = dv + tc * dt  # |VT| rises with tc·ΔT; the rail offset eats into V_GS
        # kp law, and the drain-source voltage the offset rail takes away (λ term)
        scale = ((t + dt) / t) ** mu * (1.0 + dev.lam * (distance - dv)) / (1.0 + dev.lam * distance)
        return (is_scale, shift if vt_shift is None else vt_shift + shift,
                scale if k_scale is None else k_scale * scale)


def solve(tree: Tree, columns: Columns | None = None, output_resistance: bool = True,
          is_scale: Array | None = None, base: OperatingPoint | None = None,
          only: Array | None = None) -> OperatingPoint:
    """Solve the operating point of every mirror and branch, in every column
    of ``columns`` (default: the three ends of the load voltages at the plan's
    conditions).  ``is_scale`` (n_branches, 1) multiplies each output device's
    IS relative to its input device (a quick mismatch study);
    ``output_resistance=False`` skips the term split and the small-signal pass.
    ``base`` and ``only`` (bool per mirror) re-solve only the mirrors of
    ``only``, everything else taken from ``base`` (same tree structure and
    columns): the caller promises that nothing outside ``only`` can move.

    >>> import biastree
    >>> op = biastree.solve(biastree.load("samples/bipolar_small.yaml"))
    >>> op.sweeps < 10
    True
    """
    # Outside a device's valid region the equations can produce NaN on the way;
    # they are caught as a SolveError with the mirror named, not as numpy warnings.
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return _solve(tree, columns, output_resistance, is_scale, base, only)


def _solve(
    tree: Tree,
    columns: Columns | None = None,
    output_resistance: bool = True,
    is_scale: Array | None = None,
    base: OperatingPoint | None = None,
    only: Array | None = None,
) -> OperatingPoint:
    plan = tree.plan
    cols = default_columns(tree) if columns is None else columns
    if is_scale is not None:
        cols = replace(cols, is_scale=np.broadcast_to(is_scale, (len(tree.b_parent), cols.size)))
    dev = base.devices if base is not None and base.devices is not None and is_scale is None else device_arrays(tree, cols)
    ctx = _Context(tree, dev, topology_params(tree), cols)
    supply = cols.supply[None, :]
    n_m, n_b = len(tree.mirrors), len(tree.b_parent)
    n_c = cols.size

    # Output nodes that feed loads sit at fixed voltages.
    rail = np.where(tree.m_sink[:, None], 0.0, supply)
    distance = np.zeros((n_b, n_c))
    lb = tree.l_branch
    distance[lb] = np.abs(cols.v_load - rail[tree.b_parent[lb]])
    to_mirror = np.flatnonzero(~tree.b_to_load)

    m_i_in = np.zeros((n_m, n_c))
    m_v_in = np.where(tree.m_bipolar[:, None], 0.7, np.nan_to_num(dev.vth) + 0.2) * np.ones((1, n_c))
    m_extra = np.zeros((n_m, n_c))
    b_current = np.zeros((n_b, n_c))
    b_min = np.zeros((n_b, n_c))
    b_internal = np.full((n_b, n_c), np.inf)
    groups = _groups(tree)
    if base is not None and only is not None:
        # start from the base solution; solve only the chosen mirrors
        m_i_in, m_v_in, m_extra = base.m_i_in.copy(), base.m_v_in.copy(), base.m_extra.copy()
        b_current, distance, b_internal = base.b_current.copy(), base.b_distance.copy(), base.b_internal_margin.copy()
        b_min = base.b_min_distance.copy()
        if plan.compliance.bjt_forward_bias:  # added back below
            b_min = b_min + np.where(tree.m_bipolar[tree.b_parent], plan.compliance.bjt_forward_bias, 0.0)[:, None]
        groups = _restrict(tree, groups, np.asarray(only, dtype=bool))
    root = tree.generations[0]
    i_ref = cols.i_ref[None, :]

    def branch_distances(g: _Group) -> tuple[Array, Array]:
        b = g.branches
        child_mirror = ~tree.b_to_load[b]
        dist = distance[b]
        dist[child_mirror] = supply - m_v_in[tree.b_child[b[child_mirror]]]
        distance[b] = dist
        return dist, child_mirror

    def solve_generation(generation: list[_Group]) -> None:
        for g in generation:
            b = g.branches
            dist, child_mirror = branch_distances(g)
            out = TOPOLOGIES[g.topology].solve(ctx.group_input(g, m_i_in, dist, b_current=b_current))
            m_v_in[g.mirrors] = out.v_in
            m_extra[g.mirrors] = out.extra
            b_current[b] = out.current
            b_min[b] = out.min_distance
            if out.internal_margin is not None:
                b_internal[b] = out.internal_margin
            m_i_in[tree.b_child[b[child_mirror]]] = out.current[child_mirror]

    def child_voltages(generation: list[_Group]) -> float:
        """Input voltages of a generation from its (new) input currents; the
        largest change.  Only the input voltages are kept."""
        moved = 0.0
        for g in generation:
            dist, _ = branch_distances(g)
            v_in = TOPOLOGIES[g.topology].solve(ctx.group_input(g, m_i_in, dist, b_current=b_current)).v_in
            old = m_v_in[g.mirrors]
            v_in = np.where(np.isfinite(v_in), v_in, old)
            moved = max(moved, float(np.max(np.abs(v_in - old), initial=0.0)))
            m_v_in[g.mirrors] = v_in
        return moved

    # A deep tree converges slowly when swept as a whole (each sweep carries an
    # input-voltage error one more generation down, so chains of thousands of
    # mirrors needed dozens of sweeps): there each generation is first brought
    # to a local fixed point with its children's input voltages.
    local = len(groups) > DEEP_TREE
    for sweep in range(1, MAX_SWEEPS + 1):
        previous = m_v_in.copy()
        if only is None or only[root[0]]:
            m_i_in[root] = i_ref
        for k, generation in enumerate(groups):
            solve_generation(generation)
            if local and sweep == 1 and k + 1 < len(groups):
                for _ in range(MAX_SWEEPS):
                    if not child_voltages(groups[k + 1]) >= VOLTAGE_TOL:  # (NaN stops too)
                        break
                    solve_generation(generation)
        if not np.all(np.isfinite(m_v_in)) or not np.all(np.isfinite(b_current)):
            raise _no_operating_point(tree, m_v_in, b_current, cols)
        if np.max(np.abs(m_v_in - previous)) < VOLTAGE_TOL:
            break
    else:
        m = int(np.argmax(np.max(np.abs(m_v_in - previous), axis=1)))
        raise SolveError(f"operating point did not converge in {MAX_SWEEPS} sweeps: the input voltage of mirror "
                         f"'{tree.mirrors[m]}' keeps moving", ("mirrors", tree.mirrors[m]))

    # Distances into child mirrors with the final input voltages.
    distance[to_mirror] = supply - m_v_in[tree.b_child[to_mirror]]
    if plan.compliance.bjt_forward_bias:
        b_min = b_min - np.where(tree.m_bipolar[tree.b_parent], plan.compliance.bjt_forward_bias, 0.0)[:, None]
    if output_resistance:
        factors = _factors(ctx, groups, m_i_in, distance, b_current)
        rout = _rout(ctx, groups, m_i_in, distance, b_current)
    else:
        factors, rout = {}, np.full((n_b, n_c), np.nan)
    return OperatingPoint(
        tree=tree,
        i_ref=cols.i_ref.astype(float),
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
        cases=cols.names,
        columns=cols,
        devices=dev,
    )


def _no_operating_point(tree: Tree, m_v_in: Array, b_current: Array, cols: Columns) -> SolveError:
    """Name the first mirror, the quantity and the condition where the solve broke down."""
    bad_v = ~np.isfinite(m_v_in)
    bad_b = ~np.isfinite(b_current)
    if bad_v.any():
        m, col = (int(x[0]) for x in np.nonzero(bad_v))
        what = "input voltage (V_BE)" if tree.m_bipolar[m] else "input voltage (V_GS)"
        path: tuple[object, ...] = ("mirrors", tree.mirrors[m])
    else:
        b, col = (int(x[0]) for x in np.nonzero(bad_b))
        m = int(tree.b_parent[b])
        what = f"output current of branch {int(tree.b_index[b])}"
        path = ("mirrors", tree.mirrors[m], "branches", int(tree.b_index[b]))
    case = cols.names[col] if col < len(cols.names) else str(col)
    return SolveError(
        f"no operating point: the {what} of mirror '{tree.mirrors[m]}' is not a finite number in case {case} "
        f"({cols.temperature[col] - 273.15:.4g} °C, supply {cols.supply[col]:.4g} V); a device parameter, "
        "ratio or condition drives it outside the equations' range",
        path,
    )


def _factors(ctx: _Context, groups: list[list[_Group]], i_in: Array, distance: Array, current: Array) -> dict[str, Array]:
    """Split each branch's gain into terms: the gain with ideal output devices
    (V_A → ∞, λ = 0) over the size ratio, and what the real ones add to it."""
    tree = ctx.tree
    n_b, n_c = current.shape
    ideal_gain = np.ones((n_b, n_c))
    local_gain = np.ones((n_b, n_c))  # ideal outputs and no floorplan offsets
    ideal_dev = ctx.dev.ideal_outputs()
    local = replace(ctx, cols=replace(ctx.cols, remote=None))
    for generation in groups:
        for g in generation:
            b = g.branches
            ideal_in = i_in[tree.b_parent[b]] * tree.b_ratio[b][:, None]
            out = TOPOLOGIES[g.topology].solve(ctx.group_input(g, i_in, distance[b], ideal_dev, current))
            ideal_gain[b] = out.current / ideal_in
            if ctx.cols.remote is not None:
                out = TOPOLOGIES[g.topology].solve(local.group_input(g, i_in, distance[b], ideal_dev, current))
                local_gain[b] = out.current / ideal_in
            else:
                local_gain[b] = ideal_gain[b]
    real_gain = current / (i_in[tree.b_parent] * tree.b_ratio[:, None])
    bip = tree.m_bipolar[tree.b_parent][:, None]
    return {
        "beta": np.where(bip, local_gain, 1.0),
        "gradient": ideal_gain / local_gain,
        "early": np.where(bip, real_gain / ideal_gain, 1.0),
        "lambda": np.where(bip, 1.0, real_gain / ideal_gain),
    }


ROUT_STEP = 1e-3  # V: central difference of the output current


def _rout(ctx: _Context, groups: list[list[_Group]], i_in: Array, distance: Array, ctx_current: Array) -> Array:
    """Output resistance of every branch: 1/(∂I_out/∂V_out) with the input
    current held, by a central difference of the exact DC solution (the
    small-signal model is the derivative of the same equations).  Where one
    output's voltage moves the others (bipolar cascode: base currents), the
    branches of a mirror are stepped one position at a time."""
    rout = np.full(distance.shape, np.inf)
    for generation in groups:
        for whole in generation:
            topo = TOPOLOGIES[whole.topology]
            # MOS outputs draw no gate current: they never move each other, so all are stepped at once
            coupled = topo.coupled_outputs and whole.family == "bjt"
            rounds = np.unique(whole.position) if coupled else [None]
            for position in rounds:
                g = whole
                if position is not None:
                    # only the mirrors that have an output at this position are solved again
                    with_it = np.unique(whole.row[whole.position == position])
                    if len(with_it) < len(whole.mirrors):
                        g = _group(ctx.tree, whole.family, whole.topology, whole.mirrors[with_it])
                b = g.branches
                step = np.full((len(b), 1), ROUT_STEP)
                if position is not None:
                    step = np.where((g.position == position)[:, None], ROUT_STEP, 0.0)
                hi = topo.solve(ctx.group_input(g, i_in, distance[b] + step, b_current=ctx_current)).current
                lo = topo.solve(ctx.group_input(g, i_in, distance[b] - step, b_current=ctx_current)).current
                with np.errstate(divide="ignore"):
                    r = 2.0 * ROUT_STEP / (hi - lo)
                sel = slice(None) if position is None else (g.position == position)
                rout[b[sel]] = np.where(r[sel] > 0, r[sel], np.inf)
    return rout


# --- restricted re-solve: copies of a few mirrors, many trials at once ---------------


@dataclass(frozen=True)
class Rows:
    """Copies ("rows") of some mirrors of a tree, to be re-solved together.

    Each row is one mirror in one *trial* (a change tried on a copy of the
    tree): its own topology and parameters, and every branch of the mirror
    as a branch row.  A row's input current comes from the branch row of its
    parent mirror's row in the same trial, or from the base solution where
    the parent has no row; an output into a mirror without a row keeps its
    base distance.  Rows of different trials never feed each other, so any
    number of trials share one vectorised solve (``solve_rows``)."""

    trial: Array  # (R,) trial of each row
    mirror: Array  # (R,) tree mirror of each row
    topology: Array  # (R,) object: topology name of each row
    params: dict[str, Array]  # (R, 1) topology parameters of each row
    b_start: Array  # (R,) first branch row of each row (its branches are one run)
    b_tree: Array  # (RB,) tree branch of each branch row
    b_row: Array  # (RB,) row each branch row belongs to
    b_child: Array  # (RB,) row that each branch row feeds (-1: a load, or a mirror without a row)
    in_branch: Array  # (R,) branch row feeding each row (-1: input current from the base solution)


def make_rows(tree: Tree, trial: Array, mirror: Array, topology: Array, params: dict[str, Array]) -> Rows:
    """Rows for (trial, mirror) pairs (each pair at most once), with their
    topologies and (R, 1) topology parameters; branch rows and who feeds whom
    follow from the tree."""
    trial, mirror = np.asarray(trial, dtype=np.int64), np.asarray(mirror, dtype=np.int64)
    n_m = len(tree.mirrors)
    first = np.searchsorted(tree.b_parent, mirror, "left")
    count = np.searchsorted(tree.b_parent, mirror, "right") - first
    b_start = np.cumsum(count) - count
    b_tree = np.repeat(first - b_start, count) + np.arange(int(count.sum()))
    b_row = np.repeat(np.arange(len(mirror)), count)
    key = trial * n_m + mirror
    order = np.argsort(key, kind="stable")
    b_child = np.full(len(b_tree), -1, dtype=np.int64)
    to_mirror = np.flatnonzero(~tree.b_to_load[b_tree])
    if len(to_mirror) and len(key):
        want = trial[b_row[to_mirror]] * n_m + tree.b_child[b_tree[to_mirror]]
        at = np.minimum(np.searchsorted(key[order], want), len(key) - 1)
        hit = key[order][at] == want
        b_child[to_mirror[hit]] = order[at[hit]]
    in_branch = np.full(len(mirror), -1, dtype=np.int64)
    fed = np.flatnonzero(b_child >= 0)
    in_branch[b_child[fed]] = fed
    return Rows(trial, mirror, np.asarray(topology, dtype=object), params, b_start, b_tree, b_row, b_child, in_branch)


@dataclass(frozen=True)
class RowsPoint:
    """The operating point of ``Rows`` (shapes as in ``OperatingPoint``, rows
    and branch rows instead of mirrors and branches)."""

    rows: Rows
    i_in: Array
    v_in: Array
    extra: Array
    current: Array
    distance: Array
    min_distance: Array
    internal_margin: Array
    bad: Array  # (R,) bool: no finite operating point, or still moving after MAX_SWEEPS

    @property
    def compliance(self) -> Array:
        return np.minimum(self.distance - self.min_distance, self.internal_margin)


def _generation_of(tree: Tree) -> Array:
    out = np.zeros(len(tree.mirrors), dtype=np.int64)
    for k, gen in enumerate(tree.generations):
        out[gen] = k
    return out


def solve_rows(tree: Tree, rows: Rows, base: OperatingPoint) -> RowsPoint:
    """Re-solve only ``rows``, everything else taken from ``base`` (the same
    tree solved over the same columns), by the sweeps of ``solve``: the same
    equations, started from the base solution.  The caller promises that
    nothing outside a trial's rows moves what its rows read."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return _solve_rows(tree, rows, base)


def _solve_rows(tree: Tree, rows: Rows, base: OperatingPoint) -> RowsPoint:
    cols = base.columns if base.columns is not None else default_columns(tree)
    dev = base.devices if base.devices is not None else device_arrays(tree, cols)
    ctx = _Context(tree, dev, {}, cols)
    supply = cols.supply[None, :]
    m, bt = rows.mirror, rows.b_tree
    i_in, v_in, extra = base.m_i_in[m].copy(), base.m_v_in[m].copy(), base.m_extra[m].copy()
    current, distance = base.b_current[bt].copy(), base.b_distance[bt].copy()
    internal = base.b_internal_margin[bt].copy()
    forward = tree.plan.compliance.bjt_forward_bias
    shift = np.where(tree.m_bipolar[tree.b_parent[bt]], forward, 0.0)[:, None] if forward else 0.0
    b_min = base.b_min_distance[bt] + shift  # the topologies' own figure; taken off again below

    # groups: per generation, rows of one family and topology, with their branch rows
    gen = _generation_of(tree)[m]
    fam = np.where(tree.m_bipolar[m], 0, 1)
    names = list(TOPOLOGIES)
    code = np.array([names.index(t) for t in rows.topology], dtype=np.int64) if len(m) else np.zeros(0, np.int64)
    order = np.lexsort((code, fam, gen))
    n_br = np.diff(np.append(rows.b_start, len(bt)))
    levels: list[list[tuple]] = []  # type: ignore[type-arg]
    if len(order):
        cut = np.flatnonzero(np.diff(gen[order]) | np.diff(fam[order]) | np.diff(code[order])) + 1
        last = -1
        for sel in np.split(order, cut):
            sel = np.sort(sel)
            cnt = n_br[sel]
            offsets = np.cumsum(cnt) - cnt
            brows = np.repeat(rows.b_start[sel] - offsets, cnt) + np.arange(int(cnt.sum()))
            family = "bjt" if fam[sel[0]] == 0 else "mos"
            g = _Group(family, names[code[sel[0]]], m[sel], bt[brows], np.repeat(np.arange(len(sel)), cnt),
                       tree.b_index[bt[brows]])
            b = g.branches
            static = (dev.take(g.mirrors, family), {k: v[sel] for k, v in rows.params.items()},
                      tree.b_ratio[b][:, None], tree.b_count[b][:, None],
                      *(None if a is None else a[b] for a in (cols.is_scale, cols.vt_shift, cols.k_scale)))
            child = rows.b_child[brows]
            fed = child >= 0
            if gen[sel[0]] != last:
                levels.append([])
                last = gen[sel[0]]
            levels[-1].append((g, sel, brows, child[fed], fed, static))

    def solve_group(g: _Group, sel: Array, brows: Array, child: Array, fed: Array, static: tuple) -> None:  # type: ignore[type-arg]
        dist = distance[brows]
        dist[fed] = supply - v_in[child]
        distance[brows] = dist
        taken, params, ratio, count, is_scale, vt_shift, k_scale = static
        try:
            if cols.remote is not None:
                is_scale, vt_shift, k_scale = ctx._remote(g, current[brows], dist, is_scale, vt_shift, k_scale)
            out = TOPOLOGIES[g.topology].solve(GroupInput(
                dev=taken, params=params, i_in=i_in[sel], row=g.row, ratio=ratio, count=count, distance=dist,
                supply=supply, is_scale=is_scale, vt_shift=vt_shift, k_scale=k_scale))
        except Exception:  # a topology that cannot solve these rows (e.g. not characterised): they are bad
            failed[sel] = True
            return
        v_in[sel] = out.v_in
        extra[sel] = out.extra
        current[brows] = out.current
        b_min[brows] = out.min_distance
        if out.internal_margin is not None:
            internal[brows] = out.internal_margin
        i_in[child] = out.current[fed]

    moving = np.zeros(len(m), dtype=bool)
    failed = np.zeros(len(m), dtype=bool)
    for _ in range(MAX_SWEEPS):
        previous = v_in.copy()
        for level in levels:
            for group in level:
                solve_group(*group)
        moved = np.abs(v_in - previous).max(axis=1, initial=0.0)
        moving = ~(moved < VOLTAGE_TOL)  # NaN: never settles; such rows are bad anyway
        finite = np.isfinite(v_in).all(axis=1) & np.isfinite(i_in).all(axis=1)
        if not np.any(moving & finite & ~failed):
            break
    fed = np.flatnonzero(rows.b_child >= 0)
    distance[fed] = supply - v_in[rows.b_child[fed]]
    bad = moving | failed | ~np.isfinite(v_in).all(axis=1)
    bad_branch = ~np.isfinite(current).all(axis=1) | ~np.isfinite(distance).all(axis=1)
    bad[rows.b_row[bad_branch]] = True
    return RowsPoint(rows, i_in, v_in, extra, current, distance, b_min - shift, internal, bad)
