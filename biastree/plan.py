"""The plan: a strict, validated description of one bias network.

The models are the contract of the plan file.  Quantities are parsed from
strings like ``10uA`` to SI floats here, once; every field has a
description (it ends up in the committed JSON Schema).
"""

from __future__ import annotations

from functools import cached_property
from typing import Annotated, Callable, Literal, Optional, Union

from annotated_types import Ge, Gt
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainSerializer,
    WithJsonSchema,
    field_validator,
)

from .units import ZERO_CELSIUS, parse_quantity

_QUANTITY_PATTERN = r"^\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*\S*\s*$"


def _parser(unit: str) -> Callable[[object], float]:
    """A parse function for one unit, memoising strings (large plans repeat
    the same few values, and this runs once per quantity field)."""
    cache: dict[str, float] = {}

    def parse(value: object) -> float:
        if type(value) is str:
            hit = cache.get(value)
            if hit is None:
                hit = parse_quantity(value, unit)
                if len(cache) < 4096:
                    cache[value] = hit
            return hit
        return parse_quantity(value, unit)

    return parse


def Quantity(unit: str, example: str, *constraints: object) -> object:
    """A float field that also accepts a string with SI prefix and unit."""
    schema = {
        "anyOf": [
            {"type": "number"},
            {"type": "string", "pattern": _QUANTITY_PATTERN},
        ],
        "examples": [example],
    }
    return Annotated[
        float,
        BeforeValidator(_parser(unit)),
        *constraints,
        WithJsonSchema(schema),
    ]


Current = Quantity("A", "10uA", Gt(0))
NonNegCurrent = Quantity("A", "1uA", Ge(0))
Resistance = Quantity("ohm", "10kohm", Gt(0))
PositiveVoltage = Quantity("V", "3.3V", Gt(0))
Voltage = Quantity("V", "1.5V")
NonNegVoltage = Quantity("V", "0.3V", Ge(0))
Fraction = Quantity("%", "1%", Ge(0))
PositiveFraction = Quantity("%", "5%", Gt(0))
Positive = Quantity("1", "120", Gt(0))
NonNegative = Quantity("1", "3", Ge(0))
Length = Quantity("m", "1um", Gt(0))
Transconductance = Quantity("A/V^2", "200uA/V^2", Gt(0))
InverseVoltage = Quantity("1/V", "0.05/V", Ge(0))
EnergyEV = Quantity("eV", "1.11eV", Gt(0))
Temperature = Annotated[
    float,
    BeforeValidator(_parser("C")),
    PlainSerializer(lambda k: f"{k - ZERO_CELSIUS:.6g}C", return_type=str),
    WithJsonSchema({"anyOf": [{"type": "number"}, {"type": "string"}], "examples": ["27C", "300K"]}),
]
Name = Annotated[str, Field(min_length=1)]


class _Strict(BaseModel):
    # extra="forbid": a misspelt key is an error, never silently ignored.
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class BjtModel(_Strict):
    """A bipolar device model (Gummel–Poon without parasitics)."""

    kind: Literal["npn", "pnp"] = Field(description="npn sinks current to ground, pnp sources it from the supply")
    is_: Current = Field(alias="is", description="saturation current IS of one unit device at tnom")
    beta: Positive = Field(description="forward current gain BF at tnom")
    early: Optional[PositiveVoltage] = Field(
        default=None,
        description="forward Early voltage VAF (omit for none: infinite output resistance)",
    )
    xti: NonNegative = Field(default=3.0, description="IS temperature exponent XTI (SPICE default 3)")
    eg: EnergyEV = Field(default=1.11, description="band gap EG for the IS temperature law, eV (SPICE default 1.11)")
    xtb: NonNegative = Field(default=0.0, description="BF temperature exponent XTB (SPICE default 0)")
    tnom: Temperature = Field(default=300.15, description="temperature at which the parameters are given (default 27C)")

    @property
    def vaf(self) -> float:
        """Early voltage, infinite when not given."""
        return float("inf") if self.early is None else self.early


class MosModel(_Strict):
    """A MOS device model (square law with channel-length modulation, SPICE level 1).

    Parameters are taken as valid at the plan temperature.
    """

    kind: Literal["nmos", "pmos"] = Field(description="nmos sinks current to ground, pmos sources it from the supply")
    kp: Transconductance = Field(description="transconductance parameter KP = µ·Cox, A/V²")
    vth: PositiveVoltage = Field(description="threshold voltage magnitude VTO")
    lambda_: InverseVoltage = Field(default=0.0, alias="lambda", description="channel-length modulation λ, 1/V")
    w: Length = Field(description="gate width of one unit device")
    l: Length = Field(description="gate length of one unit device")  # noqa: E741


