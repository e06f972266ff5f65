"""Self-contained interactive HTML review report.

One page, nothing fetched (styles, script, data, pictures inline), so it
opens from disk anywhere.  The numbers travel as one compact JSON object
(column arrays, the same floats as ``check --json``); the page's script
(``html_script``) builds the tables, the tree outline and every failing
load's explanation from it when they are asked for, so the page stays light
at chip scale and no explanation is left out.
"""

from __future__ import annotations

from html import escape
from typing import Any

import numpy as np

from biastree.analysis.audit import Audit
from biastree.output.breakdown import breakdown, budget_use, device_parameters, tempco_ppm, where
from biastree.output.dot import FAIL_COLOUR, PASS_COLOUR
from biastree.output.html_script import SCRIPT, STYLE
from biastree.output.markdown import CAUTION
from biastree.units import format_si


def _floats(values: Any) -> list[float | None]:
    """Exact floats, ``None`` where not finite (JSON has no inf)."""
    arr = np.asarray(values, dtype=float)
    return [x if np.isfinite(x) else None for x in arr.tolist()]


def explanation(result: Audit, i: int, stages: dict[str, int] | None = None) -> dict[str, Any]:
    """Everything the page shows about why one load fails (plain data).

    A per-load object, so that more (e.g. the deciding case) can be added
    without changing the page's other data.
    """
    if stages is None:  # mirror name → index (pass it in when explaining many loads)
        stages = {name: k for k, name in enumerate(result.tree.mirrors)}
    return {
        "reasons": result.reasons(i),
        "hints": result.hints.get(i, []),
        "where": where(result, i),
        "budget": budget_use(result, i),
        # (stage: mirror index, or a name such as 'plan' or 'reference'; effect label; value)
        "terms": [[stages.get(stage, stage), label, value] for stage, label, value in breakdown(result, i)],
    }


def page_data(result: Audit) -> dict[str, Any]:
    """The compact data the page is built from."""
    tree, op, plan = result.tree, result.op, result.tree.plan
    n_m = len(tree.mirrors)
    m_parent = np.full(n_m, -1, dtype=np.int64)
    has_parent = tree.m_in_branch >= 0
    m_parent[has_parent] = tree.b_parent[tree.m_in_branch[has_parent]]
    depth = np.zeros(n_m, dtype=np.int64)
    for k, gen in enumerate(tree.generations):
        depth[gen] = k
    worst = result.error[np.arange(len(tree.loads)), result.worst_case.astype(int)]
    loads: dict[str, Any] = {
        "name": list(tree.loads),
        "mirror": tree.b_parent[tree.l_branch].tolist(),
        "count": tree.l_mult.astype(int).tolist(),
        "target": _floats(result.target),
        "delivered": _floats(result.delivered[:, 1]),
        "error": _floats(result.error[:, 1]),
        "worst": _floats(worst),
        "tolerance": _floats(result.tolerance),
        "margin": _floats(result.margin),
        "compliance": _floats(result.worst_compliance),  # over range and conditions, as every table
        "rout": _floats(result.rout),
        "pass": result.passed.astype(int).tolist(),
    }
    conditions: list[str] = []
    if result.conditions is not None:
        conditions = list(result.conditions.columns.names)
        loads["cond_worst"] = _floats(result.conditions.worst_error)
        loads["cond_at"] = result.conditions.worst_index.astype(int).tolist()
        tc = tempco_ppm(result.conditions)
        if tc is not None:
            loads["tempco"] = _floats(tc)
    if result.spread is not None:
        loads["ksigma"] = _floats(result.k_sigma * result.sigma)
    mirrors = {
        "name": list(tree.mirrors),
        "parent": m_parent.tolist(),
        "depth": depth.tolist(),
        "device": [plan.mirrors[m].device for m in tree.mirrors],
        "topology": [plan.mirrors[m].topology for m in tree.mirrors],
        "copies": _floats(tree.m_mult),
        "input": _floats(op.m_i_in[:, 1]),
        "vin": _floats(op.m_v_in[:, 1]),
        "fanout": _floats(tree.m_fanout),
    }
    index = {name: k for k, name in enumerate(tree.mirrors)}
    explain = {str(int(i)): explanation(result, int(i), index) for i in np.flatnonzero(~result.passed)}
    return {"k_sigma": result.k_sigma, "conditions": conditions, "loads": loads, "mirrors": mirrors,
            "explain": explain}


