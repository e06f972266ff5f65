"""Plain-text load table and summary for the terminal."""

from __future__ import annotations

from biastree.analysis.audit import Audit
from biastree.output.columns import order, texts, visible
from biastree.units import format_si, signed_percent

LEGEND = ("margin: budget left after the deciding error, kσ and the reference tolerance; compl.: volts the output "
          "device has to spare; reg./V: current change per volt of the node")
MAX_REASONS = 200  # failing loads explained in the terminal; --json has them all


def _pct(x: float) -> str:
    return signed_percent(x, 2)


def to_table(result: Audit, failing_only: bool = False, sort: str | None = None, descending: bool = False) -> str:
    """One row per load, in the columns of biastree.output.columns (the same as
    Markdown, CSV and HTML); ``sort`` names a column key, ``failing_only`` keeps
    the failing loads."""
    tree = result.tree
    cols = visible(result)
    passed = result.passed.tolist()
    loads = [i for i in range(len(tree.loads)) if not (failing_only and passed[i])]
    if sort is not None:
        loads = order(result, sort, descending, loads)
    header = tuple(c.title for c in cols)
    cells = [texts(result, c, loads) for c in cols]  # column by column, in bulk
    rows = list(zip(*cells))
    right = {k for k, c in enumerate(cols) if c.right}
    widths = [max(len(h), *map(len, column)) if column else len(h) for h, column in zip(header, cells)]

    template = "  ".join(f"{{:{'>' if k in right else '<'}{w}}}" for k, w in enumerate(widths))

    def line(cells: tuple[str, ...]) -> str:
        return template.format(*cells).rstrip()

    out = [line(header), line(tuple("-" * w for w in widths))]
    out += [line(r) for r in rows]
    out.append(LEGEND)
    failing = [i for i in range(len(tree.loads)) if not passed[i]]
    if failing:
        out.append("")
        out.append("Why loads fail:")
        hints = result.hints
        for i in failing[:MAX_REASONS]:
            for reason in result.reasons(i):
                out.append(f"  {tree.loads[i]}: {reason}")
            for hint in hints.get(i, []):
                out.append(f"  {tree.loads[i]}: hint: {hint}")
        if len(failing) > MAX_REASONS:
            out.append(f"  … and {len(failing) - MAX_REASONS} more failing loads (every reason is in --json)")
    remote = result.op.columns.remote if result.op.columns is not None else None
    notes = [] if remote is None else [t for t in (result.floorplan_text(i) for i in range(len(tree.loads))) if t]
    if notes:
        out.append("")
        out += notes
    for m in result.matched():
        out.append("")
        out.append(f"matched {m['name']} ({' / '.join(m['loads'])}): ratio error {_pct(m['ratio_error'])}, "
                   f"{m['k']:g}σ = {m['k'] * m['sigma'] * 100:.3g}%, budget ±{m['tolerance'] * 100:.3g}%: "
                   + ("pass" if m["verdict"] == "pass" else "FAIL"))
    if result.conditions is not None:
        out.append("")
        out.append(f"conditions: {len(result.conditions.columns.names)} combinations of temperature × supply × "
                   "corner × load-voltage end; 'worst cond.' is the largest error among them")
    out.append("")
    out.append(to_summary(result))
    return "\n".join(out) + "\n"


def to_summary(result: Audit) -> str:
    s = result.summary()
    plan = result.tree.plan
    lines = [
        f"{plan.title or 'plan'}: {s['passed']} of {s['loads']} loads pass"
        + (f", {s['failed']} FAIL" if s["failed"] else "")
        + f" ({s['instances']} instances)",
        f"reference {format_si(s['reference_current'], 'A')} ±{result.reference_tolerance * 100:.3g}%, "
        f"supply {format_si(plan.supply, 'V')}, {plan.temperature - 273.15:.4g} °C",
        f"delivered {format_si(s['delivered_current'], 'A')}; overhead {format_si(s['overhead_current'], 'A')} "
        f"({format_si(s['overhead_power'], 'W')}); total {format_si(s['supply_power'], 'W')}",
        f"devices: {s['device_units']:.6g} unit devices"
        + (f", MOS gate area {s['mos_gate_area'] * 1e12:.6g} µm²" if s["mos_units"] else ""),
        "Design estimates: sign-off belongs to foundry models and transistor-level simulation.",
    ]
    return "\n".join(lines)


def to_comparison(comparison) -> str:  # type: ignore[no-untyped-def]
    """Side-by-side table of biastree's and the simulator's load currents."""
    header = ("load", "end", "biastree", "ngspice", "rel. diff", "")
    rows = []
    diff = comparison.difference
    for i, name in enumerate(comparison.loads):
        for k, case in enumerate(comparison.cases):
            bad = abs(diff[i, k]) > comparison.tolerance
            rows.append((name, case, f"{comparison.ours[i, k]:.9e}", f"{comparison.simulated[i, k]:.9e}",
                         f"{diff[i, k]:+.2e}", "DISAGREES" if bad else ""))
    widths = [max(len(h), *(len(r[k]) for r in rows)) for k, h in enumerate(header)]
    out = ["  ".join(c.ljust(w) for c, w in zip(header, widths)).rstrip()]
    out += ["  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip() for r in rows]
    verdict = "agree" if comparison.agrees else "DISAGREE"
    why = [(name, case, comparison.reason(i, k)) for i, name in enumerate(comparison.loads)
           for k, case in enumerate(comparison.cases) if abs(diff[i, k]) > comparison.tolerance]
    if why:
        out += ["", "Why they disagree:"]
        out += [f"  {name} ({case}): {reason or 'no known cause: please report it with the plan'}"
                for name, case, reason in why]
    out.append("")
    out.append(f"{len(comparison.loads)} loads × {len(comparison.cases)} ends: biastree and ngspice {verdict} "
               f"(largest relative difference {comparison.worst:.2e}, tolerance {comparison.tolerance:.1e})"
               + (f"; {comparison.explained} of {len(why)} disagreements have a known cause" if why else ""))
    return "\n".join(out) + "\n"
