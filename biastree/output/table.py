"""Plain-text load table and summary for the terminal."""

from __future__ import annotations

import numpy as np

from biastree.analysis.audit import Audit
from biastree.units import format_si, format_si_array, signed_percent

MAX_REASONS = 200  # failing loads explained in the terminal; --json has them all


def _pct(x: float) -> str:
    return signed_percent(x, 2)


def to_table(result: Audit, failing_only: bool = False) -> str:
    """One row per load: path, target, delivered, error, budget, margin, compliance, verdict."""
    tree = result.tree
    plan = tree.plan
    header = ("load", "×", "path", "target", "delivered", "error", "range", "worst cond.", "kσ", "budget", "margin",
              "compl.", "Rout", "reg./V", "verdict")
    rows = []
    target_text = format_si_array(result.target, "A")
    delivered_text = format_si_array(result.delivered[:, 1], "A", 4)
    compliance_text = format_si_array(result.compliance, "V")
    rout_text = format_si_array(np.where(np.isfinite(result.rout), result.rout, 0.0), "Ω")
    names = tree.mirrors
    rout = result.rout
    per_volt = result.regulation[2]
    path_text = [" > ".join(names[m] for m in p) for p in tree.mirror_paths]
    parents = tree.b_parent[tree.l_branch].tolist()
    for i, name in enumerate(tree.loads):
        ok = bool(result.passed[i])
        if failing_only and ok:
            continue
        path = path_text[parents[i]]
        lo, hi = result.error[i, 0], result.error[i, 2]
        span = "" if not isinstance(plan.loads[name].voltage, tuple) else f"{_pct(lo)}..{_pct(hi)}"
        rows.append(
            (
                name,
                str(int(tree.l_mult[i])),
                path,
                target_text[i],
                delivered_text[i],
                _pct(result.error[i, 1]),
                span,
                _pct(float(result.conditions.worst_error[i])) if result.conditions is not None else "",
                f"{result.k_sigma * result.sigma[i] * 100:.3g}%" if result.spread is not None else "",
                f"±{result.tolerance[i] * 100:.3g}%",
                _pct(result.margin[i]),
                compliance_text[i],
                rout_text[i] if np.isfinite(rout[i]) else "∞",
                f"{per_volt[i] / result.delivered[i, 1] * 100:+.3g}%" if per_volt[i] else "",
                "pass" if ok else "FAIL",
            )
        )
    right = set(range(1, 14)) - {2}
    # drop the columns this plan has nothing for
    empty = [k for k in (7, 8) if all(not r[k] for r in rows)] if rows else [7, 8]
    if empty:
        keep = [k for k in range(len(header)) if k not in empty]
        header = tuple(header[k] for k in keep)
        rows = [tuple(r[k] for k in keep) for r in rows]
        right = {keep.index(k) for k in right if k in keep}
    widths = [max(len(h), *(len(r[k]) for r in rows)) if rows else len(h) for k, h in enumerate(header)]

    template = "  ".join(f"{{:{'>' if k in right else '<'}{w}}}" for k, w in enumerate(widths))

    def line(cells: tuple[str, ...]) -> str:
        return template.format(*cells).rstrip()

    out = [line(header), line(tuple("-" * w for w in widths))]
    out += [line(r) for r in rows]
    out.append("margin: budget left after the worst error, kσ and the reference tolerance; compl.: volts the output "
               "device has to spare; reg./V: current change per volt of the node")
    failing = [i for i in range(len(tree.loads)) if not result.passed[i]]
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
    notes = [t for t in (result.floorplan_text(i) for i in range(len(tree.loads))) if t]
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
    out.append("")
    out.append(f"{len(comparison.loads)} loads × {len(comparison.cases)} ends: biastree and ngspice {verdict} "
               f"(largest relative difference {comparison.worst:.2e}, tolerance {comparison.tolerance:.1e})")
    return "\n".join(out) + "\n"
