"""Command line: a thin layer over the library.

Exit status: 0 every load passes (or the command succeeded), 1 some load
fails its budget (or the simulator disagrees), 2 invalid input or usage,
3 an internal error (a bug in biastree; please report it).
"""

from __future__ import annotations

import functools
import os
import sys
from enum import Enum
from pathlib import Path
from typing import Annotated, Callable, Optional, TypeVar

import typer

import biastree

from .errors import BiasTreeError, PlanError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
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
        except Exception as exc:  # a bug: say so in one line unless debugging
            if os.environ.get("BIASTREE_DEBUG"):
                raise
            typer.echo(f"internal error (a bug in biastree, please report): {type(exc).__name__}: {exc}", err=True)
            raise typer.Exit(3) from None
        return None

    return wrapper  # type: ignore[return-value]


def _emit(text: str, output: Optional[Path]) -> None:
    if output is None or str(output) == "-":
        sys.stdout.write(text)
    else:
        from .files import write_atomic

        write_atomic(output, text)


def _load(plan: Path, forward_bias: Optional[str] = None) -> biastree.Tree:
    tree = biastree.load(plan)
    if forward_bias is not None:
        from .plan import Compliance
        from .units import UnitError, parse_quantity

        try:
            value = parse_quantity(forward_bias, "V")
        except UnitError as exc:
            raise BiasTreeError(f"--forward-bias: {exc}") from None
        if value < 0:
            raise BiasTreeError("--forward-bias: must be ≥ 0 V")
        new = tree.plan.model_copy(update={"compliance": Compliance(bjt_forward_bias=value)})
        tree = biastree.build(new, source=str(plan))
    return tree


@app.command()
@guarded
def check(
    plan: PlanArg,
    json: Annotated[bool, typer.Option("--json", help="print the results as JSON (schemas/results.schema.json)")] = False,
    failing: Annotated[bool, typer.Option("--failing", help="list only the loads that fail")] = False,
    forward_bias: Annotated[
        Optional[str], typer.Option(help="allow this much BJT base-collector forward bias, e.g. 0.3V")
    ] = None,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file instead of stdout")] = None,
    k_sigma: Annotated[Optional[float], typer.Option(help="budgets must hold with this many σ of mismatch (plan default 3)")] = None,
    conditions: Annotated[bool, typer.Option(help="also solve the plan's temperatures, supplies and corners")] = True,
    mismatch: Annotated[bool, typer.Option(help="add k·σ of mismatch when devices carry matching coefficients")] = True,
) -> None:
    """Solve the plan and audit every load against its budget (exit 1 if any fails)."""
    if k_sigma is not None and k_sigma <= 0:
        raise BiasTreeError("--k-sigma: must be > 0")
    result = biastree.check(_load(plan, forward_bias), conditions=conditions, mismatch=mismatch, k_sigma=k_sigma)
    if json:
        from .export.json import to_json

        _emit(to_json(result), output)
    else:
        from .export.table import to_table

        _emit(to_table(result, failing_only=failing), output)
    matched_ok = all(m["verdict"] == "pass" for m in result.matched())
    raise typer.Exit(0 if bool(result.passed.all()) and matched_ok else 1)


class SchemaKind(str, Enum):
    plan = "plan"
    results = "results"


@app.command()
@guarded
def schema(
    which: Annotated[SchemaKind, typer.Argument(help="plan or results")] = SchemaKind.plan,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
) -> None:
    """Print the JSON Schema of the plan file (or of the JSON results)."""
    from .results import schema_text

    _emit(schema_text(which.value), output)


class PlanFormat(str, Enum):
    yaml = "yaml"
    json = "json"


@app.command()
@guarded
def generate(
    loads: Annotated[int, typer.Argument(help="number of loads", min=1)],
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
    seed: Annotated[int, typer.Option(help="random seed (same seed, same plan)")] = 1,
    fmt: Annotated[PlanFormat, typer.Option("--format", help="yaml or json")] = PlanFormat.yaml,
) -> None:
    """Write a random valid plan of N loads (invented data, for scale tests)."""
    from .generate import random_plan, to_text

    _emit(to_text(random_plan(loads, seed=seed), fmt.value), output)


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
    from .export.spice import to_spice

    tree = _load(plan)
    if case is Case.all:
        if output is None:
            raise BiasTreeError("--case all writes one file per end: give -o NAME.cir (writes NAME.min.cir, …)")
        for end in ("min", "nominal", "max"):
            _emit(to_spice(tree, end, str(plan)).text, output.with_suffix(f".{end}{output.suffix or '.cir'}"))
        return
    _emit(to_spice(tree, case.value, str(plan)).text, output)


@app.command()
@guarded
def verify(
    plan: PlanArg,
    tolerance: Annotated[str, typer.Option(help="largest relative difference accepted, e.g. 1e-5 or 0.01%")] = "1e-5",
    timeout: Annotated[float, typer.Option(help="seconds allowed for each simulator run")] = 120.0,
) -> None:
    """Simulate the netlist with ngspice and compare every load current (exit 1 on disagreement)."""
    from .units import UnitError, parse_quantity
    from .verify import verify as run_verify

    try:
        tol = parse_quantity(tolerance, "%")
    except UnitError as exc:
        raise BiasTreeError(f"--tolerance: {exc}") from None
    tree = _load(plan)
    comparison = run_verify(tree, tolerance=tol, timeout=timeout)
    from .export.table import to_comparison

    typer.echo(to_comparison(comparison), nl=False)
    raise typer.Exit(0 if comparison.agrees else 1)


