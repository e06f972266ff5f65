"""Random spread: device mismatch (Pelgrom's area law), the reference
tolerance and global process spread — first-order σ through the tree with
the correlations it creates, and Monte Carlo over samples.

Mismatch model.  Each mirror stage copies a current by the ratio of an
output device to its input device; what matters is the *pair*: the output
device's deviation minus the input device's.  Every device gets its own
random deviation (one copy of each branch stands for all its copies):
bipolar ΔIS/IS with σ = A_IS,single/√(emitter area), MOS ΔVT with
σ = A_VT,single/√(W·L) and Δβ/β with σ = A_β,single/√(W·L)
(Pelgrom, Duinmaijer, Welbers, IEEE JSSC 24(5), 1989: the coefficients there
are for a pair, A_single = A_pair/√2).  Siblings share their mirror's input
device — and every ancestor — so loads are correlated, and the σ of the
ratio of two loads counts only the devices they do not share.

First order: the sensitivity S of each branch's gain to its own pair is
measured on the exact solution (one solve with every pair perturbed), and
variances add down each path:  σ²(ln I_load) = Σ_stages S²·(σ²_out + σ²_in).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Callable

import numpy as np

from biastree.analysis.conditions import default_columns
from biastree.analysis.corners import path_headroom
from biastree.analysis.plausible import check_samples, check_sigma
from biastree.analysis.solve import solve
from biastree.physics.devices import Array
from biastree.tree.arrays import Tree

QUANTILES = (0.00135, 0.025, 0.5, 0.975, 0.99865)  # ±3σ and ±2σ points of a normal
_H = 1e-4  # relative / V step for the sensitivities


@dataclass(frozen=True)
class DeviceSigmas:
    """σ of one device's deviation, for every mirror's input device and every branch's output device."""

    in_is: Array  # (n_mirrors,) σ(ΔIS/IS)
    out_is: Array  # (n_branches,)
    in_vt: Array  # σ(ΔVT), V
    out_vt: Array
    in_k: Array  # σ(Δβ/β) of MOS devices
    out_k: Array

    @property
    def any(self) -> bool:
        return any(float(np.max(a, initial=0.0)) > 0 for a in vars(self).values())


def single(pair: float | None, one: float | None) -> float:
    """A single device's coefficient: given directly, or a pair's divided by √2."""
    if one is not None:
        return one
    return 0.0 if pair is None else pair / math.sqrt(2.0)


def has_coefficients(plan: object) -> bool:
    """Whether any device model carries a matching coefficient."""
    keys = ("a_is_pair", "a_is_single", "a_vt_pair", "a_vt_single", "a_beta_pair", "a_beta_single")
    return any(getattr(dev, k, None) for dev in plan.devices.values() for k in keys)  # type: ignore[attr-defined]


def device_sigmas(tree: Tree) -> DeviceSigmas:
    plan = tree.plan
    n_m = len(tree.mirrors)
    # per-mirror single-device coefficients and unit areas (zero where not given)
    a_is, a_vt, a_k, unit = np.zeros(n_m), np.zeros(n_m), np.zeros(n_m), np.ones(n_m)
    size_in = np.array([plan.mirrors[m].input_size for m in tree.mirrors])
    for i, name in enumerate(tree.mirrors):
        dev = plan.devices[plan.mirrors[name].device]
        if dev.kind in ("npn", "pnp"):
            if dev.area:
                a_is[i], unit[i] = single(dev.a_is_pair, dev.a_is_single), dev.area
        else:
            unit[i] = dev.w * dev.l
            a_vt[i] = single(dev.a_vt_pair, dev.a_vt_single)
            a_k[i] = single(dev.a_beta_pair, dev.a_beta_single)
    p = tree.b_parent
    size_out = tree.b_ratio * size_in[p]
    root_in = np.sqrt(unit * size_in)
    root_out = np.sqrt(unit[p] * size_out)
    return DeviceSigmas(in_is=a_is / root_in, out_is=a_is[p] / root_out, in_vt=a_vt / root_in,
                        out_vt=a_vt[p] / root_out, in_k=a_k / root_in, out_k=a_k[p] / root_out)


