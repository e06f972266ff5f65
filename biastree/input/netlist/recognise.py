"""Recognise current mirrors on a flat device list, by their connections.

A mirror is a diode-connected device (base/gate tied to collector/drain,
directly or through a helper device) plus the devices of the same kind that
share its control net with their emitters/sources on the same rail.  The
improved topologies of the registry are matched first, by the connections
the SPICE writer (``biastree.output.spice``) gives each of them:

- wide_swing: bias diode G; input pair M1 (d=X, g=N) under M2 (d=N, g=G, s=X);
  outputs (g=N) under cascode devices (g=G);
- cascode: diode at B on the rail under a diode at N (s=B); outputs (b=B)
  under cascode devices (b=N);
- wilson4 / wilson (bipolar): Q2 diode at B, Q1 (b=B) whose collector is the
  input N (directly, or through the diode Q4), Q3 (b=N, e=B) the output;
- degenerated (bipolar): every emitter through a resistor to the rail;
- beta_helper (bipolar): input device (c=N, b=B) with a helper (b=N, e=B);
- simple: a diode and the devices sharing its base/gate.

A rail is a node whose DC voltage is fixed by voltage sources from ground.
An output device whose emitter/source sits on a rail a little (≤ 0.1 V)
away from the input device's rail is a remote output with an IR-drop
offset; farther away, the control net is shared across rails and reported.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Iterable

from biastree.input.netlist.flat import GROUND, SINKS, TRANSISTORS, Device, Finding, Flat, family

MAX_RAIL_OFFSET = 0.1  # V: a larger offset is a different rail, not an IR drop (common practice)


@dataclass
class Output:
    """One output of a mirror: the node its current flows to and the devices carrying it."""

    node: str
    devices: list[Device]
    size: float  # size of the mirror device (netlist units, × multiplicity)
    rail_offset: float = 0.0  # V towards the other rail (remote output device)
    dtemp: float = 0.0  # K warmer than the input device


@dataclass
class Stage:
    """A recognised mirror."""

    topology: str
    kind: str
    input_node: str
    rail: str
    input: Device  # the device that defines input_size
    devices: list[Device]
    outputs: list[Output]
    params: dict[str, float] = field(default_factory=dict)
    notes: list[Finding] = field(default_factory=list)
    sources: list[Device] = field(default_factory=list)  # bias/bleed sources and resistors it owns

    @property
    def sink(self) -> bool:
        return self.kind in SINKS


def fixed_voltages(devices: Iterable[Device], given: dict[str, float] | None = None) -> dict[str, float]:
    """DC voltage of every node tied to ground (or to a ``given`` node) through voltage sources."""
    sources = [d for d in devices if d.kind == "vsource" and d.value is not None]
    volts = {GROUND: 0.0, **(given or {})}
    changed = True
    while changed:
        changed = False
        for s in sources:
            p, n = s.nodes
            if n in volts and p not in volts:
                volts[p] = volts[n] + s.value  # type: ignore[operator]
                changed = True
            elif p in volts and n not in volts:
                volts[n] = volts[p] - s.value  # type: ignore[operator]
                changed = True
    return volts


class Recogniser:
    """Match mirror patterns on one flat netlist; every device ends claimed or reported."""

    def __init__(self, flat: Flat, rails: dict[str, float] | None = None) -> None:
        self.flat = flat
        self.volts = fixed_voltages(flat.devices, rails)
        self.transistors = [d for d in flat.devices if d.kind in TRANSISTORS]
        self.ctrl: dict[str, list[Device]] = {}
        self.out: dict[str, list[Device]] = {}
        self.rs: dict[str, list[Device]] = {}
        self.two: dict[str, list[Device]] = {}
        for d in self.transistors:
            self.ctrl.setdefault(d.control, []).append(d)
            self.out.setdefault(d.output, []).append(d)
            self.rs.setdefault(d.rail_side, []).append(d)
        for d in flat.devices:
            if d.kind in ("isource", "resistor", "vsource"):
                for n in d.nodes:
                    self.two.setdefault(n, []).append(d)
        self.claimed: set[str] = set()
        self.stages: list[Stage] = []
        self.findings: list[Finding] = []

    # --- small queries -------------------------------------------------------

    def free(self, devices: Iterable[Device], kind: str) -> list[Device]:
        return [d for d in devices if d.path not in self.claimed and d.kind == kind]

    def is_rail(self, node: str) -> bool:
        return node in self.volts

    def offset(self, node: str, rail: str, kind: str) -> float | None:
        """How far ``node`` sits from ``rail`` towards the other rail, if it is nearly the same rail."""
        if node == rail:
            return 0.0
        if node not in self.volts or rail not in self.volts:
            return None
        delta = self.volts[node] - self.volts[rail]
        delta = delta if kind in SINKS else -delta
        return delta if abs(delta) <= MAX_RAIL_OFFSET else None

    def diodes(self, node: str, kind: str) -> list[Device]:
        return [d for d in self.free(self.ctrl.get(node, []), kind) if d.output == node]

    def on_rail(self, d: Device) -> bool:
        return self.is_rail(d.rail_side)

    def output_of(self, dev: Device, rail: str, base: Device, cascode: Device | None = None) -> Output | None:
        off = self.offset(dev.rail_side, rail, dev.kind)
        if off is None:
            return None
        top = cascode or dev
        return Output(top.output, [dev] + ([cascode] if cascode else []), dev.size, off, dev.dtemp - base.dtemp)

    def claim(self, stage: Stage) -> Stage:
        if family(stage.kind) == "mos":
            ref = stage.input
            for out in stage.outputs:
                o = out.devices[0]
                if (o.w, o.l) != (ref.w, ref.l):
                    stage.notes.append(Finding(o.where, o.path, f"W/L {o.w:g}/{o.l:g} differs from the input's "
                                               f"{ref.w:g}/{ref.l:g}: ratio taken from W/L (exact for the square "
                                               "law; with a real model use m= copies of one unit device)"))
        for d in stage.devices + stage.sources:
            self.claimed.add(d.path)
        self.stages.append(stage)
        return stage

    def note(self, stage_notes: list[Finding], dev: Device, message: str) -> None:
        stage_notes.append(Finding(dev.where, dev.path, message))

    def isource_into(self, node: str, sink: bool) -> list[Device]:
        """Unclaimed current sources whose current flows into ``node`` (sink) or out of it (source)."""
        found = []
        for s in self.two.get(node, []):
            if s.kind != "isource" or s.path in self.claimed or s.value is None:
                continue
            into = (s.nodes[1] == node) == (s.value > 0)
            if into == sink:
                found.append(s)
        return found

    # --- topologies, most specific first ---------------------------------------

    def _cascoded_outputs(self, kind: str, gate: str, cascode_gate: str, rail: str, base: Device,
                          skip: set[str], notes: list[Finding]) -> tuple[list[Output], list[Device]]:
        outputs, devs = [], []
        for o in self.free(self.ctrl.get(gate, []), kind):
            if o.path in skip:
                continue
            tops = [c for c in self.free(self.rs.get(o.output, []), kind) if c.control == cascode_gate]
            out = self.output_of(o, rail, base, tops[0] if tops else None)
            if out is None or not tops:
                continue
            if abs(tops[0].size - o.size) > 1e-9 * o.size:
                self.note(notes, tops[0], f"cascode device size {tops[0].size:g} differs from its mirror "
                          f"device's {o.size:g}: the plan assumes equal sizes")
            outputs.append(out)
            devs += out.devices
        return outputs, devs

    def wide_swing(self, m2: Device) -> Stage | None:
        if family(m2.kind) != "mos":
            return None
        n, g, x = m2.output, m2.control, m2.rail_side
        m1s = [d for d in self.free(self.out.get(x, []), m2.kind) if d.control == n and self.on_rail(d)]
        bias = self.diodes(g, m2.kind)
        if not m1s or not bias or bias[0].rail_side != m1s[0].rail_side:
            return None
        m1, b, rail = m1s[0], bias[0], m1s[0].rail_side
        notes: list[Finding] = []
        outputs, devs = self._cascoded_outputs(m2.kind, n, g, rail, m1, {m1.path}, notes)
        if not outputs:
            return None
        params = {"swing_n": (m1.size / b.size) ** 0.5 - 1.0}
        sources = self.isource_into(g, m2.kind in SINKS)
        if sources:
            params["bias_current"] = abs(sum(s.value for s in sources))  # type: ignore[misc]
        else:
            notes.append(Finding(b.where, b.path, "no current source feeds the bias device; the plan assumes "
                                 "the ideal input current"))
        if params["swing_n"] <= 0:
            return None
        return self.claim(Stage("wide_swing", m2.kind, n, rail, m1, [m1, m2, b] + devs, outputs, params, notes,
                                sources))

    def cascode(self, in1: Device) -> Stage | None:
        b, rail = in1.output, in1.rail_side
        in2s = [d for d in self.free(self.rs.get(b, []), in1.kind) if d.output == d.control]
        if not in2s:
            return None
        in2 = in2s[0]
        notes: list[Finding] = []
        outputs, devs = self._cascoded_outputs(in1.kind, b, in2.output, rail, in1, {in1.path}, notes)
        if not outputs:
            return None
        return self.claim(Stage("cascode", in1.kind, in2.output, rail, in1, [in1, in2] + devs, outputs, {}, notes))

    def wilson(self, q2: Device) -> Stage | None:
        if family(q2.kind) != "bjt":
            return None
        b, rail = q2.output, q2.rail_side
        q1s = [d for d in self.free(self.ctrl.get(b, []), q2.kind) if d is not q2 and d.rail_side == rail]
        q3s = [d for d in self.free(self.rs.get(b, []), q2.kind) if d.output != d.control]
        if len(q1s) != 1 or len(q3s) != 1:
            return None
        q1, q3 = q1s[0], q3s[0]
        n = q3.control
        notes: list[Finding] = []
        if q1.output == n:
            topology, devs = "wilson", [q1, q2, q3]
        else:
            q4s = [d for d in self.diodes(n, q2.kind) if d.rail_side == q1.output]
            if not q4s:
                return None
            topology, devs = "wilson4", [q1, q2, q3, q4s[0]]
        if abs(q3.size - q2.size) > 1e-9 * q2.size:
            self.note(notes, q3, f"output device size {q3.size:g} differs from the diode's {q2.size:g}: "
                      "the plan assumes equal sizes")
        out = Output(q3.output, [q3], q2.size, 0.0, q3.dtemp - q1.dtemp)
        return self.claim(Stage(topology, q2.kind, n, rail, q1, devs, [out], {}, notes))

    def degenerated(self, d: Device) -> Stage | None:
        if family(d.kind) != "bjt" or self.is_rail(d.rail_side):
            return None
        rail_r = self._emitter_resistor(d)
        if rail_r is None:
            return None
        rail, r_in = rail_r[0], rail_r[1]
        notes: list[Finding] = []
        outputs, devs, res = [], [d], [r_in]
        for o in self.free(self.ctrl.get(d.control, []), d.kind):
            if o is d:
                continue
            found = self._emitter_resistor(o)
            if found is None:
                continue
            off = self.offset(found[0], rail, d.kind)
            if off is None:
                continue
            out = Output(o.output, [o], o.size, off, o.dtemp - d.dtemp)
            ideal = r_in.value * d.size / o.size  # type: ignore[operator]
            if abs(found[1].value - ideal) > 1e-9 * ideal:  # type: ignore[operator]
                self.note(notes, found[1], f"emitter resistor {found[1].value:g} ohm is not R_in/ratio = "
                          f"{ideal:g} ohm: the plan assumes R_in/ratio")
            outputs.append(out)
            devs.append(o)
            res.append(found[1])
        if not outputs:
            return None
        return self.claim(Stage("degenerated", d.kind, d.output, rail, d, devs, outputs,
                                {"degeneration": float(r_in.value)}, notes, res))  # type: ignore[arg-type]

    def _emitter_resistor(self, d: Device) -> tuple[str, Device] | None:
        """(rail, resistor) when d's emitter reaches a rail through one resistor and nothing else."""
        e = d.rail_side
        others = [x for x in self.rs.get(e, []) if x is not d] + [x for x in self.ctrl.get(e, []) + self.out.get(e, [])]
        res = [r for r in self.two.get(e, []) if r.kind == "resistor" and r.path not in self.claimed]
        if others or len(res) != 1 or len(self.two.get(e, [])) != 1 or res[0].value is None:
            return None
        rail = res[0].nodes[1] if res[0].nodes[0] == e else res[0].nodes[0]
        return (rail, res[0]) if self.is_rail(rail) else None

    def beta_helper(self, q: Device) -> Stage | None:
        if family(q.kind) != "bjt" or q.output == q.control or not self.on_rail(q):
            return None
        n, b, rail = q.output, q.control, q.rail_side
        helpers = [h for h in self.free(self.rs.get(b, []), q.kind) if h.control == n and self.is_rail(h.output)]
        if not helpers:
            return None
        h = helpers[0]
        outputs, devs = self._plain_outputs(b, rail, q)
        devs = [q, h] + devs
        if not outputs:
            return None
        params = {"helper_size": h.size}
        # a bleed source pulls current from the base line to the rail
        bleeds = self.isource_into(b, q.kind not in SINKS)
        if bleeds:
            params["bleed"] = abs(sum(s.value for s in bleeds))  # type: ignore[misc]
        return self.claim(Stage("beta_helper", q.kind, n, rail, q, devs, outputs, params, [], bleeds))

    def simple(self, d: Device) -> Stage | None:
        if d.output != d.control or not self.on_rail(d) or self.is_rail(d.control):
            return None  # a device with its base/gate on a fixed node is a dummy, not a diode
        n, rail = d.output, d.rail_side
        outputs, devs = self._plain_outputs(n, rail, d)
        if not outputs:
            return None
        return self.claim(Stage("simple", d.kind, n, rail, d, [d] + devs, outputs, {}, []))

    def _plain_outputs(self, line: str, rail: str, base: Device) -> tuple[list[Output], list[Device]]:
        """Devices on the base/gate ``line`` whose emitters/sources sit on ``rail`` (or nearly)."""
        outputs, devs = [], []
        for o in self.free(self.ctrl.get(line, []), base.kind):
            out = None if o is base else self.output_of(o, rail, base)
            if out is not None:
                outputs.append(out)
                devs.append(o)
        return outputs, devs

    # --- the whole netlist -------------------------------------------------------

    def run(self) -> list[Stage]:
        matchers: list[Callable[[Device], Stage | None]] = [
            self.wide_swing, self.cascode, self.wilson, self.degenerated, self.beta_helper, self.simple,
        ]
        for match in matchers:
            for d in self.transistors:
                if d.path in self.claimed:
                    continue
                if match in (self.cascode, self.wilson, self.simple) and not (d.output == d.control and self.on_rail(d)):
                    continue
                if match == self.degenerated and d.output != d.control:
                    continue
                match(d)
        self._report_leftovers()
        return self.stages

    def _report_leftovers(self) -> None:
        stage_of = {n: s for s in self.stages for n in (s.input_node, s.input.control)}
        for d in self.transistors:
            if d.path in self.claimed:
                continue
            s = stage_of.get(d.control)
            if self.is_rail(d.control):
                msg = f"its base/gate is on the fixed node {d.control}: a dummy or biased device, not a mirror"
            elif s is not None and s.kind == d.kind:
                where = d.rail_side if d.rail_side not in self.volts else f"{d.rail_side} ({self.volts[d.rail_side]:g} V)"
                msg = (f"shares the control net {d.control} of the mirror at {s.input_node} but its "
                       f"{'emitter' if family(d.kind) == 'bjt' else 'source'} is on {where}, not on the mirror's "
                       f"rail {s.rail}: control net shared across rails (not audited)")
            elif s is not None:
                msg = f"a {d.kind} on the control net of a {s.kind} mirror at {s.input_node}: not audited"
            elif d.rail_side in stage_of and stage_of[d.rail_side].kind == d.kind:
                msg = (f"its {'emitter' if family(d.kind) == 'bjt' else 'source'} sits on the diode node "
                       f"{d.rail_side} of a mirror: a feedback structure not in the registry "
                       f"(e.g. a {d.kind} Wilson), not audited")
            elif d.output == d.control:
                msg = "diode-connected, but no device mirrors it from the same rail: part of no mirror"
            else:
                msg = "part of no recognised mirror (not audited)"
            self.findings.append(Finding(d.where, d.path, msg))


def recognise(flat: Flat, rails: dict[str, float] | None = None) -> tuple[list[Stage], list[Finding], dict[str, float]]:
    """(mirrors, unclassified transistors, fixed node voltages) of a flat netlist."""
    r = Recogniser(flat, rails)
    stages = r.run()
    return stages, r.findings, r.volts
