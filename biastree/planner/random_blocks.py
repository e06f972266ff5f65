"""Random block lists (invented data) for the benchmark, the tests and the sample.

Both polarities, budgets 1–20 %, fixed voltages and ranges, positions on a
square die.  "Feasible" by construction with the simple device parameters
used here: every budget is wider than the reference tolerance plus what the
widest allowed voltage range costs a high-output-resistance topology, and
every voltage range leaves the compliance of a simple mirror (≥ 0.75 V from
the block's rail).
"""

from __future__ import annotations

from typing import Any

import numpy as np


def random_blocks(n: int, seed: int = 1, die: float = 4e-3, bipolar: bool = True, mos: bool = True) -> dict[str, Any]:
    """Plain data of a block list with ``n`` blocks (validate with ``BlockList.model_validate``)."""
    rng = np.random.default_rng(seed)
    devices: dict[str, Any] = {}
    if bipolar:
        devices["qn"] = {"kind": "npn", "is": 1e-17, "beta": float(rng.uniform(100, 200)), "early": float(rng.uniform(60, 120))}
        devices["qp"] = {"kind": "pnp", "is": 2e-17, "beta": float(rng.uniform(40, 80)), "early": float(rng.uniform(40, 80))}
    if mos or not bipolar:
        devices["mn"] = {"kind": "nmos", "kp": 300e-6, "vth": 0.45, "lambda": float(rng.uniform(0.01, 0.03)), "w": 4e-6, "l": 2e-6}
        devices["mp"] = {"kind": "pmos", "kp": 80e-6, "vth": 0.5, "lambda": float(rng.uniform(0.01, 0.03)), "w": 8e-6, "l": 2e-6}
    supply = 3.3
    steps = np.array([1, 2, 2.5, 4, 5, 8, 10, 16, 20, 40]) * 1e-6
    blocks: dict[str, Any] = {}
    for k in range(n):
        direction = "sink" if rng.random() < 0.5 else "source"
        tol = float(np.round(rng.uniform(0.01, 0.20), 3)) + 0.005
        if rng.random() < 0.5:
            v = float(np.round(rng.uniform(0.9, supply - 0.9), 2))
            voltage: Any = v
        else:
            width = float(np.round(rng.uniform(0.1, 0.5 if tol < 0.03 else 1.2), 2))
            lo = float(np.round(rng.uniform(0.9, supply - 0.9 - width), 2))
            voltage = [lo, round(lo + width, 2)]
        b: dict[str, Any] = {"current": float(rng.choice(steps)), "tolerance": tol, "voltage": voltage,
                             "direction": direction,
                             "position": [float(np.round(rng.uniform(0, die), 5)), float(np.round(rng.uniform(0, die), 5))]}
        c = int(rng.integers(1, 5))
        if c > 1:
            b["count"] = c
        blocks[f"b{k:05d}"] = b
    return {"title": f"random block list ({n} blocks, seed {seed}; invented)", "supply": supply, "devices": devices,
            "reference": {"current": 10e-6, "tolerance": 0.005}, "blocks": blocks}
