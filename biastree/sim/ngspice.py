"""A plain ngspice runner (layer 0: knows decks as text, nothing of plans).

The deck is written to a fresh temporary folder and ngspice runs there in
batch mode, without a shell, with a time limit.  ``spiceinit`` (e.g.
``set ngbehavior=hsa`` for libraries written for other simulators) becomes
the folder's ``.spiceinit``, which ngspice reads before the deck; without it
ngspice runs with ``-n`` and reads no start-up file at all.  The simulator's
own words are kept: a line starting with ``Error`` (or ``Warning``, unless
allowed), a singular matrix or no convergence fails the run, even when
ngspice exits 0.
"""

from __future__ import annotations

import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from biastree.errors import SimulatorError

INSTALL_HINT = "ngspice is not installed: install it (Debian/Ubuntu: apt-get install ngspice) and try again"
BAD_WORDS = ("singular matrix", "timestep too small", "no convergence", "iteration limit reached", "failed")
# Settings open-PDK libraries need in ngspice 39: their own simulator dialect, and no
# model-parameter range check (it takes long on large libraries and only warns).
COMPATIBLE = "set ngbehavior=hsa\nset ng_nomodcheck\n"


def find_ngspice() -> str:
    exe = shutil.which("ngspice")
    if exe is None:
        raise SimulatorError(INSTALL_HINT)
    return exe


@dataclass(frozen=True)
class Run:
    stdout: str
    stderr: str
    raw: str  # the ASCII raw file's text ("" if none was asked for)


def run_deck(deck: str, spiceinit: str = "", timeout: float = 120.0, raw: bool = True,
             allow_warnings: bool = False) -> Run:
    """Run one deck; return what ngspice printed and the raw file it wrote."""
    exe = find_ngspice()
    with tempfile.TemporaryDirectory(prefix="biastree-") as tmp:
        folder = Path(tmp)
        (folder / "deck.cir").write_text(deck, encoding="utf-8")
        args = [exe, "-b"]
        if spiceinit:
            (folder / ".spiceinit").write_text(spiceinit, encoding="utf-8")
        else:
            args.append("-n")
        if raw:
            args += ["-r", "out.raw"]
        try:
            proc = subprocess.run(args + ["deck.cir"], cwd=folder, capture_output=True, text=True,
                                  timeout=timeout, stdin=subprocess.DEVNULL, env=_environment(folder))
        except subprocess.TimeoutExpired:
            raise SimulatorError(f"ngspice did not finish within {timeout:g} s") from None
        heads = ("error",) if allow_warnings else ("error", "warning")
        complaints = [
            line.strip()
            for line in (proc.stderr + "\n" + proc.stdout).splitlines()
            if line.strip().lower().startswith(heads) or any(word in line.lower() for word in BAD_WORDS)
        ]
        if complaints:
            raise SimulatorError("ngspice: " + " | ".join(list(dict.fromkeys(complaints))[:8]))
        if proc.returncode != 0:
            raise SimulatorError(f"ngspice exited with status {proc.returncode}: {proc.stderr.strip()[:500]}")
        text = ""
        if raw:
            path = folder / "out.raw"
            if not path.exists():
                raise SimulatorError("ngspice wrote no raw file")
            text = path.read_text(encoding="utf-8", errors="replace")
        return Run(proc.stdout, proc.stderr, text)


def parse_raw(text: str) -> list[dict[str, np.ndarray]]:
    """Plots of an ASCII SPICE raw file: one dict per plot, variable → values.

    >>> raw = ("Title: t\\nPlotname: Operating Point\\nFlags: real\\nNo. Variables: 2\\n"
    ...        "No. Points: 1\\nVariables:\\n\\t0\\tv(a)\\tvoltage\\n\\t1\\ti(v1)\\tcurrent\\n"
    ...        "Values:\\n0\\t\\t1.5e+00\\n\\t-2.0e-06\\n")
    >>> float(parse_raw(raw)[0]["i(v1)"][0])
    -2e-06
    """
    plots = []
    lines = text.splitlines()
    i = 0
    while i < len(lines):
        header: dict[str, str] = {}
        while i < len(lines) and not lines[i].startswith("Variables:"):
            if ":" in lines[i]:
                key, _, value = lines[i].partition(":")
                header[key.strip().lower()] = value.strip()
            i += 1
        if i >= len(lines):
            break
        try:
            n_vars = int(header["no. variables"])
            n_points = int(header["no. points"])
        except (KeyError, ValueError):
            raise SimulatorError("raw file: header without variable or point counts") from None
        complex_values = "complex" in header.get("flags", "")
        names = []
        i += 1
        for _ in range(n_vars):
            if i >= len(lines):
                raise SimulatorError("raw file: truncated variable list")
            parts = lines[i].split()
            names.append(parts[1].lower())
            i += 1
        if i >= len(lines) or not lines[i].startswith("Values:"):
            raise SimulatorError("raw file: no values (binary raw file, or the run stopped early)")
        i += 1
        tokens: list[str] = []
        needed = n_points * (n_vars + 1)
        while i < len(lines) and len(tokens) < needed:
            tokens += lines[i].split()
            i += 1
        if len(tokens) < needed:
            raise SimulatorError(f"raw file: incomplete ({len(tokens)} of {needed} numbers)")
        table = np.array(tokens[:needed], dtype=object).reshape(n_points, n_vars + 1)[:, 1:]

        def value(tok: str) -> float:
            return float(tok.split(",")[0]) if complex_values else float(tok)

        plots.append({name: np.array([value(t) for t in table[:, k]]) for k, name in enumerate(names)})
    if not plots:
        raise SimulatorError("raw file: no plot found")
    return plots


def _environment(folder: Path) -> dict[str, str]:
    import os

    env = dict(os.environ)
    env["HOME"] = str(folder)  # no user start-up file: the run depends on the deck (and spiceinit) alone
    return env
