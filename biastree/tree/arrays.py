"""From a validated ``Plan`` to its tree as numpy arrays.

``build`` runs the structural checks of ``biastree.input.checks`` (the one
place where they live) and then lays the tree out as arrays: mirrors in
generation order, one entry per branch as written.  The arrays are what the
solver walks, one generation of mirrors at a time.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING, Any, Callable

import numpy as np

from biastree.errors import PlanError, Problem, format_path
from biastree.input.checks import Layout, check_structure, clean_layout, is_sink, levels, plan_graph
from biastree.input.model import Plan

if TYPE_CHECKING:  # networkx is imported only when a graph is asked for
    import networkx as nx

Locate = Callable[[tuple[Any, ...]], "int | None"]


@dataclass(frozen=True)
class Tree:
    """A plan's bias tree.  Mirrors are listed in generation order (root first).

    Branch arrays (prefix ``b_``) have one entry per branch as written in the
    plan; ``count`` copies of a branch are one entry with a multiplicity.
    """

    plan: Plan
    mirrors: tuple[str, ...]
    loads: tuple[str, ...]
    generations: tuple[np.ndarray, ...]
    m_sink: np.ndarray  # bool: npn/nmos mirrors sink current to ground
    m_bipolar: np.ndarray  # bool
    m_in_branch: np.ndarray  # branch feeding each mirror (-1 for the root)
    m_mult: np.ndarray  # instances of each mirror (product of counts above it)
    m_fanout: np.ndarray  # Σ ratio·count over the mirror's branches
    b_parent: np.ndarray
    b_index: np.ndarray  # position in the parent's branch list
    b_ratio: np.ndarray
    b_count: np.ndarray
    b_to_load: np.ndarray  # bool
    b_child: np.ndarray  # index into mirrors or loads
    l_branch: np.ndarray  # branch feeding each load
    l_mult: np.ndarray  # instances of each load

    @cached_property
    def graph(self) -> "nx.DiGraph":
        """The tree as a networkx DiGraph: reference → mirrors → loads.

        Edges carry ``branch`` (index in the parent's list), ``ratio`` and ``count``.
        """
        return plan_graph(self.plan)

    @cached_property
    def mirror_paths(self) -> list[tuple[int, ...]]:
        """For each mirror, the mirror indices from the root down to it."""
        paths: list[tuple[int, ...]] = [()] * len(self.mirrors)
        parent = self.b_parent.tolist()
        in_branch = self.m_in_branch.tolist()
        for gen in self.generations:
            for m in gen.tolist():
                b = in_branch[m]
                paths[m] = (paths[parent[b]] if b >= 0 else ()) + (m,)
        return paths

    @cached_property
    def mirror_branch_paths(self) -> list[tuple[int, ...]]:
        """For each mirror, the branches taken from the root down to it (its
        path's stages: branch k leaves mirror k of ``mirror_paths``)."""
        paths: list[tuple[int, ...]] = [()] * len(self.mirrors)
        parent = self.b_parent.tolist()
        for gen in self.generations[1:]:
            for m, b in zip(gen.tolist(), self.m_in_branch[gen].tolist()):
                paths[m] = paths[parent[b]] + (b,)
        return paths

    @cached_property
    def m_ideal_in(self) -> np.ndarray:
        """Input current each mirror would get with ideal mirrors (ratios only)."""
        ideal = np.zeros(len(self.mirrors))
        ideal[self.generations[0]] = self.plan.reference.current
        for gen in self.generations[1:]:
            b = self.m_in_branch[gen]
            ideal[gen] = ideal[self.b_parent[b]] * self.b_ratio[b]
        return ideal

    def path(self, load: int) -> list[int]:
        """Mirror indices from the root down to the mirror that feeds ``load``."""
        return list(self.mirror_paths[int(self.b_parent[self.l_branch[load]])])


def build(plan: Plan, locate: Locate | None = None, source: str | None = None, checked: bool = True) -> Tree:
    """Check the plan's structure and return its tree, or raise ``PlanError``.

    ``locate`` maps a key path to a line of the plan file, for messages.
    ``checked=False`` skips the structural check, for a caller that has
    already checked a plan of the same structure (the planner's search builds
    many variants of one plan and checks the plan it writes in full).
    """
    layout = clean_layout(plan) if len(plan.mirrors) + len(plan.loads) > _BULK_FROM else None
    if layout is not None:
        return _from_layout(plan, layout)
    problems = check_structure(plan) if checked else []
    if problems:
        found = [Problem(format_path(path), msg, locate(path) if locate else None) for path, msg in problems]
        found.sort(key=lambda p: (p.line is None, p.line or 0))
        raise PlanError(found, source)
    order: list[str] = []
    generations = []
    for level in levels(plan):
        names = sorted(level)
        if names:
            generations.append(np.arange(len(order), len(order) + len(names)))
            order.extend(names)
    m_index = {name: i for i, name in enumerate(order)}
    loads = tuple(plan.loads)
    l_index = {name: i for i, name in enumerate(loads)}

    parents, index, ratio, count, to_load, child = [], [], [], [], [], []
    for name in order:
        for i, branch in enumerate(plan.mirrors[name].branches):
            parents.append(m_index[name])
            index.append(i)
            ratio.append(branch.ratio)
            count.append(branch.count)
            is_load = branch.to in l_index
            to_load.append(is_load)
            child.append(l_index[branch.to] if is_load else m_index[branch.to])
    kinds = [plan.devices[plan.mirrors[n].device].kind for n in order]
    return _assemble(plan, tuple(order), loads, tuple(generations), kinds, np.array(parents, dtype=np.int64),
                     np.array(index, dtype=np.int64), np.array(ratio, dtype=float), np.array(count, dtype=float),
                     np.array(to_load, dtype=bool), np.array(child, dtype=np.int64))


def _assemble(plan: Plan, mirrors: tuple[str, ...], loads: tuple[str, ...], generations: tuple[np.ndarray, ...],
              kinds: list[str], b_parent: np.ndarray, b_index: np.ndarray, b_ratio: np.ndarray, b_count: np.ndarray,
              b_to_load: np.ndarray, b_child: np.ndarray) -> Tree:
    """The tree from its branch arrays (mirrors in generation order): the arrays derived from
    them (each mirror's feeding branch, each load's branch, multiplicities, fan-out)."""
    n_m = len(mirrors)
    m_in_branch = np.full(n_m, -1, dtype=np.int64)
    mirror_branches = np.flatnonzero(~b_to_load)
    m_in_branch[b_child[mirror_branches]] = mirror_branches
    l_branch = np.empty(len(loads), dtype=np.int64)
    load_branches = np.flatnonzero(b_to_load)
    l_branch[b_child[load_branches]] = load_branches

    m_mult = np.ones(n_m)
    for gen in generations[1:]:  # parents always sit in an earlier generation
        b = m_in_branch[gen]
        m_mult[gen] = m_mult[b_parent[b]] * b_count[b]
    l_mult = m_mult[b_parent[l_branch]] * b_count[l_branch]
    m_fanout = np.zeros(n_m)
    np.add.at(m_fanout, b_parent, b_ratio * b_count)
    return Tree(
        plan=plan,
        mirrors=mirrors,
        loads=loads,
        generations=generations,
        m_sink=np.array([is_sink(k) for k in kinds], dtype=bool),
        m_bipolar=np.array([k in ("npn", "pnp") for k in kinds], dtype=bool),
        m_in_branch=m_in_branch,
        m_mult=m_mult,
        m_fanout=m_fanout,
        b_parent=b_parent,
        b_index=b_index,
        b_ratio=b_ratio,
        b_count=b_count,
        b_to_load=b_to_load,
        b_child=b_child,
        l_branch=l_branch,
        l_mult=l_mult,
    )


_BULK_FROM = 200  # mirrors + loads: larger plans are first checked and laid out in bulk


def _from_layout(plan: Plan, layout: Layout) -> Tree:
    """The tree from a bulk-proved layout: the same arrays as the walk in ``build``."""
    names = layout.names
    # generation order, names sorted within each generation (as ``build``)
    order = sorted(range(len(names)), key=lambda i: (int(layout.depth[i]), names[i]))
    rank = np.empty(len(names), dtype=np.int64)
    rank[np.array(order, dtype=np.int64)] = np.arange(len(names), dtype=np.int64)
    depth = layout.depth[order]
    bounds = np.flatnonzero(np.diff(depth)) + 1
    generations = tuple(np.arange(a, b) for a, b in zip(np.r_[0, bounds], np.r_[bounds, len(order)]))
    perm = np.argsort(rank[layout.b_parent], kind="stable")
    b_parent = rank[layout.b_parent][perm]
    b_to_load = layout.b_load[perm] >= 0
    b_child = np.where(b_to_load, layout.b_load[perm], rank[np.maximum(layout.b_mirror[perm], 0)])
    return _assemble(plan, tuple(names[i] for i in order), tuple(plan.loads), generations,
                     [layout.kinds[i] for i in order], b_parent, layout.b_index[perm], layout.b_ratio[perm],
                     layout.b_count[perm], b_to_load, b_child)
