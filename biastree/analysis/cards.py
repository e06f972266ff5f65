"""Model cards of a plan's devices: read once, evaluated per condition.

A device that points at a card (``biastree.input.cards.CardModel``) is read
with the SPICE text layer; for a bipolar device the ``.model`` card (found by
name, or inside the subcircuit that wraps it) is evaluated into the
Gummel–Poon DC parameters.  Parameters the DC solution does not use
(capacitances, transit times, noise) are accepted silently; a parameter that
is not a Gummel–Poon parameter at all is an error naming the card's line.
"""

from __future__ import annotations

import functools
import os
from dataclasses import dataclass

import numpy as np

from biastree.input.cards import CardModel
from biastree.input.spice_text import (
    Deck,
    ModelCard,
    SpiceError,
    evaluate,
    parse_text,
    read_file,
    spice_number,
    split_params,
    tokens,
)
from biastree.physics import gummel_poon as gp


@functools.lru_cache(maxsize=64)
def _read(path: str, section: str | None, stamp: float) -> Deck:
    return read_file(path, section)


@functools.lru_cache(maxsize=64)
def _inline(text: str) -> Deck:
    return parse_text(text, "inline card")


def deck(dev: CardModel, corner: str = "") -> Deck:
    """Everything the device's model source defines, at a corner's library section."""
    if dev.card is not None:
        return _inline(dev.card)
    path = dev.include if dev.include is not None else dev.library
    assert path is not None  # the model validator guarantees one source
    section = dev.section_for(corner) if dev.library is not None else None
    return _read(path, section, os.stat(path).st_mtime)


@dataclass(frozen=True)
class Located:
    """The ``.model`` card of a device and how many unit devices one instance holds."""

    card: ModelCard
    subckt: str | None  # the wrapping subcircuit's name, if any
    ports: tuple[str, ...]  # its ports (c b e [s])
    multiplier: float


def locate(dev: CardModel, corner: str = "") -> Located:
    """Find the device's ``.model`` card, directly or in the subcircuit named ``model``."""
    found = deck(dev, corner)
    name = dev.model.lower()
    if name in found.models:
        return Located(found.models[name], None, (), 1.0)
    sub = found.subckts.get(name)
    if sub is None:
        raise SpiceError(_where(dev), f"no .model or .subckt named '{dev.model}' in {_source(dev)}")
    devices = [line for line in sub.lines if line.keyword.startswith("q")]
    if len(devices) != 1:
        raise SpiceError(sub.where, f"subcircuit {dev.model} wraps {len(devices)} bipolar devices; "
                                    "biastree reads subcircuits that wrap exactly one")
    words = tokens(devices[0].text)
    positional, named = split_params(words)
    models = [w.lower() for w in positional[1:] if w.lower() in found.models]
    if not models:
        raise SpiceError(devices[0].where, f"the device in {dev.model} uses a model not found in {_source(dev)}")
    mult = 1.0
    for key in ("m", "area"):
        if key in named:
            mult *= evaluate(named[key], sub.scope.lookup(devices[0].where), devices[0].where)
    return Located(found.models[models[0]], sub.name, tuple(sub.ports), mult)


def _source(dev: CardModel) -> str:
    return "the inline card" if dev.card is not None else str(dev.include or dev.library)


def _where(dev: CardModel) -> str:
    return str(dev.include or dev.library or "inline card")


def _source_key(dev: CardModel, corner: str) -> tuple[object, ...]:
    """What a device's card evaluates from: the inline text itself, or the file, its
    section and its modification time (an edited file is read again)."""
    if dev.card is not None:
        return ("card", dev.kind, dev.model, dev.card)
    path = dev.include if dev.include is not None else dev.library
    assert path is not None  # the model validator guarantees one source
    section = dev.section_for(corner) if dev.library is not None else None
    stat = os.stat(path)
    return ("file", dev.kind, dev.model, path, section, stat.st_mtime_ns, stat.st_size)


@dataclass(frozen=True)
class _Evaluated:
    values: dict[str, float]
    note: str | None  # the parameters the model does not know, said once per card


def _evaluate(dev: CardModel, corner: str) -> _Evaluated:
    # memoised by the card's content (``_source_key``), never by its place: two inline
    # cards both start at "inline card:1" and must not share values or notes
    key = _source_key(dev, corner)
    hit = _EVALUATED.get(key)
    if hit is None:
        hit = _values(dev, corner)
        if len(_EVALUATED) >= 256:  # bounded: a long session reads many cards
            _EVALUATED.pop(next(iter(_EVALUATED)))
        _EVALUATED[key] = hit
    return hit


_EVALUATED: dict[tuple[object, ...], _Evaluated] = {}


def bipolar_values(dev: CardModel, corner: str = "") -> dict[str, float]:
    """The card's DC parameters, evaluated (lower-case SPICE names, SI units; TNOM in °C)."""
    return _evaluate(dev, corner).values


