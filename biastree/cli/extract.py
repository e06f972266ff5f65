"""Command that reads an existing design: extract (and the netlist path of check)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

import biastree
from biastree.cli.app import app, emit, guarded, with_forward_bias
from biastree.errors import BiasTreeError

NETLIST_SUFFIXES = (".spice", ".sp", ".cir", ".net", ".ckt", ".spi")


def is_netlist(path: Path) -> bool:
    return path.suffix.lower() in NETLIST_SUFFIXES


def extract_text(netlist: Path, annotate: Optional[Path] = None, top: Optional[str] = None) -> tuple[str, list[str]]:
    """(plan YAML, notes) of a netlist (``analysis.extraction.extract_plan``); when no tree is
    found at all, what was found and not classified is listed on stderr before the error."""
    from biastree.analysis.extraction import extract_plan

    try:
        return extract_plan(netlist, annotate, top)
    except BiasTreeError as exc:
        for finding in getattr(exc, "findings", []):
            typer.echo(f"note: {finding.format()}", err=True)
        raise


def netlist_tree(netlist: Path, annotate: Optional[Path], top: Optional[str],
                 forward_bias: Optional[str] = None) -> biastree.Tree:
    """The tree of a netlist's extracted plan; notes (unclassified devices) go to stderr."""
    if netlist.suffix.lower() in (".yaml", ".yml", ".json"):
        raise BiasTreeError(f"{netlist}: --annotate and --top are for a SPICE netlist, not a plan file")
    text, notes = extract_text(netlist, annotate, top)
    for line in notes:
        typer.echo(f"note: {line}", err=True)
    tree = biastree.loads(text, f"{netlist} (extracted plan)")
    return with_forward_bias(tree, forward_bias, str(netlist))


@app.command()
@guarded
def extract(
    netlist: Annotated[Path, typer.Argument(help="SPICE netlist (ngspice dialect)", show_default=False)],
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="plan file to write (stdout if omitted)")] = None,
    annotate: Annotated[
        Optional[Path], typer.Option("--annotate", help="YAML file with load budgets, voltages and device parameters")
    ] = None,
    top: Annotated[Optional[str], typer.Option("--top", help="subcircuit to extract instead of the top level")] = None,
) -> None:
    """Recognise the current mirrors of a netlist and write them as a plan (notes on stderr)."""
    text, notes = extract_text(netlist, annotate, top)
    for line in notes:
        typer.echo(f"note: {line}", err=True)
    emit(text, output)
