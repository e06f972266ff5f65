"""Cross-check biastree's currents with the ngspice circuit simulator.

Netlists run through ``biastree.sim.ngspice`` (a temporary folder, batch
mode, no shell, a time limit).  The simulator's own words are kept: a line
starting with ``Error`` or ``Warning`` on either stream (warnings are allowed
for model libraries read in compatibility mode), a singular matrix, or a
missing or incomplete raw file all fail the check, even when ngspice exits 0.
"""

from __future__ import annotations

import math
import re
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
class Device:
    """One transistor of the netlist as the simulator biased it."""

    name: str
    mirror: str  # the mirror it belongs to ("" unknown)
    nodes: tuple[str, ...]  # c b e (BJT) or d g s b (MOS)
    outside: float  # how far outside its active region, V (≤ 0: active)
    what: str  # e.g. "base-collector forward-biased by 312 mV"


def device_states(netlist: Netlist, variables: dict[str, np.ndarray], forward_bias: float = 0.0) -> list[Device]:
    """Every bipolar transistor and level-1 MOSFET of the netlist, with how far the simulator's
    node voltages put it outside its active region: a BJT whose base-collector junction is
    forward-biased by more than ``forward_bias`` (the rule ``check`` applies: VCB ≥ 0), a MOSFET
    whose |VDS| is below |VGS| − |VTO| (triode)."""
    def v(node: str) -> float:
        if node == "0":
            return 0.0
        values = variables.get(f"v({node})")
        return float(values[0]) if values is not None else math.nan

    vto: dict[str, tuple[str, float]] = {}
    for line in netlist.text.splitlines():
        if line.lower().startswith(".model"):
            parts = line.replace("(", " ").replace(")", " ").split()
            kind = parts[2].lower()
            params = dict(p.split("=", 1) for p in parts[3:] if "=" in p)
            vto[parts[1].lower()] = (kind, float(params.get("vto", "0")))
    tags = sorted(((node[2:], m) for m, node in netlist.mirror_nodes.items()), key=lambda t: -len(t[0]))
    out = []
    for line in netlist.text.splitlines():
        parts = line.split()
        if not parts or parts[0][0].lower() not in "qm" or parts[0].startswith("*"):
            continue
        name = parts[0].lower()
        mirror = next((m for tag, m in tags if name[1:].startswith(tag + "_")), "")
        if name[0] == "q" and len(parts) >= 5:
            c, b, e, model = parts[1:5]
            kind = vto.get(model.lower(), ("npn", 0.0))[0]
            vbc = (v(b) - v(c)) if kind == "npn" else (v(c) - v(b))
            out.append(Device(name, mirror, (c, b, e), vbc - forward_bias,
                              f"base-collector forward-biased by {vbc * 1e3:.3g} mV"))
        elif name[0] == "m" and len(parts) >= 6 and parts[5].lower() in vto:
            d, g, src, bulk, model = parts[1:6]
            kind, threshold = vto[model.lower()]
            sign = 1.0 if kind == "nmos" else -1.0
            vov = sign * (v(g) - v(src)) - abs(threshold)
            vds = sign * (v(d) - v(src))
            out.append(Device(name, mirror, (d, g, src, bulk), (vov - vds) if vov > 0 else -math.inf,
                              f"in triode: |VDS| {vds * 1e3:.3g} mV below VGS − VT {vov * 1e3:.3g} mV"))
    return out


