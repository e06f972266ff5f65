"""Cross-check biastree's currents with the ngspice circuit simulator.

Netlists run through ``biastree.sim.ngspice`` (a temporary folder, batch
mode, no shell, a time limit).  The simulator's own words are kept: a line
starting with ``Error`` or ``Warning`` on either stream (warnings are allowed
for model libraries read in compatibility mode), a singular matrix, or a
missing or incomplete raw file all fail the check, even when ngspice exits 0.
"""

from __future__ import annotations

import math
import shutil  # noqa: F401  (tests patch shutil.which through this module)
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from biastree.analysis.solve import CASES, OperatingPoint, solve
from biastree.errors import SimulatorError
from biastree.output.spice import Netlist, to_spice
from biastree.sim.ngspice import INSTALL_HINT, find_ngspice, parse_raw, run_deck  # noqa: F401  (re-exported)
from biastree.tree.arrays import Tree



def run_ngspice(netlist: str, timeout: float = 120.0, spiceinit: str = "") -> dict[str, np.ndarray]:
    """Run one netlist; return the first plot's variables (names in lower case)."""
    # model libraries written for several simulators print harmless warnings in compatibility mode
    run = run_deck(netlist, spiceinit, timeout, allow_warnings=bool(spiceinit))
    return parse_raw(run.raw)[0]


def simulated_currents(netlist: Netlist, variables: dict[str, np.ndarray]) -> dict[str, float]:
    """Current of one instance of every load, from the ammeters."""
    out = {}
    for load, ammeter in netlist.ammeters.items():
        key = f"i({ammeter})"
        if key not in variables:
            raise SimulatorError(f"ngspice result has no {key} for load {load}")
        out[load] = float(variables[key][0]) / netlist.instances[load]
    return out


@dataclass(frozen=True)
class Comparison:
    """biastree's and the simulator's current for every load and case."""

    loads: tuple[str, ...]
    cases: tuple[str, ...]
    ours: np.ndarray  # (n_loads, n_cases)
    simulated: np.ndarray
    tolerance: float

    @property
    def difference(self) -> np.ndarray:
        """Relative difference (ours − simulated) / simulated."""
        return (self.ours - self.simulated) / np.abs(self.simulated)

    @property
    def worst(self) -> float:
        return float(np.max(np.abs(self.difference))) if self.ours.size else 0.0

    @property
    def agrees(self) -> bool:
        return bool(np.all(np.abs(self.difference) <= self.tolerance)) and math.isfinite(self.worst)


def verify(
    tree: Tree,
    tolerance: float = 1e-5,
    cases: tuple[str, ...] = CASES,
    op: OperatingPoint | None = None,
    timeout: float = 120.0,
) -> Comparison:
    """Solve the tree (unless ``op`` is given) and compare with ngspice at every case."""
    find_ngspice()
    op = solve(tree) if op is None else op
    ours = np.zeros((len(tree.loads), len(cases)))
    sim = np.zeros_like(ours)
    for k, case in enumerate(cases):
        netlist = to_spice(tree, case, op=op)
        currents = simulated_currents(netlist, run_ngspice(netlist.text, timeout, netlist.spiceinit))
        ours[:, k] = op.l_current[:, CASES.index(case)]
        sim[:, k] = [currents[name] for name in tree.loads]
    return Comparison(tree.loads, tuple(cases), ours, sim, tolerance)


def simulate_sweep(tree: Tree, load: str, start: float, stop: float, step: float,
                   timeout: float = 120.0) -> tuple[np.ndarray, np.ndarray]:
    """(node voltages, current of one instance) of ``load`` swept by ngspice `.dc`."""
    netlist = to_spice(tree, "nominal")
    values = run_ngspice(netlist.with_sweep(load, start, stop, step), timeout, netlist.spiceinit)
    current = values[f"i({netlist.ammeters[load]})"] / netlist.instances[load]
    sweep = next((v for k, v in values.items() if "sweep" in k), None)
    if sweep is None:
        sweep = start + step * np.arange(len(current))
    return sweep, current


def ngspice_monte_carlo(tree: Tree, samples: int, seed: int = 1, timeout: float = 600.0) -> np.ndarray:
    """(n_loads, samples): load currents from an ngspice Monte Carlo of the
    exported netlist — every bipolar device's area scaled by e^δ, δ normal with
    the device's σ(ΔIS/IS) (``alter`` in a ``.control`` loop, ``sgauss``,
    ``setseed``).  Simple bipolar mirrors only: the devices map one to one."""
    from biastree.analysis.spread import device_sigmas

    plan = tree.plan
    for name in tree.mirrors:
        spec = plan.mirrors[name]
        if spec.topology != "simple" or plan.devices[spec.device].kind not in ("npn", "pnp"):
            raise SimulatorError("ngspice Monte Carlo is written for simple bipolar mirrors only")
    netlist = to_spice(tree, "nominal")
    sig = device_sigmas(tree)
    lines = netlist.text.splitlines()
    areas = {}
    for line in lines:
        if line.startswith("q"):
            parts = line.split()
            areas[parts[0]] = float(parts[-1].split("=")[1])
    alters = []
    names = {}
    for i, m in enumerate(tree.mirrors):
        tag = netlist.mirror_nodes[m][2:]
        names[f"q{tag}_in"] = float(sig.in_is[i])
    for b in range(len(tree.b_parent)):
        m = tree.mirrors[tree.b_parent[b]]
        tag = netlist.mirror_nodes[m][2:]
        names[f"q{tag}_o{int(tree.b_index[b])}"] = float(sig.out_is[b])
    for dev, sigma in names.items():
        alters.append(f"  alter {dev} area = {areas[dev]!r}*exp({sigma!r}*sgauss(0))")
    loads = list(tree.loads)
    vectors = [f"i{k}" for k in range(len(loads))]
    control = [".control", f"setseed {int(seed)}", f"let n = {int(samples)}", "let k = 0"]
    control += ["while k < n"] + alters + ["  op"]
    control += [f"  let {v} = i({netlist.ammeters[l]})" for v, l in zip(vectors, loads)]
    control += ["  echo MC " + " ".join(f"$&{v}" for v in vectors)]
    control += ["  destroy", "  let k = k + 1", "end", ".endc"]
    text = "\n".join(lines[:-1] + control + [".end"]) + "\n"
    exe = find_ngspice()
    with tempfile.TemporaryDirectory(prefix="biastree-mc-") as tmp:
        folder = Path(tmp)
        (folder / "mc.cir").write_text(text.replace(".op\n", ""), encoding="utf-8")
        try:
            proc = subprocess.run([exe, "-b", "mc.cir"], cwd=folder, capture_output=True, text=True,
                                  timeout=timeout, stdin=subprocess.DEVNULL)
        except subprocess.TimeoutExpired:
            raise SimulatorError(f"ngspice Monte Carlo did not finish within {timeout:g} s") from None
    rows = [line.split()[1:] for line in proc.stdout.splitlines() if line.startswith("MC ")]
    if len(rows) != samples:
        raise SimulatorError(f"ngspice Monte Carlo gave {len(rows)} of {samples} samples: "
                             f"{(proc.stderr or proc.stdout).strip()[-300:]}")
    currents = np.array(rows, dtype=float).T
    inst = np.array([netlist.instances[l] for l in loads])[:, None]
    return currents / inst
