"""The block list: the planner's input, the blocks that need bias without a tree.

Strict like the plan (extra="forbid", a description on every field); the
plan's own models are reused for devices, conditions, spread and the
floorplan's gradients, and the quantity types are the plan's.  Loading goes
through the plan loader's parse / locate / validate steps, so a bad block
list gets the same one-line ``file:line: key.path: message`` errors.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Literal, Optional, Union

from annotated_types import Gt
from pydantic import Field, model_validator

from biastree.errors import PlanError, Problem, format_path
from biastree.input.model import (
    Compliance,
    Conditions,
    Current,
    DeviceModel,
    Distance,
    Floorplan,
    Load,
    Matched,
    Name,
    Positive,
    PositiveVoltage,
    Reference,
    Spread,
    Temperature,
    _Strict,
)

SINK_KINDS = ("npn", "nmos")
SOURCE_KINDS = ("pnp", "pmos")


class BlockReference(Reference):
    """The reference current the planner distributes (it chooses the first mirror)."""

    feeds: Optional[Name] = Field(default=None, description="leave out: the planner names the mirror the reference drives")
    position: Optional[tuple[Distance, Distance]] = Field(default=None, description="[x, y] of the reference on the die")


class Block(Load):
    """One block that needs bias: its current, budget, node voltage and direction."""

    direction: Literal["sink", "source"] = Field(
        description="sink: the block's current is sunk to ground (npn/nmos output); source: sourced from the supply (pnp/pmos)"
    )
    position: Optional[tuple[Distance, Distance]] = Field(default=None, description="[x, y] of the block on the die")
    count: Annotated[int, Gt(0)] = Field(default=1, description="identical instances of this block")
    group: Optional[Name] = Field(default=None, description="blocks of one group are matched: they share one mirror")
    topologies: Optional[list[Name]] = Field(default=None, description="topologies allowed for this block's mirror (default all)")
    devices: Optional[list[Name]] = Field(default=None, description="device models allowed for this block's mirror (default all of its polarity)")


class Limits(_Strict):
    """What the planner may build (defaults a designer would choose; common practice)."""

    max_ratio: Positive = Field(default=16.0, description="largest branch ratio (and 1/smallest), output / input size")
    max_units: Annotated[int, Gt(0)] = Field(default=64, description="largest number of unit devices in one device")
    max_outputs: Annotated[int, Gt(0)] = Field(default=12, description="largest number of branches of one mirror")
    max_fanout: Positive = Field(default=48.0, description="largest fan-out Σ ratio·count of one mirror")
    area_budget: Optional[Positive] = Field(default=None, description="largest total device units of the tree (default none)")
    intermediate_current: tuple[Current, Current] = Field(
        default=(1e-6, 200e-6), description="[min, max] input current of a mirror the planner adds"
    )
    sink_devices: Optional[list[Name]] = Field(default=None, description="device models for sinking mirrors (default every npn/nmos)")
    source_devices: Optional[list[Name]] = Field(default=None, description="device models for sourcing mirrors (default every pnp/pmos)")
    topologies: Optional[list[Name]] = Field(default=None, description="topologies the planner may use (default all)")
    group_radius: Distance = Field(default=1e-3, description="blocks farther apart than this are not put on one mirror")


class BlockList(_Strict):
    """The planner's input: the reference, the device models, and the blocks."""

    title: str = Field(default="", description="free text, copied into the plan")
    supply: PositiveVoltage = Field(description="supply voltage")
    temperature: Temperature = Field(default=300.15, description="die temperature, e.g. 27C")
    devices: dict[Name, DeviceModel] = Field(min_length=1, description="named device models the planner may use")
    reference: BlockReference = Field(description="the reference current")
    blocks: dict[Name, Block] = Field(min_length=1, description="named blocks that need bias current")
    limits: Limits = Field(default_factory=Limits, description="what the planner may build")
    compliance: Compliance = Field(default_factory=Compliance, description="compliance limits (as in a plan)")
    conditions: Conditions = Field(default_factory=Conditions, description="temperatures, supplies and corners to cover")
    spread: Spread = Field(default_factory=Spread, description="mismatch budget (k·σ) and global spread")
    matched: dict[Name, Matched] = Field(default_factory=dict, description="block pairs whose ratio must hold (put on one mirror)")
    floorplan: Optional[Floorplan] = Field(
        default=None, description="gradients across the die (block positions are given on the blocks)"
    )

    @model_validator(mode="after")
    def _names(self) -> "BlockList":
        problems = block_problems(self)
        if problems:
            raise ValueError("; ".join(f"{format_path(p)}: {m}" for p, m in problems))
        return self


