"""Flatten a SPICE netlist into a device list (``Flat``).

Built on the SPICE text layer (``biastree.input.spice_text``), which reads
lines, numbers, ``.param`` expressions, ``.model`` cards, ``.include`` /
``.lib`` and ``.subckt`` bodies.  This module resolves the hierarchy: each
X instance's subcircuit is expanded with the instance's parameters, node
names get the instance path (``xbias.n1``), and multiplicity ``m=``
multiplies down the hierarchy.  An X instance of a PDK device subcircuit
(``sky130_fd_pr__nfet_01v8`` and the like: a name with ``nfet``, ``pfet``,
``npn`` or ``pnp`` after ``__``) is one MOS or bipolar device whose card is
the subcircuit's name.  Capacitors are open at DC and are left out;
every other element kind is kept as ``other`` so that it is reported.

Where each card and device subcircuit comes from is recorded too
(``Flat.sources``): the top-level ``.include FILE`` or ``.lib FILE SECTION``
that brought it in, or the card's own text when the netlist writes it inline.
Extraction then points a plan's card device at the same file and section.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

from biastree.input.netlist.flat import GROUND, Card, Device, Finding, Flat
from biastree.input.spice_text import (
    Deck,
    Line,
    Scope,
    SpiceError,
    Subckt,
    evaluate,
    logical_lines,
    parse_text,
    split_params,
    tokens,
)

_PDK_DEVICE = re.compile(r"__(n|p)fet|__(npn|pnp)")
_GROUNDS = ("0", "gnd", "gnd!")
_IGNORED_CARDS = (".op", ".options", ".option", ".nodeset", ".ic", ".dc", ".tran", ".ac", ".end", ".save",
                  ".print", ".plot", ".probe", ".meas", ".measure", ".width", ".title", ".csparam", ".func")


def pdk_kind(name: str) -> str | None:
    """Device kind of a PDK device subcircuit, from its name.

    >>> pdk_kind("sky130_fd_pr__pfet_01v8"), pdk_kind("sky130_fd_pr__npn_05v5_w1p00l1p00"), pdk_kind("amp")
    ('pmos', 'npn', None)
    """
    match = _PDK_DEVICE.search(name.lower())
    if match is None:
        return None
    return {"n": "nmos", "p": "pmos"}[match.group(1)] if match.group(1) else match.group(2)


@dataclass
class _Frame:
    prefix: str  # "" at the top, "xbias." inside X instance xbias
    ports: dict[str, str]  # local port name -> outer net
    scope: Scope
    mult: float
    chain: tuple[str, ...]


class _Flattener:
    def __init__(self, deck: Deck, source: str) -> None:
        self.deck = deck
        self.flat = Flat([], source=source)
        self.globals: set[str] = set()
        self.scale = 1.0
        for line in deck.lines:  # settings first: they apply to the whole deck
            words = tokens(line.text)
            head = words[0].lower()
            if head == ".global":
                self.globals.update(w.lower() for w in words[1:])
            elif head in (".option", ".options"):
                _, named = split_params(words[1:])
                if "scale" in named:
                    self.scale = evaluate(named["scale"], deck.scope.lookup(line.where), line.where)
            elif head == ".temp" and len(words) > 1:
                self.flat.temperature = evaluate(words[1], deck.scope.lookup(line.where), line.where)

    def node(self, frame: _Frame, name: str) -> str:
        name = name.lower()
        if name in _GROUNDS:
            return GROUND
        if name in frame.ports:
            return frame.ports[name]
        if name in self.globals:
            return name
        return frame.prefix + name

    def value(self, text: str, frame: _Frame, line: Line) -> float:
        return evaluate(text, frame.scope.lookup(line.where), line.where)

    def card(self, name: str, line: Line) -> Card:
        key = name.lower()
        if key not in self.flat.cards:
            model = self.deck.model(key, line.where)
            self.flat.cards[key] = Card(key, model.kind, model.values(), model.where)
        return self.flat.cards[key]

    def run(self, lines: list[Line], frame: _Frame) -> None:
        skipping = False
        for line in lines:
            head = line.keyword
            if head == ".control":
                skipping = True
            elif head == ".endc":
                skipping = False
            elif skipping or head.startswith("."):
                continue
            else:
                self.element(line, frame)

    def element(self, line: Line, frame: _Frame) -> None:
        words = tokens(line.text)
        name = words[0].lower()
        path = frame.prefix + name
        letter = name[0]
        positional, named = split_params(words[1:])
        if letter == "c":
            return  # open at DC
        if letter == "x":
            self.instance(line, frame, path, positional, named)
        elif letter == "q":
            self.bjt(line, frame, path, positional, named)
        elif letter == "m":
            self.mos(line, frame, path, positional, named)
        elif letter in "ivr":
            self.two_terminal(line, frame, path, letter, positional, named)
        else:
            nodes = tuple(self.node(frame, w) for w in positional[:2])
            self.flat.devices.append(Device(path, "other", nodes, where=line.where))

    def mult(self, named: dict[str, str], frame: _Frame, line: Line) -> float:
        m = self.value(named["m"], frame, line) if "m" in named else 1.0
        if m <= 0:
            raise SpiceError(line.where, f"m={m:g}: multiplicity must be > 0")
        return m * frame.mult

    def bjt(self, line: Line, frame: _Frame, path: str, positional: list[str], named: dict[str, str]) -> None:
        # Q c b e [s] model [area]: the model is the first word after three nodes that names a card
        for n_nodes in (3, 4):
            if len(positional) > n_nodes and positional[n_nodes].lower() in self.deck.models:
                break
        else:
            raise SpiceError(line.where, f"{path}: no .model card named after its nodes "
                                         f"(Q collector base emitter [substrate] MODEL [area])")
        card = self.card(positional[n_nodes], line)
        if card.kind not in ("npn", "pnp"):
            raise SpiceError(line.where, f"{path}: model {card.name} is a {card.kind}, not npn or pnp")
        area = self.value(positional[n_nodes + 1], frame, line) if len(positional) > n_nodes + 1 else 1.0
        area = self.value(named["area"], frame, line) if "area" in named else area
        nodes = tuple(self.node(frame, w) for w in positional[:3])
        self.flat.devices.append(Device(path, card.kind, nodes, card.name, m=self.mult(named, frame, line),
                                        area=area, dtemp=self._dtemp(named, frame, line), where=line.where,
                                        card=card.name))

    def _dtemp(self, named: dict[str, str], frame: _Frame, line: Line) -> float:
        return self.value(named["dtemp"], frame, line) if "dtemp" in named else 0.0

    def mos(self, line: Line, frame: _Frame, path: str, positional: list[str], named: dict[str, str],
            kind: str | None = None, card_name: str | None = None) -> None:
        if len(positional) < 5 and card_name is None:
            raise SpiceError(line.where, f"{path}: a MOSFET needs drain gate source bulk MODEL")
        if card_name is None:
            card = self.card(positional[4], line)
            if card.kind not in ("nmos", "pmos"):
                raise SpiceError(line.where, f"{path}: model {card.name} is a {card.kind}, not nmos or pmos")
            kind, card_name = card.kind, card.name
        for key in ("w", "l"):
            if key not in named:
                raise SpiceError(line.where, f"{path}: no {key}= (the mirror ratio needs W and L)")
        w = self.value(named["w"], frame, line) * self.scale
        l_ = self.value(named["l"], frame, line) * self.scale
        nf = self.value(named["nf"], frame, line) if "nf" in named else 1.0
        nodes = tuple(self.node(frame, w_) for w_ in positional[:4])
        self.flat.devices.append(Device(path, kind or "nmos", nodes, card_name, m=self.mult(named, frame, line),
                                        nf=nf, w=w, l=l_, dtemp=self._dtemp(named, frame, line), where=line.where,
                                        card=card_name))

    def two_terminal(self, line: Line, frame: _Frame, path: str, letter: str, positional: list[str],
                     named: dict[str, str]) -> None:
        if len(positional) < 2:
            raise SpiceError(line.where, f"{path}: needs two nodes")
        nodes = (self.node(frame, positional[0]), self.node(frame, positional[1]))
        rest = positional[2:]
        kind = {"i": "isource", "v": "vsource", "r": "resistor"}[letter]
        value: float | None = None
        if letter == "r":
            text = named.get("r") or named.get("resistance") or (rest[0] if rest else None)
            if text is None:
                raise SpiceError(line.where, f"{path}: no resistance")
            value = self.value(text, frame, line)
            if value <= 0:
                raise SpiceError(line.where, f"{path}: resistance {value:g} must be > 0")
        else:
            lowered = [w.lower() for w in rest]
            if "dc" in lowered and lowered.index("dc") + 1 < len(rest):
                value = self.value(rest[lowered.index("dc") + 1], frame, line)
            elif rest and lowered[0] not in ("ac", "pulse", "sin", "pwl", "exp", "sffm", "am"):
                value = self.value(rest[0], frame, line)
            elif not rest:
                value = 0.0
            else:
                self.flat.notes.append(Finding(line.where, path, "no DC value: taken as 0"))
                value = 0.0
            if letter == "i":
                value *= frame.mult
        self.flat.devices.append(Device(path, kind, nodes, value=value, where=line.where))

    def instance(self, line: Line, frame: _Frame, path: str, positional: list[str], named: dict[str, str]) -> None:
        if len(positional) < 1:
            raise SpiceError(line.where, f"{path}: an X instance needs nodes and a subcircuit name")
        sub_name = positional[-1].lower()
        nodes = positional[:-1]
        kind = pdk_kind(sub_name)
        if kind in ("nmos", "pmos"):
            if len(nodes) != 4:
                raise SpiceError(line.where, f"{path}: PDK MOS device {sub_name} needs 4 nodes (d g s b)")
            self.mos(line, frame, path, nodes, named, kind, sub_name)
            return
        if kind in ("npn", "pnp"):
            if len(nodes) < 3:
                raise SpiceError(line.where, f"{path}: PDK bipolar device {sub_name} needs c b e")
            area = self.value(named["area"], frame, line) if "area" in named else 1.0
            self.flat.devices.append(Device(path, kind, tuple(self.node(frame, w) for w in nodes[:3]), sub_name,
                                            m=self.mult(named, frame, line), area=area,
                                            dtemp=self._dtemp(named, frame, line), where=line.where, card=sub_name))
            return
        sub = self.deck.subckts.get(sub_name)
        if sub is None:
            known = ", ".join(sorted(self.deck.subckts)[:8]) or "none"
            raise SpiceError(line.where, f"{path}: no .subckt named '{positional[-1]}' (found: {known})")
        if sub_name in frame.chain:
            raise SpiceError(line.where, f"{path}: subcircuit {sub_name} contains itself "
                                         f"({' -> '.join(frame.chain + (sub_name,))})")
        if len(nodes) != len(sub.ports):
            raise SpiceError(line.where, f"{path}: {len(nodes)} nodes for subcircuit {sub_name}, which has "
                                         f"{len(sub.ports)} ports ({sub.where})")
        self.expand(sub, path, {p.lower(): self.node(frame, n) for p, n in zip(sub.ports, nodes)},
                    named, frame, line)

    def expand(self, sub: Subckt, path: str, ports: dict[str, str], named: dict[str, str], frame: _Frame,
               line: Line) -> None:
        mult = self.mult(named, frame, line) if "m" not in sub.params else frame.mult
        given = {k: self.value(v, frame, line) for k, v in named.items() if k != "m" or "m" in sub.params}
        unknown = sorted(set(given) - set(sub.params) - {"m"})
        if unknown:
            raise SpiceError(line.where, f"{path}: subcircuit {sub.name} has no parameter "
                                         f"{', '.join(unknown)} (its parameters: {', '.join(sub.params) or 'none'})")
        scope = Scope(dict(sub.scope.params), sub.scope.parent, given)
        self.run(sub.lines, _Frame(path + ".", ports, scope, mult, frame.chain + (sub.name,)))


def model_directives(text: str, file: str) -> list[dict[str, str]]:
    """The top-level ``.include FILE`` / ``.lib FILE SECTION`` lines of a netlist, as card source fields
    (absolute paths, relative ones taken from the netlist's folder, as ngspice does).

    >>> model_directives("t\\n.lib '/m/x.lib' tt\\n.include /m/y.spi\\n", "/d/a.sp")
    [{'library': '/m/x.lib', 'section': 'tt'}, {'include': '/m/y.spi'}]
    """
    out: list[dict[str, str]] = []
    depth = 0
    for line in logical_lines(text, file, title=True):
        words = line.text.split()
        head = words[0].lower()
        depth += (head == ".subckt") - (head == ".ends")
        if depth or head not in (".include", ".inc", ".lib") or len(words) < 2:
            continue
        target = Path(words[1].strip("'\""))
        target = target if target.is_absolute() else (Path(file).parent / target).resolve()
        if head == ".lib" and len(words) >= 3:
            out.append({"library": str(target), "section": words[2].lower()})
        elif head != ".lib":
            out.append({"include": str(target)})
    return out


def model_source(defined_in: str, deck: Deck, directives: list[dict[str, str]]) -> dict[str, str] | None:
    """The directive that brought in the file ``defined_in``: the last one read before it (files are read
    depth first, in order); None when the netlist itself defines it."""
    order = {str(Path(f).resolve()): i for i, f in enumerate(deck.files)}
    at = order.get(str(Path(defined_in).resolve()))
    if at is None:
        return None
    best = None
    for d in directives:
        k = order.get(d.get("library") or d.get("include") or "")
        if k is not None and k <= at and (best is None or k >= best[0]):
            best = (k, d)
    return best[1] if best else None


def _inline_card(name: str, card: Card) -> str:
    values = " ".join(f"{k}={v!r}" for k, v in card.params.items())
    return f".model {name} {card.kind} ({values})"


def _sources(flat: Flat, deck: Deck, directives: list[dict[str, str]]) -> None:
    for dev in flat.devices:
        if dev.card is None or dev.card in flat.sources:
            continue
        found = deck.subckts.get(dev.card) if pdk_kind(dev.card) and dev.card not in flat.cards else None
        card = flat.cards.get(dev.card)
        defined = found.file if found is not None else deck.models[dev.card].file if card is not None else None
        if defined is None:
            continue
        source = model_source(defined, deck, directives)
        if source is not None:
            flat.sources[dev.card] = dict(source)
        elif card is not None:
            flat.sources[dev.card] = {"card": _inline_card(dev.card, card)}


def flatten(deck: Deck, source: str, top: str | None = None) -> Flat:
    """Every device of ``deck`` (or of its subcircuit ``top``), with full instance paths."""
    f = _Flattener(deck, source)
    if top is None:
        f.run(deck.lines, _Frame("", {}, deck.scope, 1.0, ()))
    else:
        sub = deck.subckts.get(top.lower())
        if sub is None:
            raise SpiceError(source, f"--top {top}: no such .subckt (found: "
                                     f"{', '.join(sorted(deck.subckts)) or 'none'})")
        ports = {p.lower(): p.lower() for p in sub.ports}
        scope = Scope(dict(sub.scope.params), sub.scope.parent, {})
        f.run(sub.lines, _Frame("", ports, scope, 1.0, (sub.name,)))
    return f.flat


def read_netlist(path: str | Path, top: str | None = None) -> Flat:
    """Read and flatten a netlist file (its first line is the title, as in SPICE)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8", errors="replace")
    except OSError as err:
        raise SpiceError(str(path), f"cannot read ({err.strerror or err})") from None
    deck = parse_text(text, str(path), title=True)
    flat = flatten(deck, str(path), top)
    _sources(flat, deck, model_directives(text, str(path)))
    return flat
