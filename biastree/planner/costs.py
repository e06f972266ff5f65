"""What a plan costs and how much margin it keeps, read from its audit.

Overhead current is every current the tree draws that no block receives:
the reference, every branch into another mirror, helper devices and bias
sources (the audit's own summary).  Area is counted in unit devices (and MOS
gate area).  The figures are the ones ``biastree check`` reports.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

OBJECTIVES = ("power", "area", "margin")


@dataclass(frozen=True)
class Figures:
    """The figures a plan is judged by."""

    passed: int
    failed: int
    overhead_current: float  # A
    overhead_power: float  # W
    device_units: float
    mos_gate_area: float  # m²
    worst_margin: float  # fraction of budget left at the worst load (negative: fails)
    mirrors: int

    def key(self, objective: str) -> tuple[float, ...]:
        """Sort key: failures first, then the objective, then the others."""
        if objective == "area":
            return (self.failed, self.device_units, self.overhead_power, -self.worst_margin)
        if objective == "margin":
            return (self.failed, -round(self.worst_margin, 4), self.overhead_power, self.device_units)
        return (self.failed, self.overhead_power, self.device_units, -self.worst_margin)

    def dominates(self, other: "Figures") -> bool:
        mine = (self.overhead_power, self.device_units, -self.worst_margin)
        theirs = (other.overhead_power, other.device_units, -other.worst_margin)
        return all(a <= b for a, b in zip(mine, theirs)) and mine != theirs

    def as_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


def figures(result: Any) -> Figures:
    """Figures of an audit (``biastree.analysis.audit.Audit``)."""
    s = result.summary()
    return Figures(
        passed=int(s["passed"]),
        failed=int(s["failed"]),
        overhead_current=float(s["overhead_current"]),
        overhead_power=float(s["overhead_power"]),
        device_units=float(s["device_units"]),
        mos_gate_area=float(s["mos_gate_area"]),
        worst_margin=float(np.min(result.margin)) if len(result.margin) else 0.0,
        mirrors=len(result.tree.mirrors),
    )


def pareto(candidates: list[tuple[Figures, Any]]) -> list[tuple[Figures, Any]]:
    """The passing candidates that no other passing candidate dominates, power-lean first."""
    ok = [c for c in candidates if c[0].failed == 0]
    front = [c for c in ok if not any(o[0].dominates(c[0]) for o in ok)]
    unique: dict[tuple[float, float, float], tuple[Figures, Any]] = {}
    for c in front:
        f = c[0]
        unique.setdefault((round(f.overhead_power, 12), f.device_units, round(f.worst_margin, 6)), c)
    return sorted(unique.values(), key=lambda c: c[0].overhead_power)
