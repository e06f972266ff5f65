"""Every hint trial at once: one restricted re-solve for all of them.

A trial changes one mirror's topology and asks what some failing loads
would then get.  Only a little of the tree can move: the changed mirror's
input voltage moves the branch that feeds it (and, through coupled outputs
— bipolar cascode, Wilson, degenerated — its parent's other outputs and
input voltage, up to the *reach*), and its outputs move what hangs below.
A load's verdict reads only its own path, so each trial re-solves the
mirrors on the paths from its reach's parent down to the loads it is asked
about, plus every mirror whose input voltage one of those reads (the
children of a coupled mirror, recursively).  Those mirrors of every trial
are stacked as rows (``analysis.solve.Rows``) and solved together, over the
plan's own columns, the condition matrix and the mismatch sensitivities;
the verdict quantities of each (trial, load) pair are then read off in
array passes, the way ``audit`` computes them for the whole tree.

The answers are those of one full re-solve per trial (the tests compare
them): the same equations and the same fixed point.  A trial whose rows do
not give a finite, plausible operating point is left to that full re-solve.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from biastree.analysis.audit import Audit
from biastree.analysis.solve import OperatingPoint, RowsPoint, make_rows, solve_rows, topology_params
from biastree.analysis.spread import _H, single
from biastree.physics.devices import Array, thermal_voltage
from biastree.physics.mismatch import square_law_share
from biastree.tree.arrays import Tree

# Families in which a topology's input voltage and its other outputs do not
# depend on one output's voltage (no base current that varies with it):
# changing what hangs below one branch then touches that branch alone.
INDEPENDENT = {"simple": ("bjt", "mos"), "beta_helper": ("bjt",), "cascode": ("mos",), "wide_swing": ("mos",)}


def independent(topology: str, bipolar: bool) -> bool:
    return ("bjt" if bipolar else "mos") in INDEPENDENT.get(topology, ())


@dataclass(frozen=True)
class Outcomes:
    """What each (trial, load) pair would get: one entry per pair."""

    trial: Array  # (P,) trial index
    load: Array  # (P,) load index
    solved: Array  # (P,) bool: False = the rows did not settle; ask a full re-solve
    passed: Array
    margin: Array
    compliance: Array  # over the voltage range (the audit's ``compliance``)
    headroom_lost: Array  # bool: a branch between mirrors on the path out of compliance (``upstream`` ≥ 0)
    error: Array  # the audit's ``worst_error``: worst over the range, or over the conditions when larger
    tolerance: Array


def _parent_mirror(tree: Tree) -> Array:
    b = tree.m_in_branch
    return np.where(b >= 0, tree.b_parent[np.maximum(b, 0)], -1)


def reaches(tree: Tree, mirrors: Array) -> Array:
    """For each mirror, the topmost mirror whose subtree holds everything a
    change there can move (climbing while the parent's outputs are coupled)."""
    plan = tree.plan
    free = np.array([independent(plan.mirrors[n].topology, bool(b)) for n, b in zip(tree.mirrors, tree.m_bipolar)])
    up = _parent_mirror(tree)
    top = np.asarray(mirrors, dtype=np.int64).copy()
    while True:
        p = up[top]
        climb = (p >= 0) & ~free[np.maximum(p, 0)]
        if not climb.any():
            return top
        top = np.where(climb, p, top)


def _children(tree: Tree) -> tuple[Array, Array]:
    """CSR lists of each mirror's child mirrors: (start, children)."""
    b = np.flatnonzero(~tree.b_to_load)
    parent, child = tree.b_parent[b], tree.b_child[b]
    order = np.argsort(parent, kind="stable")
    start = np.searchsorted(parent[order], np.arange(len(tree.mirrors) + 1))
    return start, child[order]


def outcomes(result: Audit, mirrors: Array, topologies: list[str], specs: dict[str, object],
             pair_trial: Array, pair_load: Array) -> Outcomes:
    """Verdict quantities of every (trial, load) pair.  Trial k sets mirror
    ``mirrors[k]`` to ``topologies[k]`` (``specs[topology]``: a changed spec of
    that topology, for its default parameters); each load must lie below it."""
    tree = result.tree
    n_m = len(tree.mirrors)
    mirrors = np.asarray(mirrors, dtype=np.int64)
    pair_trial, pair_load = np.asarray(pair_trial, dtype=np.int64), np.asarray(pair_load, dtype=np.int64)
    plan = tree.plan
    topo_of = np.array([plan.mirrors[n].topology for n in tree.mirrors], dtype=object)
    reach = reaches(tree, mirrors)
    up = _parent_mirror(tree)
    top = np.where(up[reach] >= 0, up[reach], reach)  # the trial's topmost row: reach's parent (one branch moves)

    # rows: the paths from each pair's load up to its trial's reach, and the reach's parent
    lp = tree.b_parent[tree.l_branch[pair_load]]
    keys = [np.arange(len(mirrors)) * n_m + top]
    cur, k = lp, pair_trial
    while len(cur):
        keys.append(k * n_m + cur)
        going = cur != reach[k]
        cur, k = up[cur[going]], k[going]
    key = np.unique(np.concatenate(keys))
    # closure: a coupled mirror's input voltage reads its children's, recursively
    start, kids = _children(tree)
    new = key
    while len(new):
        t, m = new // n_m, new % n_m
        topo = np.where(m == mirrors[t], np.array(topologies, dtype=object)[t], topo_of[m])
        free = np.array([independent(x, bool(b)) for x, b in zip(topo, tree.m_bipolar[m])], dtype=bool)
        coupled = np.flatnonzero(~free)  # (a trial's top row is never coupled: the reach stops below it)
        cnt = start[m[coupled] + 1] - start[m[coupled]]
        if not cnt.sum():
            break
        first = np.repeat(start[m[coupled]] - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))
        add = np.repeat(t[coupled], cnt) * n_m + kids[first]
        new = np.setdiff1d(add, key)
        key = np.union1d(key, new)
    r_trial, r_mirror = key // n_m, key % n_m
    changed = r_mirror == mirrors[r_trial]
    names = np.array(topologies, dtype=object)
    r_topo = np.where(changed, names[r_trial], topo_of[r_mirror])
    params = {k: v[r_mirror] for k, v in topology_params(tree).items()}
    if changed.any():
        at = np.flatnonzero(changed)
        # a changed spec keeps only device, input size and branches: its parameters are the
        # defaults, the bias current (default: the ideal input current) per mirror
        for t in set(names[r_trial[at]].tolist()):
            sel = at[names[r_trial[at]] == t]
            own = topology_params(tree, [int(r_mirror[sel[0]])], [specs[t]])
            for k, values in params.items():
                values[sel] = own[k][0]
            params["bias_current"][sel, 0] = tree.m_ideal_in[r_mirror[sel]]
    rows = make_rows(tree, r_trial, r_mirror, r_topo, params)

    def row_of(t: Array, m: Array) -> Array:
        return np.searchsorted(key, t * n_m + m)

    pair_row = row_of(pair_trial, lp)
    first_branch = np.searchsorted(tree.b_parent, lp)
    pair_brow = rows.b_start[pair_row] + (tree.l_branch[pair_load] - first_branch)
    parent_row = np.where(rows.in_branch >= 0, rows.b_row[np.maximum(rows.in_branch, 0)], -1)
    root_rows = np.flatnonzero(parent_row < 0)
    gen = np.zeros(n_m, dtype=np.int64)
    for g, members in enumerate(tree.generations):
        gen[members] = g
    by_gen = [np.flatnonzero((parent_row >= 0) & (gen[r_mirror] == g)) for g in range(len(tree.generations))]

    def down(at_roots: Array, per_branch: Array, combine) -> Array:  # type: ignore[no-untyped-def]
        """A running value from each trial's top row down its rows: ``combine(parent's, in-branch's)``."""
        out = np.empty(len(key), dtype=per_branch.dtype)
        out[root_rows] = at_roots
        for rs in by_gen:
            if len(rs):
                out[rs] = combine(out[parent_row[rs]], per_branch[rows.in_branch[rs]])
        return out

    solved = np.ones(len(mirrors), dtype=bool)
    supply = plan.supply

    def settle(point: RowsPoint, base: OperatingPoint) -> None:
        bad = point.bad.copy()
        cols = base.columns
        top_supply = cols.supply[None, :] if cols is not None else np.array([[supply]])
        bad |= np.any((point.v_in <= 0) | (point.v_in > top_supply), axis=1)
        ideal = point.i_in[rows.b_row] * tree.b_ratio[rows.b_tree][:, None]
        over = np.any(point.current > 10.0 * ideal, axis=1)  # as analysis.plausible.OVERDRIVE
        bad[rows.b_row[over]] = True
        solved[np.unique(r_trial[bad])] = False

    target = result.target[pair_load]
    op = solve_rows(tree, rows, result.op)
    settle(op, result.op)
    delivered = op.current[pair_brow]
    error = delivered / target[:, None] - 1.0
    worst = np.argmax(np.abs(error), axis=1)
    err = error[np.arange(len(pair_load)), worst]
    worst_abs = np.abs(err)
    comp = op.compliance
    compliance = comp[pair_brow].min(axis=1)

    base_comp = result.op.b_compliance
    base_bad = np.full(n_m, False)
    for members in tree.generations[1:]:
        b = tree.m_in_branch[members]
        base_bad[members] = base_bad[tree.b_parent[b]] | (base_comp[b].min(axis=1) < 0)
    lost = down(base_bad[r_mirror[root_rows]], comp.min(axis=1) < 0, np.logical_or)
    headroom_lost = lost[pair_row]

    root = int(tree.generations[0][0])
    ref_headroom = np.full(len(mirrors), result.reference_headroom)
    has_root = r_mirror == root
    ref_headroom[r_trial[has_root]] = supply - op.v_in[has_root, 1]
    passed = (compliance >= 0) & ~headroom_lost & (ref_headroom[pair_trial] > 0)

    cond = result.conditions
    worst_error = err
    if cond is not None:
        c_op = solve_rows(tree, rows, cond.op)
        settle(c_op, cond.op)
        c_error = c_op.current[pair_brow] / target[:, None] - 1.0
        c_worst = c_error[np.arange(len(pair_load)), np.argmax(np.abs(c_error), axis=1)]
        worst_abs = np.maximum(worst_abs, np.abs(c_worst))
        worst_error = np.where(np.abs(c_worst) > np.abs(err), c_worst, err)
        c_comp = c_op.compliance
        c_head = down(path_headroom_at(tree, cond.op.b_compliance)[r_mirror[root_rows]], c_comp.min(axis=1), np.minimum)
        passed &= (c_comp[pair_brow].min(axis=1) >= 0) & (c_head[pair_row] >= 0)

    sigma = 0.0
    if result.spread is not None:
        sigma = _sigma(result, rows, parent_row, root_rows, down, settle, pair_row, pair_brow)
    tolerance = result.tolerance[pair_load]
    margin = tolerance - worst_abs - result.k_sigma * sigma - result.reference_tolerance
    passed &= margin >= 0
    return Outcomes(pair_trial, pair_load, solved[pair_trial], passed, margin, compliance, headroom_lost,
                    worst_error, tolerance)


