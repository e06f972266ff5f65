"""Where a load's error comes from: rows of (stage, effect, value), shared by
the report formats so that they all tell the same story."""

from __future__ import annotations

from biastree.analysis.audit import Audit
from biastree.analysis.solve import CASES
from biastree.units import format_si


def breakdown(result: Audit, load: int) -> list[tuple[str, str, float]]:
    """(stage, effect label, value as a fraction) at the load's worst voltage.

    The first row is the plan's own ratio arithmetic; the product of
    (1 + value) over all rows is 1 + the load's error, exactly.
    """
    case = int(result.worst_case[load])
    rows = [("plan", "ratio arithmetic", result.plan_term(load))]
    for stage in result.stages(load, case):
        for term in stage["terms"]:
            rows.append((stage["mirror"], term["label"], term["value"]))
    return rows


def where(result: Audit, load: int) -> str:
    """Words for the voltage the breakdown is taken at."""
    plan = result.tree.plan
    spec = plan.loads[result.tree.loads[load]]
    case = int(result.worst_case[load])
    volts = format_si(spec.v_range[case], "V")
    if isinstance(spec.voltage, tuple):
        return f"at the {CASES[case]} end of its voltage range ({volts})"
    return f"at its node voltage ({volts})"


def device_parameters(dev: object) -> str:
    """A device model's parameters as one line of text (reports)."""
    data = dev.model_dump(by_alias=True, exclude={"kind"})  # type: ignore[attr-defined]
    return ", ".join(f"{k}={v:.4g}" if isinstance(v, float) else f"{k}={v}" for k, v in data.items() if v is not None)


def budget_use(result: Audit, load: int) -> str:
    """How the load's budget is used: worst error, k·σ mismatch, reference tolerance."""
    err, at = result.worst_error(load)
    parts = [f"|error| {abs(err) * 100:.3g} %" + (f" ({at})" if at else "")]
    if result.spread is not None:
        parts.append(f"{result.k_sigma:g}σ mismatch {result.k_sigma * float(result.sigma[load]) * 100:.3g} %")
    if result.reference_tolerance:
        parts.append(f"reference {result.reference_tolerance * 100:.3g} %")
    used = float(result.tolerance[load] - result.margin[load])
    return f"budget use: {' + '.join(parts)} = {used * 100:.3g} % of ±{result.tolerance[load] * 100:.3g} %"
