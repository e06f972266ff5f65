"""Temperature, supply and process corners: solve every combination at once
(one column each) and find each load's worst case and where it happens."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from biastree.analysis.conditions import ENDS, Columns, condition_columns
from biastree.analysis.solve import OperatingPoint, solve
from biastree.physics.devices import Array
from biastree.tree.arrays import Tree


@dataclass(frozen=True)
class ConditionResult:
    """Every load's current in every condition column."""

    tree: Tree
    columns: Columns
    op: OperatingPoint

    @cached_property  # read once per load by the exporters: compute once
    def error(self) -> Array:
        """(n_loads, C): delivered / target − 1 in each column."""
        target = np.array([self.tree.plan.loads[n].current for n in self.tree.loads])
        return self.op.l_current / target[:, None] - 1.0

    @cached_property
    def worst_index(self) -> Array:
        return np.argmax(np.abs(self.error), axis=1)

    @cached_property
    def worst_error(self) -> Array:
        return self.error[np.arange(len(self.tree.loads)), self.worst_index]

    def worst_name(self, load: int) -> str:
        return self.columns.names[int(self.worst_index[load])]

    @cached_property
    def compliance(self) -> Array:
        """(n_loads,) smallest compliance margin over all columns, V."""
        return self.op.b_compliance[self.tree.l_branch].min(axis=1)

    @cached_property
    def compliance_index(self) -> Array:
        return np.argmin(self.op.b_compliance[self.tree.l_branch], axis=1)

    @cached_property
    def headroom(self) -> Array:
        """(n_loads,) smallest compliance margin of the branches between mirrors on the path."""
        tree = self.tree
        comp = self.op.b_compliance.min(axis=1)
        n_m = len(tree.mirrors)
        worst = np.full(n_m, np.inf)
        for gen in tree.generations[1:]:
            b = tree.m_in_branch[gen]
            worst[gen] = np.minimum(worst[tree.b_parent[b]], comp[b])
        return worst[tree.b_parent[tree.l_branch]]


def has_conditions(tree: Tree) -> bool:
    c = tree.plan.conditions
    return bool(c.temperatures or c.supplies or c.corners)


def evaluate(tree: Tree, columns: Columns | None = None) -> ConditionResult:
    """Solve the plan over ``columns`` (default: the plan's conditions × voltage ends)."""
    cols = condition_columns(tree) if columns is None else columns
    return ConditionResult(tree, cols, solve(tree, cols, output_resistance=False))


def sweep_columns(tree: Tree, temperatures: list[float] | None = None, supplies: list[float] | None = None,
                  corners: list[str] | None = None, ends: tuple[str, ...] = ("nominal",)) -> Columns:
    """Columns for a sweep: what is not swept stays at the plan's own value."""
    plan = tree.plan
    return condition_columns(tree, temperatures or [plan.temperature], supplies or [plan.supply],
                             corners or [""], ends)


def parse_range(text: str, unit: str) -> list[float]:
    """'-40C:125C:5C' → [233.15, 238.15, …, 398.15] (K); '3.0V:3.6V:0.1V'; or a single value."""
    from biastree.units import parse_quantity

    parts = [p for p in text.split(":")]
    if len(parts) == 1:
        return [parse_quantity(parts[0], unit)]
    if len(parts) != 3:
        raise ValueError(f"'{text}' is not START:STOP:STEP")
    start, stop = parse_quantity(parts[0], unit), parse_quantity(parts[1], unit)
    step = parse_quantity(parts[2], unit) - (parse_quantity("0", unit) if unit == "C" else 0.0)
    if step <= 0 or stop < start:
        raise ValueError(f"'{text}': need START ≤ STOP and a positive STEP")
    n = int(np.floor((stop - start) / step + 1e-9)) + 1
    if n > 10000:
        raise ValueError(f"'{text}' gives {n} points; at most 10000")
    return [start + k * step for k in range(n)]


__all__ = ["ConditionResult", "ENDS", "evaluate", "has_conditions", "parse_range", "sweep_columns"]
