"""The plan: a strict, validated description of one bias network.

The models are the contract of the plan file.  Quantities are parsed from
strings like ``10uA`` to SI floats here, once; every field has a
description (it ends up in the committed JSON Schema).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Annotated, Callable, Literal, Optional, Union

from annotated_types import Ge, Gt, Le
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Discriminator,
    Field,
    PlainSerializer,
    Tag,
    WithJsonSchema,
    field_validator,
)

from biastree.input.cards import CardModel, is_card
from biastree.units import ZERO_CELSIUS, UnitError, parse_quantity, shown

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


@dataclass(frozen=True)
class Plausible:
    """The range of values that make sense for an on-chip bias network.

    A value outside it is almost certainly a slip (``current: 20`` is 20 A);
    ``biastree.input.checks`` reports it unless the plan lists the key under
    ``allow_unusual``.  ``magnitude`` ranges bound the absolute value.
    """

    low: float
    high: float
    unit: str
    magnitude: bool = False


def Quantity(unit: str, example: str, *constraints: object, plausible: tuple[float, float] | None = None,
             shown_unit: str | None = None, magnitude: bool = False) -> object:
    """A float field that also accepts a string with SI prefix and unit."""
    schema = {
        "anyOf": [
            {"type": "number"},
            {"type": "string", "pattern": _QUANTITY_PATTERN},
        ],
        "examples": [example],
    }
    # Annotated[(…)] with a tuple: the same as listing the items, and valid on Python 3.10
    extra: tuple[object, ...] = ()
    if plausible is not None:
        extra = (Plausible(plausible[0], plausible[1], shown_unit if shown_unit is not None else unit, magnitude),)
    return Annotated[(float, BeforeValidator(_parser(unit)), *constraints, *extra, WithJsonSchema(schema))]


def _temperature(value: object) -> float:
    """A temperature must say its unit: '27C' or '300K'.  A plain number is
    refused, because a designer reads it as °C and SI as kelvin."""
    text = value if isinstance(value, str) else None
    if text is not None and text.strip().upper().endswith(("C", "K")):
        return _parser("C")(text)
    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        return parse_quantity(value, "C")  # the same message as any other field
    raise UnitError(f"'{shown(value)}' needs a unit: write {shown(value)}C (°C) or {shown(value)}K (kelvin)")


def _whole(value: object) -> object:
    """A count: a whole number, never a boolean, never beyond 10⁹."""
    if isinstance(value, bool):
        raise UnitError(f"'{value}' is a boolean, not a number")
    if isinstance(value, str) and len(value.strip()) > 12:
        raise UnitError(f"'{shown(value)}' is too large for a count (at most 1e9)")
    if isinstance(value, int) and abs(value) > 10**9:
        raise UnitError(f"'{shown(value)}' is too large for a count (at most 1e9)")
    return value


def _line_of_text(value: object) -> object:
    if isinstance(value, str) and not value.isprintable():
        raise UnitError(f"'{shown(value)}' holds a control character or an invalid one")
    return value


Current = Quantity("A", "10uA", Gt(0), plausible=(1e-12, 0.1))
NonNegCurrent = Quantity("A", "1uA", Ge(0), plausible=(0.0, 0.1))
Resistance = Quantity("ohm", "10kohm", Gt(0), plausible=(0.1, 1e9), shown_unit="Ω")
VoltMeter = Quantity("V*m", "5mV*um", Ge(0), plausible=(0.0, 1e-7), shown_unit="V·m")
FractionMeter = Quantity("%*m", "1%*um", Ge(0), plausible=(0.0, 1e-6), shown_unit="·m")
Area = Quantity("m^2", "4um^2", Gt(0), plausible=(1e-16, 1e-6), shown_unit="m²")
SignedVoltage = Quantity("V", "20mV", plausible=(0.0, 10.0), magnitude=True)
SignedFraction = Quantity("%", "-10%", Gt(-1), plausible=(-0.9, 10.0), shown_unit="%")
PerKelvin = Quantity("1/K", "50ppm/K", plausible=(0.0, 0.01), magnitude=True, shown_unit="/K")
SignedVoltagePerKelvin = Quantity("V/K", "-1mV/K", plausible=(0.0, 0.01), magnitude=True)
Distance = Quantity("m", "1.5mm", Ge(0), plausible=(0.0, 0.1))
PositiveVoltage = Quantity("V", "3.3V", Gt(0), plausible=(1e-3, 100.0))
Voltage = Quantity("V", "1.5V", plausible=(0.0, 100.0), magnitude=True)
NonNegVoltage = Quantity("V", "0.3V", Ge(0), plausible=(0.0, 1.0))
Fraction = Quantity("%", "1%", Ge(0), plausible=(0.0, 1.0), shown_unit="%")
PositiveFraction = Quantity("%", "5%", Gt(0), plausible=(0.0, 1.0), shown_unit="%")
PositiveNumber = Quantity("1", "3", Gt(0), plausible=(0.0, 10.0), shown_unit="")
Positive = Quantity("1", "120", Gt(0), plausible=(1e-3, 1e4), shown_unit="")
NonNegative = Quantity("1", "3", Ge(0), plausible=(0.0, 10.0), shown_unit="")
Length = Quantity("m", "1um", Gt(0), plausible=(1e-8, 1e-2))
Transconductance = Quantity("A/V^2", "200uA/V^2", Gt(0), plausible=(1e-7, 1e-2), shown_unit="A/V²")
InverseVoltage = Quantity("1/V", "0.05/V", Ge(0), plausible=(0.0, 10.0), shown_unit="/V")
EnergyEV = Quantity("eV", "1.11eV", Gt(0), plausible=(0.1, 5.0))
# A die between -100 °C and 250 °C covers cold labs, automotive and downhole parts.
DIE_TEMPERATURES = (173.15, 523.15)
SaturationCurrent = Quantity("A", "1e-17A", Gt(0), plausible=(1e-24, 1e-9))
# β and V_A have no practical upper bound: very large values make ideal devices
Beta = Quantity("1", "120", Gt(0), plausible=(1.0, 1e15), shown_unit="")
EarlyVoltage = Quantity("V", "60V", Gt(0), plausible=(0.5, 1e15))
Ratio = Quantity("1", "2", Gt(0), plausible=(1e-6, 1e6), shown_unit="")
Exponent = Quantity("1", "-1.5", plausible=(0.0, 5.0), magnitude=True, shown_unit="")
PerKelvin2 = Quantity("1", "1e-6", plausible=(0.0, 1e-3), magnitude=True, shown_unit="/K²")
Kelvin = Quantity("K", "2K", plausible=(0.0, 100.0), magnitude=True)
Count = Annotated[int, BeforeValidator(_whole), Gt(0), Le(10**9), Plausible(1, 1e6, "")]
Temperature = Annotated[
    float,
    BeforeValidator(_temperature),
    Plausible(*DIE_TEMPERATURES, "K"),
    PlainSerializer(lambda k: f"{k - ZERO_CELSIUS:.6g}C", return_type=str),
    WithJsonSchema({"anyOf": [{"type": "number"}, {"type": "string"}], "examples": ["27C", "300K"]}),
]
Name = Annotated[str, Field(min_length=1, max_length=200), BeforeValidator(_line_of_text)]


class _Strict(BaseModel):
    # extra="forbid": a misspelt key is an error, never silently ignored.
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class BjtModel(_Strict):
    """A bipolar device model (Gummel–Poon without parasitics)."""

    kind: Literal["npn", "pnp"] = Field(description="npn sinks current to ground, pnp sources it from the supply")
    is_: SaturationCurrent = Field(alias="is", description="saturation current IS of one unit device at tnom")
    beta: Beta = Field(description="forward current gain BF at tnom")
    early: Optional[EarlyVoltage] = Field(
        default=None,
        description="forward Early voltage VAF (omit for none: infinite output resistance)",
    )
    xti: NonNegative = Field(default=3.0, description="IS temperature exponent XTI (SPICE default 3)")
    eg: EnergyEV = Field(default=1.11, description="band gap EG for the IS temperature law, eV (SPICE default 1.11)")
    xtb: NonNegative = Field(default=0.0, description="BF temperature exponent XTB (SPICE default 0)")
    tnom: Temperature = Field(default=300.15, description="temperature at which the parameters are given (default 27C)")
    area: Optional[Area] = Field(default=None, description="emitter area of one unit device (for the matching law)")
    a_is_pair: Optional[FractionMeter] = Field(
        default=None, description="σ(ΔIS/IS) of a PAIR of devices × √(emitter area), e.g. 2%*um (Pelgrom-style)"
    )
    a_is_single: Optional[FractionMeter] = Field(
        default=None, description="σ(ΔIS/IS) of ONE device × √(emitter area) (= pair value / √2)"
    )

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
    tnom: Temperature = Field(default=300.15, description="temperature at which kp and vth are given (default 27C)")
    vth_tc: SignedVoltagePerKelvin = Field(default=0.0, description="threshold temperature coefficient d|VT|/dT, V/K")
    mobility_exp: Exponent = Field(default=-1.5, description="kp ∝ (T/tnom)^mobility_exp (default −1.5)")
    a_vt_pair: Optional[VoltMeter] = Field(
        default=None, description="Pelgrom A_VT: σ(ΔVT) of a PAIR × √(WL), e.g. 5mV*um (Pelgrom et al. 1989)"
    )
    a_vt_single: Optional[VoltMeter] = Field(default=None, description="σ(VT) of ONE device × √(WL) (= pair / √2)")
    a_beta_pair: Optional[FractionMeter] = Field(default=None, description="Pelgrom A_β: σ(Δβ/β) of a PAIR × √(WL)")
    a_beta_single: Optional[FractionMeter] = Field(default=None, description="σ(Δβ/β) of ONE device × √(WL)")


def _device_tag(data: object) -> str | None:
    # A device that names a model card (key "model") is a CardModel; otherwise its kind picks the simple model.
    if is_card(data) or isinstance(data, CardModel):
        return "card"
    kind = data.get("kind") if isinstance(data, dict) else getattr(data, "kind", None)
    return kind if isinstance(kind, str) else None


DeviceModel = Annotated[
    Union[Annotated[BjtModel, Tag("npn")], Annotated[BjtModel, Tag("pnp")], Annotated[MosModel, Tag("nmos")],
          Annotated[MosModel, Tag("pmos")], Annotated[CardModel, Tag("card")]],
    Discriminator(_device_tag),
]


class Reference(_Strict):
    """The root of the tree: one precise current source."""

    current: Current = Field(description="reference current")
    tolerance: Fraction = Field(default=0.0, description="reference current tolerance, e.g. 1%")
    feeds: Name = Field(description="name of the mirror whose input the reference drives")
    tempco: PerKelvin = Field(default=0.0, description="linear temperature coefficient, e.g. 50ppm/K")
    tempco2: PerKelvin2 = Field(default=0.0, description="quadratic temperature coefficient, 1/K²")
    tnom: Temperature = Field(default=300.15, description="temperature at which current is given (default 27C)")


class Branch(_Strict):
    """One output of a mirror."""

    to: Name = Field(description="name of the mirror or load this output drives")
    ratio: Ratio = Field(default=1.0, description="output device size / input device size")
    count: Count = Field(
        default=1,
        description="identical copies of this output; into a mirror, copies of that mirror and all below it",
    )


class Mirror(_Strict):
    """One mirror stage: a diode-connected input device and its outputs."""

    device: Name = Field(description="name of a device model under devices:")
    input_size: Ratio = Field(default=1.0, description="input device size in unit devices")
    topology: Name = Field(default="simple", description="mirror topology (see `biastree topologies`)")
    branches: list[Branch] = Field(min_length=1, description="the outputs of this mirror")
    helper_size: Ratio = Field(default=1.0, description="beta_helper: size of the helper device, unit devices")
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
        from biastree.physics.topologies import TOPOLOGIES

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


class Corner(_Strict):
    """A process corner: global shifts applied to every device of a family."""

    beta: SignedFraction = Field(default=0.0, description="relative shift of every bipolar β, e.g. -20%")
    early: SignedFraction = Field(default=0.0, description="relative shift of every Early voltage")
    is_: SignedFraction = Field(default=0.0, alias="is", description="relative shift of every IS")
    kp: SignedFraction = Field(default=0.0, description="relative shift of every MOS kp")
    vth: SignedVoltage = Field(default=0.0, description="shift of every MOS |VT|, e.g. 30mV")
    lambda_: SignedFraction = Field(default=0.0, alias="lambda", description="relative shift of every λ")


class Conditions(_Strict):
    """Operating conditions a sign-off must cover; `check` uses the worst."""

    temperatures: list[Temperature] = Field(default_factory=list, description="die temperatures, e.g. [-40C, 27C, 125C]")
    supplies: list[PositiveVoltage] = Field(default_factory=list, description="supply voltages, e.g. [3.0V, 3.6V]")
    corners: dict[Name, Corner] = Field(default_factory=dict, description="named process corners")


class Spread(_Strict):
    """Random variation: how many σ of mismatch a budget must absorb, and global process spread (1σ)."""

    k_sigma: PositiveNumber = Field(default=3.0, description="budgets must hold with this many σ of mismatch")
    beta: Fraction = Field(default=0.0, description="1σ global spread of β (Monte Carlo only)")
    vth: NonNegVoltage = Field(default=0.0, description="1σ global spread of MOS |VT| (Monte Carlo only)")
    kp: Fraction = Field(default=0.0, description="1σ global spread of MOS kp (Monte Carlo only)")


class Matched(_Strict):
    """Loads whose current ratio must hold (e.g. two halves of a differential block)."""

    loads: list[Name] = Field(min_length=2, max_length=2, description="the two loads")
    tolerance: PositiveFraction = Field(description="budget on the ratio's deviation, e.g. 0.5%")


class Offset(_Strict):
    """A remote output device's offsets from its mirror's input device."""

    temperature: Kelvin = Field(default=0.0, description="warmer by, K")  # type: ignore[valid-type]
    rail: SignedVoltage = Field(default=0.0, description="rail moved towards the other rail by, V")


class Floorplan(_Strict):
    """Where mirrors and loads sit, and the gradients across the die."""

    positions: dict[Name, tuple[Distance, Distance]] = Field(
        default_factory=dict, description="[x, y] of mirrors and loads, e.g. [0.5mm, 1.2mm]"
    )
    thermal_gradient: Quantity("K/m", "2K/mm", Ge(0), plausible=(0.0, 1e5)) = Field(default=0.0, description="temperature gradient, K/mm")  # type: ignore[valid-type]
    rail_gradient: Quantity("V/m", "1mV/mm", Ge(0), plausible=(0.0, 1e3)) = Field(default=0.0, description="IR-drop gradient of the rails, mV/mm")  # type: ignore[valid-type]
    remote: list[Name] = Field(
        default_factory=list,
        description="loads whose output device sits at the load (the mirror's base/gate line is routed there)",
    )
    long_line: Distance = Field(default=5e-4, description="a base/gate line longer than this is flagged")
    offsets: dict[Name, Offset] = Field(
        default_factory=dict,
        description="explicit offsets of a remote load's output device (instead of gradient × distance)",
    )


class Plan(_Strict):
    """One bias network: a reference current, mirrors, and the loads they feed."""

    title: Annotated[str, BeforeValidator(_line_of_text)] = Field(
        default="", max_length=200, description="free text shown in reports (one line, at most 200 characters)")
    supply: PositiveVoltage = Field(description="supply voltage (the rail of pnp/pmos mirrors)")
    temperature: Temperature = Field(default=300.15, description="die temperature, e.g. 27C or 300K")
    devices: dict[Name, DeviceModel] = Field(min_length=1, description="named device models")
    reference: Reference
    mirrors: dict[Name, Mirror] = Field(min_length=1, description="named mirror stages")
    loads: dict[Name, Load] = Field(min_length=1, description="named blocks that consume bias current")
    compliance: Compliance = Field(default_factory=Compliance, description="compliance limits")
    conditions: Conditions = Field(default_factory=Conditions, description="temperatures, supplies and corners to cover")
    spread: Spread = Field(default_factory=Spread, description="mismatch budget and global process spread")
    matched: dict[Name, Matched] = Field(default_factory=dict, description="load pairs whose ratio must hold")
    floorplan: Optional[Floorplan] = Field(default=None, description="positions and gradients across the die")
    allow_unusual: list[Name] = Field(
        default_factory=list,
        description="key paths (e.g. loads.heater.current, or a whole section such as loads) whose values "
        "may lie outside the plausible range of an on-chip bias network",
    )
