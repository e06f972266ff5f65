"""Commands over spread and operating conditions: spread, sweep, corners."""

from __future__ import annotations

import os
import sys
import time
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
    required_yield: Annotated[Optional[str], typer.Option(
        "--required-yield", help="yield each load must reach, e.g. 99% (default: erf(k/√2) for the plan's "
                                 "spread.k_sigma, 99.73% for k = 3)")] = None,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
    plot: Annotated[Optional[Path], typer.Option("--plot", help="also write histograms of the worst loads (SVG)")] = None,
) -> None:
    """Monte Carlo of device mismatch (and reference and process spread), against first-order σ;
    per-die yield of every load over all its copies (exit 1 if a load's yield is below the required yield)."""
    from biastree.analysis.spread import analytic
    from biastree.analysis.yields import die_yield, instance_count, result_bytes
    from biastree.analysis.yields import required_yield as default_yield
    from biastree.output.spread_table import spread_data, to_spread_json, to_spread_table
    from biastree.units import UnitError, parse_quantity

    tree = load_tree(plan)
    if required_yield is None:
        need = default_yield(tree.plan.spread.k_sigma)
    else:
        try:
            need = parse_quantity(required_yield, "%")
        except UnitError as exc:
            raise BiasTreeError(f"--required-yield: {exc}") from None
        if not 0.0 < need <= 1.0:
            raise BiasTreeError(f"--required-yield: {required_yield} is not a yield in (0, 100 %]")
    an = analytic(tree)
    if not an.sigmas.any:
        raise BiasTreeError(f"{plan}: no device has matching coefficients (a_is_pair/a_vt_pair/…); nothing to spread")
    size = result_bytes(tree, samples)
    free = _free_memory()
    if free is not None and size > 0.8 * free:
        most = int(0.8 * free / max(size / samples, 1))
        raise BiasTreeError(f"--samples: {samples} samples need {size / 1e9:.3g} GB for the results and "
                            f"{free / 1e9:.3g} GB are free; at most about {most} samples fit")
    show = samples * instance_count(tree) > 2_000_000 and not json and sys.stderr.isatty()
    clock = {"start": time.monotonic(), "done": 0}

    def progress(done: int, total: int) -> None:
        clock["done"] = done
        if show:
            elapsed = time.monotonic() - clock["start"]
            left = elapsed / done * (total - done) if done else 0.0
            bar = "#" * int(30 * done / total)
            typer.echo(f"\r[{bar:<30}] {done}/{total} samples, {elapsed:.0f} s, about {left:.0f} s left ",
                       err=True, nl=done == total)

    try:
        dy = die_yield(tree, samples, seed, include_reference=reference, include_process=process, progress=progress)
    except KeyboardInterrupt:
        typer.echo(("\n" if show else "") + f"interrupted after {clock['done']} of {samples} samples: nothing written",
                   err=True)
        raise typer.Exit(130) from None
    if plot is not None:
        from biastree.files import write_atomic
        from biastree.output.plots import spread_histogram

        write_atomic(plot, spread_histogram(dy.mc))
    data = spread_data(dy, an, need)
    emit(to_spread_json(data) if json else to_spread_table(data), output)
    raise typer.Exit(0 if data["verdict"] == "pass" else 1)


def _free_memory() -> Optional[int]:
    """Bytes of memory available now (None where the system does not say)."""
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


@app.command()
@guarded
def sweep(
    plan: PlanArg,
    temperature: Annotated[Optional[str], typer.Option(help="START:STOP:STEP, e.g. -40C:125C:5C")] = None,
    supply: Annotated[Optional[str], typer.Option(help="START:STOP:STEP, e.g. 3.0V:3.6V:0.1V")] = None,
    corner: Annotated[Optional[list[str]], typer.Option(help="process corner(s) from the plan")] = None,
    all_ends: Annotated[bool, typer.Option(
        "--all-ends/--nominal-only",
        help="judge each load at the min, nominal and max of its voltage range, as check does "
             "(--nominal-only: the nominal voltage alone; its verdict can then miss a failure check finds)")] = True,
    json: Annotated[bool, typer.Option("--json", help="print JSON")] = False,
    csv: Annotated[Optional[Path], typer.Option("--csv", help="also write every load × condition as CSV")] = None,
    k_sigma: Annotated[Optional[float], typer.Option(help="budgets must hold with this many σ of mismatch (plan default 3)")] = None,
    mismatch: Annotated[bool, typer.Option(help="add k·σ of mismatch when devices carry matching coefficients")] = True,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
    plot: Annotated[Optional[Path], typer.Option("--plot", help="also plot the loads against the swept axis (SVG)")] = None,
    load: Annotated[Optional[list[str]], typer.Option("--load", help="load(s) to plot (default: the worst 8)")] = None,
    plot_current: Annotated[bool, typer.Option("--plot-current", help="plot the current instead of the error")] = False,
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
    if plot is not None:
        _plot_sweep(result, plot, load, plot_current, "supply" if supply and not temperature else "temperature")
    _emit_verdicts(result, json, output, k_sigma, mismatch)


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
