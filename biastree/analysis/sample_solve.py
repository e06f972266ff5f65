"""A solver specialised for Monte Carlo samples: one top-down pass.

``biastree.analysis.solve`` sweeps the whole tree until no input voltage
moves, because in general a mirror's input voltage depends on what its
outputs see.  For the simple topology with device equations it does not: a
mirror's input voltage depends only on its own input current (and, for a
bipolar mirror, the base currents of its outputs, fixed by their sizes and
IS deviations).  So the tree is solved exactly in one pass from the root,
generation by generation: every branch that feeds a child mirror is brought
to a local fixed point with that child's input voltage (Newton's method on
the child's diode equation; the Early/λ term couples them only weakly), and
the child's input current is then known.  Every mirror and sample of a
generation is one numpy operation; samples are the trailing axis, and each
generation's mirrors and branches are contiguous rows.

The equations are those of ``biastree.physics.topologies`` (simple mirror,
bipolar without cards, square-law MOS without tables); the results equal the
general solver's to its convergence tolerance (tests/test_spread.py checks
1e-12 on the samples and generated plans).  Other trees are not supported
(``supported`` says so) and take the general solver.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from biastree.analysis.conditions import default_columns, device_arrays
from biastree.analysis.floorplan import remote_offsets
from biastree.input.model import BjtModel, MosModel
from biastree.physics import devices
from biastree.physics.devices import Array
from biastree.tree.arrays import Tree

_NEWTON = 60  # iterations at most (Newton converges in 3–5 here)
_STEP = 1e-10  # V: Newton stops after a step this small (the error left is ~K·step², K = f″/2f′ ≲ 10/V here)


@dataclass(frozen=True)
class Draws:
    """One chunk of samples' deviations, (n_branches, S) or (S,)."""

    i_ref: Array  # (S,) reference current
    is_scale: Array | None  # output/input IS ratio error of every branch (None: 1)
    vt_shift: Array | None  # V_T(output) − V_T(input), V (None: 0)
    k_scale: Array | None  # KP(output)/KP(input) (None: 1)
    beta: Array  # (S,) global relative shifts (process spread)
    vth: Array  # (S,) V
    kp: Array  # (S,)

    @property
    def size(self) -> int:
        return len(self.i_ref)


def supported(tree: Tree) -> bool:
    """Whether the one-pass solver applies: every mirror simple, every device given by
    equations (no model card), no remote output devices, every mirror with a branch."""
    plan = tree.plan
    for name in tree.mirrors:
        spec = plan.mirrors[name]
        if spec.topology != "simple" or not isinstance(plan.devices[spec.device], (BjtModel, MosModel)):
            return False
    if any(not isinstance(d, (BjtModel, MosModel)) for d in plan.devices.values()):
        return False  # a card anywhere switches the bipolar rows to Gummel–Poon parameters
    counts = np.bincount(tree.b_parent, minlength=len(tree.mirrors))
    return remote_offsets(tree) is None and bool((counts > 0).all())


@dataclass(frozen=True)
class _Block:
    """The mirrors of one family in one generation, and their branches: contiguous rows
    of the solver's own (permuted) order."""

    bipolar: bool
    mirrors: slice
    branches: slice
    counts: np.ndarray  # branches of each mirror (to repeat mirror rows onto branch rows)
    into: np.ndarray  # rows (within ``branches``) of the outputs that feed a child mirror
    kids: np.ndarray  # those children, as permuted mirror rows


