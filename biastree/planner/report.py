"""The planner's and the repair's terminal summaries (plain text)."""

from __future__ import annotations

from typing import Any

from biastree.planner.costs import Figures
from biastree.units import format_si


def _figures_line(f: Figures) -> str:
    return (f"{f.passed} of {f.passed + f.failed} blocks pass; overhead {format_si(f.overhead_current, 'A')} "
            f"({format_si(f.overhead_power, 'W')}); {f.device_units:g} unit devices"
            + (f", MOS gate area {f.mos_gate_area * 1e12:.4g} µm²" if f.mos_gate_area else "")
            + f"; worst margin {f.worst_margin * 100:+.3g} %")


def summary_text(out: Any) -> str:
    """What the planner decided and why, the figures, and any infeasible request."""
    lines = []
    if out.infeasible:
        lines.append("cannot plan every block as asked:")
        lines += [f"  {i.text()}" for i in out.infeasible]
    for d in out.decisions:
        lines.append(d)
    if out.figures is not None:
        lines.append(_figures_line(out.figures))
    if out.alternatives:
        lines.append("alternatives (passing, none beaten on power, area and margin at once):")
        lines.append(f"  {'#':>2}  {'overhead':>10}  {'power':>10}  {'units':>7}  {'worst margin':>12}  {'mirrors':>7}  plan")
        for k, (f, alt) in enumerate(out.alternatives, 1):
            what = next((d[len("variant: "):] for d in reversed(getattr(alt, "decisions", [])) if d.startswith("variant: ")),
                        "least power")
            mark = "  ← written" if alt is out else ""
            lines.append(f"  {k:>2}  {format_si(f.overhead_current, 'A'):>10}  {format_si(f.overhead_power, 'W'):>10}  "
                         f"{f.device_units:>7g}  {f.worst_margin * 100:>+11.3g}%  {f.mirrors:>7}  {what}{mark}")
    if out.result is not None and not out.infeasible:
        lines.append("every verdict above is what `biastree check` gives on the written plan")
    return "\n".join(lines) + "\n"


def _cost_text(power: float, area: float, gate_area: float) -> str:
    parts = [f"{'+' if power >= 0 else '−'}{format_si(abs(power), 'W')}",
             f"{area:+.4g} unit devices"]
    if gate_area:
        parts.append(f"{gate_area * 1e12:+.4g} µm² MOS gate")
    return ", ".join(parts)


def repair_text(fixed: Any) -> str:
    """Each change: what, why (the term that decides), before → after, its effect and its cost."""
    lines = [f"before: {_figures_line(fixed.before)}"]
    if fixed.changes:
        lines.append(f"changes ({len(fixed.changes)}, found and checked together):")
        for k, c in enumerate(fixed.changes, 1):
            lines.append(f"{k:>3}. {c.kind} {c.target}" + (f" for {_names(c.loads)}" if c.loads else ""))
            if c.why:
                lines.append(f"     why:    {c.why}")
            if c.how:
                lines.append(f"     change: {c.how}")
            lines.append(f"     before: {c.before}")
            lines.append(f"     after:  {c.after}")
            if c.effect:
                lines.append(f"     effect: {c.effect}")
            lines.append(f"     cost:   {_cost_text(c.power, c.area, c.gate_area)}")
        dp = fixed.after.overhead_power - fixed.before.overhead_power
        da = fixed.after.device_units - fixed.before.device_units
        dg = fixed.after.mos_gate_area - fixed.before.mos_gate_area
        # a change prices the mirrors it touches; the mirrors (and reference) feeding them carry the
        # changed input currents: shown on a line of their own so that the lines add up to the total
        rp = dp - sum(c.power for c in fixed.changes)
        ra = da - sum(c.area for c in fixed.changes)
        rg = dg - sum(c.gate_area for c in fixed.changes)
        if abs(rp) > 1e-12 * max(1.0, abs(dp)) + 1e-15 or abs(ra) > 1e-9 or abs(rg) > 1e-21:
            lines.append(f"upstream:   {_cost_text(rp, ra, rg)} (the mirrors feeding the changed ones: "
                         "their input currents changed)")
        lines.append(f"total cost: {_cost_text(dp, da, dg)} (the whole plan, after − before)")
    else:
        lines.append("no change found")
    lines.append(f"after:  {_figures_line(fixed.after)}")
    if fixed.infeasible:
        lines.append("still failing (cannot be repaired within the limits):")
        lines += [f"  {i.text()}" for i in fixed.infeasible]
    return "\n".join(lines) + "\n"


def _names(loads: list[str], shown: int = 4) -> str:
    return ", ".join(loads[:shown]) + (f" (+{len(loads) - shown} more)" if len(loads) > shown else "")
