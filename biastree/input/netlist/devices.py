"""Model cards to the plan's simple device models.

A Gummel–Poon card gives IS, BF, VAF, XTI, EG, XTB and TNOM (SPICE defaults
where absent: IS 1e-16 A, BF 100, VAF infinite, XTI 3, EG 1.11 eV, XTB 0,
TNOM 27 °C); a level-1 MOS card gives KP, |VTO| and LAMBDA.  Parameters the
plan's model does not have are named, not silently dropped; a card the plan
cannot read (a PDK's BSIM4 device subcircuit, another MOS level) needs the
annotation's ``devices:`` entry, or it is listed as missing.

Card devices (``card_entry``): where the netlist gives the models itself, the
plan points at them instead.  The rule: a PDK device subcircuit, a MOS card
of level ≠ 1, or a Gummel–Poon card with DC parameters beyond IS, BF, VAF,
XTI, EG, XTB and TNOM becomes a card device with the same ``library`` +
``section`` or ``include`` file as the netlist's top-level ``.lib`` /
``.include`` line (or the card's text inline, when the netlist writes it),
the unit device's W and L for MOS.  Plain level-1 and simple bipolar cards
keep the simple mapping (the same equations, and no characterisation run),
and an annotation ``devices:`` entry always wins: its stand-in parameters are
used as given.
"""

from __future__ import annotations

import math
from typing import Any

from biastree.input.netlist.annotate import DeviceNote
from biastree.input.netlist.flat import Card, Device, Finding, family
from biastree.physics.gummel_poon import ALIASES, DC_IRRELEVANT

SPICE_TNOM_C = 27.0  # SPICE's default temperature and TNOM, °C
_BJT_CARD = {"is": ("is", 1e-16), "bf": ("beta", 100.0), "xti": ("xti", 3.0), "eg": ("eg", 1.11), "xtb": ("xtb", 0.0)}
# DC parameters of a Gummel–Poon card that the plan's bipolar model does not have (value = SPICE default)
_BJT_UNMODELLED = {"nf": 1.0, "var": 0.0, "ikf": 0.0, "ise": 0.0, "ikr": 0.0, "isc": 0.0, "rb": 0.0, "re": 0.0,
                   "rc": 0.0, "br": 1.0}
_MOS_UNMODELLED = {"gamma": 0.0, "rd": 0.0, "rs": 0.0}


_BJT_SIMPLE = {"is", "bf", "vaf", "xti", "eg", "xtb", "tnom", "level"}


def wants_card(kind: str, card: Card | None, source: dict[str, str] | None, given: DeviceNote | None) -> bool:
    """Whether the plan device should be the netlist's own card (see the module text for the rule).

    >>> wants_card("npn", Card("qn", "npn", {"is": 1e-16, "ikf": 0.01}), {"card": "…"}, None)
    True
    >>> wants_card("npn", Card("qn", "npn", {"is": 1e-16, "bf": 80, "cje": 1e-15}), {"card": "…"}, None)
    False
    """
    if source is None or given is not None:
        return False
    if card is None:  # a PDK device subcircuit found in the model files
        return True
    p = card.params
    if family(kind) == "mos":
        return p.get("level", 1.0) != 1
    extra = {ALIASES.get(k, k) for k in p} - _BJT_SIMPLE - DC_IRRELEVANT
    return any(not (k in _BJT_UNMODELLED and p.get(k) == _BJT_UNMODELLED[k]) for k in extra)


def card_entry(kind: str, name: str, source: dict[str, str], first: Device) -> dict[str, Any]:
    """A plan card device: the netlist's model ``name`` from ``source``, MOS with the unit device's W and L.

    >>> card_entry("nmos", "nch", {"include": "/m/x.spi"}, Device("m1", "nmos", ("n", "n", "0", "0"), w=2e-6, l=1e-6))
    {'kind': 'nmos', 'model': 'nch', 'include': '/m/x.spi', 'w': 2e-06, 'l': 1e-06}
    """
    dev: dict[str, Any] = {"kind": kind, "model": name, **source}
    if family(kind) == "mos":
        dev.update(w=first.w, l=first.l)
    return dev


