"""Self-contained HTML review report: everything inline (styles, script,
the tree diagram as SVG, the error-breakdown charts as SVG), no network."""

from __future__ import annotations

from html import escape

import numpy as np

from biastree.analysis.audit import Audit
from biastree.output.breakdown import breakdown, budget_use, device_parameters, where
from biastree.output.dot import FAIL_COLOUR, PASS_COLOUR
from biastree.output.markdown import CAUTION
from biastree.units import format_si, signed_percent

_STYLE = """
body{font-family:Helvetica,Arial,sans-serif;margin:1.5em auto;max-width:80em;color:#1c2833;padding:0 1em}
h1{font-size:1.5em;margin-bottom:.2em} h2{font-size:1.2em;margin-top:1.6em;border-bottom:1px solid #cfd8dc}
table{border-collapse:collapse;font-size:.9em;margin:.5em 0} th,td{padding:.25em .6em;border-bottom:1px solid #eceff1}
th{background:#eceff1;text-align:left} th.sort{cursor:pointer} th.sort:after{content:" \\2195";color:#90a4ae}
td.num{text-align:right;font-variant-numeric:tabular-nums}
.pass{color:%(pass)s;font-weight:bold} .fail{color:%(fail)s;font-weight:bold}
tr.failrow td{background:#fdf0ee}
.counts span{display:inline-block;margin-right:1.5em;font-size:1.1em}
.diagram{overflow:auto;border:1px solid #cfd8dc;padding:.5em;max-height:50em}
.caution{margin-top:2em;padding:.8em;border-left:4px solid #455a64;background:#f3f5f6;font-size:.9em}
""" % {"pass": PASS_COLOUR, "fail": FAIL_COLOUR}

_SCRIPT = """
document.querySelectorAll('table.sortable').forEach(function(table){
  table.querySelectorAll('th.sort').forEach(function(th, col){
    th.addEventListener('click', function(){
      var body = table.tBodies[0], rows = Array.from(body.rows);
      var asc = th.dataset.dir !== 'asc'; th.dataset.dir = asc ? 'asc' : 'desc';
      rows.sort(function(a, b){
        var x = a.cells[col].dataset.v, y = b.cells[col].dataset.v;
        var nx = parseFloat(x), ny = parseFloat(y);
        var c = (!isNaN(nx) && !isNaN(ny)) ? nx - ny : String(x).localeCompare(String(y));
        return asc ? c : -c;
      });
      rows.forEach(function(r){ body.appendChild(r); });
    });
  });
});
"""


MAX_BREAKDOWNS = 300  # failing loads explained with a chart; beyond that the page gets unwieldy


def _pct(x: float) -> str:
    return signed_percent(x, 3)


def _td(text: str, value: object, num: bool = True, cls: str = "") -> str:
    klass = " ".join(c for c in ("num" if num else "", cls) if c)
    return f'<td{f" class={chr(34)}{klass}{chr(34)}" if klass else ""} data-v="{escape(str(value))}">{text}</td>'


def bar_chart(rows: list[tuple[str, str, float]], width: int = 640) -> str:
    """Inline SVG: one horizontal bar per (stage, effect) term, signed, in %."""
    if not rows:
        return ""
    scale = max(abs(v) for _, _, v in rows) or 1.0
    label_w, value_w, bar_h, gap = 280, 70, 16, 6
    half = (width - label_w - value_w - 10) / 2
    mid = label_w + value_w + half
    height = len(rows) * (bar_h + gap) + 20
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" role="img" '
             f'aria-label="error terms" font-family="Helvetica,Arial,sans-serif" font-size="12">',
             f'<line x1="{mid}" y1="0" x2="{mid}" y2="{height - 16}" stroke="#90a4ae"/>']
    for k, (stage, label, value) in enumerate(rows):
        y = k * (bar_h + gap) + 4
        w = abs(value) / scale * half
        x = mid if value >= 0 else mid - w
        colour = "#5c6bc0" if value >= 0 else "#ef6c00"
        pattern = "" if value >= 0 else ' stroke="#bf360c" stroke-dasharray="3,2"'
        parts.append(f'<text x="{label_w - 6}" y="{y + 12}" text-anchor="end">{escape(stage)}: {escape(label)}</text>')
        parts.append(f'<text x="{label_w + value_w - 6}" y="{y + 12}" text-anchor="end">{_pct(value)}</text>')
        parts.append(f'<rect x="{x:.1f}" y="{y}" width="{max(w, 0.5):.1f}" height="{bar_h}" fill="{colour}"{pattern}/>')
    parts.append(f'<text x="{mid}" y="{height - 2}" text-anchor="middle" fill="#607d8b">'
                 "0 · solid: raises the current · dashed: lowers it</text>")
    parts.append("</svg>")
    return "".join(parts)


