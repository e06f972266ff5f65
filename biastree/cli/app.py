"""The typer application, error mapping and helpers shared by every command.

Exit status: 0 every load passes (or the command succeeded), 1 some load
fails its budget (or the simulator disagrees), 2 invalid input or usage,
3 an internal error (a bug in biastree; please report it), 130 interrupted
(Ctrl-C; nothing written).
"""

from __future__ import annotations

import functools
import os
import signal
import sys
from pathlib import Path
from typing import Annotated, Any, Callable, Optional, TypeVar

import typer
from typer.core import TyperGroup

try:  # typer ≥ 0.22 carries its own copy of click; its exceptions are the ones raised
    from typer import _click as click
except ImportError:  # pragma: no cover - older typer on the real click
    import click  # type: ignore[no-redef]

import biastree
from biastree.errors import BiasTreeError, PlanError, SolveError, shown

INTERRUPTED = 130  # the shell's status for a process ended by SIGINT


class Interrupted(KeyboardInterrupt):
    """SIGTERM, turned into the exception Ctrl-C raises, so that cleanups
    (``finally``) run and the same one-line message and exit 130 follow."""


def _on_signal(signum: int, frame: object) -> None:
    raise Interrupted()


_USAGE_WORDS = {
    "float_parsing": "is not a number",
    "int_parsing": "is not a whole number",
    "int_from_float": "is not a whole number",
    "bool_parsing": "is not yes/no",
}


def usage_line(exc: Any) -> str:
    """One line for a usage error: ``--k-sigma: 'abc' is not a number``."""
    message = exc.format_message()
    if isinstance(exc, typer.BadParameter) and exc.param is not None:
        opts = getattr(exc.param, "opts", None)
        name = opts[-1] if opts and exc.param.param_type_name == "option" else (exc.param.name or "").upper()
        message = exc.message or "is missing"
        errors = getattr(exc.__cause__, "errors", None)
        if callable(errors):
            first = errors()[0]
            if first.get("type") in _USAGE_WORDS:
                message = f"'{first.get('input')}' {_USAGE_WORDS[first['type']]}"
        message = f"{name}: {message}"
    ctx = getattr(exc, "ctx", None)
    where = ctx.command_path if ctx is not None else "biastree"
    return f"{shown(' '.join(message.split()), 300)} (see '{where} --help')"


class _Group(TyperGroup):
    """Usage errors in one line, Ctrl-C and SIGTERM as one line and exit 130."""

    def main(self, *args: Any, standalone_mode: bool = True, **kwargs: Any) -> Any:  # type: ignore[override]
        _flags_without_type(self)
        previous: dict[int, Any] = {}
        if standalone_mode and threading_main():
            previous = {signal.SIGTERM: signal.signal(signal.SIGTERM, _on_signal)}
        try:
            code = super().main(*args, standalone_mode=False, **kwargs)
        except click.exceptions.NoArgsIsHelpError as exc:  # `biastree` alone: the help
            click.echo(exc.ctx.get_help() if exc.ctx else str(exc))
            code = 2
        except click.exceptions.ClickException as exc:
            click.echo(f"error: {usage_line(exc)}", err=True)
            code = exc.exit_code
        except (KeyboardInterrupt, typer.Abort):  # outside a command (inside, `guarded` says it)
            click.echo("error: interrupted", err=True)
            code = INTERRUPTED
        except BrokenPipeError:  # the reader went away (e.g. `| head`): stop quietly
            sys.stdout = open(os.devnull, "w")  # noqa: SIM115  (Python flushes it at exit)
            code = 1
        finally:
            for sig, handler in previous.items():
                signal.signal(sig, handler)
        if not standalone_mode:
            return code
        sys.exit(code if isinstance(code, int) else 0)


def _flags_without_type(group: Any) -> None:
    """Show on/off options in help as plain flags (``--json``), not ``--json <bool>``."""
    for command in group.commands.values():
        for param in command.params:
            if getattr(param, "is_flag", False):
                param.display_type_rich = lambda ctx: None


def threading_main() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