def device_entry(kind: str, name: str, card: Card | None, given: DeviceNote | None,
                 first: Device) -> tuple[dict[str, Any], list[Finding], list[Finding]]:
    """(plan device entry, notes, missing values) for the card ``name``; ``first`` is the
    input device of the first mirror using it (its W and L become the MOS unit device).

    >>> dev, notes, missing = device_entry("npn", "qn", Card("qn", "npn", {"is": 2e-17, "ikf": 0.01}), None,
    ...                                    Device("q1", "npn", ("n", "n", "0")))
    >>> dev["is"], dev["beta"], "early" in dev, notes[0].message
    (2e-17, 100.0, False, "card parameters the plan's model does not have: ikf (ignored)")
    """
    where = card.where if card else first.where
    p = card.params if card else {}
    dev: dict[str, Any] = {"kind": kind}
    notes: list[Finding] = []
    missing: list[Finding] = []
    if family(kind) == "bjt":
        if card is None and (given is None or given.is_ is None or given.beta is None):
            missing.append(Finding(where, name, "no .model card the plan can read: give "
                                   f"devices.{name}: {{is, beta, early}} in the annotation file"))
        for key, (field, default) in _BJT_CARD.items():
            dev[field] = p.get(key, default)
        vaf = p.get("vaf", p.get("va", 0.0))
        if vaf > 0:  # SPICE: VAF = 0 means no Early effect
            dev["early"] = vaf
        unmodelled = _BJT_UNMODELLED
    else:
        level = p.get("level", 1.0)
        needs = given is None or given.kp is None or given.vth is None
        if card is not None and level != 1 and needs:
            missing.append(Finding(where, name, f"level {level:g} card: the plan needs square-law parameters; "
                                   f"give devices.{name}: {{kp, vth, lambda}} in the annotation file"))
        elif card is None and needs:
            missing.append(Finding(where, name, "a PDK device: the plan needs square-law parameters; "
                                   f"give devices.{name}: {{kp, vth, lambda}} in the annotation file"))
        dev.update(kp=p.get("kp", 2e-5), vth=abs(p.get("vto", 0.0)), **{"lambda": p.get("lambda", 0.0)})
        dev.update(w=first.w, l=first.l)
        unmodelled = _MOS_UNMODELLED if level == 1 else {}
    if given is not None:
        dev.update(given.model_dump(by_alias=True, exclude_none=True))
    if card is not None:
        dev["tnom"] = f"{p.get('tnom', SPICE_TNOM_C):.12g}C"
        odd = [k for k, default in unmodelled.items() if k in p and p[k] != default]
        if odd:
            notes.append(Finding(card.where, name, f"card parameters the plan's model does not have: "
                                 f"{', '.join(odd)} (ignored)"))
    if family(kind) == "mos" and not dev.get("vth") and not missing:
        missing.append(Finding(where, name, f"threshold VTO is 0 or missing: give devices.{name}.vth in the "
                               "annotation file"))
    return dev, notes, missing


def temperature_law(dev: dict[str, Any], hot: dict[str, float], kelvin: float, dtemp: float) -> dict[str, float]:
    """vth_tc and mobility_exp that turn ``dev`` (at ``kelvin``) into the card ``hot`` (at kelvin + dtemp).

    The laws are the plan's: |VT|(T) = |VT| + vth_tc·ΔT, KP(T) = KP·(T/T0)^mobility_exp.

    >>> law = temperature_law({"vth": 0.5, "kp": 2e-4}, {"vto": 0.498, "kp": 2e-4 * (310 / 300) ** -1.5}, 300, 10)
    >>> round(law["vth_tc"], 9), round(law["mobility_exp"], 9)
    (-0.0002, -1.5)
    """
    return {
        "vth_tc": (abs(hot.get("vto", 0.0)) - dev["vth"]) / dtemp,
        "mobility_exp": math.log(hot.get("kp", 2e-5) / dev["kp"]) / math.log((kelvin + dtemp) / kelvin),
    }
