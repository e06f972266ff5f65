"""The typer application, error mapping and helpers shared by every command.

Exit status: 0 every load passes (or the command succeeded), 1 some load
fails its budget (or the simulator disagrees), 2 invalid input or usage,
3 an internal error (a bug in biastree; please report it), 130 interrupted
(Ctrl-C; nothing written).
"""

from __future__ import annotations

import functools
import os
import sys
from pathlib import Path
from typing import Annotated, Callable, Optional, TypeVar

import typer

import biastree
from biastree.errors import BiasTreeError, PlanError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,  # plain click help: the rich formatter alone took ~0.3 s to import
    help="Plan and audit the bias-current tree of a chip. Results are design estimates.",
)

F = TypeVar("F", bound=Callable[..., object])

PlanArg = Annotated[Path, typer.Argument(help="plan file (.yaml, .yml or .json)", show_default=False)]


def _fail(lines: list[str]) -> None:
    for line in lines:
        typer.echo(f"error: {line}", err=True)
    raise typer.Exit(2)


def guarded(fn: F) -> F:
    """Map our errors to clean messages and exit 2; never show a traceback."""

    @functools.wraps(fn)
    def wrapper(*args: object, **kwargs: object) -> object:
        try:
            return fn(*args, **kwargs)
        except PlanError as exc:
            _fail(exc.lines())
        except BiasTreeError as exc:
            _fail(str(exc).splitlines() or [type(exc).__name__])
        except (typer.Exit, typer.Abort, SystemExit):
            raise
        except KeyboardInterrupt:  # Ctrl-C: outputs are written whole or not at all
            typer.echo("\ninterrupted: nothing written", err=True)
            raise typer.Exit(130) from None
        except Exception as exc:  # a bug: say so in one line unless debugging
            if os.environ.get("BIASTREE_DEBUG"):
                raise
            typer.echo(f"internal error (a bug in biastree, please report): {type(exc).__name__}: {exc}", err=True)
            raise typer.Exit(3) from None
        return None

    return wrapper  # type: ignore[return-value]


def emit(text: str, output: Optional[Path]) -> None:
    if output is None or str(output) == "-":
        sys.stdout.write(text)
    else:
        from biastree.files import write_atomic

        write_atomic(output, text)


def load_tree(plan: Path, forward_bias: Optional[str] = None) -> biastree.Tree:
    return with_forward_bias(biastree.load(plan), forward_bias, str(plan))


def with_forward_bias(tree: biastree.Tree, forward_bias: Optional[str], source: str) -> biastree.Tree:
    """The tree with ``--forward-bias`` applied (unchanged when not given)."""
    if forward_bias is not None:
        from biastree.input.model import Compliance
        from biastree.units import UnitError, parse_quantity

        try:
            value = parse_quantity(forward_bias, "V")
        except UnitError as exc:
            raise BiasTreeError(f"--forward-bias: {exc}") from None
        if value < 0:
            raise BiasTreeError("--forward-bias: must be ≥ 0 V")
        new = tree.plan.model_copy(update={"compliance": Compliance(bjt_forward_bias=value)})
        tree = biastree.build(new, source=source)
    return tree


