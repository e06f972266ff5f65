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

from biastree.analysis.conditions import default_columns, reference_current
from biastree.analysis.corners import path_headroom
from biastree.analysis.plausible import check_samples, check_sigma
from biastree.analysis.sample_solve import Draws, SampleSolver, supported
from biastree.analysis.solve import solve
from biastree.physics.devices import Array, thermal_voltage
from biastree.physics.mismatch import square_law_share
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
    # (n_mirrors,) g_m/I_D of the mirror's devices over the square law's 2/V_ov (EKV, see
    # biastree.physics.mismatch): a threshold deviation moves the current this much less
    # than the square-law equations say; 1 for bipolar mirrors
    vt_share: Array | None = None

    @property
    def any(self) -> bool:
        sigmas = (self.in_is, self.out_is, self.in_vt, self.out_vt, self.in_k, self.out_k)
        return any(float(np.max(a, initial=0.0)) > 0 for a in sigmas)

    def share(self, n_mirrors: int) -> Array:
        return np.ones(n_mirrors) if self.vt_share is None else self.vt_share


def single(pair: float | None, one: float | None) -> float:
    """A single device's coefficient: given directly, or a pair's divided by √2."""
    if one is not None:
        return one
    return 0.0 if pair is None else pair / math.sqrt(2.0)


def has_coefficients(plan: object) -> bool:
    """Whether any device model carries a matching coefficient."""
    keys = ("a_is_pair", "a_is_single", "a_vt_pair", "a_vt_single", "a_beta_pair", "a_beta_single")
    return any(getattr(dev, k, None) for dev in plan.devices.values() for k in keys)  # type: ignore[attr-defined]


def device_sigmas(tree: Tree, i_in: Array | None = None) -> DeviceSigmas:
    """σ of every device's deviation (Pelgrom's area law), and for MOS mirrors the share
    of the square law's g_m/I_D their threshold deviation really has, at each mirror's input
    current ``i_in`` (n_mirrors,): the nominal solution's (default: the ideal currents)."""
    plan = tree.plan
    n_m = len(tree.mirrors)
    # per-mirror single-device coefficients and unit areas (zero where not given)
    a_is, a_vt, a_k, unit = np.zeros(n_m), np.zeros(n_m), np.zeros(n_m), np.ones(n_m)
    size_in = np.array([plan.mirrors[m].input_size for m in tree.mirrors])
    current = tree.m_ideal_in if i_in is None else np.asarray(i_in, dtype=float)
    share = np.ones(n_m)
    ut = float(thermal_voltage(plan.temperature))
    for i, name in enumerate(tree.mirrors):
        dev = plan.devices[plan.mirrors[name].device]
        if dev.kind in ("npn", "pnp"):
            if dev.area:
                a_is[i], unit[i] = single(dev.a_is_pair, dev.a_is_single), dev.area
        else:
            unit[i] = dev.w * dev.l
            a_vt[i] = single(dev.a_vt_pair, dev.a_vt_single)
            a_k[i] = single(dev.a_beta_pair, dev.a_beta_single)
            if a_vt[i]:
                # square-law overdrive of the input device at its current and the plan's
                # temperature (KP(T) as in biastree.analysis.conditions; λ neglected here)
                kp = dev.kp * (plan.temperature / dev.tnom) ** dev.mobility_exp
                vov = math.sqrt(max(2.0 * float(current[i]) / (kp * dev.w / dev.l * size_in[i]), 0.0))
                share[i] = float(square_law_share(vov, ut))
    p = tree.b_parent
    size_out = tree.b_ratio * size_in[p]
    root_in = np.sqrt(unit * size_in)
    root_out = np.sqrt(unit[p] * size_out)
    return DeviceSigmas(in_is=a_is / root_in, out_is=a_is[p] / root_out, in_vt=a_vt / root_in,
                        out_vt=a_vt[p] / root_out, in_k=a_k / root_in, out_k=a_k[p] / root_out, vt_share=share)


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
    nominal = plain.take(np.array([1, 1, 1, 1, 1]))
    n_b = len(tree.b_parent)
    ones, zeros = np.ones((n_b, 5)), np.zeros((n_b, 5))
    is_scale, vt_shift, k_scale = ones.copy(), zeros.copy(), ones.copy()
    is_scale[:, 1] = 1.0 + _H
    vt_shift[:, 2] = _H
    vt_shift[:, 4] = -_H  # a central difference: the square law bends at small V_ov
    k_scale[:, 3] = 1.0 + _H
    cols = replace(nominal, names=("nominal", "is", "vt", "k", "vt-"), is_scale=is_scale, vt_shift=vt_shift,
                   k_scale=k_scale)
    # values under allow_unusual may overflow here (a coefficient squared): the σ is then
    # refused with its load by check_sigma below, instead of numpy warning
    with np.errstate(all="ignore"):
        op = solve(tree, cols, output_resistance=False, base=None if base is None else base.op, only=only)
        gain = op.b_current / op.m_i_in[tree.b_parent]
        s_is = (gain[:, 1] / gain[:, 0] - 1.0) / _H
        sig = device_sigmas(tree, op.m_i_in[:, 0])
        # the square-law solve's threshold sensitivity, brought to the real g_m/I_D (EKV)
        s_vt = (gain[:, 2] - gain[:, 4]) / gain[:, 0] / (2.0 * _H) * sig.share(len(tree.mirrors))[tree.b_parent]
        s_k = (gain[:, 3] / gain[:, 0] - 1.0) / _H
        result = Analytic(tree, sig, s_is, s_vt, s_k, np.zeros(n_b), tree.plan.reference.tolerance / 3.0)
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