@dataclass(frozen=True)
class Analytic:
    """First-order σ of every load's current (relative), with the stage terms."""

    tree: Tree
    sigmas: DeviceSigmas
    s_is: Array  # (n_branches,) ∂ln(gain)/∂ln(IS_out/IS_in)
    s_vt: Array  # ∂ln(gain)/∂(VT_out − VT_in), 1/V
    s_k: Array  # ∂ln(gain)/∂ln(β_out/β_in)
    b_var: Array  # (n_branches,) variance of ln(current) from mismatch, down to this branch
    reference_sigma: float  # relative σ of the reference (tolerance/3: common practice)
    op: object = None  # the sensitivity solve (biastree.analysis.solve.OperatingPoint), for re-solves

    def local_var(self, b: np.ndarray | int) -> Array:
        """Variance one stage adds to a branch (its output device and its mirror's input device)."""
        p = self.tree.b_parent[b]
        s = self.sigmas
        return (self.s_is[b] ** 2 * (s.out_is[b] ** 2 + s.in_is[p] ** 2)
                + self.s_vt[b] ** 2 * (s.out_vt[b] ** 2 + s.in_vt[p] ** 2)
                + self.s_k[b] ** 2 * (s.out_k[b] ** 2 + s.in_k[p] ** 2))

    @cached_property
    def mismatch(self) -> Array:
        """(n_loads,) relative σ of each load's current from mismatch alone."""
        return np.sqrt(self.b_var[self.tree.l_branch])

    @cached_property
    def total(self) -> Array:
        """(n_loads,) mismatch and reference together."""
        return np.sqrt(self.mismatch**2 + self.reference_sigma**2)

    @cached_property
    def _local_sigma(self) -> list[float]:
        return np.sqrt(self.local_var(np.arange(len(self.tree.b_parent)))).tolist()

    def stage_sigmas(self, load: int) -> list[tuple[str, float]]:
        """(mirror, σ this stage adds) along the load's path."""
        tree = self.tree
        sig = self._local_sigma
        branches = tree.mirror_branch_paths[int(tree.b_parent[tree.l_branch[load]])] + (int(tree.l_branch[load]),)
        names = tree.mirrors
        parent = tree.b_parent
        return [(names[parent[b]], sig[b]) for b in branches]

    def ratio_sigma(self, a: int, b: int) -> float:
        """σ of ln(I_a/I_b): only the devices the two loads do not share count."""
        tree = self.tree
        pa, pb = tree.path(a), tree.path(b)
        ba = [int(tree.m_in_branch[m]) for m in pa[1:]] + [int(tree.l_branch[a])]
        bb = [int(tree.m_in_branch[m]) for m in pb[1:]] + [int(tree.l_branch[b])]
        k = 0
        while k < min(len(ba), len(bb)) and ba[k] == bb[k]:
            k += 1  # shared branches: identical deviations, they cancel in the ratio
        var = 0.0
        s = self.sigmas
        if k < len(ba) and k < len(bb) and tree.b_parent[ba[k]] == tree.b_parent[bb[k]]:
            i, j, p = ba[k], bb[k], tree.b_parent[ba[k]]
            # split at one mirror: its input device is shared by both branches
            var += (self.s_is[i] - self.s_is[j]) ** 2 * s.in_is[p] ** 2
            var += (self.s_vt[i] - self.s_vt[j]) ** 2 * s.in_vt[p] ** 2
            var += (self.s_k[i] - self.s_k[j]) ** 2 * s.in_k[p] ** 2
            for x in (i, j):
                var += self.s_is[x] ** 2 * s.out_is[x] ** 2 + self.s_vt[x] ** 2 * s.out_vt[x] ** 2
                var += self.s_k[x] ** 2 * s.out_k[x] ** 2
            k += 1
            rest = ba[k:] + bb[k:]
        else:
            rest = ba[k:] + bb[k:]
        for x in rest:
            var += float(self.local_var(x))
        return math.sqrt(var)


def analytic(tree: Tree, base: Analytic | None = None, only: Array | None = None) -> Analytic:
    """First-order mismatch σ of every load, from sensitivities on the exact solution.

    ``base`` and ``only`` (bool per mirror): re-solve only those mirrors (see
    biastree.analysis.solve.solve)."""
    plain = default_columns(tree)
    nominal = plain.take(np.array([1, 1, 1, 1]))
    n_b = len(tree.b_parent)
    ones, zeros = np.ones((n_b, 4)), np.zeros((n_b, 4))
    is_scale, vt_shift, k_scale = ones.copy(), zeros.copy(), ones.copy()
    is_scale[:, 1] = 1.0 + _H
    vt_shift[:, 2] = _H
    k_scale[:, 3] = 1.0 + _H
    cols = replace(nominal, names=("nominal", "is", "vt", "k"), is_scale=is_scale, vt_shift=vt_shift, k_scale=k_scale)
    # values under allow_unusual may overflow here (a coefficient squared): the σ is then
    # refused with its load by check_sigma below, instead of numpy warning
    with np.errstate(all="ignore"):
        op = solve(tree, cols, output_resistance=False, base=None if base is None else base.op, only=only)
        gain = op.b_current / op.m_i_in[tree.b_parent]
        s_is = (gain[:, 1] / gain[:, 0] - 1.0) / _H
        s_vt = (gain[:, 2] / gain[:, 0] - 1.0) / _H
        s_k = (gain[:, 3] / gain[:, 0] - 1.0) / _H
        result = Analytic(tree, device_sigmas(tree), s_is, s_vt, s_k, np.zeros(n_b), tree.plan.reference.tolerance / 3.0)
        local = result.local_var(np.arange(n_b))
        # variance carried by each mirror's input current, generation by generation
        m_var = np.zeros(len(tree.mirrors))
        for gen in tree.generations[1:]:
            b = tree.m_in_branch[gen]
            m_var[gen] = m_var[tree.b_parent[b]] + local[b]
        b_var = local + m_var[tree.b_parent]
        check_sigma(tree, np.sqrt(b_var[tree.l_branch]))
    return replace(result, b_var=b_var, op=op)


