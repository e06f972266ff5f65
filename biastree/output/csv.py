"""Per-load CSV for spreadsheets: SI floats at full precision, the same
numbers as `check --json`."""

from __future__ import annotations

import csv
import io

from biastree.analysis.audit import Audit

COLUMNS = (
    "name", "count", "path", "target_A", "delivered_A", "delivered_min_A", "delivered_max_A",
    "error", "error_min", "error_max", "worst_error", "tolerance", "reference_tolerance", "margin",
    "compliance_margin_V", "verdict", "reasons",
)


def to_csv(result: Audit) -> str:
    tree = result.tree
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(COLUMNS)
    names = tree.mirrors
    parents = tree.b_parent[tree.l_branch]
    for i, name in enumerate(tree.loads):
        path = " > ".join(["reference"] + [names[m] for m in tree.mirror_paths[int(parents[i])]] + [name])
        writer.writerow([
            name, int(tree.l_mult[i]), path,
            repr(float(result.target[i])), repr(float(result.delivered[i, 1])),
            repr(float(result.delivered[i, 0])), repr(float(result.delivered[i, 2])),
            repr(float(result.error[i, 1])), repr(float(result.error[i, 0])), repr(float(result.error[i, 2])),
            repr(float(result.error[i, int(result.worst_case[i])])),
            repr(float(result.tolerance[i])), repr(result.reference_tolerance), repr(float(result.margin[i])),
            repr(float(result.compliance[i])), "pass" if result.passed[i] else "fail",
            "; ".join(result.reasons(i)),
        ])
    return out.getvalue()
