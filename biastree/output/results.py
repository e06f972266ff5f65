"""Pydantic models of the JSON results, used to generate and commit the
results schema.  The audit builds plain dicts for speed; a test validates
them against the schema generated from these models."""

from __future__ import annotations

import json
from typing import Any, Literal, Optional

from pydantic import BaseModel, ConfigDict, Field


class _Out(BaseModel):
    model_config = ConfigDict(extra="forbid")


class Term(_Out):
    term: str = Field(description="key of the effect: beta, early, lambda, …")
    label: str = Field(description="name of the effect as shown to a designer")
    value: float = Field(description="the stage's gain factor for this effect minus one (fraction)")
    beta: Optional[float] = Field(default=None, description=(
        "β loading of a Gummel–Poon card device: β = I_C/I_B of one unit device at this output's collector current "
        "(V_CB = 0, Early effect aside); a card's β depends on each device's current"))
    note: Optional[str] = Field(default=None, description="the same in words (card devices' β loading term)")


class Stage(_Out):
    mirror: str = Field(description="mirror of this stage")
    device: str = Field(description="device model of the mirror")
    topology: str = Field(description="mirror topology")
    branch: int = Field(description="index of the branch taken towards the load")
    ratio: float = Field(description="size ratio of that branch")
    input_current: float = Field(description="input current of the mirror, A")
    output_current: float = Field(description="current of one copy of the branch, A")
    fanout: float = Field(description="Σ ratio·count of the mirror's branches")
    error: float = Field(description="stage gain / ideal ratio − 1 (product of the terms)")
    terms: list[Term]


class ConditionsTerm(_Out):
    worst_error: float = Field(description="error of largest magnitude over the plan's conditions")
    at: str = Field(description="the condition where it happens")
    compliance_margin: float = Field(description="smallest compliance margin over the conditions, V")


class StageSigma(_Out):
    mirror: str
    sigma: float = Field(description="relative σ this stage adds (its pair of devices)")


class MismatchTerm(_Out):
    sigma: float = Field(description="first-order relative σ of the load's current from mismatch")
    k: float = Field(description="budgets hold with k·σ")
    stages: list[StageSigma]


class MatchedResult(_Out):
    name: str
    loads: list[str]
    ratio_error: float = Field(description="nominal ratio / ideal ratio − 1")
    sigma: float = Field(description="first-order σ of the ratio (only what the loads do not share)")
    k: float
    tolerance: float
    verdict: Literal["pass", "fail"]


class FloorplanTerm(_Out):
    distance: float = Field(description="mirror to load, m")
    delta_t: float = Field(description="output device warmer than the mirror's input device, K")
    delta_v: float = Field(description="output device's rail offset towards the other rail, V")
    term: float = Field(description="error this adds (nominal)")
    long_line: bool = Field(description="the shared base/gate line is longer than the floorplan's long_line")


class Regulation(_Out):
    delta_current: float = Field(description="I(max voltage) − I(min voltage), A")
    fraction: float = Field(description="delta_current / delivered")
    per_volt: float = Field(description="delta_current / voltage span, A/V (0 for a fixed voltage)")


class DecidingCondition(_Out):
    name: str = Field(description="the condition column: temperature, supply, corner and voltage end")
    temperature: float = Field(description="K")
    supply: float = Field(description="V")
    corner: Optional[str] = Field(description="process corner (null: the plan's nominal devices)")


class DecidingTerm(_Out):
    stage: str = Field(description="mirror of the term, 'plan' for the ratio arithmetic, 'reference' for its drift")
    term: str = Field(description="key of the effect: ratio, reference_drift, beta, early, lambda, gradient")
    label: str = Field(description="name of the effect as shown to a designer")
    value: float = Field(description="factor minus one (fraction); Π(1 + value) − 1 over the terms is the error")
    beta: Optional[float] = Field(default=None, description=(
        "β loading of a Gummel–Poon card device: β = I_C/I_B of one unit device at this output's collector current "
        "(V_CB = 0, Early effect aside); a card's β depends on each device's current"))
    note: Optional[str] = Field(default=None, description="the same in words (card devices' β loading term)")


