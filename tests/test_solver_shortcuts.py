"""Solver shortcuts give the former answers within the solver's tolerance (issue 13).

Oracles: the former code paths themselves — the degenerated mirror's Newton
iterations run for their full 100 steps (the former stopping rules were
below the floats' resolution, so they always ran all of them), and the
output resistance of coupled outputs with the whole group stepped one
output position at a time (the former ``_rout``).  Plans are generated
(invented data) with every topology.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers import tree_of

import biastree
from biastree.analysis import solve as solve_module
from biastree.input.generate import Ranges, random_plan
from biastree.physics import topologies
from biastree.physics.topologies import TOPOLOGIES


@pytest.fixture(scope="module")
def tree() -> biastree.Tree:
    return tree_of(random_plan(150, seed=21, ranges=Ranges(topologies=tuple(TOPOLOGIES))))


def test_degenerated_early_stop_equals_the_full_newton(tree, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    assert any(tree.plan.mirrors[m].topology == "degenerated" for m in tree.mirrors)
    fast = biastree.check(tree)
    monkeypatch.setattr(topologies, "_DEGENERATED_STEP", 0.0)
    monkeypatch.setattr(topologies, "_DEGENERATED_NOISE", 0.0)
    slow = biastree.check(tree)
    # the same root to the rounding noise of the equations (about 1e-15 V on the base line)
    np.testing.assert_allclose(fast.op.b_current, slow.op.b_current, rtol=1e-13, atol=0)
    np.testing.assert_allclose(fast.op.m_v_in, slow.op.m_v_in, rtol=0, atol=1e-14)
    np.testing.assert_allclose(fast.margin, slow.margin, rtol=0, atol=1e-13)
    # a central difference over 1 mV divides that noise by ΔI/I ≈ 1e-5
    np.testing.assert_allclose(fast.op.b_rout, slow.op.b_rout, rtol=1e-7)
    assert (fast.passed == slow.passed).all()


def _former_rout(op: solve_module.OperatingPoint) -> np.ndarray:
    """The former ``_rout``: every mirror of a coupled group solved again for each output position."""
    tree = op.tree
    ctx = solve_module._Context(tree, op.devices, solve_module.topology_params(tree), op.columns)
    rout = np.full(op.b_distance.shape, np.inf)
    h = solve_module.ROUT_STEP
    for generation in solve_module._groups(tree):
        for g in generation:
            topo = TOPOLOGIES[g.topology]
            b = g.branches
            for position in (np.unique(g.position) if topo.coupled_outputs else [None]):
                step = np.full((len(b), 1), h) if position is None else np.where((g.position == position)[:, None], h, 0.0)
                hi = topo.solve(ctx.group_input(g, op.m_i_in, op.b_distance[b] + step, b_current=op.b_current)).current
                lo = topo.solve(ctx.group_input(g, op.m_i_in, op.b_distance[b] - step, b_current=op.b_current)).current
                r = 2.0 * h / (hi - lo)
                sel = slice(None) if position is None else (g.position == position)
                rout[b[sel]] = np.where(r[sel] > 0, r[sel], np.inf)
    return rout


def test_output_resistance_equals_the_former_per_position_steps(tree) -> None:  # type: ignore[no-untyped-def]
    assert {"cascode"} <= {tree.plan.mirrors[m].topology for m in tree.mirrors}
    op = biastree.solve(tree)
    with np.errstate(all="ignore"):
        former = _former_rout(op)
    np.testing.assert_allclose(op.b_rout, former, rtol=1e-7)
