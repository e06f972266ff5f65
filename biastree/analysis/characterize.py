"""Characterisation tables of MOS devices given by model cards (ngspice DC sweeps).

For each device, corner (library section) and temperature a plan uses, the
unit device (the plan's W and L; ratios are copies, ``m=``, never a wider W)
is swept in ngspice with source and bulk on the rail: I_D over a grid of
V_GS × V_DS magnitudes from 0 to the plan's highest supply (12.5 mV × 25 mV;
V_DS from 25 mV).  Where a plan stacks the device (a cascode or wide-swing
mirror: the upper device's source sits above its bulk) the table spans V_SB
too: copies of the unit device, each with its bulk V_SB beyond the source
(``vsb_planes``: 50 mV steps up to 0.2 V, where the body effect bends most,
100 mV above, a last 50 mV step at the top, up to half the highest supply
plus 0.1 V), swept in the same run.  The table is kept in a cache folder as
two files named by a SHA-256 hash of everything that determines it (the model
text of every file the source reads, the model name, section, W, L,
temperature, grid, format):

* ``<hash>.npz``: arrays ``vgs`` (V), ``vds`` (V), ``id`` (A, rows V_GS, columns
  V_DS) — format 1; with the body effect (format 2) also ``vsb`` (V), and ``id``
  and ``is`` (the current out of the source: drain plus bulk terminal, which
  differ by impact ionisation and junction leakage) of shape (V_GS, V_DS, V_SB);
* ``<hash>.json``: a header naming the source, model, section, size,
  temperature, grid, the hash and the tool that wrote it.

Gate current is not tabulated: the sky130 BSIM4 cards have no gate
tunnelling (``igcmod = igbmod = 0``) and ngspice reports exactly 0 A through
the swept gate source (measured; see the notes of this work).

The folder is ``$BIASTREE_TABLES`` if set, else ``~/.cache/biastree/tables``;
``biastree characterize PLAN --tables DIR`` fills any folder, which can be
shared with the plan.  Once the tables exist no simulator is needed.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np

from biastree.analysis import cards as model_cards
from biastree.errors import SimulatorError
from biastree.files import write_atomic
from biastree.input.cards import CardModel
from biastree.physics.tables import Table
from biastree.physics.topologies import TOPOLOGIES
from biastree.sim.ngspice import COMPATIBLE, parse_raw, run_deck
from biastree.units import ZERO_CELSIUS

STEP_VGS = 0.0125
STEP_VDS = 0.025
FORMAT = "biastree characterisation table 1"  # ln I_D(V_GS, V_DS)
FORMAT_BODY = "biastree characterisation table 2"  # ln I_D(V_GS, V_DS, V_SB)
FORMATS = (FORMAT, FORMAT_BODY)
# V_DS axis of the tables with V_SB: V_DS = 0.2 V · e^(0.125 (u − 24)) for u < 24 (from 10 mV,
# steps of 12.5 % of V_DS), 0.2 V + 25 mV · (u − 24) above; u = 0, 1, 2, …
_V_KNEE, _RATIO, _U_KNEE = 0.2, 0.125, 24
_MEMORY: dict[str, Table] = {}


def table_vmax(plan: object, supplies: tuple[float, ...] = ()) -> float:
    """Upper end of a table's sweeps: the highest supply, rounded up to 0.1 V (a stable cache key)."""
    top = max([plan.supply, *plan.conditions.supplies, *supplies])  # type: ignore[attr-defined]
    return float(np.ceil(top * 10.0 - 1e-9) / 10.0)


def table_folder() -> Path:
    """Where tables are kept: ``$BIASTREE_TABLES``, else ``~/.cache/biastree/tables``."""
    env = os.environ.get("BIASTREE_TABLES")
    return Path(env) if env else Path.home() / ".cache" / "biastree" / "tables"


def _model_text(dev: CardModel, corner: str) -> bytes:
    if dev.card is not None:
        return dev.card.encode("utf-8")
    digest = hashlib.sha256()
    for name in model_cards.deck(dev, corner).files:
        digest.update(name.encode("utf-8"))
        digest.update(Path(name).read_bytes())
    return digest.hexdigest().encode("ascii")


def vsb_planes(vmax: float) -> list[float]:
    """V_SB values of a table with the body effect (V): 50 mV steps to 0.2 V, 100 mV steps
    above, a last 50 mV step before the top, the top being half the sweep plus 0.1 V (a
    stacked device's source sits below half the supply).  Measured on sky130 nfet/pfet
    L = 0.5 µm against sweeps at the midpoints: tricubic interpolation in V_SB adds below
    8e-6 in ln I_D (uniform 100 mV steps: 1e-4, at 25 mV)."""
    top = float(np.ceil((vmax / 2.0 + 0.1) * 10.0 - 1e-9) / 10.0)
    planes = [0.0, 0.05, 0.1, 0.15, 0.2] + [round(v, 6) for v in np.arange(0.3, top - 0.1 + 1e-9, 0.1)]
    planes += [round(top - 0.05, 6), top]
    return sorted({p for p in planes if p <= top})


