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


def _environment(folder: Path) -> dict[str, str]:
    import os

    env = dict(os.environ)
    env["HOME"] = str(folder)  # no user start-up file: the run depends on the deck (and spiceinit) alone
    return env
