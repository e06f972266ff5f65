"""JSON results (the shape of schemas/results.schema.json), encoded by orjson.

Small results are indented for reading; large ones are written compact, in
pieces, so that a 100,000-load result never exists as one Python string.
The values are those of ``Audit.to_dict`` (``to_json_stdlib`` is the slow
reference path the tests compare against).
"""

from __future__ import annotations

import json
from typing import IO, Any, Iterator

import numpy as np
import orjson

from biastree.analysis.audit import Audit

INDENT_UP_TO = 2000  # loads: larger results are written compact
_CHUNK = 2000  # loads encoded per piece when streaming
DETAILS = ("stages", "loads", "summary")
_NUMPY = orjson.OPT_SERIALIZE_NUMPY  # a numpy float64 is written as the float it is


STAGE_ROWS = 1_000_000  # above this many stage rows in all, the default detail is "loads"


def default_detail(result: Audit) -> str:
    """``stages`` unless the per-load stage lists would hold more than STAGE_ROWS rows
    (a deep comb: n loads × depth n), then ``loads``."""
    tree = result.tree
    depth = np.array([len(p) for p in tree.mirror_paths])
    rows = int(depth[tree.b_parent[tree.l_branch]].sum())
    return "stages" if rows <= STAGE_ROWS else "loads"


def _check_finite(result: Audit) -> None:
    # orjson writes NaN and infinity as null; the standard library refused them
    # (allow_nan=False), and the schema wants numbers there: keep refusing.
    for a in (result.delivered, result.error, result.margin, result.compliance):
        if not np.all(np.isfinite(a)):
            raise ValueError("Out of range float values are not JSON compliant")


def _load(result: Audit, i: int, detail: str) -> dict[str, Any]:
    report = result.load_report(i)
    if detail != "stages":
        del report["stages"]
    return report


def _head(result: Audit, detail: str) -> dict[str, Any]:
    plan = result.tree.plan
    head: dict[str, Any] = {"title": plan.title, "supply": plan.supply, "temperature": plan.temperature}
    if detail != "stages":
        head["detail"] = detail
    head["summary"] = result.summary()
    return head


def iter_json(result: Audit, detail: str = "stages", indent: bool | None = None) -> Iterator[bytes]:
    """The JSON text in pieces (UTF-8).  ``detail``: ``stages`` (everything),
    ``loads`` (no per-stage terms), ``summary`` (no per-load entries)."""
    if detail not in DETAILS:
        raise ValueError(f"detail must be one of {', '.join(DETAILS)}")
    _check_finite(result)
    n = len(result.tree.loads)
    if indent is None:
        indent = n <= INDENT_UP_TO
    head = _head(result, detail)
    if indent:
        data = dict(head)
        data["loads"] = [] if detail == "summary" else [_load(result, i, detail) for i in range(n)]
        data["matched"] = result.matched()
        yield orjson.dumps(data, option=orjson.OPT_INDENT_2 | _NUMPY) + b"\n"
        return
    yield orjson.dumps(head, option=_NUMPY)[:-1] + b',"loads":['
    if detail != "summary":
        for start in range(0, n, _CHUNK):
            piece = orjson.dumps([_load(result, i, detail) for i in range(start, min(n, start + _CHUNK))], option=_NUMPY)
            yield (b"," if start else b"") + piece[1:-1]
    yield b'],"matched":' + orjson.dumps(result.matched(), option=_NUMPY) + b"}\n"


def to_json(result: Audit, detail: str = "stages", indent: bool | None = None) -> str:
    return b"".join(iter_json(result, detail, indent)).decode("utf-8")


def write_json(result: Audit, stream: IO[bytes], detail: str = "stages", indent: bool | None = None) -> None:
    """Stream the JSON to a binary file object, piece by piece."""
    for piece in iter_json(result, detail, indent):
        stream.write(piece)


def to_json_stdlib(result: Audit) -> str:
    """The reference encoding (standard library, every stage): slow, kept to test against."""
    return json.dumps(result.to_dict(), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
