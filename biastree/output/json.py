"""JSON results (the shape of schemas/results.schema.json)."""

from __future__ import annotations

import json

from biastree.analysis.audit import Audit


def to_json(result: Audit) -> str:
    return json.dumps(result.to_dict(), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