def to_html(result: Audit, svg: str | None = None, source: str | None = None) -> str:
    """The whole review as one HTML page.  ``svg`` is the rendered tree (inline)."""
    tree = result.tree
    plan = tree.plan
    op = result.op
    s = result.summary()
    title = escape(plan.title or "untitled plan")
    h = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Bias tree review: {title}</title>",
        f"<style>{_STYLE}</style></head><body>",
        f"<h1>Bias tree review: {title}</h1>",
    ]
    if source:
        h.append(f"<p>Plan file: <code>{escape(source)}</code></p>")
    fail_text = f'<span class="fail">{s["failed"]} FAIL</span>' if s["failed"] else ""
    h += [
        '<p class="counts">'
        f'<span class="pass">{s["passed"]} of {s["loads"]} loads PASS</span>{fail_text}'
        f'<span>{s["instances"]} instances</span></p>',
        "<h2>Inputs</h2><table>",
        f"<tr><th>supply</th><td>{format_si(plan.supply, 'V')}</td></tr>",
        f"<tr><th>temperature</th><td>{plan.temperature - 273.15:.4g} °C</td></tr>",
        f"<tr><th>reference</th><td>{format_si(plan.reference.current, 'A')} ±{plan.reference.tolerance * 100:.3g}% "
        f"→ {escape(plan.reference.feeds)} (headroom {format_si(result.reference_headroom, 'V')})</td></tr>",
        f"<tr><th>delivered</th><td>{format_si(s['delivered_current'], 'A', 4)}</td></tr>",
        f"<tr><th>overhead</th><td>{format_si(s['overhead_current'], 'A', 4)} "
        f"({format_si(s['overhead_power'], 'W', 4)})</td></tr>",
        f"<tr><th>total supply power</th><td>{format_si(s['supply_power'], 'W', 4)}</td></tr>",
        f"<tr><th>device units</th><td>{s['device_units']:.6g}"
        + (f" (MOS gate area {s['mos_gate_area'] * 1e12:.6g} µm²)" if s["mos_units"] else "") + "</td></tr>",
        "</table>",
        "<h3>Device models</h3><table><tr><th>model</th><th>kind</th><th>parameters</th></tr>",
    ]
    for name, dev in plan.devices.items():
        params = device_parameters(dev)
        h.append(f"<tr><td>{escape(name)}</td><td>{dev.kind}</td><td>{escape(params)}</td></tr>")
    h.append("</table><h3>Mirrors</h3><table><tr><th>mirror</th><th>device</th><th>topology</th><th>copies</th>"
             "<th>input current</th><th>input voltage</th><th>fan-out</th></tr>")
    for m, name in enumerate(tree.mirrors):
        spec = plan.mirrors[name]
        h.append(f"<tr><td>{escape(name)}</td><td>{escape(spec.device)}</td><td>{escape(spec.topology)}</td>"
                 f'<td class="num">{tree.m_mult[m]:g}</td><td class="num">{format_si(op.m_i_in[m, 1], "A", 4)}</td>'
                 f'<td class="num">{format_si(op.m_v_in[m, 1], "V", 4)}</td><td class="num">{tree.m_fanout[m]:g}</td></tr>')
    h.append("</table>")
    h.append("<h2>Tree</h2>")
    if svg:
        h.append(f'<div class="diagram">{svg}</div>')
    else:
        h.append("<p>(diagram not included)</p>")
    h += ["<h2>Loads</h2>", "<p>Click a column heading to sort.</p>",
          '<table class="sortable"><thead><tr>']
    extra_heads = (["worst cond."] if result.conditions is not None else []) + (
        [f"{result.k_sigma:g}σ"] if result.spread is not None else [])
    for head in ("load", "×", "path", "target", "delivered", "error", "worst error", "budget", "margin",
                 "compliance", "Rout", "verdict", *extra_heads):
        h.append(f'<th class="sort">{head}</th>')
    h.append("</tr></thead><tbody>")
    for i, name in enumerate(tree.loads):
        ok = bool(result.passed[i])
        worst = float(result.error[i, int(result.worst_case[i])])
        path = " › ".join(tree.mirrors[m] for m in tree.path(i))
        verdict = '<span class="pass">PASS</span>' if ok else f'<a href="#fail-{i}" class="fail">FAIL</a>'
        h.append(
            f'<tr{"" if ok else " class=failrow"}>'
            + _td(escape(name), name, num=False) + _td(str(int(tree.l_mult[i])), int(tree.l_mult[i]))
            + _td(escape(path), path, num=False)
            + _td(format_si(result.target[i], "A", 4), result.target[i])
            + _td(format_si(result.delivered[i, 1], "A", 6), result.delivered[i, 1])
            + _td(_pct(result.error[i, 1]), result.error[i, 1]) + _td(_pct(worst), worst)
            + _td(f"±{result.tolerance[i] * 100:.3g}%", result.tolerance[i])
            + _td(_pct(result.margin[i]), result.margin[i])
            + _td(format_si(result.compliance[i], "V", 4), result.compliance[i])
            + _td(format_si(float(result.rout[i]), "Ω", 4) if np.isfinite(result.rout[i]) else "∞",
                  result.rout[i] if np.isfinite(result.rout[i]) else 1e300)
            + _td(verdict, "pass" if ok else "fail", num=False)
            + (_td(_pct(float(result.conditions.worst_error[i])) + f" ({escape(result.conditions.worst_name(i))})",
                   float(result.conditions.worst_error[i])) if result.conditions is not None else "")
            + (_td(f"{result.k_sigma * float(result.sigma[i]) * 100:.3g}%", result.k_sigma * float(result.sigma[i]))
               if result.spread is not None else "")
            + "</tr>"
        )
    h.append("</tbody></table>")
    notes = [t for t in (result.floorplan_text(i) for i in range(len(tree.loads))) if t]
    for m in result.matched():
        notes.append(f"matched pair {m['name']} ({' / '.join(m['loads'])}): ratio error {m['ratio_error'] * 100:+.3g} %, "
                     f"{m['k']:g}σ = {m['k'] * m['sigma'] * 100:.3g} %, budget ±{m['tolerance'] * 100:.3g} %: "
                     + m["verdict"].upper())
    if result.conditions is not None:
        notes.append(f"{len(result.conditions.columns.names)} operating conditions (temperature × supply × corner × "
                     "voltage end) were solved; the verdicts use the worst of them.")
    if notes:
        h.append("<h3>Notes</h3><ul>" + "".join(f"<li>{escape(n)}</li>" for n in notes) + "</ul>")
    failing = [i for i in range(len(tree.loads)) if not result.passed[i]]
    if failing:
        h.append("<h2>Why loads fail</h2>")
        if len(failing) > MAX_BREAKDOWNS:
            h.append(f"<p>{len(failing)} loads fail; the first {MAX_BREAKDOWNS} are explained here "
                     "(<code>biastree check --json</code> and the CSV hold every one).</p>")
        for i in failing[:MAX_BREAKDOWNS]:
            h.append(f'<h3 id="fail-{i}">{escape(tree.loads[i])}</h3><ul>')
            h += [f"<li>{escape(r)}</li>" for r in result.reasons(i)]
            h += [f"<li><b>hint:</b> {escape(x)}</li>" for x in result.hints.get(i, [])]
            h.append(f"</ul><p>Error terms {escape(where(result, i))}, stage by stage "
                     "(they compound: Π(1 + term) − 1 = the load's error):</p>")
            h.append(bar_chart(breakdown(result, i)))
            h.append(f"<p>{escape(budget_use(result, i))}</p>")
    h += [f'<p class="caution">{escape(CAUTION)} Generated by biastree from the plan file; '
          "all numbers are reproducible with <code>biastree check --json</code>.</p>",
          f"<script>{_SCRIPT}</script>", "</body></html>"]
    return "\n".join(h) + "\n"