class Deciding(_Out):
    """The case whose error decides the budget verdict, and its terms."""

    end: Literal["min", "nominal", "max"] = Field(description="end of the load's voltage range")
    voltage: float = Field(description="node voltage in that case, V")
    condition: Optional[DecidingCondition] = Field(
        description="the condition column, when the plan's conditions give the largest error (null: the plan's own)")
    error: float = Field(description="delivered / target − 1 in that case")
    k: float = Field(description="budgets hold with k·σ of mismatch")
    k_sigma: float = Field(description="the kσ term: k × first-order mismatch σ (fraction; 0 without coefficients)")
    reference: float = Field(description="the reference term: its tolerance (fraction)")
    used: float = Field(description="|error| + kσ + reference: the budget this case uses")
    tolerance: float = Field(description="the load's budget (fraction)")
    margin: float = Field(description="tolerance − used")
    terms: list[DecidingTerm] = Field(description="every term of that case, largest |value| first")
    stages: list[Stage] = Field(description="stage-by-stage terms in that case")


class LoadResult(_Out):
    name: str
    count: int = Field(description="instances of this load in the expanded tree")
    path: list[str] = Field(description="reference, mirrors, load")
    target: float = Field(description="target current of one instance, A")
    delivered: float = Field(description="current at the nominal voltage (value or middle of the range), A")
    delivered_range: list[float] = Field(description="current at the [min, max] ends of the voltage range, A")
    voltage: list[float] = Field(description="node voltage [min, nominal, max], V")
    error: float = Field(description="delivered / target − 1 at the nominal voltage")
    error_range: list[float] = Field(description="error at the [min, max] voltage")
    worst_error: float = Field(description="error of largest magnitude over the range")
    worst_case: Literal["min", "nominal", "max"]
    reference_tolerance: float
    tolerance: float = Field(description="the load's error budget (fraction)")
    margin: float = Field(description="tolerance − |worst error| − reference tolerance (fraction)")
    compliance_margin: float = Field(description="smallest voltage margin of the output device over the range, V")
    verdict: Literal["pass", "fail"]
    reasons: list[str]
    plan_error: float = Field(description="error from the ratios alone: ideal current / target − 1")
    rout: Optional[float] = Field(description="output resistance seen by the load at its nominal voltage, Ω (null: infinite)")
    regulation: Regulation
    hints: list[str] = Field(description="computed topology changes that would help a failing load")
    floorplan: Optional[FloorplanTerm] = Field(description="gradient cost of a remote output device")
    conditions: Optional[ConditionsTerm] = Field(description="worst case over temperatures, supplies, corners")
    mismatch: Optional[MismatchTerm] = Field(description="mismatch σ (when devices carry matching coefficients)")
    deciding: Deciding = Field(description="the case that decides the budget verdict, broken into its terms")
    stages: list[Stage] = Field(default_factory=list,
                                description="nominal: terms of each stage along the path, at the nominal voltage "
                                            "(left out when the result's detail is loads or summary)")


class Summary(_Out):
    loads: int
    instances: int
    passed: int
    failed: int
    reference_current: float
    overhead_current: float = Field(
        description="reference, every branch between mirrors, helper devices and bias sources, A"
    )
    overhead_power: float = Field(description="overhead current × supply, W")
    delivered_current: float = Field(description="sum over all load instances, A")
    supply_current: float
    supply_power: float
    device_units: float = Field(description="unit devices in all mirrors (sizes × copies)")
    bipolar_units: float
    mos_units: float
    mos_gate_area: float = Field(description="gate area of all MOS mirror devices, m²")
    reference_headroom: float = Field(description="voltage left across the reference source, V")
    sweeps: int = Field(description="top-down sweeps the solver needed")


class CheckResult(_Out):
    title: str
    supply: float
    temperature: float = Field(description="K")
    detail: Literal["stages", "loads", "summary"] = Field(
        "stages", description="what the result holds: stages (everything), loads (no stage terms), summary (no loads); "
                              "absent means stages")
    summary: Summary
    loads: list[LoadResult]
    matched: list[MatchedResult]


def results_schema() -> dict[str, Any]:
    return CheckResult.model_json_schema()


def plan_schema() -> dict[str, Any]:
    from biastree.input.model import Plan

    schema = Plan.model_json_schema(by_alias=True)
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "biastree plan"
    return schema


def schema_text(which: str) -> str:
    """The committed text of ``schemas/<which>.schema.json``."""
    schema = plan_schema() if which == "plan" else results_schema()
    return json.dumps(schema, indent=2, ensure_ascii=False, sort_keys=False) + "\n"