def path_headroom_at(tree: Tree, b_compliance: Array) -> Array:
    """(n_mirrors,) smallest compliance margin, over every column, of the branches
    between mirrors on the path down to each mirror (``corners.path_headroom``, per mirror)."""
    worst = np.full(len(tree.mirrors), np.inf)
    low = b_compliance.min(axis=1)
    for members in tree.generations[1:]:
        b = tree.m_in_branch[members]
        worst[members] = np.minimum(worst[tree.b_parent[b]], low[b])
    return worst


def _sigma(result: Audit, rows, parent_row, root_rows, down, settle, pair_row, pair_brow) -> Array:  # type: ignore[no-untyped-def]
    """First-order mismatch σ of each pair's load, as ``spread.analytic`` gives it."""
    tree, an = result.tree, result.spread
    point = solve_rows(tree, rows, an.op)
    settle(point, an.op)
    gain = point.current / point.i_in[rows.b_row]
    s_is = (gain[:, 1] / gain[:, 0] - 1.0) / _H
    share = _vt_share(tree, rows.mirror, point.i_in[:, 0])
    s_vt = (gain[:, 2] - gain[:, 4]) / gain[:, 0] / (2.0 * _H) * share[rows.b_row]
    s_k = (gain[:, 3] / gain[:, 0] - 1.0) / _H
    s, b, p = an.sigmas, rows.b_tree, tree.b_parent[rows.b_tree]
    local = (s_is ** 2 * (s.out_is[b] ** 2 + s.in_is[p] ** 2)
             + s_vt ** 2 * (s.out_vt[b] ** 2 + s.in_vt[p] ** 2)
             + s_k ** 2 * (s.out_k[b] ** 2 + s.in_k[p] ** 2))
    top = rows.mirror[root_rows]
    into = tree.m_in_branch[top]
    m_var = down(np.where(into >= 0, an.b_var[np.maximum(into, 0)], 0.0), local, np.add)
    return np.sqrt(local[pair_brow] + m_var[pair_row])


def _vt_share(tree: Tree, mirrors: Array, i_in: Array) -> Array:
    """``spread.device_sigmas``' vt_share for the given mirrors at input currents ``i_in``."""
    plan = tree.plan
    coef = np.ones(len(tree.mirrors))
    has = np.zeros(len(tree.mirrors), dtype=bool)
    for i, name in enumerate(tree.mirrors):
        spec = plan.mirrors[name]
        dev = plan.devices[spec.device]
        if dev.kind not in ("npn", "pnp") and single(dev.a_vt_pair, dev.a_vt_single):
            kp = dev.kp * (plan.temperature / dev.tnom) ** dev.mobility_exp
            coef[i] = kp * dev.w / dev.l * spec.input_size
            has[i] = True
    ut = float(thermal_voltage(plan.temperature))
    vov = np.sqrt(np.maximum(2.0 * i_in / coef[mirrors], 0.0))
    return np.where(has[mirrors], square_law_share(vov, ut), 1.0)
