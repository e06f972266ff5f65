"""Command that compares two plans: diff."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

import biastree
from biastree.cli.app import PlanArg, app, emit, guarded, load_tree


@app.command()
@guarded
def diff(
    old: PlanArg,
    new: PlanArg,
    json: Annotated[bool, typer.Option("--json", help="print JSON")] = False,
    all_loads: Annotated[bool, typer.Option("--all", help="list every load, also those that did not change")] = False,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
) -> None:
    """What changed from OLD to NEW (structure, parameters) and what it did to every load
    (exit 1 when a load fails in NEW that passed in OLD or is new)."""
    from biastree.analysis.diff import compare
    from biastree.output.diff_table import to_diff_json, to_diff_table

    result = compare(biastree.check(load_tree(old)), biastree.check(load_tree(new)))
    emit(to_diff_json(result) if json else to_diff_table(result, all_loads), output)
    if result.regressions:
        raise typer.Exit(1)
