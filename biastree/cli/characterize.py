"""Command: characterize — simulate the tables of MOS devices given by model cards."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from biastree.cli.app import PlanArg, app, guarded, load_tree


@app.command()
@guarded
def characterize(
    plan: PlanArg,
    tables: Annotated[Optional[Path], typer.Option(
        "--tables", help="cache folder for the tables (default: $BIASTREE_TABLES or ~/.cache/biastree/tables)")] = None,
) -> None:
    """Build (or find) the characterisation tables of every MOS device given by a card, at every
    temperature and corner of the plan; `check` then needs no simulator."""
    from biastree.analysis.characterize import characterize_plan

    done = characterize_plan(load_tree(plan), tables)
    for info in done:
        section = f" [{info['section']}]" if info["section"] else ""
        typer.echo(f"{info['device']}: {info['model']}{section} w={float(info['w_m']) * 1e6:g}um "  # type: ignore[arg-type]
                   f"l={float(info['l_m']) * 1e6:g}um at {float(info['temperature_K']) - 273.15:g}C -> {info['file']}")  # type: ignore[arg-type]
    if not done:
        typer.echo("no MOS device of this plan is given by a card: nothing to characterise")
