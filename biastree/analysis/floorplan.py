"""Distribution across the die: thermal gradients and rail IR drops.

A load listed as *remote* in the floorplan has its output device at the
load, with the mirror's base (gate) line routed there; that device then sits
ΔT = gradient × distance warmer and ΔV = rail gradient × distance closer to
the opposite rail than the mirror's input device.  (A load that is not
remote gets its current routed from an output device beside the mirror and
sees neither.)  Closed forms (REFERENCES.md, derived): BJT
ΔI/I = e^(−ΔV/V_T) − 1 for the rail and IS(T+ΔT)/IS(T)·e^(V_BE/V_T(T+ΔT) −
V_BE/V_T(T)) − 1 at fixed V_BE for the temperature (≈ +7 %/K); MOS
(1 − ΔV/V_ov)² − 1 for the rail and the kp and VT temperature laws.
The solver applies these exactly, per branch, inside its sweeps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from biastree.physics.devices import Array
from biastree.tree.arrays import Tree


@dataclass(frozen=True)
class Remote:
    """Per-branch offsets of remote output devices (zeros elsewhere)."""

    delta_t: Array  # (n_branches,) K, output device warmer than the input device
    delta_v: Array  # (n_branches,) V, output device's rail moved towards the other rail
    distance: Array  # (n_branches,) m, mirror to load

    @property
    def any(self) -> bool:
        return bool(np.any(self.delta_t) or np.any(self.delta_v))


def remote_offsets(tree: Tree) -> Remote | None:
    plan = tree.plan
    fp = plan.floorplan
    if fp is None or not fp.remote:
        return None
    n_b = len(tree.b_parent)
    dist, dt, dv = np.zeros(n_b), np.zeros(n_b), np.zeros(n_b)
    for name in fp.remote:
        i = tree.loads.index(name)
        b = int(tree.l_branch[i])
        mirror = tree.mirrors[tree.b_parent[b]]
        if mirror in fp.positions and name in fp.positions:
            (x0, y0), (x1, y1) = fp.positions[mirror], fp.positions[name]
            dist[b] = math.hypot(x1 - x0, y1 - y0)
        if name in fp.offsets:  # explicit offsets win over gradient × distance
            dt[b], dv[b] = fp.offsets[name].temperature, fp.offsets[name].rail
        else:
            dt[b], dv[b] = dist[b] * fp.thermal_gradient, dist[b] * fp.rail_gradient
    return Remote(dt, dv, dist)