def _values(dev: CardModel, corner: str) -> _Evaluated:
    found = locate(dev, corner)
    card = found.card
    if card.kind not in ("npn", "pnp"):
        raise SpiceError(card.where, f"model {card.name} is a {card.kind} card, the device is a {dev.kind}")
    if card.kind != dev.kind:
        raise SpiceError(card.where, f"model {card.name} is a {card.kind} card, the device is a {dev.kind}")
    level = card.params.get("level")
    if level is not None and float(card.value("level")) != 1.0:
        raise SpiceError(card.where, f"model {card.name} has level={card.params['level']}: "
                                     "bipolar cards are read at level 1 (Gummel–Poon) only")
    values: dict[str, float] = {}
    unknown: list[str] = []
    for key in card.params:
        if key in gp.UNSUPPORTED:
            raise SpiceError(card.where, f"model {card.name}: '{key}' (quasi-saturation) is not supported")
        if not gp.known(key):
            # reported, not fatal: ngspice too warns and ignores a parameter it does not know
            unknown.append(key)
            continue
        target = gp.ALIASES.get(key, key)
        if target in gp.DC_DEFAULTS or target in gp.TEMP_PARAMS:
            values[target] = card.value(key)
    from biastree.input.cards import bipolar_value_problem

    problem = bipolar_value_problem(values)
    if problem:
        raise SpiceError(card.where, f"model {card.name}: {problem}")
    if found.multiplier != 1.0:
        values["_m"] = found.multiplier
    note = None
    if unknown:
        note = (f"{card.where}: model {card.name}: not Gummel–Poon parameters, ignored "
                f"(as ngspice ignores them): {', '.join(unknown)}")
    return _Evaluated(values, note)


def notes(plan: object) -> list[str]:
    """One line per card of the plan that carries parameters the model does not know."""
    wanted = []
    for dev, corner in _bipolar_cards(plan):
        note = _evaluate(dev, corner).note  # raises SpiceError with file:line on a bad card
        if note is not None:
            wanted.append(note)
    return list(dict.fromkeys(wanted)) + fractional_copies(plan)


def fractional_copies(plan: object) -> list[str]:
    """One line per mirror whose card devices are not whole copies of the unit device.

    A card's device is built from ``m=`` copies of its unit device (never a wider
    W: real models depend on W), so an input of ``input_size`` units and an output
    of ``input_size × ratio`` units should both be whole numbers; the simulator
    accepts a fractional m, a layout does not."""
    lines = []
    for name, spec in getattr(plan, "mirrors", {}).items():
        if not isinstance(plan.devices.get(spec.device), CardModel):  # type: ignore[attr-defined]
            continue
        sizes = [("input", spec.input_size)] + [(f"output to {b.to}", spec.input_size * b.ratio) for b in spec.branches]
        odd = [f"{what} {size:.4g}" for what, size in sizes if abs(size - round(size)) > 1e-9 or round(size) < 1]
        if odd:
            lines.append(f"mirror {name}: {', '.join(odd)} unit devices; a device of model card {spec.device} "
                         "is whole copies of its unit device (m=): choose input_size so that every size is whole")
    return lines


def gummel_poon(dev: CardModel, corner: str, kelvin: np.ndarray) -> gp.GummelPoon:
    """The device's DC parameters per unit instance, at each temperature."""
    values = dict(bipolar_values(dev, corner))
    mult = values.pop("_m", 1.0)
    try:
        p = gp.from_card(values, kelvin, gmin=0.0)
    except ValueError as err:
        raise SpiceError(locate(dev, corner).card.where, str(err)) from None
    if mult != 1.0:  # a subcircuit instance of several devices: all currents scale
        from dataclasses import replace

        p = replace(p, is_be=p.is_be * mult, is_bc=p.is_bc * mult, ise=p.ise * mult, isc=p.isc * mult,
                    inv_ikf=p.inv_ikf / mult, inv_ikr=p.inv_ikr / mult, rb=p.rb / mult, rbm=p.rbm / mult,
                    irb=p.irb * mult, re=p.re / mult, rc=p.rc / mult)
    return p


def check_plan_cards(plan: object) -> None:
    """Read every card a plan names (raises ``SpiceError`` with file:line on the first bad one)."""
    for dev, corner in _bipolar_cards(plan):
        _evaluate(dev, corner)


def _bipolar_cards(plan: object) -> list[tuple[CardModel, str]]:
    """(device, corner) of every bipolar card device of a plan, at every corner it has."""
    devices = getattr(plan, "devices", {})
    corners = list(getattr(getattr(plan, "conditions", None), "corners", {}) or [])
    return [(dev, corner) for dev in devices.values() if isinstance(dev, CardModel) and dev.is_bipolar
            for corner in [""] + corners]


def _spice_num(x: float) -> str:
    return f"{x:.12g}"


def source_line(dev: CardModel, corner: str) -> str:
    """The designer's models by reference (``.include`` / ``.lib FILE SECTION``) or inline."""
    if dev.card is not None:
        return dev.card.strip()
    if dev.include is not None:
        return f'.include "{dev.include}"'
    return f'.lib "{dev.library}" {dev.section_for(corner)}'


def length_scale(dev: CardModel, corner: str) -> float:
    """The ``.option scale`` the device's library sets (sky130: 1e-6), 1 if none."""
    for line in deck(dev, corner).lines:
        if line.keyword in (".option", ".options"):
            for word in line.text.lower().replace("=", " = ").split("scale = ")[1:]:
                value = spice_number(word.split()[0])
                if value:
                    return value
    return 1.0


def instance_line(label: str, dev: CardModel, c: str, b: str, e: str, bulk: str, copies: float,
                  corner: str = "") -> str:
    """One instance of a card device: ``copies`` unit devices in parallel (m=), never a wider device."""
    if dev.is_bipolar:
        found = locate(dev, corner)
        if found.subckt is None:
            return f"q{label} {c} {b} {e} {dev.model} m={_spice_num(copies)}"
        ports = [c, b, e] + [bulk] * (len(found.ports) - 3)
        return f"x{label} {' '.join(ports)} {dev.model} m={_spice_num(copies)}"
    scale = length_scale(dev, corner)
    size = f"w={_spice_num(dev.w / scale)} l={_spice_num(dev.l / scale)}"  # type: ignore[operator]
    kind = "m" if dev.model.lower() in deck(dev, corner).models else "x"
    return f"{kind}{label} {c} {b} {e} {bulk} {dev.model} {size} m={_spice_num(copies)}"


