"""Commands that draw the tree and write review reports: draw, report."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer

import biastree
from biastree.cli.app import PlanArg, app, guarded, load_tree


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
    subtree: Annotated[Optional[str], typer.Option("--subtree", help="draw only this mirror and what it feeds")] = None,
    full: Annotated[bool, typer.Option("--full", help="do not fit a large tree to a readable height "
                                       "(still at most a few thousand nodes)")] = False,
) -> None:
    """Draw the audited tree (Graphviz; status shown by colour and by mark)."""
    from biastree.files import write_atomic
    from biastree.output.dot import to_dot

    result = biastree.check(load_tree(plan))
    diagram = to_dot(result, only_failing=only_failing, depth=depth, annotate=annotate.value, expand=expand,
                     subtree=subtree, fit=not full)
    for note in diagram.notes:
        typer.echo(f"note: {note}", err=True)
    fmt = output.suffix.lower().lstrip(".")
    if fmt in ("dot", "gv"):
        write_atomic(output, diagram.text)
        return
    from biastree.output.render import height_note, render

    picture = render(diagram.text, fmt, diagram.nodes)
    note = height_note(picture) if fmt == "svg" else None
    if note:
        typer.echo(f"note: {note}", err=True)
    write_atomic(output, picture)


def report_plots(result: biastree.Audit) -> list[tuple[str, str]]:
    """The report's plots (matplotlib, SVG): the worst loads' error over the plan's temperatures."""
    from biastree.output.plots import report_plots as plots

    return plots(result)


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
    against: Annotated[Optional[Path], typer.Option("--against", help="an older plan: add what changed and what it "
                                                    "did to every load")] = None,
) -> None:
    """Write a review report: inputs, verdicts, tree diagram, load table, why loads fail."""
    from biastree.files import write_atomic

    result = biastree.check(load_tree(plan))
    kind = fmt.value if fmt else ("md" if output.suffix.lower() in (".md", ".markdown") else "html")
    if kind == "md":
        from biastree.output.markdown import to_markdown

        figures = []
        folder = output.with_name(output.stem + "_figures")  # the SVGs a Markdown viewer shows beside the text
        pictures = list(report_plots(result))
        if diagram:
            from biastree.output.dot import to_dot
            from biastree.output.render import render

            picture = to_dot(result)
            for note in picture.notes:
                typer.echo(f"note: diagram: {note}", err=True)
            pictures.insert(0, ("The audited tree (colour: verdict; the node shows the deciding case).",
                                render(picture.text, "svg", picture.nodes).decode("utf-8")))
        for k, (caption, svg_text) in enumerate(pictures):
            folder.mkdir(parents=True, exist_ok=True)
            name = "tree.svg" if diagram and k == 0 else f"plot{k}.svg"
            write_atomic(folder / name, svg_text)
            figures.append((caption, f"{folder.name}/{name}"))
        changes = None
        if against is not None:
            from biastree.analysis.diff import compare
            from biastree.output.diff_table import to_diff_markdown

            changes = to_diff_markdown(compare(biastree.check(load_tree(against)), result), str(against))
        text = to_markdown(result, str(plan), figures, changes)
    else:
        from biastree.output.dot import to_dot
        from biastree.output.html import to_html
        from biastree.output.render import render, svg_body

        svg = None
        if diagram:
            picture = to_dot(result)  # fitted to a readable size; the page's outline and tables hold the rest
            for note in picture.notes:
                typer.echo(f"note: diagram: {note}", err=True)
            svg = svg_body(render(picture.text, "svg", picture.nodes))
        changes = None
        if against is not None:
            from biastree.analysis.diff import compare
            from biastree.output.diff_table import to_diff_html

            changes = to_diff_html(compare(biastree.check(load_tree(against)), result), str(against))
        text = to_html(result, svg, str(plan), plots=report_plots(result), diff=changes)
    if csv is not None:
        from biastree.output.csv import to_csv

        write_atomic(csv, to_csv(result))
    write_atomic(output, text)
