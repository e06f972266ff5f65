"""Tables and JSON for Monte Carlo and condition sweeps."""

from __future__ import annotations

import json
from typing import Any

import numpy as np

from biastree.analysis.corners import ConditionResult, Verdicts
from biastree.analysis.spread import QUANTILES, Analytic
from biastree.analysis.yields import DieYield
from biastree.units import format_si


def spread_data(dy: DieYield, an: Analytic, required: float) -> dict[str, Any]:
    """Per load: statistics of one instance (copy 0), and the per-die yield over all its copies."""
    tree, mc = dy.tree, dy.mc
    s = mc.summary()
    first = dy.first
    die = dy.load_yield()
    saturated = dy.saturated()
    loads = []
    for i, name in enumerate(tree.loads):
        k = int(first[i])
        loads.append({
            "name": name,
            "count": int(tree.l_mult[i]),
            "target": float(tree.plan.loads[name].current),
            "mean": float(s["mean"][k]),
            "sigma": float(s["sigma"][k]),
            "sigma_analytic": float(an.total[i] if mc.include_reference else an.mismatch[i]),
            "sigma_mismatch": float(an.mismatch[i]),
            "quantiles": {f"{q:g}": float(v) for q, v in zip(QUANTILES, s["quantiles"][k])},
            "yield_instance": float(s["yield"][k]),
            "yield": float(die[i]),
            "saturated": float(saturated[i]),
            "verdict": "pass" if die[i] >= required else "fail",
        })
    matched = []
    currents = mc.currents
    for name, group in tree.plan.matched.items():
        a, b = (int(first[tree.loads.index(n)]) for n in group.loads)
        ratio = currents[a] / currents[b]
        ideal = tree.plan.loads[group.loads[0]].current / tree.plan.loads[group.loads[1]].current
        dev = ratio / ideal - 1.0
        y = float(np.mean(np.abs(dev) <= group.tolerance))
        matched.append({"name": name, "loads": list(group.loads), "sigma": float(np.std(ratio / ratio.mean(), ddof=1)),
                        "sigma_analytic": an.ratio_sigma(tree.loads.index(group.loads[0]), tree.loads.index(group.loads[1])),
                        "yield": y, "verdict": "pass" if y >= required else "fail"})
    failed = sum(l["verdict"] == "fail" for l in loads) + sum(m["verdict"] == "fail" for m in matched)
    return {"samples": mc.samples, "seed": mc.seed, "reference_sampled": mc.include_reference,
            "process_sampled": mc.include_process, "per_copy": dy.per_copy, "required_yield": required,
            "overall_yield": dy.overall_yield(), "verdict": "fail" if failed else "pass",
            "loads": loads, "matched": matched}


def to_spread_json(data: dict[str, Any]) -> str:
    return json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def to_spread_table(d: dict[str, Any]) -> str:
    head = ("load", "×", "target", "mean", "σ (MC)", "σ (1st order)", "−3σ point", "+3σ point", "saturated", "yield",
            "verdict")
    rows = []
    for l in d["loads"]:
        q = list(l["quantiles"].values())
        rows.append((l["name"], str(l["count"]), format_si(l["target"], "A"), format_si(l["mean"], "A", 4),
                     f"{l['sigma'] * 100:.3g}%", f"{l['sigma_analytic'] * 100:.3g}%", format_si(q[0], "A", 4),
                     format_si(q[-1], "A", 4), f"{l['saturated'] * 100:.4g}%" if l["saturated"] else "",
                     f"{l['yield'] * 100:.4g}%", "pass" if l["verdict"] == "pass" else "FAIL"))
    widths = [max(len(h), *(len(r[k]) for r in rows)) for k, h in enumerate(head)]
    line = lambda r: "  ".join(c.rjust(w) if k else c.ljust(w) for k, (c, w) in enumerate(zip(r, widths))).rstrip()  # noqa: E731
    out = [line(head), line(tuple("-" * w for w in widths))] + [line(r) for r in rows]
    for m in d["matched"]:
        out.append(f"matched {m['name']}: ratio σ {m['sigma'] * 100:.3g}% (1st order {m['sigma_analytic'] * 100:.3g}%), "
                   f"yield {m['yield'] * 100:.4g}%: " + ("pass" if m["verdict"] == "pass" else "FAIL"))
    what = "mismatch" + (", reference" if d["reference_sampled"] else "") + (", process" if d["process_sampled"] else "")
    copies = ("every copy of a replicated load sampled with its own devices; a die passes a load only when all "
              "its copies do" if d["per_copy"] else
              "too many copies to sample each: one instance stands for each load's copies (per-instance yield)")
    out.append("")
    out.append(f"{d['samples']} samples (seed {d['seed']}; {what}); {copies}. A sample with the output device (or a "
               "branch on the path) out of its active region does not pass.")
    out.append(f"yield = dies with the load inside its budget; required {d['required_yield'] * 100:.4g}% per load "
               f"(--required-yield); every load inside its budget on {d['overall_yield'] * 100:.4g}% of dies")
    n_fail = sum(l["verdict"] == "fail" for l in d["loads"])
    out.append(f"{len(d['loads']) - n_fail} of {len(d['loads'])} loads reach the required yield"
               + (f", {n_fail} FAIL" if n_fail else ""))
    out.append("Design estimates: sign-off belongs to foundry models and transistor-level simulation.")
    return "\n".join(out) + "\n"


