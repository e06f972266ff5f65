"""Random valid plans, for scale tests and simulator cross-checks.

Everything here is invented data.  Plans are built breadth-first from one
root mirror; polarity alternates (sink → source → sink …) between mirror
levels; load voltages are kept inside compliance; each load's target is
the current its ratios would give with ideal mirrors, so its error is the
tree's own error.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

import numpy as np

SINK = ("npn", "nmos")
SOURCE = ("pnp", "pmos")


@dataclass(frozen=True)
class Ranges:
    """What a random plan may contain (defaults: realistic and in compliance)."""

    max_depth: int = 5
    max_fanout: int = 8
    families: tuple[str, ...] = ("bjt", "mos")
    ratio: tuple[float, float] = (0.25, 4.0)
    max_count: int = 4
    beta: tuple[float, float] = (50.0, 250.0)
    early: tuple[float, float] = (20.0, 150.0)
    supply: float = 3.3
    load_voltage: tuple[float, float] = (1.0, 2.3)
    unit_current: float = 10e-6  # input devices are sized for about this per unit


def _devices(rng: np.random.Generator, r: Ranges) -> dict[str, dict[str, Any]]:
    def beta() -> float:
        return round(float(rng.uniform(*r.beta)), 3)

    def early() -> str:
        return f"{float(rng.uniform(*r.early)):.4g}V"

    return {
        "qn": {"kind": "npn", "is": "1e-17A", "beta": beta(), "early": early()},
        "qp": {"kind": "pnp", "is": "5e-18A", "beta": beta(), "early": early()},
        "mn": {"kind": "nmos", "kp": "300uA/V^2", "vth": "0.45V", "lambda": f"{rng.uniform(0.01, 0.1):.3g}/V", "w": "4um", "l": "1um"},
        "mp": {"kind": "pmos", "kp": "80uA/V^2", "vth": "0.5V", "lambda": f"{rng.uniform(0.01, 0.1):.3g}/V", "w": "8um", "l": "1um"},
    }


def random_plan(n_loads: int, seed: int = 1, ranges: Ranges | None = None) -> dict[str, Any]:
    """A valid plan (plain data) with exactly ``n_loads`` loads."""
    r = ranges or Ranges()
    rng = np.random.default_rng(seed)
    families = list(r.families)
    mirrors: dict[str, dict[str, Any]] = {}
    loads: dict[str, dict[str, Any]] = {}
    i_ref = 20e-6

    def device(sink: bool) -> str:
        family = families[int(rng.integers(len(families)))]
        return {("bjt", True): "qn", ("bjt", False): "qp", ("mos", True): "mn", ("mos", False): "mp"}[(family, sink)]

    # queue of (name, sink?, input current, depth)
    queue = [("m0", bool(rng.integers(2)), i_ref, 1)]
    count = 1
    remaining = n_loads
    while queue:
        name, sink, current, depth = queue.pop(0)
        input_size = max(1, int(round(current / r.unit_current)))
        n_branches = int(rng.integers(1, r.max_fanout + 1))
        n_branches = min(n_branches, max(1, remaining - len(queue)))
        branches = []
        for k in range(n_branches):
            ratio = float(rng.choice([0.25, 0.5, 1, 1, 1.5, 2, 3, 4]))
            ratio = min(max(ratio, r.ratio[0]), r.ratio[1])
            out = current * ratio
            if out < 1e-6 or out > 200e-6:  # keep currents in a sane range
                ratio = 1.0
                out = current
            # make child mirrors while the tree is shallow and loads remain to place
            want_mirror = depth < r.max_depth and remaining - len(queue) > 2 and rng.random() < 0.35
            if want_mirror and not (k == n_branches - 1 and not branches):
                child = f"m{count}"
                count += 1
                copies = int(rng.integers(1, 3))
                branches.append({"to": child, "ratio": ratio, "count": copies})
                queue.append((child, not sink, out, depth + 1))
            else:
                if remaining <= len(queue):
                    break
                lname = f"load{n_loads - remaining}"
                remaining -= 1
                copies = int(rng.integers(1, r.max_count + 1))
                branches.append({"to": lname, "ratio": ratio, "count": copies})
                lo, hi = r.load_voltage
                if rng.random() < 0.3:
                    a, b = sorted(rng.uniform(lo, hi, 2))
                    voltage: Any = [f"{a:.3f}V", f"{b:.3f}V"]
                else:
                    voltage = f"{rng.uniform(lo, hi):.3f}V"
                loads[lname] = {
                    "current": float(f"{out:.6g}"),
                    "tolerance": f"{int(rng.choice([5, 10, 15, 20]))}%",
                    "voltage": voltage,
                }
        if not branches:  # every mirror needs an output: give it one more load
            lname = f"load{n_loads - remaining}"
            remaining -= 1
            branches.append({"to": lname, "ratio": 1.0})
            loads[lname] = {"current": float(f"{current:.6g}"), "tolerance": "10%", "voltage": "1.5V"}
        mirrors[name] = {"device": device(sink), "input_size": input_size, "branches": branches}
    # Any loads still to place hang off the last mirrors as extra branches.
    names = list(mirrors)
    k = 0
    while remaining > 0:
        name = names[-1 - (k % len(names))]
        lname = f"load{n_loads - remaining}"
        remaining -= 1
        mirrors[name]["branches"].append({"to": lname, "ratio": 1.0})
        loads[lname] = {"current": 0.0, "tolerance": "10%", "voltage": "1.5V", "_from": name}
        k += 1
    plan = {
        "title": f"Random plan, {n_loads} loads, seed {seed} (invented data)",
        "supply": f"{r.supply}V",
        "temperature": "27C",
        "devices": _devices(rng, r),
        "reference": {"current": f"{i_ref * 1e6:g}uA", "tolerance": "0.5%", "feeds": "m0"},
        "mirrors": mirrors,
        "loads": loads,
    }
    _fix_targets(plan)
    return plan


def _fix_targets(plan: dict[str, Any]) -> None:
    """Set every load's target to its ideal (ratio-only) current."""
    ideal = {plan["reference"]["feeds"]: 20e-6}
    order = [plan["reference"]["feeds"]]
    for name in order:
        for branch in plan["mirrors"][name]["branches"]:
            current = ideal[name] * branch["ratio"]
            if branch["to"] in plan["mirrors"]:
                ideal[branch["to"]] = current
                order.append(branch["to"])
            else:
                load = plan["loads"][branch["to"]]
                load.pop("_from", None)
                load["current"] = float(f"{current:.6g}")


def to_text(plan: dict[str, Any], fmt: str = "yaml") -> str:
    if fmt == "json":
        return json.dumps(plan, indent=1) + "\n"
    import yaml

    header = "# Random plan written by `biastree generate`: invented data for scale tests.\n"
    return header + yaml.safe_dump(plan, sort_keys=False, default_flow_style=None, width=120)