@dataclass(frozen=True)
class Comparison:
    """biastree's and the simulator's current for every load and case."""

    loads: tuple[str, ...]
    cases: tuple[str, ...]
    ours: np.ndarray  # (n_loads, n_cases)
    simulated: np.ndarray
    tolerance: float
    # why a load and case disagree, where it is known ("" otherwise), (n_loads, n_cases)
    reasons: tuple[tuple[str, ...], ...] = ()

    def reason(self, load: int, case: int) -> str:
        return self.reasons[load][case] if self.reasons else ""

    @property
    def explained(self) -> int:
        """Disagreeing (load, case) pairs with a known cause."""
        bad = np.abs(self.difference) > self.tolerance
        return int(sum(1 for i, k in zip(*np.nonzero(bad)) if self.reason(int(i), int(k))))

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
    reasons: list[list[str]] = [[""] * len(cases) for _ in tree.loads]
    for k, case in enumerate(cases):
        netlist = to_spice(tree, case, op=op)
        variables = run_ngspice(netlist.text, timeout, netlist.spiceinit)
        currents = simulated_currents(netlist, variables)
        c = CASES.index(case)
        ours[:, k] = op.l_current[:, c]
        sim[:, k] = [currents[name] for name in tree.loads]
        bad = np.abs((ours[:, k] - sim[:, k]) / np.abs(sim[:, k])) > tolerance
        if bad.any():
            devices = device_states(netlist, variables, tree.plan.compliance.bjt_forward_bias)
            for i in np.flatnonzero(bad):
                name = tree.loads[int(i)]
                reasons[int(i)][k] = explain(tree, op, c, int(i), devices, "o_" + netlist.ammeters[name][3:])
    return Comparison(tree.loads, tuple(cases), ours, sim, tolerance, tuple(tuple(r) for r in reasons))


def explain(tree: Tree, op: OperatingPoint, case: int, load: int, devices: list[Device], out_node: str = "") -> str:
    """Known causes of a disagreement for one load in one case ("" when none is known):
    an output (or a branch on the path) that biastree already reports out of compliance,
    and devices the simulator drove out of their active region — the load's own output,
    a sibling output on the same mirror (bipolar: its base current loads the shared base
    line, so the siblings move too), or a mirror upstream."""
    comp = op.b_compliance[:, case]
    branch = int(tree.l_branch[load])
    parent = int(tree.b_parent[branch])
    why = []
    if comp[branch] < 0:
        why.append(f"check reports this output out of compliance ({comp[branch] * 1e3:+.4g} mV): outside the "
                   "active region biastree's equations and the simulator's model part")
    path = tree.path(load)
    upstream = [int(tree.m_in_branch[m]) for m in path[1:]]
    lacking = [b for b in upstream if comp[b] < 0]
    if lacking:
        b = lacking[0]
        why.append(f"check reports {tree.mirrors[tree.b_parent[b]]} -> {tree.mirrors[tree.b_child[b]]} out of "
                   f"compliance ({comp[b] * 1e3:+.4g} mV)")
    own = int(tree.b_index[branch])
    on_path = {tree.mirrors[m] for m in path}
    mine, siblings, others, above = [], [], [], []
    for d in devices:
        if d.outside <= 0 or d.mirror not in on_path:
            continue
        if d.mirror != tree.mirrors[parent]:
            above.append(d)
            continue
        position = re.search(r"_[oc](\d+)$", d.name)
        if (position and int(position.group(1)) == own) or d.nodes[0] == out_node:
            mine.append(d)
        elif position:
            siblings.append(d)
        else:
            others.append(d)
    if mine:
        why.append("the simulator drove the output device out of its active region (" +
                   "; ".join(f"{d.name}: {d.what}" for d in mine[:2]) + ")")
    if siblings:
        bipolar = bool(tree.m_bipolar[parent])
        why.append(f"a sibling output of {tree.mirrors[parent]} is out of its active region in the simulator ("
                   + "; ".join(f"{d.name}: {d.what}" for d in siblings[:2]) + ")"
                   + ("; its extra base current loads the shared base line, so this load moved too" if bipolar else "")
                   + f"; biastree's figure assumes every output of {tree.mirrors[parent]} active")
    if others:
        why.append(f"the simulator drove {', '.join(d.name for d in others[:2])} inside {tree.mirrors[parent]} out of "
                   "its active region (" + "; ".join(d.what for d in others[:2]) + ")")
    if above:
        why.append("upstream, the simulator drove " + "; ".join(f"{d.name} ({d.mirror}): {d.what}" for d in above[:2])
                   + " out of its active region")
    return "; ".join(why)


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
