"""Commands over spread and operating conditions: spread, sweep, corners."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from biastree.cli.app import PlanArg, app, emit, guarded, load_tree
from biastree.errors import BiasTreeError


@app.command()
@guarded
def spread(
    plan: PlanArg,
    samples: Annotated[int, typer.Option(help="Monte Carlo samples", min=2)] = 1000,
    seed: Annotated[int, typer.Option(help="random seed (same seed, same numbers)")] = 1,
    json: Annotated[bool, typer.Option("--json", help="print JSON")] = False,
    reference: Annotated[bool, typer.Option(help="sample the reference tolerance (as 3σ)")] = True,
    process: Annotated[bool, typer.Option(help="sample the plan's global process spread")] = True,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
    plot: Annotated[Optional[Path], typer.Option("--plot", help="also write histograms of the worst loads (SVG)")] = None,
) -> None:
    """Monte Carlo of device mismatch (and reference and process spread), against first-order σ."""
    from biastree.analysis.spread import analytic, monte_carlo
    from biastree.output.spread_table import to_spread_json, to_spread_table

    tree = load_tree(plan)
    an = analytic(tree)
    if not an.sigmas.any:
        raise BiasTreeError(f"{plan}: no device has matching coefficients (a_is_pair/a_vt_pair/…); nothing to spread")
    work = samples * len(tree.b_parent)
    show = work > 2_000_000 and not json and sys.stderr.isatty()

    def progress(done: int, total: int) -> None:
        if show:
            bar = "#" * int(30 * done / total)
            typer.echo(f"\r[{bar:<30}] {done}/{total} samples", err=True, nl=done == total)

    mc = monte_carlo(tree, samples, seed, include_reference=reference, include_process=process, progress=progress)
    if plot is not None:
        from biastree.files import write_atomic
        from biastree.output.plots import spread_histogram

        write_atomic(plot, spread_histogram(mc))
    emit(to_spread_json(mc, an) if json else to_spread_table(mc, an), output)


@app.command()
@guarded
def sweep(
    plan: PlanArg,
    temperature: Annotated[Optional[str], typer.Option(help="START:STOP:STEP, e.g. -40C:125C:5C")] = None,
    supply: Annotated[Optional[str], typer.Option(help="START:STOP:STEP, e.g. 3.0V:3.6V:0.1V")] = None,
    corner: Annotated[Optional[list[str]], typer.Option(help="process corner(s) from the plan")] = None,
    all_ends: Annotated[bool, typer.Option("--all-ends", help="each load at min, nominal and max voltage")] = False,
    json: Annotated[bool, typer.Option("--json", help="print JSON")] = False,
    csv: Annotated[Optional[Path], typer.Option("--csv", help="also write every load × condition as CSV")] = None,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
    plot: Annotated[Optional[Path], typer.Option("--plot", help="also plot the loads against the swept axis (SVG)")] = None,
    load: Annotated[Optional[list[str]], typer.Option("--load", help="load(s) to plot (default: the worst 8)")] = None,
    plot_current: Annotated[bool, typer.Option("--plot-current", help="plot the current instead of the error")] = False,
) -> None:
    """Solve the plan over temperature, supply and corners; each load's worst case and where."""
    from biastree.analysis.corners import evaluate, parse_range, sweep_columns
    from biastree.output.spread_table import sweep_data, to_sweep_csv, to_sweep_table

    tree = load_tree(plan)
    try:
        temps = parse_range(temperature, "C") if temperature else None
        sups = parse_range(supply, "V") if supply else None
    except ValueError as exc:
        raise BiasTreeError(f"sweep: {exc}") from None
    for name in corner or []:
        if name not in tree.plan.conditions.corners:
            known = ", ".join(tree.plan.conditions.corners) or "none in the plan"
            raise BiasTreeError(f"--corner: no corner named '{name}' (known: {known})")
    ends = ("min", "nominal", "max") if all_ends else ("nominal",)
    result = evaluate(tree, sweep_columns(tree, temps, sups, corner, ends))
    if csv is not None:
        from biastree.files import write_atomic

        write_atomic(csv, to_sweep_csv(result))
    if plot is not None:
        _plot_sweep(result, plot, load, plot_current, "supply" if supply and not temperature else "temperature")
    if json:
        import json as _json

        emit(_json.dumps(sweep_data(result), indent=1) + "\n", output)
    else:
        emit(to_sweep_table(result), output)


def _plot_sweep(result: object, path: Path, names: Optional[list[str]], current: bool, axis: str) -> None:
    from biastree.files import write_atomic
    from biastree.output.plots import sweep_plot

    tree = result.tree  # type: ignore[attr-defined]
    unknown = [n for n in names or [] if n not in tree.loads]
    if unknown:
        raise BiasTreeError(f"--load: no load named '{unknown[0]}'")
    picked = [tree.loads.index(n) for n in names] if names else None
    write_atomic(path, sweep_plot(result, picked, "current" if current else "error", axis))


@app.command()
@guarded
def corners(
    plan: PlanArg,
    json: Annotated[bool, typer.Option("--json", help="print JSON")] = False,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
) -> None:
    """The plan's corner matrix (temperatures × supplies × corners × voltage ends): worst case per load."""
    from biastree.analysis.corners import evaluate, has_conditions
    from biastree.output.spread_table import sweep_data, to_sweep_table

    tree = load_tree(plan)
    if not has_conditions(tree):
        raise BiasTreeError(f"{plan}: the plan lists no conditions (conditions: temperatures/supplies/corners)")
    result = evaluate(tree)
    if json:
        import json as _json

        emit(_json.dumps(sweep_data(result), indent=1) + "\n", output)
    else:
        emit(to_sweep_table(result), output)
