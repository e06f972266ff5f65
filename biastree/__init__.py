"""biastree: plan and audit the bias-current distribution tree of a chip.

Results are design estimates; sign-off belongs to the foundry's device
models and transistor-level simulation.

>>> import biastree
>>> result = biastree.check("samples/bipolar_small.yaml")
>>> result.summary()["loads"]
10
"""

from __future__ import annotations

import gc
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterator, Union

from biastree.errors import BiasTreeError, PlanError, Problem, RenderError, SimulatorError, SolveError
from biastree.version import __version__  # noqa: F401  (re-exported)

if TYPE_CHECKING:
    from biastree.analysis.audit import Audit, audit
    from biastree.analysis.solve import OperatingPoint, solve
    from biastree.input.model import Plan
    from biastree.tree.arrays import Tree, build

# numpy, pydantic and the models are imported on first use, so that
# `import biastree` and `biastree --help` start fast.
_LAZY = {
    "Audit": "biastree.analysis.audit",
    "audit": "biastree.analysis.audit",
    "OperatingPoint": "biastree.analysis.solve",
    "solve": "biastree.analysis.solve",
    "Plan": "biastree.input.model",
    "Tree": "biastree.tree.arrays",
    "build": "biastree.tree.arrays",
}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'biastree' has no attribute '{name}'")
    import importlib

    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value

__all__ = [
    "Audit",
    "BiasTreeError",
    "OperatingPoint",
    "Plan",
    "PlanError",
    "Problem",
    "RenderError",
    "SimulatorError",
    "SolveError",
    "Tree",
    "audit",
    "build",
    "check",
    "load",
    "loads",
    "solve",
]


@contextmanager
def _gc_paused() -> Iterator[None]:
    # Parsing a large plan allocates millions of small acyclic objects; the
    # cyclic collector would scan them again and again for nothing.
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def loads(text: str, source: str = "plan", fmt: str = "yaml") -> Tree:
    """Validate plan text (YAML or JSON) and build its tree; raises ``PlanError``."""
    from biastree.input.loader import parse_text, validate
    from biastree.tree.arrays import build

    with _gc_paused():
        doc = parse_text(text, source, fmt)
        plan = validate(doc)
        return build(plan, doc.line_of, doc.source)


def load(path: Union[str, Path]) -> Tree:
    """Read, validate and build the tree of a plan file; raises ``PlanError``.

    >>> tree = load("samples/cmos_soc.yaml")
    >>> len(tree.loads), len(tree.mirrors)
    (15, 4)
    """
    from biastree.input.loader import load_document, validate
    from biastree.tree.arrays import build

    with _gc_paused():
        doc = load_document(path)
        plan = validate(doc)
        return build(plan, doc.line_of, doc.source)


def check(path_or_tree: Union[str, Path, Tree], conditions: bool = True, mismatch: bool = True,
          k_sigma: float | None = None, detail: bool = True) -> Audit:
    """Load (if given a path), solve and audit a plan in one call.

    When the plan lists operating conditions they are all solved and the
    worst case counts; when its devices carry matching coefficients, k·σ of
    mismatch (k from the plan's spread.k_sigma unless given) counts too.
    ``detail=False`` skips the error terms and output resistances (verdicts only).
    The result's ``hints`` (computed on first use) say which topology change
    would fix each failing load.
    """
    import dataclasses

    from biastree.analysis.advise import hints
    from biastree.analysis.pipeline import check_tree
    from biastree.tree.arrays import Tree

    tree = path_or_tree if isinstance(path_or_tree, Tree) else load(path_or_tree)
    result = check_tree(tree, conditions, mismatch, k_sigma, detail)
    return dataclasses.replace(result, advisor=hints)
