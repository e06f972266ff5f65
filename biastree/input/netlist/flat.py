"""A flattened netlist: every device of the design with its full instance path.

This is what the recogniser works on.  Hierarchy, parameters and
multiplicity have been resolved by the flattener; each device keeps the
file and line it was written on, so every finding can point there.

>>> d = Device("xbias.q1", "npn", ("xbias.n1", "xbias.n1", "0"), "qn", where="a.sp:3")
>>> d.size, d.control, d.output, d.rail_side
(1.0, 'xbias.n1', 'xbias.n1', '0')
"""

from __future__ import annotations

from dataclasses import dataclass, field

TRANSISTORS = ("npn", "pnp", "nmos", "pmos")
SINKS = ("npn", "nmos")  # the rest source current from the supply
KINDS = TRANSISTORS + ("isource", "vsource", "resistor", "other")
GROUND = "0"


def family(kind: str) -> str:
    """'bjt' or 'mos' for a transistor kind."""
    return "bjt" if kind in ("npn", "pnp") else "mos"


@dataclass(frozen=True)
class Device:
    """One flattened device.

    ``nodes``: BJT (collector, base, emitter[, substrate]); MOS (drain, gate,
    source, bulk); two-terminal elements (positive, negative).  ``value`` is a
    source's DC value (A or V) or a resistor's resistance (ohm).  ``m`` is the
    total multiplicity (the instance's own ``m=`` times every enclosing
    X instance's), ``area`` a BJT's area factor; ``w``/``l`` a MOS gate in the
    netlist's length unit (already scaled by any ``.option scale``).
    """

    path: str
    kind: str
    nodes: tuple[str, ...]
    model: str | None = None
    value: float | None = None
    m: float = 1.0
    area: float = 1.0
    nf: float = 1.0
    w: float | None = None
    l: float | None = None
    dtemp: float = 0.0
    where: str = ""
    card: str | None = None  # name of the .model card or PDK device subcircuit

    @property
    def control(self) -> str:
        return self.nodes[1]

    @property
    def output(self) -> str:
        return self.nodes[0]

    @property
    def rail_side(self) -> str:
        return self.nodes[2]

    @property
    def size(self) -> float:
        """Size in the netlist's own units: BJT area × m; MOS (W/L) × m.

        ``nf`` is not a factor: W is the total gate width over all fingers
        (the BSIM4 convention, which the open 130 nm PDK follows).
        """
        if self.kind in ("npn", "pnp"):
            return self.area * self.m
        if self.w is None or self.l is None:
            return self.m
        return self.w / self.l * self.m


@dataclass(frozen=True)
class Card:
    """A ``.model`` card (lower-case parameter names, SI values)."""

    name: str
    kind: str
    params: dict[str, float]
    where: str = ""


@dataclass(frozen=True)
class Finding:
    """Something the extraction could not classify or had to assume, at a netlist line."""

    where: str
    subject: str  # instance or node name
    message: str

    def format(self) -> str:
        return f"{self.where}: {self.subject}: {self.message}" if self.where else f"{self.subject}: {self.message}"


@dataclass
class Flat:
    """Every device of a design, plus its model cards and global settings."""

    devices: list[Device]
    cards: dict[str, Card] = field(default_factory=dict)
    temperature: float | None = None  # °C from .temp
    source: str = "netlist"
    notes: list[Finding] = field(default_factory=list)  # elements skipped by the flattener
    # card or PDK device subcircuit name -> where the netlist gets it, as a plan card device's source
    # fields: {"library": path, "section": s}, {"include": path} or {"card": text} (see flatten.model_source)
    sources: dict[str, dict[str, str]] = field(default_factory=dict)

    def by_node(self) -> dict[str, list[tuple[Device, int]]]:
        """node → [(device, terminal index)]."""
        out: dict[str, list[tuple[Device, int]]] = {}
        for dev in self.devices:
            for i, node in enumerate(dev.nodes):
                out.setdefault(node, []).append((dev, i))
        return out
