"""Where a load's error comes from: rows of (stage, effect, value), shared by
the report formats so that they all tell the same story."""

from __future__ import annotations

from typing import Any

from biastree.analysis.audit import Audit
from biastree.analysis.solve import CASES
from biastree.input.model import Plausible
from biastree.physics.devices import Array
from biastree.units import format_percent, format_si


def breakdown(result: Audit, load: int) -> list[tuple[str, str, float]]:
    """(stage, effect label, value as a fraction) in the case that decides the
    load's verdict (``Audit.deciding``), largest first.

    The product of (1 + value) over all rows is 1 + that case's error, exactly.
    """
    return [(t["stage"], t["label"], t["value"]) for t in result.deciding(load)["terms"]]


def nominal_breakdown(result: Audit, load: int) -> list[tuple[str, str, float]]:
    """The same rows at the nominal voltage and the plan's own conditions, in path order
    (to show beside the deciding case, labelled nominal)."""
    rows = [("plan", "ratio arithmetic", result.plan_term(load))]
    for stage in result.stages(load, 1):
        for term in stage["terms"]:
            rows.append((stage["mirror"], term["label"], term["value"]))
    return rows


def where(result: Audit, load: int) -> str:
    """Words for the case the breakdown is taken in (the deciding case)."""
    return f"in the deciding case ({result.deciding_text(load)})"


def where_nominal(result: Audit, load: int) -> str:
    """Words for the nominal case."""
    spec = result.tree.plan.loads[result.tree.loads[load]]
    return f"nominal ({CASES[1]} voltage {format_si(spec.v_range[1], 'V')}, the plan's own conditions)"


def _parameter(value: object, unit: str | None) -> str:
    """One parameter in a designer's units: 300 µA/V², 2 µm, 1 %·µm, 5 mV·µm."""
    if not isinstance(value, float) or unit is None:
        return str(value)
    if unit == "%":
        return format_percent(value, 4)
    if unit == "·m":  # a Pelgrom coefficient of a fraction: σ × √(area)
        return f"{value * 1e8:.4g} %·µm"
    if unit == "V·m":
        return f"{value * 1e9:.4g} mV·µm"
    if unit == "m²":
        return f"{value * 1e12:.4g} µm²"
    if unit in ("", "/V", "/K", "/K²", "eV"):
        return f"{value:.4g}{' ' + unit if unit else ''}"
    return format_si(value, unit, 4)


_CARD_UNITS = {"w": "m", "l": "m", "area": "m²", "a_vt_pair": "V·m", "a_vt_single": "V·m",
               "a_beta_pair": "·m", "a_beta_single": "·m", "a_is_pair": "·m", "a_is_single": "·m"}


def _unit_of(annotation: object, metadata: list[object]) -> str | None:
    """The unit a field's plausible range is stated in, looked for through Optional[...]."""
    from typing import get_args

    for m in metadata:
        if isinstance(m, Plausible):
            return m.unit
    for arg in get_args(annotation):
        found = _unit_of(arg, list(getattr(arg, "__metadata__", ())))
        if found is not None:
            return found
    return None


def device_parameters(dev: object) -> str:
    """A device model's parameters as one line of text in SI units (reports); empty
    entries are left out."""
    fields = type(dev).model_fields  # type: ignore[attr-defined]
    data = dev.model_dump(by_alias=True, exclude={"kind"})  # type: ignore[attr-defined]
    units = {info.alias or name: _unit_of(info.annotation, info.metadata) for name, info in fields.items()}
    for key, unit in _CARD_UNITS.items():  # a card device's own fields carry no plausible range
        units[key] = units.get(key) or unit
    return ", ".join(f"{k}={_parameter(v, units.get(k))}" for k, v in data.items() if v not in (None, {}, [], ""))


def budget_use(result: Audit, load: int) -> str:
    """How the deciding case uses the load's budget: |error|, the kσ term, the reference term."""
    d = result.deciding(load)
    parts = [f"|error| {abs(d['error']) * 100:.3g} % ({result.deciding_text(load, d)})"]
    if result.spread is not None:
        parts.append(f"{d['k']:g}σ mismatch {d['k_sigma'] * 100:.3g} %")
    if d["reference"]:
        parts.append(f"reference {d['reference'] * 100:.3g} %")
    return f"budget use: {' + '.join(parts)} = {d['used'] * 100:.3g} % of ±{d['tolerance'] * 100:.3g} %"


def tempco_ppm(cond: Any) -> Array | None:
    """(n_loads,) temperature coefficient of each load's current, ppm/K, or ``None``
    when the conditions hold fewer than two temperatures (``ConditionResult.tempco_ppm``)."""
    return cond.tempco_ppm