def devices_for(blocks: BlockList, direction: str) -> list[str]:
    """Device models allowed for a polarity (the limits' list, else every model of it)."""
    kinds = SINK_KINDS if direction == "sink" else SOURCE_KINDS
    listed = blocks.limits.sink_devices if direction == "sink" else blocks.limits.source_devices
    names = listed if listed is not None else [n for n, d in blocks.devices.items() if d.kind in kinds]
    return [n for n in names if n in blocks.devices and blocks.devices[n].kind in kinds]


def block_problems(blocks: BlockList) -> list[tuple[tuple[object, ...], str]]:
    """Names that resolve to nothing or to the wrong polarity (key path, message)."""
    from biastree.physics.topologies import TOPOLOGIES

    out: list[tuple[tuple[object, ...], str]] = []
    for side, kinds in (("sink_devices", SINK_KINDS), ("source_devices", SOURCE_KINDS)):
        for i, name in enumerate(getattr(blocks.limits, side) or []):
            dev = blocks.devices.get(name)
            if dev is None:
                out.append((("limits", side, i), f"unknown device model '{name}'"))
            elif dev.kind not in kinds:
                out.append((("limits", side, i), f"'{name}' is a {dev.kind}; this list takes {' or '.join(kinds)}"))
    for i, t in enumerate(blocks.limits.topologies or []):
        if t not in TOPOLOGIES:
            out.append((("limits", "topologies", i), f"unknown topology '{t}'"))
    for d in ("sink", "source"):
        if any(b.direction == d for b in blocks.blocks.values()) and not devices_for(blocks, d):
            kinds = " or ".join(SINK_KINDS if d == "sink" else SOURCE_KINDS)
            out.append((("devices",), f"blocks need current {'sunk' if d == 'sink' else 'sourced'}, but no {kinds} model is given"))
    if not devices_for(blocks, "sink"):
        out.append((("devices",), "the reference drives a sinking mirror: give an npn or nmos model"))
    for name, b in blocks.blocks.items():
        kinds = SINK_KINDS if b.direction == "sink" else SOURCE_KINDS
        for i, d in enumerate(b.devices or []):
            dev = blocks.devices.get(d)
            if dev is None:
                out.append((("blocks", name, "devices", i), f"unknown device model '{d}'"))
            elif dev.kind not in kinds:
                out.append((("blocks", name, "devices", i), f"'{d}' is a {dev.kind}; a {b.direction} block needs {' or '.join(kinds)}"))
        for i, t in enumerate(b.topologies or []):
            if t not in TOPOLOGIES:
                out.append((("blocks", name, "topologies", i), f"unknown topology '{t}'"))
        lo, _, hi = b.v_range
        if lo < 0 or hi > blocks.supply:
            out.append((("blocks", name, "voltage"), f"must lie between ground and the supply ({blocks.supply:g} V)"))
    for pair, m in blocks.matched.items():
        for i, n in enumerate(m.loads):
            if n not in blocks.blocks:
                out.append((("matched", pair, "loads", i), f"unknown block '{n}'"))
    lo, hi = blocks.limits.intermediate_current
    if lo > hi:
        out.append((("limits", "intermediate_current"), "must be written [min, max]"))
    return out


def parse_blocks(text: str, source: str = "blocks", fmt: str = "yaml") -> BlockList:
    """Validate block-list text; raises ``PlanError`` with every problem and its line."""
    from biastree.input.loader import parse_text, validate

    doc = parse_text(text, source, fmt)
    try:
        return validate(doc, BlockList)
    except PlanError as exc:
        raise _locate_name_problems(exc, doc) from None


def _locate_name_problems(exc: PlanError, doc: object) -> PlanError:
    # The whole-model check above reports "path: message" in one value error at the
    # root; split it back into one line per problem, each at its own key's line.
    out = []
    for p in exc.problems:
        if p.path == "" and ": " in p.message and p.message.startswith(("limits", "blocks", "devices", "matched")):
            for part in p.message.split("; "):
                path, _, message = part.partition(": ")
                keys = tuple(int(k) if k.isdigit() else k for k in path.replace("[", ".").replace("]", "").split("."))
                out.append(Problem(path, message, doc.line_of(keys)))  # type: ignore[attr-defined]
        else:
            out.append(p)
    return PlanError(out, exc.source)


def load_blocks(path: Union[str, Path]) -> BlockList:
    """Read and validate a block-list file (YAML or JSON)."""
    from biastree.input.loader import read_text

    path = Path(path)
    fmt = "json" if path.suffix.lower() == ".json" else "yaml"
    return parse_blocks(read_text(path), str(path), fmt)


def schema() -> dict[str, object]:
    """JSON Schema of the block list (committed as schemas/blocks.schema.json)."""
    out = BlockList.model_json_schema(by_alias=True)
    out["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    out["title"] = "biastree block list"
    return out
