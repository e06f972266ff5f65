"""Commands that audit a plan and describe the formats: check, schema, generate, topologies."""

from __future__ import annotations

import sys
from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer

import biastree
from biastree.cli.app import PlanArg, app, emit, guarded, load_tree
from biastree.output.columns import COLUMNS
from biastree.errors import BiasTreeError


class JsonDetail(str, Enum):
    stages = "stages"
    loads = "loads"
    summary = "summary"


@app.command()
@guarded
def check(
    plan: PlanArg,
    json: Annotated[bool, typer.Option("--json", help="print the results as JSON (schemas/results.schema.json)")] = False,
    failing: Annotated[bool, typer.Option("--failing", help="list only the loads that fail")] = False,
    sort: Annotated[Optional[str], typer.Option(
        "--sort", help="sort the table by a column: " + ", ".join(c.key for c in COLUMNS))] = None,
    descending: Annotated[bool, typer.Option("--descending", help="with --sort: largest first")] = False,
    forward_bias: Annotated[
        Optional[str], typer.Option(help="allow this much BJT base-collector forward bias, e.g. 0.3V")
    ] = None,
    output: Annotated[Optional[Path], typer.Option("-o", "--output", help="write to this file instead of stdout")] = None,
    k_sigma: Annotated[Optional[float], typer.Option(help="budgets must hold with this many σ of mismatch (plan default 3)")] = None,
    conditions: Annotated[bool, typer.Option(help="also solve the plan's temperatures, supplies and corners")] = True,
    mismatch: Annotated[bool, typer.Option(help="add k·σ of mismatch when devices carry matching coefficients")] = True,
    annotate: Annotated[
        Optional[Path], typer.Option("--annotate", help="a SPICE netlist given: its load budgets (see `extract`)")
    ] = None,
    top: Annotated[Optional[str], typer.Option("--top", help="a SPICE netlist given: the subcircuit to audit")] = None,
    json_detail: Annotated[Optional[JsonDetail], typer.Option(
        help="with --json: stages (every stage's terms), loads (no stage terms) or summary (no loads); "
             "default stages, or loads when the stages would exceed a million rows")] = None,
) -> None:
    """Solve the plan and audit every load against its budget (exit 1 if any fails)."""
    if k_sigma is not None and k_sigma <= 0:
        raise BiasTreeError("--k-sigma: must be > 0")
    if sort is not None:
        from biastree.output.columns import column

        try:
            column(sort)
        except ValueError as exc:
            raise BiasTreeError(f"--sort: {exc}") from None
    from biastree.cli.extract import is_netlist, netlist_tree

    with biastree._gc_paused():  # millions of small acyclic objects: nothing for the collector to find
        netlist = is_netlist(plan) or annotate is not None or top is not None
        tree = netlist_tree(plan, annotate, top, forward_bias) if netlist else load_tree(plan, forward_bias)
        from biastree.analysis.cards import notes

        for note in notes(tree.plan):  # card parameters the model does not know: said, never silently dropped
            typer.echo(f"note: {note}", err=True)
        result = biastree.check(tree, conditions=conditions, mismatch=mismatch, k_sigma=k_sigma)
        if json:
            from biastree.output.json import default_detail, iter_json

            detail = json_detail.value if json_detail is not None else default_detail(result)
            if json_detail is None and detail != "stages":
                typer.echo(f"note: {detail} detail (the stage terms would be too many rows); "
                           "--json-detail stages includes them", err=True)
            pieces = iter_json(result, detail)
            if output is None or str(output) == "-":
                for piece in pieces:  # streamed: the whole text never sits in memory
                    sys.stdout.buffer.write(piece)
                sys.stdout.flush()
            else:
                emit(b"".join(pieces), output)  # type: ignore[arg-type]  (written whole or not at all)
        else:
            from biastree.output.table import to_table

            emit(to_table(result, failing_only=failing, sort=sort, descending=descending), output)
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
    from biastree.output.results import schema_text

    emit(schema_text(which.value), output)


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
    from biastree.input.generate import random_plan, to_text

    emit(to_text(random_plan(loads, seed=seed), fmt.value), output)



@app.command()
def topologies() -> None:
    """List the mirror topologies and the devices they work with."""
    from biastree.physics.topologies import TOPOLOGIES

    for topo in TOPOLOGIES.values():
        typer.echo(f"{topo.name:12s} {'/'.join(sorted(topo.kinds)):8s} {topo.summary}")
