"""Per-load CSV for spreadsheets: the load table's columns (biastree.output.columns,
the same as the terminal, Markdown and HTML tables) as SI floats at full
precision — the same numbers as `check --json` — and each load's reasons."""

from __future__ import annotations

import csv
import io

from biastree.analysis.audit import Audit
from biastree.output.columns import visible


def to_csv(result: Audit) -> str:
    cols = visible(result)
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow([h for c in cols for h in c.csv_headers()] + ["reasons"])
    for i in range(len(result.tree.loads)):
        writer.writerow([cell for c in cols for cell in c.csv_cells(result, i)] + ["; ".join(result.reasons(i))])
    return out.getvalue()
