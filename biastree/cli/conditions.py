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
    k_sigma: Annotated[Optional[float], typer.Option(help="budgets must hold with this many σ of mismatch (plan default 3)")] = None,
    mismatch: Annotated[bool, typer.Option(help="add k·σ of mismatch when devices carry matching coefficients")] = True,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
) -> None:
    """Solve the plan over temperature, supply and corners; each load's worst case, where, and its
    verdict (exit 1 if any load fails in some condition)."""
    from biastree.analysis.corners import evaluate, parse_range, sweep_columns
    from biastree.output.spread_table import to_sweep_csv

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
    _emit_verdicts(result, json, output, k_sigma, mismatch)


@app.command()
@guarded
def corners(
    plan: PlanArg,
    json: Annotated[bool, typer.Option("--json", help="print JSON")] = False,
    k_sigma: Annotated[Optional[float], typer.Option(help="budgets must hold with this many σ of mismatch (plan default 3)")] = None,
    mismatch: Annotated[bool, typer.Option(help="add k·σ of mismatch when devices carry matching coefficients")] = True,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
) -> None:
    """The plan's corner matrix (temperatures × supplies × corners × voltage ends): worst case and
    verdict per load (exit 1 if any load fails in some corner)."""
    from biastree.analysis.corners import evaluate, has_conditions

    tree = load_tree(plan)
    if not has_conditions(tree):
        raise BiasTreeError(f"{plan}: the plan lists no conditions (conditions: temperatures/supplies/corners)")
    _emit_verdicts(evaluate(tree), json, output, k_sigma, mismatch)


def _emit_verdicts(result, json: bool, output: Optional[Path], k_sigma: Optional[float],  # type: ignore[no-untyped-def]
                   mismatch: bool) -> None:
    """Judge every load over the solved conditions, print, and exit 1 when one fails."""
    from biastree.analysis.spread import analytic, has_coefficients
    from biastree.output.spread_table import sweep_data, to_sweep_table

    if k_sigma is not None and k_sigma <= 0:
        raise BiasTreeError("--k-sigma: must be > 0")
    plan = result.tree.plan
    k = plan.spread.k_sigma if k_sigma is None else k_sigma
    sigma = analytic(result.tree).mismatch if mismatch and has_coefficients(plan) else None
    verdicts = result.judge(sigma, k)
    if json:
        import json as _json

        emit(_json.dumps(sweep_data(result, verdicts), indent=1, allow_nan=False) + "\n", output)
    else:
        emit(to_sweep_table(result, verdicts), output)
    raise typer.Exit(0 if bool(verdicts.passed.all()) else 1)