def header(dev: CardModel, corner: str, kelvin: float, vmax: float, body: bool = False) -> dict[str, object]:
    """What determines a table (its hash is the file name)."""
    info: dict[str, object] = {
        "format": FORMAT_BODY if body else FORMAT,
        "model": dev.model,
        # the file's name, not its folder: a table found by its hash stays valid on another machine
        "source": "inline card" if dev.card is not None else Path(str(dev.include or dev.library)).name,
        "section": dev.section_for(corner) if dev.library is not None else None,
        "kind": dev.kind,
        "w_m": dev.w,
        "l_m": dev.l,
        "temperature_K": round(float(kelvin), 9),
        "vgs": [0.0, vmax, STEP_VGS],
        "vds": [STEP_VDS, vmax, STEP_VDS],
    }
    if body:
        info["vds"] = {"below_V": _V_KNEE, "from_V": round(_V_KNEE * float(np.exp(-_RATIO * _U_KNEE)), 6),
                       "ratio": _RATIO, "step_above_V": STEP_VDS, "to_V": vmax}
        info["vsb"] = vsb_planes(vmax)
    digest = hashlib.sha256(json.dumps(info, sort_keys=True).encode("utf-8"))
    digest.update(_model_text(dev, corner))
    info["hash"] = digest.hexdigest()[:32]
    return info