def _json_for_script(data: Any) -> str:
    import orjson

    text = orjson.dumps(data).decode("utf-8")
    # inside <script> only "</" could end the element early
    return text.replace("</", "<\\/")


# what a summary figure counts, shown when the pointer rests on it
_FACT_TITLES = {
    "device units": "all mirror devices counted in unit devices: input size, ratio × copies of each output, and the "
                    "helper and cascode devices of the topology; an output of ratio 0.5 counts half a unit device",
    "overhead": "supply current not delivered to loads (the reference, currents feeding other mirrors, helper and "
                "bias currents), and that times the supply",
    "reference headroom": "supply minus the first mirror's input voltage: the voltage left for the reference source",
}


def _summary(result: Audit, source: str | None) -> list[str]:
    plan = result.tree.plan
    s = result.summary()
    ok = s["failed"] == 0
    verdict = (f'<span class="big pass">PASS</span> all {s["loads"]} loads inside their budgets' if ok else
               f'<span class="big fail">FAIL</span> {s["failed"]} of {s["loads"]} loads out of budget '
               f'({s["passed"]} pass)')
    ref = plan.reference
    facts = [
        ("loads / instances", f'{s["loads"]} / {s["instances"]}'),
        ("mirrors", str(len(result.tree.mirrors))),
        ("supply", format_si(plan.supply, "V")),
        ("temperature", f"{plan.temperature - 273.15:.4g} °C"),
        ("reference", f"{format_si(ref.current, 'A')} ±{ref.tolerance * 100:.3g}%"),
        ("reference headroom", format_si(result.reference_headroom, "V")),
        ("delivered", format_si(s["delivered_current"], "A", 4)),
        ("overhead", f"{format_si(s['overhead_current'], 'A', 4)} ({format_si(s['overhead_power'], 'W', 4)})"),
        ("supply power", format_si(s["supply_power"], "W", 4)),
        ("device units", f"{s['device_units']:.6g}"
         + (f" (MOS gate {s['mos_gate_area'] * 1e12:.4g} µm²)" if s["mos_units"] else "")),
    ]
    if result.conditions is not None:
        facts.append(("conditions", f"{len(result.conditions.columns.names)} solved, worst counts"))
    if result.spread is not None:
        facts.append(("mismatch", f"{result.k_sigma:g}σ counts"))
    cells = "".join(f'<div title="{escape(_FACT_TITLES.get(k, ""))}"><b>{escape(k)}</b><span>{escape(v)}</span></div>'
                    for k, v in facts)
    out = [f'<section id="summary"><p class="verdict">{verdict}</p><div class="facts">{cells}</div>']
    if source:
        out.append(f'<p class="src">plan file <code>{escape(source)}</code></p>')
    out.append("</section>")
    return out


def _inputs(result: Audit) -> list[str]:
    plan = result.tree.plan
    h = ['<section id="inputs"><h2>Device models</h2><table class="plain"><thead><tr><th>model</th><th>kind</th>'
         "<th>parameters</th></tr></thead><tbody>"]
    for name, dev in plan.devices.items():
        h.append(f"<tr><td>{escape(name)}</td><td>{dev.kind}</td><td>{escape(device_parameters(dev))}</td></tr>")
    h.append("</tbody></table></section>")
    return h


def _notes(result: Audit) -> list[str]:
    tree = result.tree
    notes = [t for t in (result.floorplan_text(i) for i in range(len(tree.loads))) if t]
    for m in result.matched():
        notes.append(f"matched pair {m['name']} ({' / '.join(m['loads'])}): ratio error {m['ratio_error'] * 100:+.3g} %, "
                     f"{m['k']:g}σ = {m['k'] * m['sigma'] * 100:.3g} %, budget ±{m['tolerance'] * 100:.3g} %: "
                     + m["verdict"].upper())
    if result.conditions is not None:
        notes.append(f"{len(result.conditions.columns.names)} operating conditions (temperature × supply × corner × "
                     "voltage end) were solved; the verdicts use the worst of them.")
    if not notes:
        return []
    return ['<section id="notes"><h2>Notes</h2><ul>'] + [f"<li>{escape(n)}</li>" for n in notes] + ["</ul></section>"]