class Annotation(str, Enum):
    current = "current"
    ratio = "ratio"
    error = "error"


@app.command()
@guarded
def draw(
    plan: PlanArg,
    output: Annotated[Path, typer.Option("-o", "--output", help="tree.svg, .png, .pdf or .dot (format by suffix)")],
    only_failing: Annotated[bool, typer.Option("--only-failing", help="keep only the paths to failing loads")] = False,
    depth: Annotated[Optional[int], typer.Option(help="mirror levels to draw; deeper parts are summed up", min=1)] = None,
    annotate: Annotated[Annotation, typer.Option(help="edge labels: current, ratio or error")] = Annotation.current,
    expand: Annotated[bool, typer.Option("--expand", help="one node per copy of a load (default: one node ×N)")] = False,
) -> None:
    """Draw the audited tree (Graphviz; status shown by colour and by mark)."""
    from .export.dot import to_dot
    from .files import write_atomic

    result = biastree.check(_load(plan))
    diagram = to_dot(result, only_failing=only_failing, depth=depth, annotate=annotate.value, expand=expand)
    for note in diagram.notes:
        typer.echo(f"note: {note}", err=True)
    fmt = output.suffix.lower().lstrip(".")
    if fmt in ("dot", "gv"):
        write_atomic(output, diagram.text)
        return
    from .export.render import render

    write_atomic(output, render(diagram.text, fmt, diagram.nodes))


class ReportFormat(str, Enum):
    html = "html"
    md = "md"


@app.command()
@guarded
def report(
    plan: PlanArg,
    output: Annotated[Path, typer.Option("-o", "--output", help="review.html or review.md")],
    fmt: Annotated[Optional[ReportFormat], typer.Option("--format", help="html or md (default: by suffix)")] = None,
    csv: Annotated[Optional[Path], typer.Option("--csv", help="also write the load table as CSV")] = None,
    diagram: Annotated[bool, typer.Option(help="embed the tree diagram (needs Graphviz)")] = True,
) -> None:
    """Write a review report: inputs, verdicts, tree diagram, load table, why loads fail."""
    from .files import write_atomic

    result = biastree.check(_load(plan))
    kind = fmt.value if fmt else ("md" if output.suffix.lower() in (".md", ".markdown") else "html")
    if kind == "md":
        from .export.markdown import to_markdown

        text = to_markdown(result, str(plan))
    else:
        from .export.dot import to_dot
        from .export.html import to_html
        from .export.render import render, svg_body

        svg = None
        if diagram:
            picture = to_dot(result)
            for note in picture.notes:
                typer.echo(f"note: {note}", err=True)
            svg = svg_body(render(picture.text, "svg"))
        text = to_html(result, svg, str(plan))
    if csv is not None:
        from .export.csv import to_csv

        write_atomic(csv, to_csv(result))
    write_atomic(output, text)


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
    from .export.spread_table import to_spread_json, to_spread_table
    from .spread import analytic, monte_carlo

    tree = _load(plan)
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
    _emit(to_spread_json(mc, an) if json else to_spread_table(mc, an), output)


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
) -> None:
    """Solve the plan over temperature, supply and corners; each load's worst case and where."""
    from .corners import evaluate, parse_range, sweep_columns
    from .export.spread_table import sweep_data, to_sweep_csv, to_sweep_table

    tree = _load(plan)
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
        from .files import write_atomic

        write_atomic(csv, to_sweep_csv(result))
    if json:
        import json as _json

        _emit(_json.dumps(sweep_data(result), indent=1) + "\n", output)
    else:
        _emit(to_sweep_table(result), output)


@app.command()
@guarded
def corners(
    plan: PlanArg,
    json: Annotated[bool, typer.Option("--json", help="print JSON")] = False,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file")] = None,
) -> None:
    """The plan's corner matrix (temperatures × supplies × corners × voltage ends): worst case per load."""
    from .corners import evaluate, has_conditions
    from .export.spread_table import sweep_data, to_sweep_table

    tree = _load(plan)
    if not has_conditions(tree):
        raise BiasTreeError(f"{plan}: the plan lists no conditions (conditions: temperatures/supplies/corners)")
    result = evaluate(tree)
    if json:
        import json as _json

        _emit(_json.dumps(sweep_data(result), indent=1) + "\n", output)
    else:
        _emit(to_sweep_table(result), output)


@app.command()
def topologies() -> None:
    """List the mirror topologies and the devices they work with."""
    from .topologies import TOPOLOGIES

    for topo in TOPOLOGIES.values():
        typer.echo(f"{topo.name:12s} {'/'.join(sorted(topo.kinds)):8s} {topo.summary}")


def main() -> None:
    app(prog_name="biastree")