# --- Monte Carlo -----------------------------------------------------------------


@dataclass(frozen=True)
class MonteCarlo:
    tree: Tree
    currents: Array  # (n_loads, samples): current of one instance
    seed: int
    include_reference: bool
    include_process: bool
    active: Array | None = None  # (n_loads, samples) bool: output and every branch on the path active

    @property
    def samples(self) -> int:
        return self.currents.shape[1]

    @cached_property  # read once per load by the writers: build it once
    def target(self) -> Array:
        return np.array([self.tree.plan.loads[n].current for n in self.tree.loads])

    @property
    def error(self) -> Array:
        return self.currents / self.target[:, None] - 1.0

    def passes(self) -> Array:
        """(n_loads, samples) bool: inside the load's budget (the reference is sampled, not added)
        with its output device and every branch on its path active (a saturated output
        does not pass, whatever current it happens to carry)."""
        tol = np.array([self.tree.plan.loads[n].tolerance for n in self.tree.loads])
        inside = np.abs(self.error) <= tol[:, None]
        return inside if self.active is None else inside & self.active

    def summary(self) -> dict[str, Array]:
        rel = self.currents / self.currents.mean(axis=1, keepdims=True)
        return {
            "mean": self.currents.mean(axis=1),
            "sigma": rel.std(axis=1, ddof=1),
            "quantiles": np.quantile(self.currents, QUANTILES, axis=1).T,
            "yield": self.passes().mean(axis=1),
        }

    def overall_yield(self) -> float:
        return float(self.passes().all(axis=0).mean())


def _chunk(n_branches: int, samples: int) -> int:
    # bounded memory: about 2 million values per array per chunk (deterministic,
    # so a seed gives the same numbers on every machine)
    return max(1, min(samples, 2_000_000 // max(n_branches, 1)))


def monte_carlo(tree: Tree, samples: int, seed: int = 1, include_reference: bool = True,
                include_process: bool = True, progress: Callable[[int, int], None] | None = None) -> MonteCarlo:
    """Sample every device's mismatch (and the reference tolerance and the
    plan's global process spread) and re-solve the tree, vectorised over
    samples in chunks.  Loads sit at their nominal voltage."""
    plan = tree.plan
    sig = device_sigmas(tree)
    rng = np.random.default_rng(seed)
    n_b, n_l = len(tree.b_parent), len(tree.loads)
    currents = np.empty((n_l, samples))
    active = np.empty((n_l, samples), dtype=bool)
    base = default_columns(tree)
    chunk = _chunk(n_b, samples)
    spread = plan.spread
    parent = tree.b_parent
    done = 0
    while done < samples:
        c = min(chunk, samples - done)
        cols = base.take(np.ones(c, dtype=int))
        d_is = rng.standard_normal((n_b, c)) * sig.out_is[:, None] - (rng.standard_normal((len(tree.mirrors), c))
                                                                      * sig.in_is[:, None])[parent]
        d_vt = rng.standard_normal((n_b, c)) * sig.out_vt[:, None] - (rng.standard_normal((len(tree.mirrors), c))
                                                                      * sig.in_vt[:, None])[parent]
        k_out = 1.0 + rng.standard_normal((n_b, c)) * sig.out_k[:, None]
        k_in = 1.0 + rng.standard_normal((len(tree.mirrors), c)) * sig.in_k[:, None]
        shifts = {k: np.zeros(c) for k in ("beta", "early", "is", "kp", "vth", "lambda")}
        i_ref = cols.i_ref.copy()
        if include_reference:
            i_ref = i_ref * (1.0 + rng.standard_normal(c) * plan.reference.tolerance / 3.0)
        if include_process:
            shifts["beta"] = rng.standard_normal(c) * spread.beta
            shifts["vth"] = rng.standard_normal(c) * spread.vth
            shifts["kp"] = rng.standard_normal(c) * spread.kp
        cols = replace(cols, names=tuple(f"s{done + j}" for j in range(c)), i_ref=i_ref, shifts=shifts,
                       is_scale=np.exp(d_is), vt_shift=d_vt, k_scale=k_out / k_in[parent])
        with np.errstate(all="ignore"):  # extreme samples are refused by check_samples, not warned about
            op = solve(tree, cols, output_resistance=False)
            comp = op.b_compliance
            active[:, done:done + c] = (comp[tree.l_branch] >= 0) & (path_headroom(tree, comp) >= 0)
        currents[:, done:done + c] = check_samples(tree, op.l_current)
        done += c
        if progress:
            progress(done, samples)
    return MonteCarlo(tree, currents, seed, include_reference, include_process, active)
