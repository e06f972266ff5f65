"""Temperature, supply and process corners: solve every combination at once
(one column each) and find each load's worst case and where it happens."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from biastree.analysis.conditions import ENDS, Columns, condition_columns
from biastree.analysis.plausible import check_conditions
from biastree.analysis.solve import OperatingPoint, solve
from biastree.physics.devices import Array
from biastree.tree.arrays import Tree


@dataclass(frozen=True)
class ConditionResult:
    """Every load's current in every condition column."""

    tree: Tree
    columns: Columns
    op: OperatingPoint

    @cached_property  # computed once: callers ask per load
    def error(self) -> Array:
        """(n_loads, C): delivered / target − 1 in each column."""
        target = np.array([self.tree.plan.loads[n].current for n in self.tree.loads])
        return self.op.l_current / target[:, None] - 1.0

    @cached_property  # computed once: callers ask per load
    def worst_index(self) -> Array:
        return np.argmax(np.abs(self.error), axis=1)

    @cached_property  # computed once: callers ask per load
    def worst_error(self) -> Array:
        return self.error[np.arange(len(self.tree.loads)), self.worst_index]

    def worst_name(self, load: int) -> str:
        return self.columns.names[int(self.worst_index[load])]

    @cached_property
    def tempco_ppm(self) -> Array | None:
        """(n_loads,) temperature coefficient of each load's current, ppm/K, or ``None``
        when the conditions hold fewer than two temperatures.

        End-point slope over the solved temperature range, at the first supply and
        corner and the nominal voltage end: (I(Tmax) − I(Tmin)) / (Ī · (Tmax − Tmin)),
        Ī the mean of the two currents.
        """
        cols = self.columns
        ends = [name.rsplit(" ", 1)[-1] for name in cols.names]
        end = "nominal" if "nominal" in ends else ends[0]
        pick = [k for k in range(cols.size) if ends[k] == end and cols.supply[k] == cols.supply[0]
                and cols.corner[k] == cols.corner[0]]
        temps = cols.temperature[pick]
        if len(pick) < 2 or temps.max() <= temps.min():
            return None
        lo, hi = pick[int(np.argmin(temps))], pick[int(np.argmax(temps))]
        i_lo, i_hi = self.op.l_current[:, lo], self.op.l_current[:, hi]
        with np.errstate(invalid="ignore", divide="ignore"):
            return (i_hi - i_lo) / (0.5 * (i_hi + i_lo) * (cols.temperature[hi] - cols.temperature[lo])) * 1e6

    def end(self, column: int) -> str:
        """The load-voltage end (min, nominal, max) of one column: the last word of its name."""
        word = self.columns.names[column].rsplit(" ", 1)[-1]
        return word if word in ENDS else "nominal"

    @cached_property  # computed once: callers ask per load
    def compliance(self) -> Array:
        """(n_loads,) smallest compliance margin over all columns, V."""
        return self.op.b_compliance[self.tree.l_branch].min(axis=1)

    @cached_property  # computed once: callers ask per load
    def compliance_index(self) -> Array:
        return np.argmin(self.op.b_compliance[self.tree.l_branch], axis=1)

    @cached_property  # computed once: callers ask per load
    def headroom(self) -> Array:
        """(n_loads,) smallest compliance margin of the branches between mirrors on the path."""
        return path_headroom(self.tree, self.op.b_compliance).min(axis=1)

    @property
    def headroom_index(self) -> Array:
        return np.argmin(path_headroom(self.tree, self.op.b_compliance), axis=1)

    def judge(self, sigma: Array | None = None, k_sigma: float = 3.0) -> "Verdicts":
        """Each load's verdict over every column, as ``check`` gives it: the worst
        |error| + k·σ of mismatch (``sigma``, relative, when known) + the reference
        tolerance within the budget, and every output and every branch on its path
        active in every column (compliance lost in one column fails the load)."""
        tree = self.tree
        plan = tree.plan
        tol = np.array([plan.loads[n].tolerance for n in tree.loads])
        k_term = np.zeros(len(tol)) if sigma is None else k_sigma * np.asarray(sigma)
        margin = tol - np.abs(self.worst_error) - k_term - plan.reference.tolerance
        compliance, headroom = self.compliance, self.headroom
        passed = (margin >= 0) & (compliance >= 0) & (headroom >= 0)
        names = self.columns.names
        reasons: list[list[str]] = []
        for i in range(len(tol)):
            why = []
            if margin[i] < 0:
                why.append(f"budget: error {self.worst_error[i] * 100:+.3g} % at {self.worst_name(i)}"
                           + (f" + {k_sigma:g}σ mismatch {k_term[i] * 100:.3g} %" if k_term[i] else "")
                           + (f" + reference {plan.reference.tolerance * 100:.3g} %" if plan.reference.tolerance else "")
                           + f" exceeds ±{tol[i] * 100:.3g} %")
            if compliance[i] < 0:
                why.append(f"compliance: the output device leaves its active region at {names[int(self.compliance_index[i])]} "
                           f"({compliance[i] * 1e3:+.4g} mV)")
            if headroom[i] < 0:
                why.append(f"headroom: a branch between mirrors on its path leaves its active region at "
                           f"{names[int(self.headroom_index[i])]} ({headroom[i] * 1e3:+.4g} mV)")
            reasons.append(why)
        return Verdicts(margin=margin, k_sigma=k_term, passed=passed, reasons=reasons)