app = typer.Typer(
    cls=_Group,
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


# Options that name files a command writes; every other path option or
# argument is a file it reads.
OUTPUT_OPTIONS = ("output", "csv")
# Suffixes a command can write, per output option (commands not listed write
# text of one kind whatever the name).
OUTPUT_SUFFIXES: dict[str, dict[str, tuple[str, ...]]] = {
    "report": {"output": (".html", ".htm", ".md", ".markdown"), "csv": (".csv",)},
    "draw": {"output": (".svg", ".png", ".pdf", ".dot", ".gv")},
}


def check_suffix(path: Path, allowed: tuple[str, ...], option: str = "-o") -> None:
    """Refuse an output name whose extension the command cannot write.

    >>> check_suffix(Path("review.md"), (".html", ".md"))
    >>> check_suffix(Path("x.docx"), (".html", ".md"))
    Traceback (most recent call last):
    biastree.errors.BiasTreeError: -o x.docx: cannot write a '.docx' file; use .html or .md
    """
    if str(path) == "-":
        return
    if path.suffix.lower() not in allowed:
        kind = f"a '{path.suffix}' file" if path.suffix else "a file without an extension"
        raise BiasTreeError(f"{option} {shown(path, 120)}: cannot write {kind}; use {' or '.join(allowed)}")


def _same_file(a: Path, b: Path) -> bool:
    try:
        if a.exists() and b.exists():
            return os.path.samefile(a, b)
        return a.resolve() == b.resolve()
    except OSError:
        return False


def check_outputs(command: str, kwargs: dict[str, object]) -> None:
    """Refuse, before any work, an output that would replace a file the
    command reads (``check plan.yaml -o plan.yaml``), two outputs with one
    name, and an output extension the command cannot write."""
    outputs = [(k, v) for k, v in kwargs.items() if k in OUTPUT_OPTIONS and isinstance(v, Path) and str(v) != "-"]
    inputs = [v for k, v in kwargs.items() if k not in OUTPUT_OPTIONS and isinstance(v, Path)]
    flag = {"output": "-o", "csv": "--csv"}
    for key, out in outputs:
        for source in inputs:
            if _same_file(out, source):
                raise BiasTreeError(f"{flag.get(key, key)} {shown(out, 120)}: is the input {shown(source, 120)}; "
                                    "biastree never writes over a file it reads (choose another name)")
        allowed = OUTPUT_SUFFIXES.get(command, {}).get(key)
        if allowed and not (command == "report" and key == "output" and kwargs.get("fmt") is not None):
            check_suffix(out, allowed, flag.get(key, key))
    for i, (key, out) in enumerate(outputs):
        for other_key, other in outputs[i + 1:]:
            if _same_file(out, other):
                raise BiasTreeError(f"{flag.get(key, key)} and {flag.get(other_key, other_key)} name the same file")


def _located(exc: SolveError, kwargs: dict[str, object]) -> list[str]:
    """A solve or plausibility error as ``file:line: key.path: message``."""
    plan = kwargs.get("plan")
    path = getattr(exc, "path", None)
    if not isinstance(plan, Path) or not path:
        return [f"{plan}: {exc}" if isinstance(plan, Path) else str(exc)]
    from biastree.errors import Problem, format_path
    from biastree.input.loader import load_document

    try:
        line = load_document(plan).line_of(path)
    except BiasTreeError:
        line = None
    return [Problem(format_path(path), str(exc), line).format(str(plan))]


def guarded(fn: F) -> F:
    """Map our errors to clean messages and exit 2; never show a traceback."""

    @functools.wraps(fn)
    def wrapper(*args: object, **kwargs: object) -> object:
        try:
            check_outputs(fn.__name__, kwargs)
            return fn(*args, **kwargs)
        except PlanError as exc:
            _fail(exc.lines())
        except SolveError as exc:
            _fail(_located(exc, kwargs))
        except BiasTreeError as exc:
            # one problem a line (some errors list several), each line short and printable
            _fail([shown(line, 400) for line in str(exc).splitlines() if line.strip()] or [type(exc).__name__])
        except (typer.Exit, typer.Abort, SystemExit, BrokenPipeError):
            raise
        except KeyboardInterrupt:  # Ctrl-C: outputs are written whole or not at all
            typer.echo("\ninterrupted: nothing written", err=True)
            raise typer.Exit(130) from None
        except Exception as exc:  # a bug: say so in one line unless debugging
            if os.environ.get("BIASTREE_DEBUG"):
                raise
            if isinstance(exc, RecursionError):
                typer.echo("error: the plan is nested too deeply to process", err=True)
                raise typer.Exit(2) from None
            typer.echo(f"internal error (a bug in biastree, please report): {type(exc).__name__}: "
                       f"{shown(' '.join(str(exc).split()), 300)}", err=True)
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


