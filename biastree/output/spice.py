"""SPICE netlist of a whole bias tree (ngspice dialect).

Replicated branches (``count``) are written once with multiplicity: a
BJT's ``area`` and a MOSFET's ``m`` scale every current of a copied
subtree by its number of instances, which by symmetry is exactly what k
identical copies do.  Each load sits at its node voltage through a 0 V
ammeter whose current, divided by the load's instances, is the current of
one instance (positive = delivered); a comment table at the end maps
ammeters back to loads.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from biastree.analysis.conditions import condition_columns, reference_current
from biastree.analysis.floorplan import remote_offsets as tree_remote
from biastree.analysis.solve import CASES, OperatingPoint, solve, topology_params
from biastree.analysis import cards as model_cards
from biastree.input.cards import CardModel
from biastree.input.model import BjtModel, MosModel
from biastree.sim.ngspice import COMPATIBLE
from biastree.tree.arrays import Tree
from biastree.units import ZERO_CELSIUS

# Tight tolerances: with SPICE's default reltol=1e-3 the KCL residual alone
# is ~1e-4 of the device currents and would hide real disagreements.  gmin
# is lowered so the conductance SPICE puts across every junction does not
# add ~1e-12 S × 0.7 V to sub-µA currents.
OPTIONS = ".options reltol=1e-7 abstol=1e-16 vntol=1e-10 gmin=1e-18 filetype=ascii"
MAX_NAME = 24


def _num(x: float) -> str:
    return f"{x:.12g}"


class Names:
    """Plan names → unique, SPICE-safe, case-insensitive names (and back)."""

    def __init__(self) -> None:
        self._taken: set[str] = set()
        self.forward: dict[tuple[str, str], str] = {}

    def get(self, kind: str, name: str) -> str:
        key = (kind, name)
        if key in self.forward:
            return self.forward[key]
        base = re.sub(r"[^a-z0-9_]", "_", name.lower())[:MAX_NAME] or "n"
        if not base[0].isalpha():
            base = "n" + base
        candidate, k = base, 1
        while candidate in self._taken:
            k += 1
            candidate = f"{base}_{k}"
        self._taken.add(candidate)
        self.forward[key] = candidate
        return candidate


@dataclass
class Netlist:
    """Netlist text plus the map from ammeters to loads."""

    text: str
    case: str
    ammeters: dict[str, str] = field(default_factory=dict)  # load name → ammeter source (lower case)
    instances: dict[str, float] = field(default_factory=dict)  # load name → instances behind the ammeter
    sources: dict[str, str] = field(default_factory=dict)  # load name → its node-voltage source
    mirror_nodes: dict[str, str] = field(default_factory=dict)  # mirror name → input node
    spiceinit: str = ""  # start-up settings the models need (ngspice compatibility mode for PDK libraries)

    def with_sweep(self, load: str, start: float, stop: float, step: float) -> str:
        """The netlist with its operating point replaced by a DC sweep of one load's voltage."""
        return self.text.replace("\n.op\n", f"\n.dc {self.sources[load]} {_num(start)} {_num(stop)} {_num(step)}\n")


def _model_card(name: str, dev: BjtModel | MosModel, temperature: float) -> str:
    if isinstance(dev, BjtModel):
        params = [f"is={_num(dev.is_)}", f"bf={_num(dev.beta)}"]
        if dev.early is not None:
            params.append(f"vaf={_num(dev.early)}")
        params += [f"xti={_num(dev.xti)}", f"eg={_num(dev.eg)}", f"xtb={_num(dev.xtb)}",
                   f"tnom={_num(dev.tnom - ZERO_CELSIUS)}"]
        return f".model {name} {dev.kind} ({' '.join(params)})"
    # Level 1 has no linear VT tempco: write the card evaluated at the temperature
    # (biastree's law, see biastree.conditions) with tnom = temp, so ngspice applies no law of its own.
    vth = dev.vth + dev.vth_tc * (temperature - dev.tnom)
    kp = dev.kp * (temperature / dev.tnom) ** dev.mobility_exp
    vto = vth if dev.kind == "nmos" else -vth
    params = ["level=1", f"kp={_num(kp)}", f"vto={_num(vto)}", f"lambda={_num(dev.lambda_)}",
              f"tnom={_num(temperature - ZERO_CELSIUS)}"]
    return f".model {name} {dev.kind} ({' '.join(params)})"


