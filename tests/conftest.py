"""Shared fixtures.  External tools (ngspice, Graphviz dot) are *required*
when CI=true: a missing tool fails the test there instead of skipping it."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = sorted((ROOT / "samples").glob("*.yaml"))


def require_tool(name: str, install: str) -> None:
    if shutil.which(name):
        return
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail(f"{name} is required in CI but not installed ({install})")
    pytest.skip(f"{name} not installed ({install})")


@pytest.fixture
def ngspice() -> None:
    require_tool("ngspice", "apt-get install ngspice")


@pytest.fixture
def dot() -> None:
    require_tool("dot", "apt-get install graphviz")


@pytest.fixture
def write_plan(tmp_path: Path):  # type: ignore[no-untyped-def]
    """Write plan text to a file and return its path."""

    def _write(text: str, name: str = "plan.yaml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path

    return _write