@dataclass(frozen=True)
class Verdicts:
    """Per load over a condition matrix: margin (fraction), kσ term, pass/fail and the reasons."""

    margin: Array
    k_sigma: Array
    passed: Array
    reasons: list[list[str]]


def path_headroom(tree: Tree, b_compliance: Array) -> Array:
    """(n_loads, C): smallest compliance margin of the branches between mirrors on each
    load's path, in each column (inf for a load fed straight from the first mirror)."""
    n_m = len(tree.mirrors)
    worst = np.full((n_m, b_compliance.shape[1]), np.inf)
    for gen in tree.generations[1:]:
        b = tree.m_in_branch[gen]
        worst[gen] = np.minimum(worst[tree.b_parent[b]], b_compliance[b])
    return worst[tree.b_parent[tree.l_branch]]


def has_conditions(tree: Tree) -> bool:
    c = tree.plan.conditions
    return bool(c.temperatures or c.supplies or c.corners)


def evaluate(tree: Tree, columns: Columns | None = None) -> ConditionResult:
    """Solve the plan over ``columns`` (default: the plan's conditions × voltage ends).
    A result that is not physical raises ``SolveError`` (``analysis.plausible``), as in
    ``check``: values under allow_unusual may overflow on the way, and the non-finite
    result is refused with its place instead of numpy warning."""
    cols = condition_columns(tree) if columns is None else columns
    with np.errstate(all="ignore"):
        op = solve(tree, cols, output_resistance=False)
    return check_conditions(ConditionResult(tree, cols, op))


def sweep_columns(tree: Tree, temperatures: list[float] | None = None, supplies: list[float] | None = None,
                  corners: list[str] | None = None, ends: tuple[str, ...] = ("nominal",)) -> Columns:
    """Columns for a sweep: what is not swept stays at the plan's own value."""
    plan = tree.plan
    return condition_columns(tree, temperatures or [plan.temperature], supplies or [plan.supply],
                             corners or [""], ends)


def parse_range(text: str, unit: str) -> list[float]:
    """'-40C:125C:5C' → [233.15, 238.15, …, 398.15] (K); '3.0V:3.6V:0.1V'; or a single value.
    Both ends are included, STOP even when STEP does not divide the span:

    >>> [round(t - 273.15, 6) for t in parse_range("-40C:125C:25C", "C")]
    [-40.0, -15.0, 10.0, 35.0, 60.0, 85.0, 110.0, 125.0]
    """
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
    points = [start + k * step for k in range(n)]
    # The stop value is always solved: the last step is shorter when STEP does not
    # divide the span, and a point within rounding of STOP is STOP itself.
    if abs(points[-1] - stop) <= 1e-9 * max(abs(stop), step):
        points[-1] = stop
    else:
        points.append(stop)
    return points


__all__ = ["ConditionResult", "ENDS", "Verdicts", "path_headroom", "evaluate", "has_conditions", "parse_range", "sweep_columns"]
