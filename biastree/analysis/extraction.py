"""A netlist's extracted plan, ready for every command: extraction (``input.netlist``)
plus what needs the solver — the current of a resistor-defined reference.

The CLI's ``extract`` and ``check NETLIST`` both come here, so the plan text one
writes is the plan the other audits.
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional

from biastree.analysis.solve import solve
from biastree.errors import BiasTreeError
from biastree.tree.arrays import Tree, build
from biastree.version import __version__

RESISTOR_ITERATIONS = 60


def _tree(text: str, source: str) -> Tree:
    """Validate and build plan text (the steps of ``biastree.loads``)."""
    from biastree.input.loader import parse_text, validate

    doc = parse_text(text, source, "yaml")
    return build(validate(doc), doc.line_of, doc.source)


def extract_plan(netlist: Path, annotate: Optional[Path] = None, top: Optional[str] = None) -> tuple[str, list[str]]:
    """(plan YAML, notes) of a netlist; raises ``BiasTreeError`` listing every missing value
    (with ``findings``, what was found and not classified, when no tree was found at all)."""
    from biastree.input.netlist.annotate import read_annotations
    from biastree.input.netlist.extract import extract
    from biastree.input.netlist.flatten import read_netlist
    from biastree.input.netlist.to_plan import to_plan_yaml

    notes = read_annotations(annotate)
    ext = extract(read_netlist(netlist, top), notes)
    if ext.missing:
        raise BiasTreeError("\n".join(_placed(m, annotate) for m in ext.missing))
    header = [f"Plan extracted by biastree {__version__} from {netlist}"
              + (f" (top cell {top})" if top else "") + (f", budgets from {annotate}" if annotate else ""),
              "Names are the netlist's nodes; each comment lists the instances (file:line) behind an entry."]
    text = to_plan_yaml(ext, header)
    if ext.resistor_reference is not None and notes.reference.current is None:
        text = _resistor_reference(ext, header)
    _tree(text, f"{netlist} (extracted plan)")  # the plan written is always valid
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
    from biastree.input.netlist.to_plan import to_plan_yaml

    resistance, drop = ext.resistor_reference  # type: ignore[attr-defined]
    plan = ext.plan  # type: ignore[attr-defined]
    current = first = plan["reference"]["current"]
    for _ in range(RESISTOR_ITERATIONS):
        plan["reference"]["current"] = current
        tree = _tree(to_plan_yaml(ext, header), "extracted plan")  # type: ignore[arg-type]
        v_in = float(solve(tree, None, output_resistance=False).m_v_in[0, 1])
        new = (drop - v_in) / resistance
        if new <= 0:
            raise BiasTreeError(f"reference resistor: {drop:g} V across it and the input leaves no current")
        if abs(new - current) <= 1e-14 * abs(new):
            break
        current = new
    else:
        raise BiasTreeError(f"reference resistor: the current did not settle in {RESISTOR_ITERATIONS} steps")
    plan["reference"]["current"] = new
    for name in ext.ideal_loads:  # type: ignore[attr-defined]
        plan["loads"][name]["current"] *= new / first  # ideal targets follow the solved reference
    header.append(f"Reference current solved from the resistor: ({drop:.6g} V - V_in) / {resistance:.6g} ohm, "
                  "at the netlist's supply and temperature; conditions hold it fixed.")
    return to_plan_yaml(ext, header)  # type: ignore[arg-type]
