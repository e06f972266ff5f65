"""Write an extracted plan as YAML in the plan format, with its sources as comments.

Every mirror, load, device model and the reference carries a comment naming
the netlist instances (and file:line) it came from, so a reviewer can find
each device in the schematic; what was not classified is listed at the top.
Values are SI numbers written with 17 significant digits (exact floats).
"""

from __future__ import annotations

import json
from typing import Any

from biastree.input.cards import portable_path
from biastree.input.netlist.extract import Extraction

_ORDER = ("kind", "model", "library", "section", "include", "card", "is", "beta", "early", "xti", "eg", "xtb", "kp", "vth", "lambda", "w", "l", "tnom", "vth_tc",
          "mobility_exp")
_MIRROR_KEYS = ("device", "topology", "input_size", "helper_size", "bleed", "degeneration", "bias_current", "swing_n")


def _scalar(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(float(value)) if isinstance(value, float) else str(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_scalar(v) for v in value) + "]"
    return json.dumps(str(value), ensure_ascii=False)


def _flow(mapping: dict[str, Any], order: tuple[str, ...] = ()) -> str:
    keys = [k for k in order if k in mapping] + [k for k in mapping if k not in order]
    return "{" + ", ".join(f"{k}: {_scalar(mapping[k])}" for k in keys) + "}"


def _comment(lines: list[str], width: int = 6) -> str:
    if not lines:
        return ""
    shown = lines[:width] + ([f"… {len(lines) - width} more"] if len(lines) > width else [])
    return "  # " + "; ".join(shown)


def to_plan_yaml(ext: Extraction, header: list[str] | None = None) -> str:
    """The plan of an extraction as YAML text (loadable by ``biastree.load``)."""
    plan, origins = ext.plan, ext.origins
    out = [f"# {line}" for line in (header or [])]
    if ext.findings:
        out.append(f"# Not audited or assumed ({len(ext.findings)}):")
        out += [f"#   {f.format()}" for f in ext.findings]
    out.append(f"title: {_scalar(plan['title'])}")
    out.append(f"supply: {_scalar(plan['supply'])}")
    out.append(f"temperature: {_scalar(plan['temperature'])}")
    out.append("devices:")
    for name, dev in plan["devices"].items():
        dev = {k: portable_path(v) if k in ("library", "include") else v for k, v in dev.items()}
        out.append(f"  {_scalar(name)}: {_flow(dev, _ORDER)}{_comment(origins.get(f'devices.{name}', []))}")
    out.append(f"reference: {_flow(plan['reference'])}{_comment(origins.get('reference', []))}")
    out.append("mirrors:")
    for name, spec in plan["mirrors"].items():
        out.append(f"  {_scalar(name)}:{_comment(origins.get(f'mirrors.{name}', []), 12)}")
        for key in _MIRROR_KEYS:
            if key in spec:
                out.append(f"    {key}: {_scalar(spec[key])}")
        out.append("    branches:")
        for k, branch in enumerate(spec["branches"]):
            where = ext.branch_origin.get((name, k))
            out.append(f"      - {_flow(branch)}" + (f"  # {where}" if where else ""))
    out.append("loads:")
    for name, load in plan["loads"].items():
        out.append(f"  {_scalar(name)}: {_flow(load, ('current', 'tolerance', 'voltage'))}"
                   f"{_comment(origins.get(f'loads.{name}', []))}")
    for key in ("conditions", "spread", "matched"):  # from the annotation file, as JSON flow (valid YAML)
        if plan.get(key):
            out.append(f"{key}: {json.dumps(plan[key], ensure_ascii=False)}")
    fp = plan.get("floorplan")
    if fp:
        out.append("floorplan:  # remote output devices: rail offset and temperature read from the netlist")
        out.append(f"  remote: {_scalar(fp['remote'])}")
        out.append("  offsets:")
        for name, off in fp["offsets"].items():
            out.append(f"    {_scalar(name)}: {_flow(off)}")
    return "\n".join(out) + "\n"
