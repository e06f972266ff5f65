"""The planner's command: plan a tree from a block list, or repair a failing plan."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer

from biastree.cli.app import app, emit, guarded, load_tree
from biastree.errors import BiasTreeError


class Objective(str, Enum):
    power = "power"
    area = "area"
    margin = "margin"


@app.command()
@guarded
def plan(
    file: Annotated[Path, typer.Argument(help="block list (.yaml or .json); with --repair, a plan", show_default=False)],
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write the planned (or repaired) plan here")] = None,
    repair: Annotated[bool, typer.Option("--repair", help="FILE is a plan: find a small set of changes that makes it pass")] = False,
    objective: Annotated[Objective, typer.Option(help="what to spend least: power (overhead current × supply), area, or most margin")] = Objective.power,
    pareto: Annotated[bool, typer.Option("--pareto", help="also show the passing alternatives no other beats on power, area and margin")] = False,
    forward_bias: Annotated[Optional[str], typer.Option(help="repair: allow this much BJT base-collector forward bias, e.g. 0.3V")] = None,
) -> None:
    """Plan a bias tree from a block list (exit 1 with the reasons when a block cannot be served)."""
    from biastree.planner.report import repair_text, summary_text

    if repair:
        from biastree.planner.repair import repair as do_repair
        from biastree.units import UnitError, parse_quantity

        fb = None
        if forward_bias is not None:
            try:
                fb = parse_quantity(forward_bias, "V")
            except UnitError as exc:
                raise BiasTreeError(f"--forward-bias: {exc}") from None
        tree = load_tree(file)
        from biastree.analysis.pipeline import check_tree

        fixed = do_repair(tree, check_tree(tree, detail=False), fb, objective=objective.value)
        typer.echo(repair_text(fixed), nl=False, err=output is None)
        if fixed.ok:
            emit(fixed.text, output)
        raise typer.Exit(0 if fixed.ok else 1)
    from biastree.input.blocks import load_blocks
    from biastree.planner.synthesis import plan_blocks

    blocks = load_blocks(file)
    out = plan_blocks(blocks, "power")  # the power-lean plan; the other objectives start from it
    if out.ok and (pareto or objective != Objective.power):
        from biastree.planner.alternatives import alternatives

        alts = alternatives(out, blocks)
        pick = {Objective.power: lambda f: (f.overhead_power, f.device_units),
                Objective.area: lambda f: (f.device_units, f.overhead_power),
                Objective.margin: lambda f: (-f.worst_margin, f.overhead_power)}[objective]
        best = min(alts, key=lambda a: pick(a[0]))[1] if alts else out
        best.alternatives = alts if pareto else []
        out = best
    # with -o the summary goes to stdout; without, the plan does and the summary goes to stderr
    typer.echo(summary_text(out), nl=False, err=output is None)
    if out.ok:
        emit(out.text or "", output)
    raise typer.Exit(0 if out.ok else 1)