Writer = Callable[["_Context", str], list[str]]


@dataclass
class _Context:
    tree: Tree
    names: Names
    models: dict[str, str]
    node_of_mirror: dict[str, str]
    out_node: dict[tuple[str, int], str]
    mult: dict[str, float]
    params: dict[str, np.ndarray]

    remote_lines: list[str] = field(default_factory=list)
    hot_models: list[str] = field(default_factory=list)
    kelvin: float = 300.15
    remote: Any = None  # biastree.floorplan.Remote of the plan, or None

    def param(self, key: str, mirror: str) -> float:
        return float(self.params[key][self.tree.mirrors.index(mirror), 0])

    def out_rail(self, mirror: str, i: int, rail: str) -> tuple[str, str]:
        """(rail node, extra instance parameters) of branch i's output device: a remote
        device gets its own rail, offset by the IR drop, and its temperature offset."""
        tree = self.tree
        remote = self.remote
        m = tree.mirrors.index(mirror)
        b = int(np.flatnonzero((tree.b_parent == m) & (tree.b_index == i))[0])
        if remote is None or not (remote.delta_v[b] or remote.delta_t[b]):
            return rail, ""
        tag = f"{self.names.get('mirror', mirror)}_o{i}"
        node = f"r_{tag}"
        dv = float(remote.delta_v[b])
        # the remote rail sits ΔV towards the other rail (ground up, supply down)
        self.remote_lines.append(f"vr_{tag} {node} {rail} dc {_num(dv if rail == '0' else -dv)}")
        bipolar = bool(tree.m_bipolar[m])
        extra = ""
        if remote.delta_t[b] and bipolar:
            extra = f" dtemp={_num(float(remote.delta_t[b]))}"
        elif remote.delta_t[b]:
            # a MOS card is evaluated at its temperature: the warmer device gets its own card
            model = f"{self.models[tree.plan.mirrors[mirror].device]}_{tag}"
            dev = tree.plan.devices[tree.plan.mirrors[mirror].device]
            self.hot_models.append(_model_card(model, dev, self.kelvin + float(remote.delta_t[b])))
            extra = f"@model={model} dtemp={_num(float(remote.delta_t[b]))}"
        return node, extra

    def device(self, label: str, mirror: str, c: str, b: str, e: str, size: float, multiplicity: float,
               extra: str = "", bulk: str | None = None) -> str:
        """One device of ``mirror``: size in unit devices, times ``multiplicity`` copies."""
        plan = self.tree.plan
        dev = plan.devices[plan.mirrors[mirror].device]
        model = self.models[plan.mirrors[mirror].device]
        if isinstance(dev, CardModel):
            rail = "0" if dev.kind in ("npn", "nmos") else "vdd"
            return model_cards.instance_line(label, dev, c, b, e, bulk or rail, size * multiplicity)
        if isinstance(dev, BjtModel):
            return f"q{label} {c} {b} {e} {model} area={_num(size * multiplicity)}{extra}"
        if extra.startswith("@model="):
            model, _, rest = extra[len("@model="):].partition(" ")
            extra = " " + rest if rest else ""
        return (f"m{label} {c} {b} {e} {bulk or e} {model} w={_num(dev.w * size)} l={_num(dev.l)} "
                f"m={_num(multiplicity)}{extra}")


def _frame(ctx: _Context, mirror: str) -> tuple[str, str, str, str, float]:
    """(tag, input node, rail, opposite rail, instances) of a mirror."""
    plan = ctx.tree.plan
    spec = plan.mirrors[mirror]
    sink = plan.devices[spec.device].kind in ("npn", "nmos")
    return (ctx.names.get("mirror", mirror), ctx.node_of_mirror[mirror], "0" if sink else "vdd",
            "vdd" if sink else "0", ctx.mult[mirror])


