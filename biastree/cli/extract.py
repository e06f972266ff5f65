"""Command that reads an existing design: extract (and the netlist path of check)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

import biastree
from biastree.cli.app import app, emit, guarded, with_forward_bias
from biastree.errors import BiasTreeError

NETLIST_SUFFIXES = (".spice", ".sp", ".cir", ".net", ".ckt", ".spi")
_RESISTOR_ITER = 60


def is_netlist(path: Path) -> bool:
    return path.suffix.lower() in NETLIST_SUFFIXES


def extract_text(netlist: Path, annotate: Optional[Path] = None, top: Optional[str] = None) -> tuple[str, list[str]]:
    """(plan YAML, notes) of a netlist; raises ``BiasTreeError`` listing every missing value."""
    from biastree.input.netlist.annotate import read_annotations
    from biastree.input.netlist.extract import extract
    from biastree.input.netlist.flatten import read_netlist
    from biastree.input.netlist.to_plan import to_plan_yaml

    notes = read_annotations(annotate)
    try:
        ext = extract(read_netlist(netlist, top), notes)
    except BiasTreeError as exc:  # no tree at all: still list what was found and not classified
        for finding in getattr(exc, "findings", []):
            typer.echo(f"note: {finding.format()}", err=True)
        raise
    if ext.missing:
        raise BiasTreeError("\n".join(_placed(m, annotate) for m in ext.missing))
    header = [f"Plan extracted by biastree {biastree.__version__} from {netlist}"
              + (f" (top cell {top})" if top else "") + (f", budgets from {annotate}" if annotate else ""),
              "Names are the netlist's nodes; each comment lists the instances (file:line) behind an entry."]
    text = to_plan_yaml(ext, header)
    if ext.resistor_reference is not None and notes.reference.current is None:
        text = _resistor_reference(ext, header)
    biastree.loads(text, f"{netlist} (extracted plan)")  # the plan written is always valid
    return text, [f.format() for f in ext.findings]


def _placed(finding: "object", annotate: Optional[Path]) -> str:
    """A finding about the annotation file itself, placed at its line there."""
    if finding.where != "annotation" or annotate is None:  # type: ignore[attr-defined]
        return finding.format()  # type: ignore[attr-defined]
    from biastree.input.loader import parse_text, read_text

    doc = parse_text(read_text(annotate), str(annotate))
    path = tuple(finding.subject.split(".", 1))  # type: ignore[attr-defined]
    return f"{annotate}:{doc.line_of(path)}: {finding.subject}: {finding.message}"  # type: ignore[attr-defined]


def _resistor_reference(ext: "object", header: list[str]) -> str:
    """Solve a resistor-defined reference: I = (V_R − V_in(I))/R with V_in the root mirror's solved input voltage."""
    from biastree.analysis.solve import solve
    from biastree.input.netlist.to_plan import to_plan_yaml

    resistance, drop = ext.resistor_reference  # type: ignore[attr-defined]
    plan = ext.plan  # type: ignore[attr-defined]
    current = first = plan["reference"]["current"]
    for _ in range(_RESISTOR_ITER):
        plan["reference"]["current"] = current
        tree = biastree.loads(to_plan_yaml(ext, header), "extracted plan")  # type: ignore[arg-type]
        v_in = float(solve(tree, None, output_resistance=False).m_v_in[0, 1])
        new = (drop - v_in) / resistance
        if new <= 0:
            raise BiasTreeError(f"reference resistor: {drop:g} V across it and the input leaves no current")
        if abs(new - current) <= 1e-14 * abs(new):
            break
        current = new
    else:
        raise BiasTreeError(f"reference resistor: the current did not settle in {_RESISTOR_ITER} steps")
    plan["reference"]["current"] = new
    for name in ext.ideal_loads:  # type: ignore[attr-defined]
        plan["loads"][name]["current"] *= new / first  # ideal targets follow the solved reference
    header.append(f"Reference current solved from the resistor: ({drop:.6g} V - V_in) / {resistance:.6g} ohm, "
                  "at the netlist's supply and temperature; conditions hold it fixed.")
    return to_plan_yaml(ext, header)  # type: ignore[arg-type]


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