def to_html(result: Audit, svg: str | None = None, source: str | None = None,
            plots: list[tuple[str, str]] | None = None, diff: str | None = None) -> str:
    """The whole review as one HTML page.

    ``svg`` is the rendered tree diagram (inline, fitted and zoomable in the
    page); ``plots`` are (caption, SVG text) pairs; ``diff`` an HTML fragment
    comparing this plan with another (``biastree.output.diff_report``).
    """
    plan = result.tree.plan
    title = escape(plan.title or "untitled plan")
    toc = [("summary", "Summary"), ("worst", "Worst loads"), ("loads", "Loads"), ("tree", "Tree"),
           ("mirrors", "Mirrors")]
    if plots:
        toc.append(("plots", "Plots"))
    if diff:
        toc.append(("diff", "Changes"))
    toc += [("inputs", "Devices"), ("notes", "Notes")]
    colours = {"pass": PASS_COLOUR, "fail": FAIL_COLOUR}
    h = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Bias tree review: {title}</title>",
        f"<style>{STYLE % colours}</style></head><body>",
        f'<header><h1>Bias tree review: {title}</h1><nav id="toc">'
        + "".join(f'<a href="#{k}">{v}</a>' for k, v in toc) + "</nav></header><main>",
    ]
    h += _summary(result, source)
    h += ['<section id="worst"><h2>Worst loads</h2><p class="hint">The ten smallest margins; '
          'click FAIL for the explanation.</p><div id="worst-table"></div></section>',
          '<section id="loads"><h2>Loads</h2><div class="controls">'
          '<input id="search" type="search" placeholder="search load or mirror name" aria-label="search by name">'
          '<select id="verdict" aria-label="verdict filter"><option value="all">all loads</option>'
          '<option value="fail">failing only</option><option value="pass">passing only</option></select>'
          '<select id="condition" aria-label="worst condition filter"><option value="">any worst condition</option>'
          '</select><span id="subtree"></span><span id="count" class="hint"></span></div>'
          '<div id="load-table"></div>'
          '<div id="why" hidden></div></section>',
          '<section id="tree"><h2>Tree</h2><div class="controls"><button id="expand">expand one level</button>'
          '<button id="collapse">collapse</button><span class="hint">click a mirror name to see only its loads</span>'
          '</div><div id="outline"></div>']
    if svg:
        attr = " open" if len(result.tree.loads) <= 40 else ""
        h.append(f'<details id="diagram-box"{attr}><summary>Diagram (drag to pan, wheel to zoom, double-click to fit)'
                 f'</summary><div id="diagram">{svg}</div></details>')
    else:
        h.append('<p class="hint">No diagram embedded (too large or not asked for): '
                 "the outline above holds every mirror; <code>biastree draw --subtree NAME</code> draws a part.</p>")
    h.append("</section>")
    h.append('<section id="mirrors"><h2>Mirrors</h2><div id="mirror-table"></div></section>')
    if plots:
        h.append('<section id="plots"><h2>Plots</h2>')
        for caption, picture in plots:
            h.append(f'<figure class="plot">{picture}<figcaption>{escape(caption)}</figcaption></figure>')
        h.append("</section>")
    if diff:
        h.append(f'<section id="diff"><h2>Changes</h2>{diff}</section>')
    h += _inputs(result)
    h += _notes(result) or ['<section id="notes"><h2>Notes</h2><p>none</p></section>']
    h += [f'<p class="caution">{escape(CAUTION)} Generated by biastree from the plan file; '
          "all numbers are reproducible with <code>biastree check --json</code>.</p></main>",
          f'<script type="application/json" id="data">{_json_for_script(page_data(result))}</script>',
          f"<script>{SCRIPT}</script>", "</body></html>"]
    return "\n".join(h) + "\n"
