"""The annotation file: what a netlist does not say (budgets, voltages, simple device parameters).

Strict like the plan: a misspelt key is an error.  Loads are named by node
or by the instance name of any element on that node (the output device
driving it, the block's own instance).

```yaml
rails: {vdd: 1.8V}                            # nodes no source fixes (a cell's supply port)
defaults: {tolerance: 5%, voltage: 1.2V}     # used where a load gives none
reference: {tolerance: 1%}
loads:
  o_adc: {tolerance: 3%, voltage: [1.0V, 2.0V]}   # current defaults to the ideal mirrored current
  xamp1.tail: {current: 20uA, tolerance: 5%, name: amp_tail}
devices:                                            # cards the plan's simple models cannot read
  sky130_fd_pr__nfet_01v8: {kp: 280uA/V^2, vth: 0.45V, lambda: 0.08/V}
conditions: {temperatures: [-40C, 125C]}            # conditions, spread, matched: as in a plan
```
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional, Union

from pydantic import BaseModel, ConfigDict, Field

from biastree.errors import PlanError
from biastree.input.model import (
    Conditions,
    Current,
    Fraction,
    InverseVoltage,
    Matched,
    PerKelvin,
    Positive,
    PositiveFraction,
    PositiveVoltage,
    Spread,
    Temperature,
    Transconductance,
    Voltage,
)


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class LoadNote(_Strict):
    """Budget of one load (a terminal node of the tree)."""

    name: Optional[str] = Field(default=None, description="name of the load in the plan (default: the node name)")
    current: Optional[Current] = Field(default=None, description="target current (default: the ideal mirrored current)")
    tolerance: Optional[PositiveFraction] = Field(default=None, description="error budget, e.g. 5%")
    voltage: Optional[Union[Voltage, tuple[Voltage, Voltage]]] = Field(
        default=None, description="node voltage (vs ground): a value or [min, max]"
    )


class Defaults(_Strict):
    """Values for every load that does not give its own."""

    tolerance: Optional[PositiveFraction] = Field(default=None, description="error budget of every load")
    voltage: Optional[Union[Voltage, tuple[Voltage, Voltage]]] = Field(
        default=None, description="node voltage of every load whose node the netlist does not fix"
    )


class ReferenceNote(_Strict):
    """What the netlist cannot say about the reference."""

    tolerance: Fraction = Field(default=0.0, description="reference current tolerance, e.g. 1%")
    tempco: PerKelvin = Field(default=0.0, description="linear temperature coefficient, e.g. 50ppm/K")
    current: Optional[Current] = Field(default=None, description="override the reference current read from the netlist")


class DeviceNote(_Strict):
    """Simple parameters for a card the plan's models cannot read (e.g. a PDK's BSIM4 device)."""

    kp: Optional[Transconductance] = Field(default=None, description="MOS: KP = µ·Cox, A/V²")
    vth: Optional[PositiveVoltage] = Field(default=None, description="MOS: threshold voltage magnitude")
    lambda_: Optional[InverseVoltage] = Field(default=None, alias="lambda", description="MOS: λ, 1/V")
    is_: Optional[Current] = Field(default=None, alias="is", description="bipolar: IS of a unit device")
    beta: Optional[Positive] = Field(default=None, description="bipolar: BF")
    early: Optional[PositiveVoltage] = Field(default=None, description="bipolar: VAF")


class Annotations(_Strict):
    """Budgets and settings for a plan extracted from a netlist."""

    title: Optional[str] = Field(default=None, description="plan title (default: names the netlist)")
    supply: Optional[PositiveVoltage] = Field(default=None, description="supply voltage (default: read from the netlist)")
    rails: dict[str, Voltage] = Field(
        default_factory=dict, description="DC voltages of nodes no source in the netlist fixes (a cell's supply port)"
    )
    temperature: Optional[Temperature] = Field(default=None, description="die temperature (default: .temp, else 27C)")
    reference: ReferenceNote = Field(default_factory=ReferenceNote, description="reference tolerance and tempco")
    defaults: Defaults = Field(default_factory=Defaults, description="values for loads that give none")
    loads: dict[str, LoadNote] = Field(default_factory=dict, description="loads by node or instance name")
    devices: dict[str, DeviceNote] = Field(default_factory=dict, description="simple parameters by card name")
    conditions: Optional[Conditions] = Field(default=None, description="copied into the plan: conditions to cover")
    spread: Optional[Spread] = Field(default=None, description="copied into the plan: mismatch budget and spread")
    matched: dict[str, Matched] = Field(default_factory=dict, description="copied into the plan: matched load pairs "
                                        "(by the loads' plan names)")


def read_annotations(path: str | Path | None) -> Annotations:
    """Read an annotation file (YAML or JSON) with the plan's strict loader; empty when ``path`` is None."""
    if path is None:
        return Annotations()
    from pydantic import ValidationError

    from biastree.errors import Problem, format_path
    from biastree.input.loader import parse_text, read_text

    doc = parse_text(read_text(Path(path)), str(path))
    try:
        return Annotations.model_validate(doc.data if doc.data is not None else {})
    except ValidationError as exc:
        problems = []
        for err in exc.errors():
            loc = tuple(err["loc"])
            msg = err["msg"].removeprefix("Value error, ")
            if err["type"] == "extra_forbidden":
                msg = "unknown key"
            problems.append(Problem(format_path(loc), msg, doc.line_of(loc)))
        raise PlanError(problems, str(path)) from None