def draw(tree: Tree, sig: DeviceSigmas, rng: np.random.Generator, samples: int, include_reference: bool = True,
         include_process: bool = True) -> Draws:
    """One chunk of random deviations.  Only the devices whose σ is not zero are drawn
    (a bipolar device has no threshold, most plans match only some devices)."""
    plan = tree.plan
    n_b, n_m = len(tree.b_parent), len(tree.mirrors)
    parent = tree.b_parent

    def normals(sigma: Array, rows: int) -> Array | None:
        nz = np.flatnonzero(sigma)
        if not nz.size:
            return None
        out = np.zeros((rows, samples))
        got = rng.standard_normal((nz.size, samples))
        got *= sigma[nz, None]
        out[nz] = got
        return out

    def pair(out_sigma: Array, in_sigma: Array) -> Array | None:
        """Output device's deviation minus its mirror's input device's, per branch."""
        out, inp = normals(out_sigma, n_b), normals(in_sigma, n_m)
        if inp is not None:
            if out is None:
                out = -inp[parent]
            else:
                out -= inp[parent]
        return out

    i_ref = np.full(samples, float(reference_current(plan, np.array(plan.temperature))))
    if include_reference:
        i_ref = i_ref * (1.0 + rng.standard_normal(samples) * plan.reference.tolerance / 3.0)
    zero = np.zeros(samples)
    beta, vth, kp = zero, zero, zero
    if include_process:
        spread = plan.spread
        beta = rng.standard_normal(samples) * spread.beta
        vth = rng.standard_normal(samples) * spread.vth
        kp = rng.standard_normal(samples) * spread.kp
    d_is = pair(sig.out_is, sig.in_is)
    d_vt = pair(sig.out_vt, sig.in_vt)
    if d_vt is not None:  # what the square-law equations must see for the real g_m/I_D
        d_vt *= sig.share(n_m)[parent][:, None]
    k_out, k_in = normals(sig.out_k, n_b), normals(sig.in_k, n_m)
    k_scale = None
    if k_out is not None or k_in is not None:
        k_scale = 1.0 + (0.0 if k_out is None else k_out)
        if k_in is not None:
            k_scale = k_scale / (1.0 + k_in[parent])
    is_scale = None
    if d_is is not None:
        rows = np.flatnonzero(sig.out_is + sig.in_is[parent])
        is_scale = np.ones((n_b, samples))
        is_scale[rows] = np.exp(d_is[rows])
    return Draws(i_ref, is_scale, d_vt, k_scale, beta, vth, kp)


def general_solve(tree: Tree, draws: Draws, first: int = 0) -> tuple[Array, Array, Array]:
    """Per load and sample: current, its output's compliance margin and the smallest margin
    of the branches between mirrors on its path, by the general solver
    (biastree.analysis.solve) — the reference for the one-pass solver."""
    c = draws.size
    cols = default_columns(tree).take(np.ones(c, dtype=int))
    shifts = {k: np.zeros(c) for k in ("beta", "early", "is", "kp", "vth", "lambda")}
    shifts.update(beta=draws.beta, vth=draws.vth, kp=draws.kp)
    cols = replace(cols, names=tuple(f"s{first + j}" for j in range(c)), i_ref=draws.i_ref, shifts=shifts,
                   is_scale=draws.is_scale, vt_shift=draws.vt_shift, k_scale=draws.k_scale)
    with np.errstate(all="ignore"):  # extreme samples are refused by check_samples, not warned about
        op = solve(tree, cols, output_resistance=False)
        comp = op.b_compliance
        return op.l_current, comp[tree.l_branch], path_headroom(tree, comp)


def monte_carlo(tree: Tree, samples: int, seed: int = 1, include_reference: bool = True,
                include_process: bool = True, progress: Callable[[int, int], None] | None = None,
                fast: bool = True) -> MonteCarlo:
    """Sample every device's mismatch (and the reference tolerance and the
    plan's global process spread) and re-solve the tree, vectorised over
    samples in chunks.  Loads sit at their nominal voltage.  Trees of simple
    mirrors take the one-pass solver (biastree.analysis.sample_solve; ``fast=False``
    forces the general one), others the general solver."""
    one_pass = SampleSolver(tree) if fast and supported(tree) else None
    if any(d.kind in ("nmos", "pmos") and (d.a_vt_pair or d.a_vt_single) for d in tree.plan.devices.values()):
        # V_ov, hence the threshold's share, at the nominal solution's currents
        nominal = draw(tree, device_sigmas(tree), np.random.default_rng(0), 1, False, False)
        nominal = replace(nominal, is_scale=None, vt_shift=None, k_scale=None)
        got = one_pass.input_currents(nominal) if one_pass is not None else None
        if got is None:
            with np.errstate(all="ignore"):
                got = solve(tree, default_columns(tree), output_resistance=False).m_i_in[:, 1]
        sig = device_sigmas(tree, got)
    else:
        sig = device_sigmas(tree)
    rng = np.random.default_rng(seed)
    n_b, n_l = len(tree.b_parent), len(tree.loads)
    currents = np.empty((n_l, samples))
    active = np.empty((n_l, samples), dtype=bool)
    chunk = _chunk(n_b, samples)
    done = 0
    while done < samples:
        c = min(chunk, samples - done)
        draws = draw(tree, sig, rng, c, include_reference, include_process)
        with np.errstate(all="ignore"):
            got = None if one_pass is None else one_pass.solve(draws)
            l_cur, l_comp, l_head = got if got is not None else general_solve(tree, draws, done)
            active[:, done:done + c] = (l_comp >= 0) & (l_head >= 0)
        currents[:, done:done + c] = check_samples(tree, l_cur)
        done += c
        if progress:
            progress(done, samples)
    return MonteCarlo(tree, currents, seed, include_reference, include_process, active)
