"""A plan comparison (``biastree.analysis.diff``) as a text table, JSON, or an
HTML fragment for the review report."""

from __future__ import annotations

import json
from html import escape
from typing import Any

from biastree.analysis.diff import LoadChange, PlanDiff
from biastree.units import format_si, signed_percent


# Display units of the plan keys a diff most often shows (values inside are SI).
_UNITS = {"current": "A", "voltage": "V", "supply": "V", "early": "V", "is": "A", "vth": "V", "bleed": "A",
          "bias_current": "A", "degeneration": "Ω", "degeneration_drop": "V", "w": "m", "l": "m"}
_PERCENT = {"tolerance", "tempco"}


def _value(x: Any, path: str = "") -> str:
    if x is None:
        return "—"
    key = path.rsplit(".", 1)[-1]
    if isinstance(x, float) and key in _PERCENT:
        return f"{x * 100:.4g}%"
    if isinstance(x, float) and key in _UNITS:
        return format_si(x, _UNITS[key], 4)
    if isinstance(x, float) and key == "temperature":
        return f"{x - 273.15:.4g} °C"
    if isinstance(x, float):
        return f"{x:.6g}"
    if isinstance(x, (dict, list)):
        text = json.dumps(x, ensure_ascii=False, default=str)
        return text if len(text) <= 60 else text[:57] + "…"
    return str(x)


def _row(c: LoadChange) -> tuple[str, ...]:
    o, n = c.old, c.new
    cur = lambda side: format_si(side["delivered"], "A", 5) if side else "—"  # noqa: E731
    pct = lambda side, key: signed_percent(side[key], 3) if side else "—"  # noqa: E731
    d_err = c.delta("error")
    return (c.name, cur(o), cur(n), pct(o, "error"), pct(n, "error"),
            "—" if d_err is None else signed_percent(d_err, 3),
            pct(o, "margin"), pct(n, "margin"), (o or {}).get("verdict", "—").upper(),
            (n or {}).get("verdict", "—").upper(), c.status)


HEAD = ("load", "delivered old", "delivered new", "error old", "error new", "Δ error",
        "margin old", "margin new", "old", "new", "status")


def changed_loads(d: PlanDiff, everything: bool = False) -> list[LoadChange]:
    """Loads that changed (all with ``everything``), largest change of margin first."""
    rows = [c for c in d.loads if everything or c.status != "same"]
    return sorted(rows, key=lambda c: -abs(c.delta("margin") or 0.0) - (1.0 if c.status not in ("same", "changed") else 0.0))


def to_diff_table(d: PlanDiff, everything: bool = False) -> str:
    out = [f"{len(d.changes)} change(s) in the plan:"]
    out += [f"  {c.kind:8} {c.path}: {_value(c.old, c.path)} → {_value(c.new, c.path)}" for c in d.changes] or ["  (none)"]
    rows = [_row(c) for c in changed_loads(d, everything)]
    same = sum(1 for c in d.loads if c.status == "same")
    out.append("")
    out.append(f"{len(d.loads)} load(s): {len(d.loads) - same} changed, {same} the same"
               + (f"; {len(d.regressions)} now FAIL that passed or were new: {', '.join(d.regressions[:20])}"
                  + ("…" if len(d.regressions) > 20 else "") if d.regressions else ""))
    if rows:
        widths = [max(len(h), *(len(r[k]) for r in rows)) for k, h in enumerate(HEAD)]
        line = lambda r: "  ".join(c.rjust(w) if 0 < k < 10 else c.ljust(w) for k, (c, w) in enumerate(zip(r, widths))).rstrip()  # noqa: E731
        out += [line(HEAD), line(tuple("-" * w for w in widths))] + [line(r) for r in rows]
    return "\n".join(out) + "\n"


def to_diff_json(d: PlanDiff) -> str:
    return json.dumps(d.to_dict(), indent=1, ensure_ascii=False, default=str, allow_nan=False) + "\n"


def to_diff_html(d: PlanDiff, old_name: str = "old plan") -> str:
    """HTML fragment: the plan's changes and the loads they moved (for the review report)."""
    h = [f"<p>Compared with <code>{escape(old_name)}</code>: {len(d.changes)} change(s) in the plan, "
         f"{sum(1 for c in d.loads if c.status != 'same')} of {len(d.loads)} loads changed"
         + (f', <span class="fail">{len(d.regressions)} newly failing</span>' if d.regressions else "") + ".</p>"]
    if d.changes:
        h.append('<table class="plain"><thead><tr><th>what</th><th>key</th><th>old</th><th>new</th></tr></thead><tbody>')
        h += [f"<tr><td>{c.kind}</td><td><code>{escape(c.path)}</code></td><td>{escape(_value(c.old, c.path))}</td>"
              f"<td>{escape(_value(c.new, c.path))}</td></tr>" for c in d.changes]
        h.append("</tbody></table>")
    rows = [_row(c) for c in changed_loads(d)]
    if rows:
        h.append("<table><thead><tr>" + "".join(f"<th>{escape(x)}</th>" for x in HEAD) + "</tr></thead><tbody>")
        for r in rows:
            cls = ' class="failrow"' if "FAIL" in (r[9],) else ""
            h.append(f"<tr{cls}>" + "".join(f'<td{" class=num" if 0 < k < 8 else ""}>{escape(x)}</td>'
                                            for k, x in enumerate(r)) + "</tr>")
        h.append("</tbody></table>")
    return "".join(h)


def to_diff_markdown(d: PlanDiff, old_name: str = "old plan") -> list[str]:
    """Markdown lines: the plan's changes and the loads they moved (for the Markdown review)."""
    cell = lambda text: text.replace("|", "\\|")  # noqa: E731
    out = [f"Compared with `{old_name}`: {len(d.changes)} change(s) in the plan, "
           f"{sum(1 for c in d.loads if c.status != 'same')} of {len(d.loads)} loads changed"
           + (f", **{len(d.regressions)} newly failing**" if d.regressions else "") + ".", ""]
    if d.changes:
        out += ["| what | key | old | new |", "|---|---|---|---|"]
        out += [f"| {c.kind} | `{cell(c.path)}` | {cell(_value(c.old, c.path))} | {cell(_value(c.new, c.path))} |"
                for c in d.changes]
        out.append("")
    rows = [_row(c) for c in changed_loads(d)]
    if rows:
        out += ["| " + " | ".join(HEAD) + " |", "|" + "|".join("--:" if 0 < k < 8 else "---" for k in range(len(HEAD))) + "|"]
        out += ["| " + " | ".join(cell(x) for x in r) + " |" for r in rows]
        out.append("")
    return out