def _simple(ctx: _Context, mirror: str) -> list[str]:
    spec = ctx.tree.plan.mirrors[mirror]
    tag, node, rail, _, mult = _frame(ctx, mirror)
    lines = [ctx.device(f"{tag}_in", mirror, node, node, rail, spec.input_size, mult)]
    for i, branch in enumerate(spec.branches):
        out = ctx.out_node[(mirror, i)]
        erail, extra = ctx.out_rail(mirror, i, rail)
        lines.append(ctx.device(f"{tag}_o{i}", mirror, out, node, erail, branch.ratio * spec.input_size,
                                mult * branch.count, extra))
    return lines


def _beta_helper(ctx: _Context, mirror: str) -> list[str]:
    spec = ctx.tree.plan.mirrors[mirror]
    tag, node, rail, other, mult = _frame(ctx, mirror)
    base = f"b_{tag}"
    lines = [
        ctx.device(f"{tag}_in", mirror, node, base, rail, spec.input_size, mult),
        ctx.device(f"{tag}_hlp", mirror, other, node, base, spec.helper_size, mult),
    ]
    if spec.bleed > 0:
        a, b = (base, "0") if rail == "0" else ("vdd", base)
        lines.append(f"i{tag}_bleed {a} {b} dc {_num(spec.bleed * mult)}")
    for i, branch in enumerate(spec.branches):
        erail, extra = ctx.out_rail(mirror, i, rail)
        lines.append(ctx.device(f"{tag}_o{i}", mirror, ctx.out_node[(mirror, i)], base, erail,
                                branch.ratio * spec.input_size, mult * branch.count, extra))
    return lines


def _wilson(ctx: _Context, mirror: str, four: bool = False) -> list[str]:
    spec = ctx.tree.plan.mirrors[mirror]
    tag, node, rail, _, mult = _frame(ctx, mirror)
    base, m = f"b_{tag}", spec.branches[0].ratio
    a0 = spec.input_size
    q1_collector = f"x_{tag}" if four else node
    lines = [
        ctx.device(f"{tag}_q1", mirror, q1_collector, base, rail, a0, mult),
        ctx.device(f"{tag}_q2", mirror, base, base, rail, m * a0, mult),
        ctx.device(f"{tag}_q3", mirror, ctx.out_node[(mirror, 0)], node, base, m * a0, mult),
    ]
    if four:
        lines.append(ctx.device(f"{tag}_q4", mirror, node, node, q1_collector, a0, mult))
    return lines


def _wilson4(ctx: _Context, mirror: str) -> list[str]:
    return _wilson(ctx, mirror, four=True)


def _cascode(ctx: _Context, mirror: str) -> list[str]:
    spec = ctx.tree.plan.mirrors[mirror]
    tag, node, rail, _, mult = _frame(ctx, mirror)
    base, a0 = f"b_{tag}", spec.input_size
    lines = [
        ctx.device(f"{tag}_in1", mirror, base, base, rail, a0, mult),
        ctx.device(f"{tag}_in2", mirror, node, node, base, a0, mult),
    ]
    return lines + _stacked_outputs(ctx, mirror, base, node)


def _stacked_outputs(ctx: _Context, mirror: str, mirror_gate: str, cascode_gate: str) -> list[str]:
    """Per branch: a mirror device (on its rail, maybe remote) under a cascode device."""
    spec = ctx.tree.plan.mirrors[mirror]
    tag, _, rail, _, mult = _frame(ctx, mirror)
    lines = []
    for i, branch in enumerate(spec.branches):
        mid = f"x{i}_{tag}"
        size, copies = branch.ratio * spec.input_size, mult * branch.count
        erail, extra = ctx.out_rail(mirror, i, rail)
        lines.append(ctx.device(f"{tag}_o{i}", mirror, mid, mirror_gate, erail, size, copies, extra))
        lines.append(ctx.device(f"{tag}_c{i}", mirror, ctx.out_node[(mirror, i)], cascode_gate, mid, size, copies,
                                bulk=rail))
    return lines


