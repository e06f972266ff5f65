"""Tables and JSON for Monte Carlo and condition sweeps."""

from __future__ import annotations

import json
from typing import Any

import numpy as np

from biastree.analysis.corners import ConditionResult, Verdicts
from biastree.analysis.spread import QUANTILES, Analytic, MonteCarlo
from biastree.units import format_si


def spread_data(mc: MonteCarlo, an: Analytic) -> dict[str, Any]:
    tree = mc.tree
    s = mc.summary()
    loads = []
    for i, name in enumerate(tree.loads):
        loads.append({
            "name": name,
            "target": float(mc.target[i]),
            "mean": float(s["mean"][i]),
            "sigma": float(s["sigma"][i]),
            "sigma_analytic": float(an.total[i] if mc.include_reference else an.mismatch[i]),
            "sigma_mismatch": float(an.mismatch[i]),
            "quantiles": {f"{q:g}": float(v) for q, v in zip(QUANTILES, s["quantiles"][i])},
            "yield": float(s["yield"][i]),
        })
    matched = []
    for name, group in tree.plan.matched.items():
        a, b = (tree.loads.index(n) for n in group.loads)
        ratio = mc.currents[a] / mc.currents[b]
        ideal = tree.plan.loads[group.loads[0]].current / tree.plan.loads[group.loads[1]].current
        dev = ratio / ideal - 1.0
        matched.append({"name": name, "loads": list(group.loads), "sigma": float(np.std(ratio / ratio.mean(), ddof=1)),
                        "sigma_analytic": an.ratio_sigma(a, b), "yield": float(np.mean(np.abs(dev) <= group.tolerance))})
    return {"samples": mc.samples, "seed": mc.seed, "reference_sampled": mc.include_reference,
            "process_sampled": mc.include_process, "overall_yield": mc.overall_yield(), "loads": loads,
            "matched": matched}


def to_spread_json(mc: MonteCarlo, an: Analytic) -> str:
    return json.dumps(spread_data(mc, an), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def to_spread_table(mc: MonteCarlo, an: Analytic) -> str:
    d = spread_data(mc, an)
    head = ("load", "target", "mean", "σ (MC)", "σ (1st order)", "−3σ point", "+3σ point", "yield")
    rows = []
    for l in d["loads"]:
        q = list(l["quantiles"].values())
        rows.append((l["name"], format_si(l["target"], "A"), format_si(l["mean"], "A", 4), f"{l['sigma'] * 100:.3g}%",
                     f"{l['sigma_analytic'] * 100:.3g}%", format_si(q[0], "A", 4), format_si(q[-1], "A", 4),
                     f"{l['yield'] * 100:.4g}%"))
    widths = [max(len(h), *(len(r[k]) for r in rows)) for k, h in enumerate(head)]
    line = lambda r: "  ".join(c.rjust(w) if k else c.ljust(w) for k, (c, w) in enumerate(zip(r, widths))).rstrip()  # noqa: E731
    out = [line(head), line(tuple("-" * w for w in widths))] + [line(r) for r in rows]
    for m in d["matched"]:
        out.append(f"matched {m['name']}: ratio σ {m['sigma'] * 100:.3g}% (1st order {m['sigma_analytic'] * 100:.3g}%), "
                   f"yield {m['yield'] * 100:.4g}%")
    what = "mismatch" + (", reference" if d["reference_sampled"] else "") + (", process" if d["process_sampled"] else "")
    out.append("")
    out.append(f"{d['samples']} samples (seed {d['seed']}; {what}): every load inside its budget in "
               f"{d['overall_yield'] * 100:.4g}% of them (one instance stands for each load's copies)")
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
