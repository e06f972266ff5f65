"""Markdown review report: the same numbers as the HTML report, for flows
that keep reviews in text."""

from __future__ import annotations

from biastree.analysis.audit import Audit
from biastree.output.breakdown import breakdown, budget_use, device_parameters, nominal_breakdown, where, where_nominal
from biastree.output.columns import visible
from biastree.units import format_si, signed_percent

CAUTION = ("Design estimates: sign-off belongs to the foundry's device models and "
           "transistor-level simulation.")


def _pct(x: float) -> str:
    return signed_percent(x, 3)


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def to_markdown(result: Audit, source: str | None = None, figures: list[tuple[str, str]] | None = None,
                diff: list[str] | None = None) -> str:
    """The review as Markdown; ``figures`` are (caption, image path) pairs written beside it
    (the tree diagram and the plots, as SVG files), ``diff`` the lines of a comparison."""
    tree = result.tree
    plan = tree.plan
    s = result.summary()
    out = [f"# Bias tree review: {_cell(plan.title or 'untitled')}", ""]
    if source:
        out += [f"Plan file: `{source}`", ""]
    out += [
        f"**{s['passed']} of {s['loads']} loads pass**" + (f", **{s['failed']} fail**" if s["failed"] else "")
        + f" ({s['instances']} instances).",
        "",
        "| quantity | value |",
        "|---|---|",
        f"| supply | {format_si(plan.supply, 'V')} |",
        f"| temperature | {plan.temperature - 273.15:.4g} °C |",
        f"| reference | {format_si(plan.reference.current, 'A')} ±{plan.reference.tolerance * 100:.3g}% "
        f"(feeds {plan.reference.feeds}) |",
        f"| delivered current | {format_si(s['delivered_current'], 'A', 4)} |",
        f"| overhead current | {format_si(s['overhead_current'], 'A', 4)} ({format_si(s['overhead_power'], 'W', 4)}) |",
        f"| total supply power | {format_si(s['supply_power'], 'W', 4)} |",
        f"| device units | {s['device_units']:.6g} |",
        "",
        "## Devices",
        "",
        "| model | kind | parameters |",
        "|---|---|---|",
    ]
    for name, dev in plan.devices.items():
        params = device_parameters(dev)
        out.append(f"| {_cell(name)} | {dev.kind} | {_cell(params)} |")
    if diff:
        out += ["", "## What changed", ""] + diff
    for caption, path in figures or []:
        out += ["", f"![figure: {path.rsplit('/', 1)[-1]}]({path})", "", f"_{_cell(caption)}_"]
    cols = visible(result)
    out += ["", "## Loads", "",
            "| " + " | ".join(_cell(c.title) for c in cols) + " |",
            "|" + "|".join("--:" if c.right else "---" for c in cols) + "|"]
    for i in range(len(tree.loads)):
        cells = [_cell(c.text(result, i)) for c in cols]
        cells = [f"**{t}**" if c.key == "verdict" and t == "FAIL" else t for c, t in zip(cols, cells)]
        out.append("| " + " | ".join(cells) + " |")
    notes = [t for t in (result.floorplan_text(i) for i in range(len(tree.loads))) if t]
    notes += [f"matched pair {m['name']}: ratio error {m['ratio_error'] * 100:+.3g} %, {m['k']:g}σ = "
              f"{m['k'] * m['sigma'] * 100:.3g} %, budget ±{m['tolerance'] * 100:.3g} %: {m['verdict']}"
              for m in result.matched()]
    if notes:
        out += ["", "## Notes", ""] + [f"- {_cell(n)}" for n in notes]
    failing = [i for i in range(len(tree.loads)) if not result.passed[i]]
    if failing:
        out += ["", "## Why loads fail", ""]
        for i in failing:
            out += [f"### {tree.loads[i]}", ""]
            out += [f"- {_cell(r)}" for r in result.reasons(i)]
            out += [f"- hint: {_cell(h)}" for h in result.hints.get(i, [])]
            out += ["", _cell(f"Error terms {where(result, i)}, largest first "
                              "(they compound: Π(1 + term) − 1 = that case's error):"), "",
                    "| stage | effect | term |", "|---|---|--:|"]
            out += [f"| {_cell(st)} | {_cell(label)} | {_pct(v)} |" for st, label, v in breakdown(result, i)]
            out += ["", _cell(budget_use(result, i)), ""]
            out += [_cell(f"Error terms {where_nominal(result, i)}, stage by stage:"), "",
                    "| stage | effect | term (nominal) |", "|---|---|--:|"]
            out += [f"| {_cell(st)} | {_cell(label)} | {_pct(v)} |" for st, label, v in nominal_breakdown(result, i)]
            out += [""]
    out += ["", f"_{CAUTION}_", ""]
    return "\n".join(out)