def _wide_swing(ctx: _Context, mirror: str) -> list[str]:
    spec = ctx.tree.plan.mirrors[mirror]
    tag, node, rail, _, mult = _frame(ctx, mirror)
    gate, mid, a0 = f"g_{tag}", f"x_{tag}", spec.input_size
    bias = ctx.param("bias_current", mirror)
    a, b = ("vdd", gate) if rail == "0" else (gate, "0")
    lines = [
        f"i{tag}_bias {a} {b} dc {_num(bias * mult)}",
        ctx.device(f"{tag}_bias", mirror, gate, gate, rail, a0 / (spec.swing_n + 1.0) ** 2, mult),
        ctx.device(f"{tag}_in1", mirror, mid, node, rail, a0, mult),
        ctx.device(f"{tag}_in2", mirror, node, gate, mid, a0, mult),
    ]
    return lines + _stacked_outputs(ctx, mirror, node, gate)


def _degenerated(ctx: _Context, mirror: str) -> list[str]:
    spec = ctx.tree.plan.mirrors[mirror]
    tag, node, rail, _, mult = _frame(ctx, mirror)
    r1 = ctx.param("r_emitter", mirror)
    lines = [
        ctx.device(f"{tag}_in", mirror, node, node, f"e_{tag}", spec.input_size, mult),
        f"r{tag}_in e_{tag} {rail} {_num(r1 / mult)}",
    ]
    for i, branch in enumerate(spec.branches):
        copies = mult * branch.count
        erail, extra = ctx.out_rail(mirror, i, rail)
        lines.append(ctx.device(f"{tag}_o{i}", mirror, ctx.out_node[(mirror, i)], node, f"e{i}_{tag}",
                                branch.ratio * spec.input_size, copies, extra))
        lines.append(f"r{tag}_o{i} e{i}_{tag} {erail} {_num(r1 / branch.ratio / copies)}")
    return lines


WRITERS: dict[str, Writer] = {
    "simple": _simple,
    "beta_helper": _beta_helper,
    "wilson": _wilson,
    "wilson4": _wilson4,
    "cascode": _cascode,
    "wide_swing": _wide_swing,
    "degenerated": _degenerated,
}


