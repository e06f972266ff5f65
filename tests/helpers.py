"""Small builders for plans in tests (invented values)."""

from __future__ import annotations

import json
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