def deck(dev: CardModel, corner: str, kelvin: float, vmax: float, body: bool = False) -> str:
    """The ngspice sweep of one unit device (source at 0 V; pmos swept negative).  Without
    the body effect the bulk is at 0 V; with it, one copy per V_SB plane, each with its
    own bulk source (V_SB beyond the source) and its own drain ammeter."""
    sign = 1.0 if dev.kind == "nmos" else -1.0
    top = vmax + STEP_VGS / 2
    lines = [
        f"* biastree characterisation of {dev.model} ({dev.kind})",
        ".options reltol=1e-9 abstol=1e-18 vntol=1e-12 gmin=1e-18 filetype=ascii",
        model_cards.source_line(dev, corner),
        f".temp {kelvin - ZERO_CELSIUS:.9g}",
        "vd d 0 dc 0",
        "vg g 0 dc 0",
    ]
    if body:
        # V_DS through a behavioural source from a swept index u: geometric steps (12.5 % of
        # V_DS) below 0.2 V, where ln I_D bends like ln V_DS in the triode region, 25 mV above
        lines[-2] = "vu u 0 dc 0"
        lines.insert(-1, f"bd d 0 v = {sign:g} * (v(u) < {_U_KNEE} ? {_V_KNEE} * exp({_RATIO} * (v(u) - {_U_KNEE})) "
                         f": {_V_KNEE} + {STEP_VDS} * (v(u) - {_U_KNEE}))")
        planes = vsb_planes(vmax)
        for k, vsb in enumerate(planes):
            lines += [f"vb{k} b{k} 0 dc {-sign * vsb:.6g}", f"vm{k} d d{k} dc 0",
                      model_cards.instance_line(f"{k}", dev, f"d{k}", "g", "0", f"b{k}", 1.0, corner)]
        lines.append(".save v(d) v(g) " + " ".join(f"i(vm{k}) i(vb{k})" for k in range(len(planes))))
    else:
        lines.append(model_cards.instance_line("1", dev, "d", "g", "0", "0", 1.0, corner))
    sweep_d = (f"vu 0 {_U_KNEE + (vmax - _V_KNEE) / STEP_VDS + 0.5:.6g} 1" if body else
               f"vd {sign * STEP_VDS:.6g} {sign * (vmax + STEP_VDS / 2):.6g} {sign * STEP_VDS:.6g}")
    lines += [
        f".dc {sweep_d} vg 0 {sign * top:.6g} {sign * STEP_VGS:.6g}",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def sweep(dev: CardModel, corner: str, kelvin: float, vmax: float,
          body: bool = False) -> dict[str, np.ndarray]:
    """Run the sweep: arrays ``vgs``, ``vds`` and ``id`` (magnitudes; id with rows V_GS and
    columns V_DS); with the body effect also ``vsb`` and ``is`` (the current out of the
    source, I_D plus the bulk terminal's), both with V_SB as their third axis."""
    spiceinit = COMPATIBLE if dev.card is None else ""
    run = run_deck(deck(dev, corner, kelvin, vmax, body), spiceinit, timeout=600.0, allow_warnings=bool(spiceinit))
    plot = parse_raw(run.raw)[0]
    vd = np.abs(plot["v(d)"])
    vg = np.abs(plot["v(g)"])
    n_d = int(np.sum(vg == vg[0]))
    if n_d < 4 or vd.size % n_d:
        raise SimulatorError(f"characterisation of {dev.model}: unexpected sweep shape ({vd.size} points)")
    grid = {"vgs": vg[::n_d], "vds": vd[:n_d]}
    shape = (grid["vgs"].size, n_d)
    if not body:
        return {**grid, "id": np.abs(plot["i(vd)"]).reshape(shape)}
    planes = range(len(vsb_planes(vmax)))
    # currents into the device: drain i(vm) (ammeter d → drain), bulk −i(vb) (source from the bulk to 0)
    drain = np.stack([plot[f"i(vm{k})"].reshape(shape) for k in planes], axis=-1)
    bulk = np.stack([-plot[f"i(vb{k})"].reshape(shape) for k in planes], axis=-1)
    return {**grid, "vsb": np.asarray(vsb_planes(vmax), float), "id": np.abs(drain), "is": np.abs(drain + bulk)}


def table_for(dev: CardModel, corner: str, kelvin: float, vmax: float, folder: Path | None = None,
              body: bool = False) -> Table:
    """The device's table at one condition (with ``body``, spanning V_SB too): from memory,
    from the cache folder, or by simulation."""
    info = header(dev, corner, kelvin, vmax, body)
    key = str(info["hash"])
    if key in _MEMORY:
        return _MEMORY[key]
    where = folder or table_folder()
    npz, head = where / f"{key}.npz", where / f"{key}.json"
    if npz.is_file() and head.is_file():
        with np.load(npz) as data:
            arrays = {name: data[name] for name in data.files}
    else:
        arrays = sweep(dev, corner, kelvin, vmax, body)
        where.mkdir(parents=True, exist_ok=True)
        tmp = where / f".{key}.tmp.npz"
        np.savez(tmp, **arrays)  # type: ignore[arg-type]
        os.replace(tmp, npz)  # whole or not at all
        from biastree.version import __version__

        info["written_by"] = f"biastree {__version__} with ngspice"
        info["source_path"] = str(dev.include or dev.library or "")
        info["arrays"] = {"vgs": "V_GS magnitude, V", "vds": "V_DS magnitude, V",
                          "id": "drain current magnitude, A; rows V_GS, columns V_DS"}
        if body:
            info["arrays"] = {"vgs": "V_GS magnitude, V", "vds": "V_DS magnitude, V",
                              "vsb": "V_SB magnitude (the bulk beyond the source), V",
                              "id": "drain current magnitude, A; axes V_GS, V_DS, V_SB",
                              "is": "current out of the source (drain plus bulk terminal), magnitude, A; "
                                    "axes V_GS, V_DS, V_SB"}
        write_atomic(head, json.dumps(info, indent=2) + "\n")
    def log(name: str) -> np.ndarray:
        return np.log(np.maximum(np.asarray(arrays[name], float), 1e-30))

    table = Table(np.asarray(arrays["vgs"], float), np.asarray(arrays["vds"], float), log("id"),
                  np.asarray(arrays["vsb"], float) if body else None, log("is") if body else None)
    _MEMORY[key] = table
    return table


def stacked_devices(plan: object) -> set[str]:
    """Devices some mirror of the plan stacks (cascode, wide-swing): their tables span V_SB."""
    mirrors = plan.mirrors  # type: ignore[attr-defined]
    return {spec.device for spec in mirrors.values() if TOPOLOGIES[spec.topology].stacks_mos}


def characterize_plan(tree: object, folder: Path | None = None) -> list[dict[str, object]]:
    """Tables of every MOS device given by a card, at every temperature and corner the plan
    uses (nominal included); simulated where the cache folder has none.  Returns their headers."""
    plan = tree.plan  # type: ignore[attr-defined]
    vmax = table_vmax(plan)
    temps = sorted(set(plan.conditions.temperatures or [plan.temperature]) | {plan.temperature})
    corners = [""] + list(plan.conditions.corners)
    done = []
    used = {plan.mirrors[m].device for m in plan.mirrors}
    stacked = stacked_devices(plan)
    for name, dev in plan.devices.items():
        if not isinstance(dev, CardModel) or dev.is_bipolar or name not in used:
            continue
        for corner in corners:
            for kelvin in temps:
                table_for(dev, corner, kelvin, vmax, folder, name in stacked)
                info = header(dev, corner, kelvin, vmax, name in stacked)
                info["device"] = name
                info["file"] = str((folder or table_folder()) / f"{info['hash']}.npz")
                done.append(info)
    return done