class SampleSolver:
    """Exact one-pass solution of a simple-mirror tree over many samples.

    Internally mirrors and branches are renumbered so that each generation's
    bipolar and MOS mirrors, and their branches, are contiguous slices (no
    gathers on the hot path but the repeat of each mirror onto its outputs).

    >>> import biastree
    >>> tree = biastree.load("samples/bipolar_small.yaml")
    >>> supported(tree)
    True
    """

    def __init__(self, tree: Tree) -> None:
        plan = tree.plan
        self.tree = tree
        cols = default_columns(tree).take(np.array([1]))  # the plan's conditions, nominal load voltages
        dev = device_arrays(tree, cols)
        parent = tree.b_parent
        n_m = len(tree.mirrors)
        counts = np.bincount(parent, minlength=n_m)
        first = np.searchsorted(parent, np.arange(n_m))
        # the solver's order: generation by generation, bipolar mirrors first
        m_order = np.concatenate([np.concatenate([g[tree.m_bipolar[g]], g[~tree.m_bipolar[g]]])
                                  for g in tree.generations])
        b_order = np.concatenate([np.arange(first[m], first[m] + counts[m]) for m in m_order.tolist()])
        m_rank = np.empty(n_m, dtype=np.int64)
        m_rank[m_order] = np.arange(n_m)
        b_rank = np.empty(len(parent), dtype=np.int64)
        b_rank[b_order] = np.arange(len(parent))
        self.b_order = b_order
        self.m_order = m_order
        self.bipolar = tree.m_bipolar[m_order]
        col = lambda a: np.asarray(a)[m_order, :1].copy()  # (n_mirrors, 1), solver order
        self.vt = float(dev.vt[0, 0])
        self.is_in, self.beta, self.k_in, self.vth, self.lam = (col(dev.is_in), col(dev.beta), col(dev.k_in),
                                                                col(dev.vth), col(dev.lam))
        b_parent = parent[b_order]
        self.early_b = np.asarray(dev.early)[b_parent, :1].copy()
        self.lam_b = np.asarray(dev.lam)[b_parent, :1].copy()
        self.supply = float(plan.supply)
        self.ratio = tree.b_ratio[b_order, None].astype(float)
        self.weight = (tree.b_ratio * tree.b_count)[b_order, None].astype(float)
        self.counts = counts[m_order]
        self.starts = np.cumsum(self.counts) - self.counts
        # fan-out sums of the bipolar mirrors, k-th branch of every mirror at a time
        # (a padded sum: numpy's reduceat over rows is several times slower)
        rows = np.flatnonzero(self.bipolar)
        self.fan_nominal = np.zeros((n_m, 1))
        np.add.at(self.fan_nominal, np.repeat(np.arange(n_m), self.counts), self.weight)
        self.fan_steps = [(rows[self.counts[rows] > j], self.starts[rows[self.counts[rows] > j]] + j)
                          for j in range(int(self.counts[rows].max(initial=0)))]
        rail = np.where(tree.m_sink, 0.0, self.supply)
        self.distance = np.zeros((len(parent), 1))
        self.distance[b_rank[tree.l_branch], 0] = np.abs(cols.v_load[:, 0] - rail[parent[tree.l_branch]])
        fb = plan.compliance.bjt_forward_bias or 0.0
        self.forward_bias = np.where(tree.m_bipolar[b_parent], fb, 0.0)[:, None]
        self.roots = m_rank[tree.generations[0]]
        self.load_rows = b_rank[tree.l_branch]
        self.load_parents = m_rank[parent[tree.l_branch]]
        self.blocks: list[list[_Block]] = []
        m0 = 0
        for gen in tree.generations:
            blocks = []
            for bip in (True, False):
                n = int((tree.m_bipolar[gen] == bip).sum())
                if not n:
                    continue
                ms = slice(m0, m0 + n)
                bs = slice(int(self.starts[m0]), int(self.starts[m0 + n - 1] + self.counts[m0 + n - 1]))
                rows = b_order[bs]
                into = np.flatnonzero(~tree.b_to_load[rows])
                blocks.append(_Block(bip, ms, bs, self.counts[ms], into, m_rank[tree.b_child[rows[into]]]))
                m0 += n
            self.blocks.append(blocks)

    def solve(self, draws: Draws) -> tuple[Array, Array, Array] | None:
        """Per load and sample: (current, compliance margin of its output, smallest margin
        of the branches between mirrors on its path (inf: none)), or None when some value
        is not finite (the general solver then names the place)."""
        current, comp, i_in = self._run(draws)
        if not (np.isfinite(current).all() and np.isfinite(comp).all()):
            return None
        worst = np.full(i_in.shape, np.inf)
        for blocks in self.blocks:
            for k in blocks:
                b = k.branches.start + k.into
                worst[k.kids] = np.minimum(np.repeat(worst[k.mirrors], k.counts, axis=0)[k.into], comp[b])
        return current[self.load_rows], comp[self.load_rows], worst[self.load_parents]

    def input_currents(self, draws: Draws) -> Array | None:
        """(n_mirrors,) input current of every mirror in the first sample (None if not finite)."""
        i_in = np.empty(len(self.tree.mirrors))
        i_in[self.m_order] = self._run(draws)[2][:, 0]
        return i_in if np.isfinite(i_in).all() else None

    def _run(self, draws: Draws) -> tuple[Array, Array, Array]:
        """(branch currents, branch compliance margins, mirror input currents), solver order."""
        n_m, n_b, s = len(self.counts), len(self.b_order), draws.size
        take = lambda a: None if a is None else a[self.b_order]
        scale, dvt, ks = take(draws.is_scale), take(draws.vt_shift), take(draws.k_scale)
        # device parameters per sample (the global shifts of biastree.analysis.conditions)
        beta = self.beta * (1.0 + draws.beta[None, :])
        k_in = self.k_in * (1.0 + draws.kp[None, :])
        vth = self.vth + draws.vth[None, :]
        # base-current loading of every bipolar mirror: 1 + (1 + Σ m·count·scale)/β
        if scale is None:
            fan = self.fan_nominal
        else:
            fan = np.zeros((n_m, s))
            for rows, src in self.fan_steps:
                fan[rows] += self.weight[src] * scale[src]
        den = 1.0 + (1.0 + fan) / beta
        i_in = np.empty((n_m, s))
        current = np.empty((n_b, s))
        comp = np.empty((n_b, s))
        distance = np.broadcast_to(self.distance, (n_b, s)).copy()
        i_in[self.roots] = draws.i_ref[None, :]
        for blocks in self.blocks:
            for k in blocks:
                ms, bs, rep = k.mirrors, k.branches, k.counts
                if k.bipolar:
                    x_in = i_in[ms] / den[ms]
                    vbe = np.repeat(self.vt * np.log(x_in / self.is_in[ms]), rep, axis=0)
                    base = np.repeat(x_in, rep, axis=0) * self.ratio[bs]
                    if scale is not None:
                        base *= scale[bs]
                    early = self.early_b[bs]
                    # each output into a child carries a + q·(its distance from the rail)
                    a = base[k.into] * (1.0 - vbe[k.into] / early[k.into])
                    q = base[k.into] / early[k.into]
                else:
                    vgs = devices.mos_vgs(i_in[ms], k_in[ms], vth[ms], self.lam[ms])
                    vov = np.repeat(vgs - vth[ms], rep, axis=0)
                    lam = self.lam_b[bs]
                    shifted = vov if dvt is None else vov - dvt[bs]
                    base = np.repeat(i_in[ms], rep, axis=0) * self.ratio[bs] * (shifted / vov) ** 2
                    if ks is not None:
                        base *= ks[bs]
                    base /= devices.clm_factor(np.repeat(vgs, rep, axis=0), lam)
                    a = base[k.into]
                    q = a * lam[k.into]
                d = distance[bs]  # a view: the children's solution lands in ``distance``
                if k.into.size:
                    d[k.into] = self.supply - self._child_voltage(a, q, k.kids, den, k_in, vth)
                if k.bipolar:
                    current[bs] = base * devices.early_factor(d - vbe, early)
                    comp[bs] = d - vbe + self.forward_bias[bs]
                else:
                    current[bs] = base * devices.clm_factor(d, lam)
                    comp[bs] = d - shifted
                i_in[k.kids] = current[bs][k.into]
        return current, comp, i_in

    def _child_voltage(self, a: Array, q: Array, kids: np.ndarray, den: Array, k_in: Array, vth: Array) -> Array:
        """Input voltage V of each child mirror ``kids`` fed by an output carrying
        a + q·(supply − V): Newton's method on the child's diode equation."""
        vs = self.supply
        v = np.empty_like(a)
        bip = self.bipolar[kids]
        if bip.any():
            k = kids[bip]
            aa, qq = a[bip], q[bip]
            g_is = den[k] * self.is_in[k]  # child current = g_is·e^(V/V_T)
            x = self.vt * np.log(aa / g_is)
            for _ in range(_NEWTON):
                c = aa + qq * (vs - x)
                step = (x - self.vt * np.log(c / g_is)) / (1.0 + self.vt * qq / c)
                x = x - step
                if not np.max(np.abs(step), initial=0.0) > _STEP:  # (NaN stops too)
                    break
            v[bip] = x
        if (~bip).any():
            k = kids[~bip]
            aa, qq = a[~bip], q[~bip]
            kk, vt0, lam = k_in[k], vth[k], self.lam[k]
            x = vt0 + np.sqrt(2.0 * (aa + qq * vs) / (kk * (1.0 + lam * vt0)))  # above the root
            for _ in range(_NEWTON):
                vov = x - vt0
                h = 0.5 * kk * vov**2 * (1.0 + lam * x) - aa - qq * (vs - x)
                slope = kk * vov * (1.0 + lam * x) + 0.5 * kk * lam * vov**2 + qq
                step = h / slope
                x = x - step
                if not np.max(np.abs(step), initial=0.0) > _STEP:
                    break
            v[~bip] = x
        return v


__all__ = ["Draws", "SampleSolver", "supported"]