DeviceModel = Annotated[Union[BjtModel, MosModel], Field(discriminator="kind")]


class Reference(_Strict):
    """The root of the tree: one precise current source."""

    current: Current = Field(description="reference current")
    tolerance: Fraction = Field(default=0.0, description="reference current tolerance, e.g. 1%")
    feeds: Name = Field(description="name of the mirror whose input the reference drives")


class Branch(_Strict):
    """One output of a mirror."""

    to: Name = Field(description="name of the mirror or load this output drives")
    ratio: Positive = Field(default=1.0, description="output device size / input device size")
    count: Annotated[int, Gt(0)] = Field(
        default=1,
        description="identical copies of this output; into a mirror, copies of that mirror and all below it",
    )


class Mirror(_Strict):
    """One mirror stage: a diode-connected input device and its outputs."""

    device: Name = Field(description="name of a device model under devices:")
    input_size: Positive = Field(default=1.0, description="input device size in unit devices")
    topology: Name = Field(default="simple", description="mirror topology (see `biastree topologies`)")
    branches: list[Branch] = Field(min_length=1, description="the outputs of this mirror")
    helper_size: Positive = Field(default=1.0, description="beta_helper: size of the helper device, unit devices")
    bleed: NonNegCurrent = Field(default=0.0, description="beta_helper: bleed current from the base line to the rail")
    degeneration: Optional[Resistance] = Field(
        default=None, description="degenerated: emitter resistor of the input device (outputs get R/ratio)"
    )
    degeneration_drop: Optional[PositiveVoltage] = Field(
        default=None, description="degenerated: instead of a resistor, the drop across it at the ideal input current"
    )
    bias_current: Optional[Current] = Field(
        default=None, description="wide_swing: current of the cascode bias device (default: the ideal input current)"
    )
    swing_n: Positive = Field(
        default=1.25,
        description="wide_swing: bias device is (W/L)/(n+1)²; n = 1 is the textbook edge of saturation, "
        "1.25 keeps a margin",
    )

    @field_validator("topology")
    @classmethod
    def _known_topology(cls, value: str) -> str:
        from .topologies import TOPOLOGIES

        if value not in TOPOLOGIES:
            raise ValueError(f"unknown topology '{value}'; known: {', '.join(sorted(TOPOLOGIES))}")
        return value


class Load(_Strict):
    """A block that consumes bias current."""

    current: Current = Field(description="target current of one instance")
    tolerance: PositiveFraction = Field(description="error budget, e.g. 5%")
    voltage: Union[Voltage, tuple[Voltage, Voltage]] = Field(
        description="voltage of the load's node (vs ground): a value or [min, max]"
    )

    @field_validator("voltage")
    @classmethod
    def _ordered(cls, value: float | tuple[float, float]) -> float | tuple[float, float]:
        if isinstance(value, tuple) and value[0] > value[1]:
            raise ValueError(f"range [{value[0]:g}, {value[1]:g}] V must be written [min, max]")
        return value

    @cached_property
    def v_range(self) -> tuple[float, float, float]:
        """(min, nominal, max) node voltage; nominal is the middle of a range."""
        v = self.voltage
        if type(v) is tuple:
            return v[0], 0.5 * (v[0] + v[1]), v[1]
        return v, v, v  # type: ignore[return-value]


class Compliance(_Strict):
    """How much the output devices may be pushed towards saturation."""

    bjt_forward_bias: NonNegVoltage = Field(
        default=0.0,
        description="forward bias allowed on a BJT output's base-collector junction (0 = VCB ≥ 0)",
    )


class Plan(_Strict):
    """One bias network: a reference current, mirrors, and the loads they feed."""

    title: str = Field(default="", description="free text shown in reports")
    supply: PositiveVoltage = Field(description="supply voltage (the rail of pnp/pmos mirrors)")
    temperature: Temperature = Field(default=300.15, description="die temperature, e.g. 27C or 300K")
    devices: dict[Name, DeviceModel] = Field(min_length=1, description="named device models")
    reference: Reference
    mirrors: dict[Name, Mirror] = Field(min_length=1, description="named mirror stages")
    loads: dict[Name, Load] = Field(min_length=1, description="named blocks that consume bias current")
    compliance: Compliance = Field(default_factory=Compliance, description="compliance limits")