def to_spice(tree: Tree, case: str = "nominal", source: str | None = None, op: OperatingPoint | None = None,
             temperature: float | None = None, supply: float | None = None, corner: str = "") -> Netlist:
    """The plan as an ngspice netlist, loads at the ``case`` end of their range.

    ``case`` is one of ``min``, ``nominal``, ``max``; ``temperature`` (K) and
    ``supply`` (V) override the plan's conditions; ``corner`` picks the library
    sections of devices given by cards.  Devices given by cards are written by
    reference (``.include`` / ``.lib FILE SECTION``) or inline, each size as
    ``m=`` copies of the unit device.  Every mirror's input
    node gets a ``.nodeset`` at biastree's solution (``op``, solved here if
    not given): only a starting guess for the simulator's Newton iteration,
    which still finds its own answer, but it spares deep trees the gmin
    stepping that could otherwise end in a singular matrix.
    """
    if case not in CASES:
        raise ValueError(f"case must be one of {', '.join(CASES)}")
    column = CASES.index(case)
    plan = tree.plan
    kelvin = plan.temperature if temperature is None else temperature
    vdd = plan.supply if supply is None else supply
    names = Names()
    names.get("node", "vdd")
    from biastree.version import __version__

    title = (plan.title or "untitled").replace("\n", " ")
    lines = [
        f"* biastree {__version__}: bias tree '{title}' from {source or 'a plan'}; load voltages at {case}",
        "* Design estimate for cross-checking; sign-off needs the foundry's models.",
        OPTIONS,
        f".temp {_num(kelvin - ZERO_CELSIUS)}",
    ]
    models: dict[str, str] = {}
    sources: list[str] = []
    for name, dev in plan.devices.items():
        if isinstance(dev, CardModel):
            models[name] = dev.model
            source = model_cards.source_line(dev, corner)
            if source not in sources:  # one .lib/.include per library, however many devices use it
                sources.append(source)
                lines.append(source)
            continue
        models[name] = names.get("model", name)
        lines.append(_model_card(models[name], dev, kelvin))
    lines.append(f"vdd vdd 0 dc {_num(vdd)}")

    node_of_mirror = {m: "n_" + names.get("mirror", m) for m in tree.mirrors}
    mult = {m: float(tree.m_mult[i]) for i, m in enumerate(tree.mirrors)}
    out_node: dict[tuple[str, int], str] = {}
    load_lines: list[str] = []
    ammeters: dict[str, str] = {}
    sources_of_loads: dict[str, str] = {}
    instances: dict[str, float] = {}
    for b in range(len(tree.b_parent)):
        parent = tree.mirrors[tree.b_parent[b]]
        index = int(tree.b_index[b])
        if tree.b_to_load[b]:
            load = tree.loads[tree.b_child[b]]
            tag = names.get("load", load)
            node = f"o_{tag}"
            out_node[(parent, index)] = node
            voltage = plan.loads[load].v_range[column]
            sink = bool(tree.m_sink[tree.b_parent[b]])
            # ammeter oriented so that the delivered current reads positive
            a, c = (f"l_{tag}", node) if sink else (node, f"l_{tag}")
            ammeters[load] = f"va_{tag}"
            sources_of_loads[load] = f"vl_{tag}"
            instances[load] = float(tree.l_mult[tree.b_child[b]])
            load_lines += [f"va_{tag} {a} {c} dc 0", f"vl_{tag} l_{tag} 0 dc {_num(voltage)}"]
        else:
            out_node[(parent, index)] = node_of_mirror[tree.mirrors[tree.b_child[b]]]

    root = tree.mirrors[0]
    root_node = node_of_mirror[root]
    i_ref = float(reference_current(plan, np.array(kelvin)))
    if tree.m_sink[0]:
        lines.append(f"iref vdd {root_node} dc {_num(i_ref)}")
    else:
        lines.append(f"iref {root_node} 0 dc {_num(i_ref)}")
    ctx = _Context(tree, names, models, node_of_mirror, out_node, mult, topology_params(tree), kelvin=kelvin,
                   remote=tree_remote(tree))
    for m in tree.mirrors:
        spec = plan.mirrors[m]
        lines.append(f"* mirror {m}: {spec.device} {spec.topology}, ×{mult[m]:g}")
        lines += WRITERS[spec.topology](ctx, m)
    if op is None:
        cols = condition_columns(tree, [kelvin], [vdd], [""], ends=CASES) if (temperature or supply) else None
        op = solve(tree, cols, output_resistance=False)
    nodeset = []
    for i, m in enumerate(tree.mirrors):
        v = float(op.m_v_in[i, column])
        nodeset.append(f"v({node_of_mirror[m]})={_num(v if tree.m_sink[i] else vdd - v)}")
    for k in range(0, len(nodeset), 6):
        lines.append(".nodeset " + " ".join(nodeset[k:k + 6]))
    if ctx.remote_lines:
        lines.append("* remote output devices: their rail offset by the IR drop (floorplan)")
        lines += ctx.remote_lines
        lines += ctx.hot_models
    lines.append("* loads: ammeter (0 V) then the node voltage")
    lines += load_lines
    lines.append(".op")
    lines.append("* ammeter -> load (instances behind the ammeter)")
    for load in tree.loads:
        lines.append(f"*   {ammeters[load]} -> {load} (x{instances[load]:g})")
    lines.append(".end")
    by_file = any(isinstance(d, CardModel) and d.card is None for d in plan.devices.values())
    return Netlist("\n".join(lines) + "\n", case, ammeters, instances, sources_of_loads, node_of_mirror,
                   spiceinit=COMPATIBLE if by_file else "")
