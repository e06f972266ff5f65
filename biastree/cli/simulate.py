"""Commands that hand the tree to the circuit simulator: netlist, verify."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer

from biastree.cli.app import PlanArg, app, emit, guarded, load_tree
from biastree.errors import BiasTreeError


class Case(str, Enum):
    min = "min"
    nominal = "nominal"
    max = "max"
    all = "all"


@app.command()
@guarded
def netlist(
    plan: PlanArg,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="netlist file (stdout if omitted)")] = None,
    case: Annotated[
        Case, typer.Option(help="which end of each load's voltage range: min, nominal, max, or all (one file per end)")
    ] = Case.nominal,
) -> None:
    """Write an ngspice netlist of the whole tree, each load through a named ammeter."""
    from biastree.output.spice import to_spice

    tree = load_tree(plan)
    if case is Case.all:
        if output is None:
            raise BiasTreeError("--case all writes one file per end: give -o NAME.cir (writes NAME.min.cir, …)")
        for end in ("min", "nominal", "max"):
            emit(to_spice(tree, end, str(plan)).text, output.with_suffix(f".{end}{output.suffix or '.cir'}"))
        return
    emit(to_spice(tree, case.value, str(plan)).text, output)


@app.command()
@guarded
def verify(
    plan: PlanArg,
    tolerance: Annotated[str, typer.Option(help="largest relative difference accepted, e.g. 1e-5 or 0.01%")] = "1e-5",
    timeout: Annotated[float, typer.Option(help="seconds allowed for each simulator run")] = 120.0,
) -> None:
    """Simulate the netlist with ngspice and compare every load current (exit 1 on disagreement)."""
    from biastree.sim.verify import verify as run_verify
    from biastree.units import UnitError, parse_quantity

    try:
        tol = parse_quantity(tolerance, "%")
    except UnitError as exc:
        raise BiasTreeError(f"--tolerance: {exc}") from None
    tree = load_tree(plan)
    comparison = run_verify(tree, tolerance=tol, timeout=timeout)
    from biastree.output.table import to_comparison

    typer.echo(to_comparison(comparison), nl=False)
    raise typer.Exit(0 if comparison.agrees else 1)

