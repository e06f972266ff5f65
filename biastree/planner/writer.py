"""Plain plan data → plan-file text (YAML), values exact.

Every number is written so that the loader reads back the very same float
(SI prefixes where they are exact, plain SI numbers otherwise), because the
planner's verdicts must be the ones ``biastree check`` gives on this file.
"""

from __future__ import annotations

import json
import re
from typing import Any

from biastree.units import parse_quantity

_PLAIN = re.compile(r"^[A-Za-z_][A-Za-z0-9_.\-]*$")
_PREFIXES = (("", 0), ("m", -3), ("u", -6), ("n", -9), ("p", -12), ("f", -15), ("k", 3))
_RESERVED = {"y", "n", "yes", "no", "on", "off", "true", "false", "null", "~"}


def name(text: str) -> str:
    """A key or name, quoted when YAML could read it as something else."""
    if _PLAIN.match(text) and text.lower() not in _RESERVED:
        return text
    return json.dumps(text, ensure_ascii=False)


def quantity(value: float, unit: str) -> str:
    """Shortest exact text of ``value`` with an SI prefix, e.g. 1e-05 → '10uA'."""
    for prefix, power in _PREFIXES:
        mantissa = value / 10.0**power
        if 0.1 <= abs(mantissa) < 1000 or value == 0:
            for digits in (6, 9, 12, 15, 17):
                text = f"{mantissa:.{digits}g}{prefix}{unit}"
                if parse_quantity(text, unit) == value:
                    return text
    return repr(float(value))


def number(value: float) -> str:
    v = float(value)
    return str(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(v)


def _scalar(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return number(value)
    if isinstance(value, str):
        return name(value) if not re.match(r"^[+-]?[\d.]", value) else value
    raise TypeError(type(value))


def flow(value: Any) -> str:
    """One-line YAML flow text of plain data."""
    if isinstance(value, dict):
        return "{" + ", ".join(f"{name(str(k))}: {flow(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(flow(v) for v in value) + "]"
    return _scalar(value)


def to_yaml(data: dict[str, Any], header: str) -> str:
    """The plan as YAML: one line per device, mirror branch and load."""
    out = [f"# {line}".rstrip() for line in header.splitlines()]
    out.append(f"title: {json.dumps(data.get('title', ''), ensure_ascii=False)}")
    out.append(f"supply: {quantity(data['supply'], 'V')}")
    out.append(f"temperature: {flow(data['temperature'])}")
    out.append("devices:")
    for k, v in data["devices"].items():
        out.append(f"  {name(k)}: {flow(v)}")
    ref = dict(data["reference"])
    ref["current"] = quantity(ref["current"], "A")
    out.append(f"reference: {flow(ref)}")
    out.append("mirrors:")
    for k, m in data["mirrors"].items():
        head = {key: val for key, val in m.items() if key != "branches"}
        out.append(f"  {name(k)}:")
        for key, val in head.items():
            out.append(f"    {key}: {flow(val)}")
        out.append("    branches:")
        for b in m["branches"]:
            out.append(f"      - {flow(b)}")
    out.append("loads:")
    for k, load in data["loads"].items():
        spec = dict(load)
        spec["current"] = quantity(spec["current"], "A")
        v = spec["voltage"]
        spec["voltage"] = [quantity(x, "V") for x in v] if isinstance(v, (list, tuple)) else quantity(v, "V")
        out.append(f"  {name(k)}: {flow(spec)}")
    for key in ("compliance", "conditions", "spread", "matched"):
        if data.get(key):
            out.append(f"{key}: {flow(data[key])}")
    fp = data.get("floorplan")
    if fp:
        out.append("floorplan:")
        for key, val in fp.items():
            if key == "positions":
                out.append("  positions:")
                for n, (x, y) in val.items():
                    out.append(f"    {name(n)}: [{quantity(x, 'm')}, {quantity(y, 'm')}]")
            else:
                out.append(f"  {key}: {flow(val)}")
    return "\n".join(out) + "\n"
