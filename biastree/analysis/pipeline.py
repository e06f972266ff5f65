"""One call from a built tree to its verdicts: conditions, mismatch, solve, audit.

The CLI, the public API, the hints and the planner all reach verdicts through
``check_tree``, so every one of them gives the answer ``biastree check`` gives.
"""

from __future__ import annotations

import numpy as np

from biastree.analysis.audit import Audit, audit
from biastree.analysis.corners import evaluate, has_conditions
from biastree.analysis.plausible import check_result
from biastree.analysis.solve import solve
from biastree.analysis.spread import analytic, has_coefficients
from biastree.tree.arrays import Tree


def check_tree(tree: Tree, conditions: bool = True, mismatch: bool = True,
               k_sigma: float | None = None, detail: bool = True) -> Audit:
    """Solve and audit a built tree.

    When the plan lists operating conditions they are all solved and the
    worst case counts; when its devices carry matching coefficients, k·σ of
    mismatch (k from the plan's spread.k_sigma unless given) counts too.
    ``detail=False`` skips the error terms and output resistances (verdicts only).
    A result that is not physical raises ``SolveError`` (``analysis.plausible``).
    """
    # Values a plan marks allow_unusual can overflow on the way (a σ squared, a
    # division by a vanishing current); the result is then not finite, and
    # check_result refuses it with its place instead of numpy warning on stderr.
    with np.errstate(all="ignore"):
        cond = evaluate(tree) if conditions and has_conditions(tree) else None
        spread = analytic(tree) if mismatch and has_coefficients(tree.plan) else None
        result = audit(solve(tree, output_resistance=detail), cond, spread, k_sigma)
    return check_result(result)
