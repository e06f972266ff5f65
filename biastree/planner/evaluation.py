"""What the planner's search works with: its rules, the changes it makes, the
requests it cannot meet, and the evaluation of a candidate plan — always
``check_tree`` on the plan built from the candidate's data, as ``biastree check``
would build it (only the mirrors that changed are validated again).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from biastree.analysis.audit import Audit
from biastree.analysis.pipeline import check_tree
from biastree.input.model import Mirror, Plan
from biastree.tree.arrays import Tree, build
from biastree.units import format_si


@dataclass
class Rules:
    """What the search may change."""

    max_units: int = 64
    max_ratio: float = 16.0
    min_current: float = 0.0  # least intermediate current, A
    max_fanout: float = float("inf")  # Σ ratio·count of one mirror (a split looks for a feeder with room)
    topologies: set[str] | None = None  # allowed topologies (None: all)
    block_topologies: dict[str, set[str]] = field(default_factory=dict)  # per load
    rebalance: bool = True
    whole: bool = True  # realise rebalanced ratios with whole unit devices
    split: bool = True
    rounds: int = 12
    patience: int = 5  # rounds without fewer failing blocks before the search gives up
    economise: bool = True  # after every block passes, cheaper topologies where they still pass
    objective: str = "power"  # how trials rank passing topologies: power (extra current) or area


@dataclass
class Change:
    """One change the search made, in a designer's words."""

    kind: str  # rebalance, topology, split, size, local
    target: str  # mirror or load name
    before: str
    after: str
    why: str
    power: float = 0.0  # W added (filled by the repair)
    area: float = 0.0  # unit devices added


@dataclass(frozen=True)
class Infeasible:
    """A request that cannot be met: which block, which constraint, by how much."""

    block: str
    constraint: str
    amount: float
    unit: str
    detail: str

    def text(self) -> str:
        amount = f"{self.amount * 100:.3g} %" if self.unit == "%" else format_si(self.amount, self.unit)
        return f"{self.block}: {self.constraint}: short by {amount} — {self.detail}"


def evaluate(data: dict[str, Any]) -> tuple[Tree, Audit]:
    """Build and check plain plan data exactly as ``biastree check`` would."""
    tree = build(Plan.model_validate(data))
    return tree, check_tree(tree, detail=False)


class Evaluator:
    """``evaluate`` that re-validates only the mirrors that changed since the last call
    (the loads, devices and conditions of a large plan are validated once).

    ``checked=False`` skips the structural check of each variant (the planner's
    own search, whose edits keep the structure valid; the plan it writes is
    built and checked in full from its text).  The verdicts do not depend on it."""

    def __init__(self, checked: bool = True) -> None:
        self.checked = checked
        self._base: Plan | None = None
        self._key: str | None = None
        self._mirrors: dict[str, tuple[str, Mirror]] = {}
        self.calls = 0

    def __call__(self, data: dict[str, Any]) -> tuple[Tree, Audit]:
        self.calls += 1
        key = repr((data.get("floorplan"), data.get("compliance"), data["reference"]))
        if self._base is None or key != self._key:
            self._base = Plan.model_validate(data)
            self._key = key
            self._mirrors = {n: (repr(spec), self._base.mirrors[n]) for n, spec in data["mirrors"].items()}
            plan = self._base
        else:
            mirrors = {}
            for n, spec in data["mirrors"].items():
                text = repr(spec)
                hit = self._mirrors.get(n)
                if hit is None or hit[0] != text:
                    hit = (text, Mirror.model_validate(spec))
                    self._mirrors[n] = hit
                mirrors[n] = hit[1]
            plan = self._base.model_copy(update={"mirrors": mirrors})
        tree = build(plan, checked=self.checked)
        return tree, check_tree(tree, detail=False)


def infeasible(tree: Tree, result: Audit) -> list[Infeasible]:
    """Every failing load, with the constraint it misses and by how much."""
    out = []
    op = result.op
    for i in np.flatnonzero(~result.passed).tolist():
        name = tree.loads[i]
        b = int(tree.l_branch[i])
        mirror = tree.mirrors[int(tree.b_parent[b])]
        if result.compliance[i] < 0:
            case = int(result.compliance_case[i])
            need = float(op.b_min_distance[b, case])
            have = float(op.b_distance[b, case])
            topo = tree.plan.mirrors[mirror].topology
            out.append(Infeasible(name, "compliance", need - have, "V",
                                  f"its voltage range leaves {format_si(have, 'V')} from the rail; the least-demanding allowed "
                                  f"topology ({topo}) needs {format_si(need, 'V')}"))
        elif result.conditions is not None and result.conditions.compliance[i] < 0:
            out.append(Infeasible(name, "compliance", -float(result.conditions.compliance[i]), "V",
                                  "the output leaves its active region under the plan's conditions"))
        elif result.upstream[i] >= 0:
            out.append(Infeasible(name, "headroom", -float(op.b_compliance[int(result.upstream[i])].min()), "V",
                                  "a mirror above it has too little voltage for its input"))
        else:
            mm = result.k_sigma * float(result.sigma[i])
            what = "mismatch budget (needs more area than the unit limit allows)" if mm > -result.margin[i] else "budget"
            out.append(Infeasible(name, what, -float(result.margin[i]), "%",
                                  "; ".join(result.reasons(i)) or "error exceeds the budget"))
    return out
