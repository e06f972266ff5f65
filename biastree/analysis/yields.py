"""Per-die yield: every copy of a replicated load is its own circuit.

A branch with ``count: 16`` is sixteen output devices, each with its own
mismatch; a branch with a count into a mirror is that many copies of the
mirror and all below it.  A die is good for a load only when *every* copy
is inside its budget with its output device active.  ``expanded_plan``
writes the plan with every copy spelt out (count 1 everywhere, copy 0 keeps
the original names), so the Monte Carlo samples each copy's devices exactly;
``die_yield`` folds the copies back onto the plan's loads.

The required yield defaults to the two-sided normal probability of k·σ,
erf(k/√2) (k = spread.k_sigma: 99.73 % for k = 3), the yield that the
``check`` verdict's k·σ budget stands for.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from biastree.analysis.spread import MonteCarlo, monte_carlo
from biastree.input.model import Plan
from biastree.physics.devices import Array
from biastree.tree.arrays import Tree, build

EXPAND_LIMIT = 200_000  # branches of the expanded tree; above this one instance stands for its copies


def required_yield(k_sigma: float) -> float:
    """Two-sided normal probability of ±k·σ (k = 3 → 0.9973).

    >>> round(required_yield(3.0), 5)
    0.9973
    """
    return math.erf(k_sigma / math.sqrt(2.0))


def instance_count(tree: Tree) -> int:
    """Branches of the tree with every copy spelt out."""
    b_inst = tree.m_mult[tree.b_parent] * tree.b_count
    return int(b_inst.sum())


def expanded_plan(plan: Plan) -> tuple[Plan, dict[str, str]]:
    """The plan with every copy spelt out, and each load copy's original load name.

    >>> import biastree
    >>> plan = biastree.load("samples/failing_budgets.yaml").plan
    >>> big, origin = expanded_plan(plan)
    >>> sum(1 for v in origin.values() if v == "amp_bias"), len(big.loads)
    (6, 13)
    """
    mirrors: dict[str, Any] = {}
    loads: dict[str, Any] = {}
    origin: dict[str, str] = {}
    copies: dict[str, list[str]] = {}

    def walk(name: str, suffix: str, depth: int) -> None:
        spec = plan.mirrors[name]
        branches = []
        for b in spec.branches:
            for j in range(b.count):
                sub = suffix + (f"#{depth}-{j + 1}" if j else "")
                target = b.to + sub
                branches.append(b.model_copy(update={"to": target, "count": 1}))
                copies.setdefault(b.to, []).append(target)
                if b.to in plan.mirrors:
                    walk(b.to, sub, depth + 1)
                else:
                    loads[target] = plan.loads[b.to]
                    origin[target] = b.to
        mirrors[name + suffix] = spec.model_copy(update={"branches": branches})

    walk(plan.reference.feeds, "", 0)
    copies.setdefault(plan.reference.feeds, [plan.reference.feeds])
    update: dict[str, Any] = {"mirrors": mirrors, "loads": loads}
    fp = plan.floorplan
    if fp is not None:
        update["floorplan"] = fp.model_copy(update={
            "positions": {c: xy for n, xy in fp.positions.items() for c in copies.get(n, [n])},
            "remote": [c for n in fp.remote for c in copies.get(n, [n])],
            "offsets": {c: o for n, o in fp.offsets.items() for c in copies.get(n, [n])},
        })
    return plan.model_copy(update=update), origin


@dataclass(frozen=True)
class DieYield:
    """Monte Carlo of every copy, folded back onto the plan's loads."""

    tree: Tree  # the plan's own tree
    mc: MonteCarlo  # over the expanded tree (or the plan's own when per_copy is False)
    copies: list[np.ndarray]  # per load of ``tree``: its copies' indices in mc.tree.loads (copy 0 first)
    per_copy: bool  # every copy sampled; False: one instance stands for its copies (plan too large)

    @property
    def first(self) -> np.ndarray:
        """Index of each load's copy 0 (the one carrying the plan's name) in mc.tree.loads."""
        return np.array([c[0] for c in self.copies], dtype=np.int64)

    def passes(self) -> Array:
        """(n_loads, samples): every copy inside its budget with its output and path active."""
        each = self.mc.passes()
        return np.stack([each[c].all(axis=0) for c in self.copies]) if len(self.copies) else each[:0]

    def load_yield(self) -> Array:
        return self.passes().mean(axis=1)

    def saturated(self) -> Array:
        """(n_loads,) fraction of samples in which some copy's output (or a branch on its path) is not active."""
        active = self.mc.active
        if active is None:
            return np.zeros(len(self.copies))
        return np.array([float((~active[c].all(axis=0)).mean()) for c in self.copies])

    def overall_yield(self) -> float:
        return float(self.passes().all(axis=0).mean())


def die_yield(tree: Tree, samples: int, seed: int = 1, include_reference: bool = True, include_process: bool = True,
              progress: Callable[[int, int], None] | None = None, limit: int = EXPAND_LIMIT) -> DieYield:
    """Monte Carlo with every copy of every load sampled (when the expanded tree
    has at most ``limit`` branches; above that, one instance per load)."""
    replicated = bool((tree.b_count > 1).any())
    per_copy = replicated and instance_count(tree) <= limit
    if per_copy:
        big, origin = expanded_plan(tree.plan)
        sampled = build(big)
        index = {n: k for k, n in enumerate(sampled.loads)}
        groups: dict[str, list[int]] = {n: [index[n]] for n in tree.loads}
        for copy, name in origin.items():
            if copy != name:
                groups[name].append(index[copy])
        copies = [np.array(groups[n], dtype=np.int64) for n in tree.loads]
    else:
        sampled = tree
        copies = [np.array([i], dtype=np.int64) for i in range(len(tree.loads))]
    mc = monte_carlo(sampled, samples, seed, include_reference=include_reference, include_process=include_process,
                     progress=progress)
    return DieYield(tree, mc, copies, per_copy or not replicated)


def result_bytes(tree: Tree, samples: int, limit: int = EXPAND_LIMIT) -> int:
    """Memory the kept Monte Carlo results need: a current and an active flag per load copy and
    sample, and the copy the quantiles take."""
    replicated = bool((tree.b_count > 1).any())
    n = int(tree.l_mult.sum()) if replicated and instance_count(tree) <= limit else len(tree.loads)
    return n * samples * (8 + 1 + 8)


__all__ = ["DieYield", "EXPAND_LIMIT", "die_yield", "expanded_plan", "instance_count", "required_yield",
           "result_bytes"]
