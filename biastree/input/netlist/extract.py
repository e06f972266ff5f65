"""From recognised mirrors to a plan: follow each output to the next mirror or to a load.

The reference is the current source (or the resistor from a rail) that
feeds the input of a mirror no other mirror feeds.  Each output is followed
to the next mirror's input or to a terminal node, which becomes a load
named after the node.  Mirror names are their input nodes.  Sizes and
multiplicity fold into ``input_size`` and ``ratio`` (``count`` stays 1: a
device of m=4 into one node is one load of four times the current).
Everything the plan cannot hold is a ``Finding``; every value the plan
needs but neither the netlist nor the annotation gives is listed in
``missing``, never guessed.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from biastree.input.netlist.annotate import Annotations
from biastree.input.netlist.devices import SPICE_TNOM_C, card_entry, device_entry, temperature_law, wants_card
from biastree.input.netlist.flat import SINKS, TRANSISTORS, Device, Finding, Flat, family
from biastree.input.netlist.recognise import Recogniser, Stage


@dataclass
class Extraction:
    """A plan as plain data, where each part came from, and what was left out."""

    plan: dict[str, Any]
    origins: dict[str, list[str]]  # "mirrors.X", "loads.Y", "devices.Z", "reference" -> ["inst (file:line)"]
    findings: list[Finding] = field(default_factory=list)  # unclassified devices and assumptions
    missing: list[Finding] = field(default_factory=list)  # needed values nobody gave
    resistor_reference: tuple[float, float] | None = None  # (R, voltage across R and the input) when resistor-fed
    branch_origin: dict[tuple[str, int], str] = field(default_factory=dict)
    ideal_loads: set[str] = field(default_factory=set)  # loads whose target is the ideal mirrored current


def _at(d: Device) -> str:
    return f"{d.path} ({d.where})"


class _Builder:
    def __init__(self, flat: Flat, notes: Annotations) -> None:
        self.flat, self.notes = flat, notes
        self.r = Recogniser(flat, {k.lower(): v for k, v in notes.rails.items()})
        self.stages = self.r.run()
        self.findings: list[Finding] = list(flat.notes) + self.r.findings
        self.missing: list[Finding] = []
        self.origins: dict[str, list[str]] = {}
        self.by_node = flat.by_node()
        self.load_nodes: dict[str, str] = {}
        self.skipped: set[str] = set()  # sources already reported
        self.ideal: set[str] = set()
        self.used: set[str] = set()  # annotation load keys that matched
        for s in self.stages:
            self.findings += s.notes

    # --- the tree ----------------------------------------------------------

    def edges(self) -> dict[str, list[tuple[str, float, list[Device], Stage | None]]]:
        """Per mirror: (node, size, devices, child mirror or None) of each output node."""
        by_input = {s.input_node: s for s in self.stages}
        out: dict[str, list[tuple[str, float, list[Device], Stage | None]]] = {}
        for s in self.stages:
            merged: dict[str, tuple[float, list[Device]]] = {}
            for o in s.outputs:
                size, devs = merged.get(o.node, (0.0, []))
                merged[o.node] = (size + o.size, devs + o.devices)
            rows = []
            for node, (size, devs) in merged.items():
                child = by_input.get(node)
                if child is not None and child.sink == s.sink:
                    self.findings.append(Finding(devs[0].where, devs[0].path, f"a {s.kind} output drives the input "
                                                 f"of the {child.kind} mirror at {node}: same polarity, not audited"))
                    continue
                if sum(o.node == node for o in s.outputs) > 1:
                    self.findings.append(Finding(devs[0].where, node, "several outputs of one mirror drive this "
                                                 "node: taken as one branch of their summed size"))
                rows.append((node, size, devs, child))
            out[s.input_node] = rows
        return out

    def reference(self, s: Stage) -> tuple[list[Device], float | None, tuple[float, float] | None]:
        sources = self.r.isource_into(s.input_node, s.sink)
        if sources:
            return sources, abs(sum(x.value for x in sources)), None  # type: ignore[misc]
        for res in self.r.two.get(s.input_node, []):
            if res.kind != "resistor" or res.path in self.r.claimed:
                continue
            other = res.nodes[1] if res.nodes[0] == s.input_node else res.nodes[0]
            if other in self.r.volts and other != s.rail:
                drop = abs(self.r.volts[other] - self.r.volts.get(s.rail, 0.0))
                return [res], None, (float(res.value), drop)  # type: ignore[arg-type]
        return [], None, None

    def run(self) -> Extraction:
        edges = self.edges()
        parents: dict[str, str] = {}
        for name, rows in edges.items():
            for node, _, devs, child in rows:
                if child is None:
                    continue
                if node in parents:
                    self.findings.append(Finding(devs[0].where, node, f"mirror input fed by both {parents[node]} and "
                                                 f"{name}: only the first is followed"))
                else:
                    parents[node] = name
        # the reference feeds a mirror no other mirror feeds; inside a loop it may feed one that another does
        fed = [(s, *self.reference(s)) for s in self.stages]
        fed = [f for f in fed if f[1]]
        if not fed:
            where = f"{self.flat.source}:1" if not self.stages else self.stages[0].input.where
            what = "no current mirror found" if not self.stages else \
                "no current source or rail resistor feeds a mirror that no other mirror feeds"
            self._leftovers([])
            raise _no_tree(where, what, self.findings)
        size = {s.input_node: self._subtree(s.input_node, edges) for s, *_ in fed}
        fed.sort(key=lambda f: (f[0].input_node in parents, -size[f[0].input_node]))
        root, ref_devs, i_ref, res_ref = fed[0]
        loops = self._loops(edges)
        for s, devs, *_ in fed[1:]:
            self.findings.append(Finding(devs[0].where, devs[0].path, f"a second reference (into {s.input_node}): "
                                         "one reference per plan, its tree is not audited"))
            ref_devs_other = devs
            self.skipped.update(d.path for d in ref_devs_other)
        plan: dict[str, Any] = {"mirrors": {}, "loads": {}, "devices": {}}
        ext = Extraction(plan, self.origins, self.findings, self.missing, ideal_loads=self.ideal)
        if res_ref is not None:
            ext.resistor_reference = res_ref
            # a first estimate; the caller refines it with the solved input voltage
            i_ref = (res_ref[1] - 0.7) / res_ref[0] if res_ref[1] > 0.7 else res_ref[1] / res_ref[0] / 2
        if self.notes.reference.current is not None:
            i_ref = self.notes.reference.current
        ref = {"current": i_ref, "feeds": root.input_node}
        if self.notes.reference.tolerance:
            ref["tolerance"] = self.notes.reference.tolerance
        if self.notes.reference.tempco:
            ref["tempco"] = self.notes.reference.tempco
        plan["reference"] = ref
        self.origins["reference"] = [_at(d) for d in ref_devs]
        visited: list[Stage] = []
        self._walk(root, edges, [root.input_node], float(i_ref or 0.0), plan, visited, ext)
        seen = {s.input_node for s in visited}
        for s in self.stages:
            if s.input_node not in seen:
                loop = f", part of the feedback loop {loops[s.input_node]}" if s.input_node in loops else ""
                self.findings.append(Finding(s.input.where, s.input.path, f"{s.topology} {s.kind} mirror at "
                                             f"{s.input_node} is not reached from the reference{loop}: not audited "
                                             f"({len(s.devices)} devices)"))
        self._devices(visited, plan)
        self._globals(visited, plan)
        self._unused_notes(plan)
        for key in ("conditions", "spread"):
            section = getattr(self.notes, key)
            if section is not None:
                plan[key] = section.model_dump(mode="json", by_alias=True, exclude_defaults=True)
        if self.notes.matched:
            plan["matched"] = {k: m.model_dump(mode="json", by_alias=True) for k, m in self.notes.matched.items()}
        self._leftovers(ref_devs)
        return ext

    def _loops(self, edges: dict[str, list[Any]]) -> dict[str, str]:
        """Mirror input node -> the loop it lies on, written as a path ``a -> b -> a``."""
        out: dict[str, str] = {}
        for start in edges:
            stack = [(start, [start])]
            while stack:
                node, path = stack.pop()
                for _, _, _, child in edges.get(node, []):
                    if child is None:
                        continue
                    if child.input_node == start:
                        out.setdefault(start, " -> ".join(path + [start]))
                    elif child.input_node not in path:
                        stack.append((child.input_node, path + [child.input_node]))
        return out

    def _unused_notes(self, plan: dict[str, Any]) -> None:
        """Annotation entries that name nothing in the tree are errors, like unknown keys in a plan."""
        for key in self.notes.loads:
            if key not in self.used:
                self.missing.append(Finding("annotation", f"loads.{key}", "no load node, or instance on a load "
                                            "node, of that name in the extracted tree"))
        cards = {s.input.card for s in self.stages}
        for key in self.notes.devices:  # harmless (a shared file for a PDK), but said
            if key not in cards:
                self.findings.append(Finding("", f"annotation devices.{key}", "no mirror uses a card of that name "
                                             f"(cards: {', '.join(sorted(c for c in cards if c)) or 'none'})"))

    def _subtree(self, node: str, edges: dict[str, list[Any]], seen: set[str] | None = None) -> int:
        seen = set() if seen is None else seen
        if node in seen:
            return 0
        seen.add(node)
        return 1 + sum(self._subtree(c.input_node, edges, seen) for _, _, _, c in edges.get(node, []) if c)

    def _walk(self, s: Stage, edges: dict[str, list[Any]], path: list[str], i_in: float, plan: dict[str, Any],
              visited: list[Stage], ext: Extraction) -> None:
        visited.append(s)
        spec: dict[str, Any] = {"topology": s.topology, "branches": []}
        self.origins[f"mirrors.{s.input_node}"] = [_at(d) for d in s.devices + s.sources]
        plan["mirrors"][s.input_node] = spec
        spec["_stage"] = s
        for k, (node, size, devs, child) in enumerate(edges[s.input_node]):
            ratio = size / s.input.size
            if child is not None and child.input_node in path:
                loop = " -> ".join(path[path.index(child.input_node):] + [child.input_node])
                self.findings.append(Finding(devs[0].where, devs[0].path, f"feedback loop {loop}: this output is "
                                             "not followed"))
                continue
            if child is not None and child.input_node in plan["mirrors"]:
                continue
            to = child.input_node if child is not None else self._load(node, devs, i_in * ratio, plan, s)
            if to is None:
                continue
            spec["branches"].append({"to": to, "ratio": ratio})
            ext.branch_origin[(s.input_node, len(spec["branches"]) - 1)] = ", ".join(d.path for d in devs)
            out = next(o for o in s.outputs if o.node == node)
            if (out.rail_offset or out.dtemp) and child is None:
                fp = plan.setdefault("floorplan", {"remote": [], "offsets": {}})
                fp["remote"].append(to)
                fp["offsets"][to] = {"temperature": out.dtemp, "rail": out.rail_offset}
                spec.setdefault("_hot", []).append(out)
                spec.setdefault("_remote", []).append((to, out))
            elif out.rail_offset or out.dtemp:
                self.findings.append(Finding(devs[0].where, devs[0].path, "offset rail or temperature on an output "
                                             "into a mirror: the plan cannot hold it, ignored"))
            if child is not None:
                self._walk(child, edges, path + [child.input_node], i_in * ratio, plan, visited, ext)
        if not spec["branches"]:
            del plan["mirrors"][s.input_node]
            visited.remove(s)
            self.findings.append(Finding(s.input.where, s.input.path, f"mirror at {s.input_node} has no output "
                                         "that could be followed: not audited"))

    def _load(self, node: str, devs: list[Device], ideal: float, plan: dict[str, Any], s: Stage) -> str | None:
        others = [d for d, _ in self.by_node.get(node, []) if d not in devs]
        keys = [node] + [d.path for d in devs + others]
        key = next((k for k in keys if k in self.notes.loads), None)
        note = self.notes.loads[key] if key is not None else None
        if key is not None:
            self.used.add(key)
        name = note.name if note is not None and note.name else node
        where = devs[0].where
        load: dict[str, Any] = {}
        given = note is not None and note.current is not None
        load["current"] = note.current if given else ideal  # type: ignore[union-attr]
        tol = note.tolerance if note is not None and note.tolerance is not None else self.notes.defaults.tolerance
        if tol is None:
            self.missing.append(Finding(where, name, f"no tolerance: give loads.{node}.tolerance or "
                                        "defaults.tolerance in the annotation file"))
        else:
            load["tolerance"] = tol
        volt = note.voltage if note is not None and note.voltage is not None else self.r.volts.get(node)
        volt = self.notes.defaults.voltage if volt is None else volt
        if volt is None:
            self.missing.append(Finding(where, name, f"no voltage: the netlist does not fix node {node}; give "
                                        f"loads.{node}.voltage or defaults.voltage in the annotation file"))
        else:
            load["voltage"] = list(volt) if isinstance(volt, tuple) else volt
        if name in plan["loads"]:
            self.findings.append(Finding(where, name, "a second mirror output drives this load: kept as "
                                         f"'{name}@{s.input_node}'"))
            name = f"{name}@{s.input_node}"
        plan["loads"][name] = load
        self.load_nodes[node] = name
        if not given:
            self.ideal.add(name)
        self.origins[f"loads.{name}"] = [f"node {node}"] + [_at(d) for d in devs] + [_at(d) for d in others]
        return name

    # --- devices, supply, temperature -------------------------------------------

    def _devices(self, visited: list[Stage], plan: dict[str, Any]) -> None:
        lengths: dict[str, set[float]] = {}
        for s in visited:
            if family(s.kind) == "mos":
                lengths.setdefault(s.input.card or "", set()).add(round(s.input.l or 0.0, 15))
        units: dict[str, float] = {}
        for s in visited:
            spec = plan["mirrors"][s.input_node]
            card = s.input.card or "?"
            name = card
            if family(s.kind) == "mos" and len(lengths[card]) > 1:
                name = f"{card}_l{(s.input.l or 0) * 1e6:.4g}u"
            for d in s.devices:
                if d.card != s.input.card and not (d.dtemp and family(s.kind) == "mos"):
                    self.findings.append(Finding(d.where, d.path, f"model {d.card} differs from the mirror's "
                                                 f"{s.input.card}: the plan uses {s.input.card} for every device"))
            if name not in plan["devices"]:
                plan["devices"][name] = self._device(s, card)
                units[name] = 1.0 if family(s.kind) == "bjt" else (s.input.w or 1.0) / (s.input.l or 1.0)
            spec["device"] = name
            spec["input_size"] = s.input.size / units[name]
            for key, value in s.params.items():
                spec[key] = value / (units[name] if key == "helper_size" else 1.0)
            if s.topology == "wide_swing":
                spec["swing_n"] = s.params["swing_n"]
            remote = spec.pop("_remote", [])
            if "model" in plan["devices"][name]:  # card devices take no floorplan offsets yet
                spec.pop("_hot", None)
                self._drop_offsets(plan, remote)
            for out in spec.pop("_hot", []):
                self._hot_card(s, out, plan["devices"][name])

    def _drop_offsets(self, plan: dict[str, Any], remote: list[tuple[str, Any]]) -> None:
        fp = plan.get("floorplan")
        for to, out in remote:
            if fp is None:
                break
            fp["remote"].remove(to)
            fp["offsets"].pop(to, None)
            self.findings.append(Finding(out.devices[0].where, out.devices[0].path, "rail offset or dtemp on a "
                                         "device given by its model card: the plan cannot apply it to card "
                                         "devices yet, ignored (audited as a local output)"))
        if fp is not None and not fp["remote"]:
            del plan["floorplan"]

    def _device(self, s: Stage, card_name: str) -> dict[str, Any]:
        card = self.flat.cards.get(card_name)
        self.origins[f"devices.{card_name}"] = [f".model {card_name} ({card.where})" if card else
                                               f"device subcircuit {card_name} (first used {s.input.where})"]
        given, source = self.notes.devices.get(card_name), self.flat.sources.get(card_name)
        if wants_card(s.kind, card, source, given):
            at = source.get("library") or source.get("include")  # type: ignore[union-attr]
            section = f" section {source['section']}" if "section" in source else ""  # type: ignore[operator]
            self.origins[f"devices.{card_name}"].append(f"model from {at}{section}" if at else "card text as written")
            return card_entry(s.kind, card_name, source, s.input)  # type: ignore[arg-type]
        dev, findings, missing = device_entry(s.kind, card_name, card, given, s.input)
        self.findings += findings
        self.missing += missing
        return dev

    def _hot_card(self, s: Stage, out: Any, dev: dict[str, Any]) -> None:
        """A warmer MOS output device with its own card: the pair of cards gives the temperature law."""
        card = out.devices[0].card
        if family(s.kind) != "mos" or card == s.input.card or card not in self.flat.cards or "model" in dev:
            return
        for key, value in temperature_law(dev, self.flat.cards[card].params, self.temperature_k, out.dtemp).items():
            if key in dev and abs(dev[key] - value) > 1e-6 * max(1.0, abs(value)):
                self.findings.append(Finding(out.devices[0].where, out.devices[0].path, f"its card {card} implies "
                                             f"{key} = {value:.6g}, another device's {dev[key]:.6g}: the first is kept"))
            dev.setdefault(key, value)

    @property
    def temperature_k(self) -> float:
        if self.notes.temperature is not None:
            return self.notes.temperature
        return (self.flat.temperature if self.flat.temperature is not None else SPICE_TNOM_C) + 273.15

    def _globals(self, visited: list[Stage], plan: dict[str, Any]) -> None:
        plan["temperature"] = f"{self.temperature_k - 273.15:.12g}C"
        supply = self.notes.supply
        if supply is None:
            rails = {self.r.volts[s.rail] for s in visited if s.kind not in SINKS and s.rail in self.r.volts}
            touched = [self.r.volts[n] for n, items in self.by_node.items() if n in self.r.volts
                       and any(d.kind in TRANSISTORS + ("isource",) for d, _ in items)]
            supply = max(rails) if rails else (max(touched) if touched and max(touched) > 0 else None)
        if supply is None:
            self.missing.append(Finding(self.flat.source, "supply", "the netlist fixes no supply node: give "
                                        "supply (or rails: {NODE: VOLTAGE}) in the annotation file"))
        else:
            plan["supply"] = supply
        plan["title"] = self.notes.title or f"extracted from {self.flat.source}"

    def _leftovers(self, ref_devs: list[Device]) -> None:
        used = set(self.r.claimed) | {d.path for d in ref_devs} | self.skipped
        devices = {d.path: d for d in self.flat.devices}
        for k, f in enumerate(self.findings):  # transistors the recogniser left: say which block they belong to
            d = devices.get(f.subject)
            block = self._block_of(d) if d is not None and d.path not in used else None
            if block is not None and "part of no" in f.message:
                self.findings[k] = Finding(f.where, f.subject, f"part of load {block}, not of the bias tree")
        for d in self.flat.devices:
            if d.path in used or d.kind in TRANSISTORS + ("vsource",):
                continue
            block = self._block_of(d)
            what = {"isource": "current source", "resistor": "resistor"}.get(d.kind, "element")
            if block is not None:
                msg = f"{what} of load {block}, not of the bias tree"
            elif d.kind == "other":
                msg = "element kind not supported by the extraction (not audited)"
            else:
                msg = f"{what} not part of the bias tree (not audited)"
            self.findings.append(Finding(d.where, d.path, msg))

    def _block_of(self, d: Device) -> str | None:
        return next((self.load_nodes[n] for n in d.nodes if n in self.load_nodes), None)


def _no_tree(where: str, what: str, findings: list[Finding]) -> Exception:
    from biastree.input.spice_text import SpiceError

    err = SpiceError(where, what)
    err.findings = findings  # type: ignore[attr-defined]
    return err


def extract(flat: Flat, notes: Annotations | None = None) -> Extraction:
    """Recognise the mirrors of a flat netlist and build a plan of them.

    >>> from biastree.input.netlist.flat import Device, Flat
    >>> devs = [Device("v1", "vsource", ("vdd", "0"), value=3.0), Device("i1", "isource", ("vdd", "n"), value=1e-5),
    ...         Device("q1", "npn", ("n", "n", "0"), "qn", card="qn"), Device("q2", "npn", ("o", "n", "0"), "qn",
    ...         area=2, card="qn")]
    >>> ext = extract(Flat(devs))
    >>> ext.plan["mirrors"]["n"]["branches"], [m.format() for m in ext.missing][:1]
    ([{'to': 'o', 'ratio': 2.0}], ['o: no tolerance: give loads.o.tolerance or defaults.tolerance in the annotation file'])
    """
    ext = _Builder(flat, notes or Annotations()).run()
    for spec in ext.plan["mirrors"].values():
        spec.pop("_stage", None)
    return ext
