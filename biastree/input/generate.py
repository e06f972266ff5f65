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
    max_mirror_count: int = 1  # copies of whole subtrees multiply instance counts quickly
    beta: tuple[float, float] = (50.0, 250.0)
    early: tuple[float, float] = (20.0, 150.0)
    supply: float = 3.3
    load_voltage: tuple[float, float] = (1.0, 2.3)
    unit_current: float = 10e-6  # input devices are sized for about this per unit
    topologies: tuple[str, ...] = ("simple",)  # drawn at random where the mirror allows


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
    """A valid plan (plain data) with exactly ``n_loads`` loads.

    Each mirror is given a number of loads to reach below it and splits that
    budget between loads of its own and child mirrors, so trees stay
    balanced; the depth grows past ``max_depth`` only when the loads would not
    fit otherwise (fan-out^depth < n_loads).
    """
    r = ranges or Ranges()
    if n_loads < 1:
        raise ValueError("a plan needs at least one load")
    rng = np.random.default_rng(seed)
    families = list(r.families)
    mirrors: dict[str, dict[str, Any]] = {}
    loads: dict[str, dict[str, Any]] = {}
    i_ref = 20e-6
    depth_limit = r.max_depth
    while max(r.max_fanout, 2) ** depth_limit < n_loads:
        depth_limit += 1
    counter = {"mirror": 0, "load": 0}
    ratio_choices = [x for x in (0.25, 0.5, 1, 1, 1.5, 2, 3, 4, 8, 16) if r.ratio[0] <= x <= r.ratio[1]] or [1.0]

    def device(sink: bool) -> str:
        family = families[int(rng.integers(len(families)))]
        return {("bjt", True): "qn", ("bjt", False): "qp", ("mos", True): "mn", ("mos", False): "mp"}[(family, sink)]

    def pick_ratio(current: float) -> tuple[float, float]:
        ratio = float(rng.choice(ratio_choices))
        out = current * ratio
        if out < 1e-6 or out > 200e-6:  # keep currents in a sane range
            return 1.0, current
        return ratio, out

    def add_load(current: float) -> dict[str, Any]:
        name = f"load{counter['load']}"
        counter["load"] += 1
        ratio, out = pick_ratio(current)
        lo, hi = r.load_voltage
        if rng.random() < 0.3:
            a, b = sorted(rng.uniform(lo, hi, 2))
            voltage: Any = [f"{a:.3f}V", f"{b:.3f}V"]
        else:
            voltage = f"{rng.uniform(lo, hi):.3f}V"
        loads[name] = {"current": 0.0, "tolerance": f"{int(rng.choice([5, 10, 15, 20]))}%", "voltage": voltage}
        return {"to": name, "ratio": ratio, "count": int(rng.integers(1, r.max_count + 1))}

    # work list of (mirror name, sinks?, input current, depth, loads to place below)
    work = [("m0", bool(rng.integers(2)), i_ref, 1, n_loads)]
    counter["mirror"] = 1
    while work:
        name, sink, current, depth, budget = work.pop()
        input_size = max(1, int(round(current / r.unit_current)))
        fan = max(r.max_fanout, 1)
        width = int(rng.integers(1, fan + 1))
        capacity = max(fan, 2) ** (depth_limit - depth)  # loads one child subtree can take
        if depth >= depth_limit or budget <= width:
            n_children, n_direct = 0, budget
        else:
            least = max(1, -(-budget // capacity))
            n_children = int(rng.integers(least, max(least, min(fan, budget)) + 1))
            n_direct = int(rng.integers(0, max(0, min(fan - n_children, budget - n_children)) + 1))
        branches = [add_load(current) for _ in range(n_direct)]
        rest = budget - n_direct
        if n_children:
            shares = rng.multinomial(rest - n_children, [1.0 / n_children] * n_children) + 1
            for share in shares:
                child = f"m{counter['mirror']}"
                counter["mirror"] += 1
                ratio, out = pick_ratio(current)
                branches.append({"to": child, "ratio": ratio, "count": int(rng.integers(1, r.max_mirror_count + 1))})
                work.append((child, not sink, out, depth + 1, int(share)))
        mirrors[name] = {"device": device(sink), "input_size": input_size, "branches": branches}
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
    if r.topologies != ("simple",):
        _assign_topologies(plan, r.topologies, rng)
    return plan


def _assign_topologies(plan: dict[str, Any], names: tuple[str, ...], rng: np.random.Generator) -> None:
    """Give each mirror a topology from ``names`` that fits its device and outputs."""
    from biastree.physics.topologies import TOPOLOGIES

    for mirror in plan["mirrors"].values():
        family = "bjt" if mirror["device"] in ("qn", "qp") else "mos"
        single = len(mirror["branches"]) == 1 and mirror["branches"][0].get("count", 1) == 1
        fits = [n for n in names if family in TOPOLOGIES[n].kinds and (single or not TOPOLOGIES[n].single_output)]
        if not fits:
            continue
        name = str(rng.choice(fits))
        if name != "simple":
            mirror["topology"] = name
        if name == "degenerated":
            mirror["degeneration_drop"] = f"{rng.uniform(0.03, 0.3):.3f}V"
        if name == "beta_helper" and rng.random() < 0.5:
            mirror["bleed"] = f"{rng.uniform(0.1, 2.0):.3f}uA"
        if name in ("wilson", "wilson4", "cascode") and family == "bjt":
            # outputs need about two V_BE from their rail: move the loads there
            sink = mirror["device"] == "qn"
            supply = float(plan["supply"].rstrip("V"))
            for branch in mirror["branches"]:
                if branch["to"] in plan["loads"]:
                    dist = rng.uniform(1.75, supply - 0.9)
                    plan["loads"][branch["to"]]["voltage"] = f"{dist if sink else supply - dist:.3f}V"


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
