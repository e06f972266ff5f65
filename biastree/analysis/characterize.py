"""Characterisation tables of MOS devices given by model cards (ngspice DC sweeps).

For each device, corner (library section) and temperature a plan uses, the
unit device (the plan's W and L; ratios are copies, ``m=``, never a wider W)
is swept in ngspice with source and bulk on the rail: I_D over a grid of
V_GS × V_DS magnitudes from 0 to the plan's highest supply (12.5 mV × 25 mV;
V_DS from 25 mV).  The table is kept in a cache folder as two files named by
a SHA-256 hash of everything that determines it (the model text of every file
the source reads, the model name, section, W, L, temperature, grid):

* ``<hash>.npz``: arrays ``vgs`` (V), ``vds`` (V), ``id`` (A, rows V_GS, columns V_DS);
* ``<hash>.json``: a header naming the source, model, section, size,
  temperature, grid, the hash and the tool that wrote it.

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
from biastree.sim.ngspice import COMPATIBLE, parse_raw, run_deck
from biastree.units import ZERO_CELSIUS

STEP_VGS = 0.0125
STEP_VDS = 0.025
FORMAT = "biastree characterisation table 1"
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


def header(dev: CardModel, corner: str, kelvin: float, vmax: float) -> dict[str, object]:
    """What determines a table (its hash is the file name)."""
    info: dict[str, object] = {
        "format": FORMAT,
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
    digest = hashlib.sha256(json.dumps(info, sort_keys=True).encode("utf-8"))
    digest.update(_model_text(dev, corner))
    info["hash"] = digest.hexdigest()[:32]
    return info


def deck(dev: CardModel, corner: str, kelvin: float, vmax: float) -> str:
    """The ngspice sweep of one unit device (source and bulk at 0 V; pmos swept negative)."""
    sign = 1.0 if dev.kind == "nmos" else -1.0
    top = vmax + STEP_VGS / 2
    lines = [
        f"* biastree characterisation of {dev.model} ({dev.kind})",
        ".options reltol=1e-9 abstol=1e-18 vntol=1e-12 gmin=1e-18 filetype=ascii",
        model_cards.source_line(dev, corner),
        f".temp {kelvin - ZERO_CELSIUS:.9g}",
        "vd d 0 dc 0",
        "vg g 0 dc 0",
        model_cards.instance_line("1", dev, "d", "g", "0", "0", 1.0, corner),
        f".dc vd {sign * STEP_VDS:.6g} {sign * (vmax + STEP_VDS / 2):.6g} {sign * STEP_VDS:.6g} "
        f"vg 0 {sign * top:.6g} {sign * STEP_VGS:.6g}",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def sweep(dev: CardModel, corner: str, kelvin: float, vmax: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Run the sweep: (vgs, vds, id) magnitudes, id with rows V_GS and columns V_DS."""
    spiceinit = COMPATIBLE if dev.card is None else ""
    run = run_deck(deck(dev, corner, kelvin, vmax), spiceinit, timeout=600.0, allow_warnings=bool(spiceinit))
    plot = parse_raw(run.raw)[0]
    vd = np.abs(plot["v(d)"])
    vg = np.abs(plot["v(g)"])
    current = np.abs(plot["i(vd)"])
    n_d = int(np.sum(vg == vg[0]))
    if n_d < 4 or vd.size % n_d:
        raise SimulatorError(f"characterisation of {dev.model}: unexpected sweep shape ({vd.size} points)")
    grid_d = vd[:n_d]
    grid_g = vg[::n_d]
    table = current.reshape(len(grid_g), n_d)
    return grid_g, grid_d, table


def table_for(dev: CardModel, corner: str, kelvin: float, vmax: float, folder: Path | None = None) -> Table:
    """The device's table at one condition: from memory, from the cache folder, or by simulation."""
    info = header(dev, corner, kelvin, vmax)
    key = str(info["hash"])
    if key in _MEMORY:
        return _MEMORY[key]
    where = folder or table_folder()
    npz, head = where / f"{key}.npz", where / f"{key}.json"
    if npz.is_file() and head.is_file():
        data = np.load(npz)
        vgs, vds, current = data["vgs"], data["vds"], data["id"]
    else:
        vgs, vds, current = sweep(dev, corner, kelvin, vmax)
        where.mkdir(parents=True, exist_ok=True)
        tmp = where / f".{key}.tmp.npz"
        np.savez(tmp, vgs=vgs, vds=vds, id=current)
        os.replace(tmp, npz)  # whole or not at all
        from biastree.version import __version__

        info["written_by"] = f"biastree {__version__} with ngspice"
        info["source_path"] = str(dev.include or dev.library or "")
        info["arrays"] = {"vgs": "V_GS magnitude, V", "vds": "V_DS magnitude, V",
                          "id": "drain current magnitude, A; rows V_GS, columns V_DS"}
        write_atomic(head, json.dumps(info, indent=2) + "\n")
    table = Table(np.asarray(vgs, float), np.asarray(vds, float), np.log(np.maximum(current, 1e-30)))
    _MEMORY[key] = table
    return table


def characterize_plan(tree: object, folder: Path | None = None) -> list[dict[str, object]]:
    """Tables of every MOS device given by a card, at every temperature and corner the plan
    uses (nominal included); simulated where the cache folder has none.  Returns their headers."""
    plan = tree.plan  # type: ignore[attr-defined]
    vmax = table_vmax(plan)
    temps = sorted(set(plan.conditions.temperatures or [plan.temperature]) | {plan.temperature})
    corners = [""] + list(plan.conditions.corners)
    done = []
    used = {plan.mirrors[m].device for m in plan.mirrors}
    for name, dev in plan.devices.items():
        if not isinstance(dev, CardModel) or dev.is_bipolar or name not in used:
            continue
        for corner in corners:
            for kelvin in temps:
                table_for(dev, corner, kelvin, vmax, folder)
                info = header(dev, corner, kelvin, vmax)
                info["device"] = name
                info["file"] = str((folder or table_folder()) / f"{info['hash']}.npz")
                done.append(info)
    return done
