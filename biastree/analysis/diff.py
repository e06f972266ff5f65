"""What changed between two audited plans, and what it did to every load.

``compare(old, new)`` lists the changes of the plan files (structure and
parameters, as key paths of the validated plans) and, for every load of
either plan, its delivered current, error, margin and verdict before and
after.  Pure: two ``Audit`` objects in, plain data out.

>>> import biastree
>>> a = biastree.check("samples/bipolar_small.yaml")
>>> d = compare(a, a)
>>> d.changes, d.regressions
([], [])
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from biastree.analysis.audit import Audit


@dataclass(frozen=True)
class Change:
    """One difference of the plan files: a key path and its old and new value
    (``None`` where the key does not exist on that side)."""

    path: str
    old: Any
    new: Any

    @property
    def kind(self) -> str:
        return "added" if self.old is None else "removed" if self.new is None else "changed"


@dataclass(frozen=True)
class LoadChange:
    """A load before and after (a side is ``None`` when the load is not in that plan)."""

    name: str
    old: dict[str, Any] | None
    new: dict[str, Any] | None

    @property
    def status(self) -> str:
        if self.old is None:
            return "added"
        if self.new is None:
            return "removed"
        if self.old["verdict"] != self.new["verdict"]:
            return f"{self.old['verdict']} → {self.new['verdict']}"
        same = all(self.old[k] == self.new[k] for k in ("delivered", "error", "margin", "path"))
        return "same" if same else "changed"

    def delta(self, key: str) -> float | None:
        if self.old is None or self.new is None:
            return None
        return float(self.new[key] - self.old[key])


@dataclass(frozen=True)
class PlanDiff:
    changes: list[Change]
    loads: list[LoadChange]

    @property
    def regressions(self) -> list[str]:
        """Loads that fail in the new plan but passed (or did not exist) in the old."""
        return [c.name for c in self.loads
                if c.new is not None and c.new["verdict"] == "fail" and (c.old is None or c.old["verdict"] == "pass")]

    def to_dict(self) -> dict[str, Any]:
        return {
            "changes": [{"path": c.path, "kind": c.kind, "old": c.old, "new": c.new} for c in self.changes],
            "loads": [{"name": c.name, "status": c.status, "old": c.old, "new": c.new} for c in self.loads],
            "regressions": self.regressions,
        }


def _walk(old: Any, new: Any, path: str, out: list[Change]) -> None:
    if isinstance(old, dict) and isinstance(new, dict):
        for key in list(old) + [k for k in new if k not in old]:
            sub = f"{path}.{key}" if path else str(key)
            if key not in new:
                out.append(Change(sub, old[key], None))
            elif key not in old:
                out.append(Change(sub, None, new[key]))
            else:
                _walk(old[key], new[key], sub, out)
    elif isinstance(old, (list, tuple)) and isinstance(new, (list, tuple)) and not _scalar_list(old, new):
        for k in range(max(len(old), len(new))):
            sub = f"{path}[{k}]"
            if k >= len(new):
                out.append(Change(sub, old[k], None))
            elif k >= len(old):
                out.append(Change(sub, None, new[k]))
            else:
                _walk(old[k], new[k], sub, out)
    elif old != new:
        out.append(Change(path, old, new))


def _scalar_list(old: Any, new: Any) -> bool:
    """A list of plain values (a voltage range) is one value."""
    return all(not isinstance(x, (dict, list, tuple)) for x in list(old) + list(new))


def _load_facts(result: Audit) -> dict[str, dict[str, Any]]:
    tree = result.tree
    out = {}
    for i, name in enumerate(tree.loads):
        out[name] = {
            "target": float(result.target[i]),
            "delivered": float(result.delivered[i, 1]),
            "error": float(result.error[i, 1]),
            "margin": float(result.margin[i]),
            "tolerance": float(result.tolerance[i]),
            "compliance": float(result.compliance[i]),
            "verdict": "pass" if result.passed[i] else "fail",
            "path": " › ".join(tree.mirrors[m] for m in tree.path(i)),
        }
    return out


def compare(old: Audit, new: Audit) -> PlanDiff:
    """Changes of the plan (key paths) and every load before and after."""
    changes: list[Change] = []
    _walk(old.tree.plan.model_dump(by_alias=True, exclude_none=True),
          new.tree.plan.model_dump(by_alias=True, exclude_none=True), "", changes)
    a, b = _load_facts(old), _load_facts(new)
    names = list(a) + [n for n in b if n not in a]
    return PlanDiff(changes, [LoadChange(n, a.get(n), b.get(n)) for n in names])
