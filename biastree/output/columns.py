"""The load table's columns, defined once for every format that shows it
(terminal, Markdown, CSV, HTML): one key, one title and one meaning each.

``key`` is the CSV header (with the SI unit appended where there is one) and
the name ``check --sort`` takes; ``title`` is the header the reading formats
show.  ``value`` gives the SI number (or text) a column holds, ``text`` its
display; a range column holds two numbers, written to CSV as ``key_low`` and
``key_high``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable, Union

from biastree.units import format_si, format_si_list, signed_percent

if TYPE_CHECKING:  # the column list is read by `--help`, which must not load numpy
    from biastree.analysis.audit import Audit

Value = Union[float, str, tuple[float, float], None]


@dataclass(frozen=True)
class Column:
    key: str
    title: str
    unit: str  # SI unit of the value ("" a fraction or a count, "text" for words)
    meaning: str
    value: Callable[[Audit, int], Value]
    text: Callable[[Audit, int], str]
    right: bool = True  # align right (numbers)
    optional: bool = False  # dropped when no load has a value

    def csv_headers(self) -> list[str]:
        suffix = f"_{self.unit}" if self.unit not in ("", "text") else ""
        if self.key in RANGES:
            return [f"{self.key}_low{suffix}", f"{self.key}_high{suffix}"]
        return [f"{self.key}{suffix}"]

    def csv_cells(self, result: Audit, load: int) -> list[str]:
        v = self.value(result, load)
        if self.key in RANGES:
            lo, hi = v if isinstance(v, tuple) else (None, None)
            return [_raw(lo), _raw(hi)]
        return [_raw(v)]  # type: ignore[arg-type]


def _raw(v: float | str | None) -> str:
    if v is None:
        return ""
    if isinstance(v, (str, int)):  # a count stays a whole number
        return str(v)
    return repr(float(v))


def _pct(x: float) -> str:
    return signed_percent(x, 2)


def _path(result: Audit, load: int) -> str:
    tree = result.tree
    return " > ".join(tree.mirrors[m] for m in tree.mirror_paths[int(tree.b_parent[tree.l_branch[load]])])


def _ranged(result: Audit, load: int) -> bool:
    return isinstance(result.tree.plan.loads[result.tree.loads[load]].voltage, tuple)


def _voltage(result: Audit, load: int) -> tuple[float, float]:
    lo, _, hi = result.tree.plan.loads[result.tree.loads[load]].v_range
    return (float(lo), float(hi))


def _voltage_text(result: Audit, load: int) -> str:
    lo, hi = _voltage(result, load)
    return format_si(lo, "V") if lo == hi else f"{format_si(lo, 'V')}..{format_si(hi, 'V')}"


def _error_range(result: Audit, load: int) -> tuple[float, float] | None:
    if not _ranged(result, load):
        return None
    a, b = float(result.error[load, 0]), float(result.error[load, 2])
    return (min(a, b), max(a, b))


def _error_range_text(result: Audit, load: int) -> str:
    r = _error_range(result, load)
    return "" if r is None else f"{_pct(r[0])}..{_pct(r[1])}"


def _worst_condition(result: Audit, load: int) -> float | None:
    return None if result.conditions is None else float(result.conditions.worst_error[load])


def _k_sigma(result: Audit, load: int) -> float | None:
    return None if result.spread is None else float(result.k_sigma * result.sigma[load])


def _rout(result: Audit, load: int) -> float | None:
    r = float(result.op.b_rout[result.tree.l_branch[load], 1])  # = result.rout[load], without the whole array
    return r if math.isfinite(r) else None


def _regulation(result: Audit, load: int) -> float | None:
    per_volt = float(result.regulation[2][load])
    nominal = float(result.delivered[load, 1])
    return per_volt / nominal if per_volt and nominal else None  # no relative figure without a nominal current


def _tempco(result: Audit, load: int) -> float | None:
    cond = result.conditions
    tc = None if cond is None else cond.tempco_ppm
    if tc is None or not math.isfinite(float(tc[load])):
        return None
    return float(tc[load])


def _opt_pct(f: Callable[[Audit, int], float | None], digits: int = 2) -> Callable[[Audit, int], str]:
    def text(result: Audit, load: int) -> str:
        v = f(result, load)
        return "" if v is None else signed_percent(v, digits)
    return text


COLUMNS: tuple[Column, ...] = (
    Column("load", "load", "text", "the load's name", lambda r, i: r.tree.loads[i], lambda r, i: r.tree.loads[i],
           right=False),
    Column("count", "×", "", "instances of the load (product of the counts on its path)",
           lambda r, i: int(r.tree.l_mult[i]), lambda r, i: str(int(r.tree.l_mult[i]))),
    Column("path", "path", "text", "the mirrors from the reference to the load", _path, _path, right=False),
    Column("voltage", "node V", "V", "the load's node voltage (value, or min..max)", _voltage, _voltage_text),
    Column("target", "target", "A", "target current of one instance",
           lambda r, i: float(r.target[i]), lambda r, i: format_si(float(r.target[i]), "A")),
    Column("delivered", "delivered", "A", "current at the nominal voltage and the plan's own conditions",
           lambda r, i: float(r.delivered[i, 1]), lambda r, i: format_si(float(r.delivered[i, 1]), "A", 4)),
    Column("error", "error", "", "delivered / target − 1 (nominal)",
           lambda r, i: float(r.error[i, 1]), lambda r, i: _pct(float(r.error[i, 1]))),
    Column("error_range", "error range", "", "the error over the node-voltage range, low..high",
           _error_range, _error_range_text, optional=True),
    Column("worst_condition", "worst cond.", "", "the error of largest magnitude over the plan's conditions",
           _worst_condition, _opt_pct(_worst_condition), optional=True),
    Column("tempco", "ppm/K", "", "temperature coefficient of the current over the plan's temperatures, ppm/K "
           "(end-point slope at the first supply and corner)", _tempco,
           lambda r, i: "" if _tempco(r, i) is None else f"{_tempco(r, i):+.4g}", optional=True),
    Column("k_sigma", "kσ", "", "the kσ term: k × first-order mismatch σ", _k_sigma,
           lambda r, i: "" if r.spread is None else f"{r.k_sigma * r.sigma[i] * 100:.3g}%", optional=True),
    Column("budget", "budget", "", "the load's error budget (±)",
           lambda r, i: float(r.tolerance[i]), lambda r, i: f"±{r.tolerance[i] * 100:.3g}%"),
    Column("margin", "margin", "", "budget − |deciding error| − kσ − reference tolerance",
           lambda r, i: float(r.margin[i]), lambda r, i: _pct(float(r.margin[i]))),
    Column("compliance", "compl.", "V", "volts the output device has to spare (smallest over range and conditions)",
           lambda r, i: _compliance(r, i), lambda r, i: format_si(_compliance(r, i), "V")),
    Column("rout", "Rout", "Ω", "output resistance at the nominal voltage (empty: infinite)", _rout,
           lambda r, i: "∞" if _rout(r, i) is None else format_si(_rout(r, i), "Ω")),  # type: ignore[arg-type]
    Column("regulation", "reg./V", "", "current change per volt of the node, relative", _regulation,
           lambda r, i: "" if _regulation(r, i) is None else f"{_regulation(r, i) * 100:+.3g}%"),  # type: ignore[operator]
    Column("verdict", "verdict", "text", "pass or FAIL", lambda r, i: "pass" if r.passed[i] else "fail",
           lambda r, i: "pass" if r.passed[i] else "FAIL", right=False),
)

RANGES = {"voltage", "error_range"}
BY_KEY = {c.key: c for c in COLUMNS}


def _compliance(result: Audit, load: int) -> float:
    return float(result.worst_compliance[load])


def visible(result: Audit) -> list[Column]:
    """The columns this result has something for (the optional ones need a value on some load)."""
    n = len(result.tree.loads)
    out = []
    for c in COLUMNS:
        # an optional column's text is empty exactly where it has no value
        if c.optional and not (any(texts(result, c, list(range(n)))) if c.key in BULK_TEXT
                               else any(c.value(result, i) is not None for i in range(n))):
            continue
        out.append(c)
    return out


def column(name: str) -> Column:
    """A column by key or title ('k_sigma' or 'kσ'); ValueError names the choices."""
    for c in COLUMNS:
        if name in (c.key, c.title):
            return c
    raise ValueError(f"no column '{name}' (choose one of: {', '.join(c.key for c in COLUMNS)})")


def order(result: Audit, key: str, descending: bool = False, loads: list[int] | None = None) -> list[int]:
    """Load indices sorted by one column (a range by its low end; empty values last;
    ``verdict`` puts failing loads first)."""
    col = column(key)
    rows = list(range(len(result.tree.loads))) if loads is None else list(loads)

    def sort_key(i: int) -> tuple[int, float | str]:
        v = col.value(result, i)
        if col.key == "verdict":
            return (0, 0.0 if not result.passed[i] else 1.0)
        if v is None:
            return (1, 0.0)
        if isinstance(v, tuple):
            v = v[0]
        return (0, v)

    present = [i for i in rows if sort_key(i)[0] == 0]
    missing = [i for i in rows if sort_key(i)[0] == 1]
    present.sort(key=lambda i: sort_key(i)[1], reverse=descending)  # type: ignore[arg-type, return-value]
    return present + missing


# --- whole columns at once (the table of a large plan) ------------------------
#
# Each gives ``[column.text(result, i) for i in loads]`` from whole arrays;
# tests/test_fast_front_end.py compares them with the per-load texts.


def _bulk_path(result: Audit, loads: list[int]) -> list[str]:
    tree = result.tree
    names = tree.mirrors
    per_mirror = [" > ".join(names[m] for m in p) for p in tree.mirror_paths]
    parent = tree.b_parent[tree.l_branch].tolist()
    return [per_mirror[parent[i]] for i in loads]


def _specs(result: Audit, loads: list[int]) -> list[tuple[float, float, float]]:
    specs = result.tree.plan.loads
    names = result.tree.loads
    return [specs[names[i]].v_range for i in loads]


def _bulk_voltage(result: Audit, loads: list[int]) -> list[str]:
    ranges = _specs(result, loads)
    lo = format_si_list([float(r[0]) for r in ranges], "V")
    hi = format_si_list([float(r[2]) for r in ranges], "V")
    return [a if r[0] == r[2] else f"{a}..{b}" for a, b, r in zip(lo, hi, ranges)]


def _bulk_error_range(result: Audit, loads: list[int]) -> list[str]:
    specs, names = result.tree.plan.loads, result.tree.loads
    low = result.error[:, 0].tolist()
    high = result.error[:, 2].tolist()
    out = []
    for i in loads:
        if not isinstance(specs[names[i]].voltage, tuple):
            out.append("")
            continue
        a, b = low[i], high[i]
        out.append(f"{_pct(min(a, b))}..{_pct(max(a, b))}")
    return out


def _bulk_optional(f: Callable[[Audit, int], float | None], present: Callable[[Audit], bool],
                   text: Callable[[float], str]) -> Callable[[Audit, list[int]], list[str]]:
    def texts(result: Audit, loads: list[int]) -> list[str]:
        if not present(result):
            return [""] * len(loads)
        out = []
        for i in loads:
            v = f(result, i)
            out.append("" if v is None else text(v))
        return out
    return texts


def _bulk_rout(result: Audit, loads: list[int]) -> list[str]:
    r = result.op.b_rout[result.tree.l_branch, 1].tolist()
    values = [r[i] for i in loads]
    finite = [v for v in values if math.isfinite(v)]
    texts = iter(format_si_list(finite, "Ω"))
    return [next(texts) if math.isfinite(v) else "∞" for v in values]


def _bulk_regulation(result: Audit, loads: list[int]) -> list[str]:
    per_volt = result.regulation[2].tolist()
    nominal = result.delivered[:, 1].tolist()
    out = []
    for i in loads:
        p, n = per_volt[i], nominal[i]
        out.append(f"{p / n * 100:+.3g}%" if p and n else "")
    return out


def _pick(values: list[object], loads: list[int]) -> list[object]:
    return [values[i] for i in loads]


BULK_TEXT: dict[str, Callable[[Audit, list[int]], list[str]]] = {
    "load": lambda r, loads: [r.tree.loads[i] for i in loads],
    "count": lambda r, loads: [str(int(v)) for v in _pick(r.tree.l_mult.tolist(), loads)],  # type: ignore[call-overload]
    "path": _bulk_path,
    "voltage": _bulk_voltage,
    "target": lambda r, loads: format_si_list(_pick(r.target.tolist(), loads), "A"),  # type: ignore[arg-type]
    "delivered": lambda r, loads: format_si_list(_pick(r.delivered[:, 1].tolist(), loads), "A", 4),  # type: ignore[arg-type]
    "error": lambda r, loads: [_pct(v) for v in _pick(r.error[:, 1].tolist(), loads)],  # type: ignore[arg-type]
    "error_range": _bulk_error_range,
    "worst_condition": _bulk_optional(_worst_condition, lambda r: r.conditions is not None, _pct),
    "tempco": _bulk_optional(_tempco, lambda r: r.conditions is not None and r.conditions.tempco_ppm is not None,
                             lambda v: f"{v:+.4g}"),
    "k_sigma": lambda r, loads: [""] * len(loads) if r.spread is None else [
        f"{v:.3g}%" for v in _pick((r.k_sigma * r.sigma * 100).tolist(), loads)],
    "budget": lambda r, loads: [f"±{v * 100:.3g}%" for v in _pick(r.tolerance.tolist(), loads)],  # type: ignore[operator]
    "margin": lambda r, loads: [_pct(v) for v in _pick(r.margin.tolist(), loads)],  # type: ignore[arg-type]
    "compliance": lambda r, loads: format_si_list(_pick(r.worst_compliance.tolist(), loads), "V"),  # type: ignore[arg-type]
    "rout": _bulk_rout,
    "regulation": _bulk_regulation,
    "verdict": lambda r, loads: ["pass" if v else "FAIL" for v in _pick(r.passed.tolist(), loads)],
}


def texts(result: Audit, col: Column, loads: list[int]) -> list[str]:
    """The column's cells for these loads (in bulk where the column has a bulk form)."""
    bulk = BULK_TEXT.get(col.key)
    return bulk(result, loads) if bulk is not None else [col.text(result, i) for i in loads]


__all__ = ["BULK_TEXT", "BY_KEY", "COLUMNS", "Column", "column", "order", "texts", "visible"]