def sweep_data(result: ConditionResult, verdicts: Verdicts) -> dict[str, Any]:
    tree = result.tree
    return {
        "columns": list(result.columns.names),
        "temperature": result.columns.temperature.tolist(),
        "supply": result.columns.supply.tolist(),
        "corner": list(result.columns.corner),
        "summary": {"loads": len(tree.loads), "passed": int(verdicts.passed.sum()),
                    "failed": int((~verdicts.passed).sum())},
        "loads": [{"name": n, "current": result.op.l_current[i].tolist(), "error": result.error[i].tolist(),
                   "worst_error": float(result.worst_error[i]), "worst_at": result.worst_name(i),
                   "compliance_margin": float(result.compliance[i]),
                   "compliance_at": result.columns.names[int(result.compliance_index[i])],
                   "k_sigma": float(verdicts.k_sigma[i]), "margin": float(verdicts.margin[i]),
                   "verdict": "pass" if verdicts.passed[i] else "fail", "reasons": verdicts.reasons[i]}
                  for i, n in enumerate(tree.loads)],
    }


def to_sweep_table(result: ConditionResult, verdicts: Verdicts) -> str:
    tree = result.tree
    head = ("load", "target", "min error", "max error", "worst", "at", "kσ", "budget", "margin", "compl. min", "verdict")
    rows = []
    for i, name in enumerate(tree.loads):
        e = result.error[i]
        spec = tree.plan.loads[name]
        rows.append((name, format_si(spec.current, "A"), f"{e.min() * 100:+.3f}%", f"{e.max() * 100:+.3f}%",
                     f"{result.worst_error[i] * 100:+.3f}%", result.worst_name(i),
                     f"{verdicts.k_sigma[i] * 100:.3g}%" if verdicts.k_sigma[i] else "",
                     f"±{spec.tolerance * 100:.3g}%", f"{verdicts.margin[i] * 100:+.2f}%",
                     format_si(float(result.compliance[i]), "V"), "pass" if verdicts.passed[i] else "FAIL"))
    widths = [max(len(h), *(len(r[k]) for r in rows)) for k, h in enumerate(head)]
    line = lambda r: "  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip()  # noqa: E731
    out = [line(head), line(tuple("-" * w for w in widths))] + [line(r) for r in rows]
    failing = [i for i in range(len(tree.loads)) if not verdicts.passed[i]]
    if failing:
        out += ["", "Why loads fail:"]
        out += [f"  {tree.loads[i]}: {why}" for i in failing for why in verdicts.reasons[i]]
    out.append("")
    out.append(f"{len(result.columns.names)} conditions solved in one pass; 'worst' is the error of largest magnitude; "
               "margin = budget − |worst| − kσ − reference tolerance; compliance must hold in every condition.")
    n_fail = len(failing)
    out.append(f"{len(tree.loads) - n_fail} of {len(tree.loads)} loads pass in every condition"
               + (f", {n_fail} FAIL" if n_fail else ""))
    return "\n".join(out) + "\n"


def to_sweep_csv(result: ConditionResult) -> str:
    import csv
    import io

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["load", "condition", "temperature_K", "supply_V", "corner", "current_A", "error"])
    for i, name in enumerate(result.tree.loads):
        for k, col in enumerate(result.columns.names):
            w.writerow([name, col, repr(float(result.columns.temperature[k])), repr(float(result.columns.supply[k])),
                        result.columns.corner[k], repr(float(result.op.l_current[i, k])), repr(float(result.error[i, k]))])
    return buf.getvalue()
