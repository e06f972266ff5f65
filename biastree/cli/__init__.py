"""Command line: a thin layer over the library, one module per group of commands.

Exit status: 0 every load passes (or the command succeeded), 1 some load
fails its budget (or the simulator disagrees), 2 invalid input or usage,
3 an internal error (a bug in biastree; please report it).
"""

from __future__ import annotations

from biastree.cli import characterize, check, conditions, diff, extract, plan, review, simulate  # noqa: F401  (each registers its commands)
from biastree.cli.app import app

__all__ = ["app", "main"]


def main() -> None:
    app(prog_name="biastree")
