"""Mirror topologies: a registry of exact DC solutions.

A topology turns a mirror's input current into its output currents.  Each
entry provides, as pure functions over arrays (first axis = mirrors or
branches of that topology, trailing axes broadcast):

* ``input``:  (devices, input current, fan-out) → input voltage and the
  per-mirror gain factors (e.g. β loading), and the "unit" current of a
  ratio-1 output before output-voltage effects;
* ``output``: (devices, unit current, rail distance of each output) →
  per-branch gain factors (e.g. Early effect) and the minimum rail distance
  the output device needs (compliance).

An output's current is then  I_out = I_in · ratio · Π(mirror factors) ·
Π(branch factors), exactly.  Keeping the factors separate is what lets the
audit say which effect, in which stage, causes a load's error.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from . import devices
from .devices import Array

# Factor names and how a report calls them.
TERM_LABELS = {
    "beta": "β loading",
    "early": "Early effect",
    "lambda": "channel-length modulation",
}


@dataclass(frozen=True)
class DeviceArrays:
    """Device parameters of a group of mirrors of one family, at the operating
    temperature (SI floats; first axis = mirrors, trailing axes broadcast)."""

    family: str  # "bjt" or "mos"
    vt: Array  # thermal voltage
    is_in: Array  # BJT: IS of the input device (IS·input_size)
    beta: Array  # BJT: BF
    early: Array  # BJT: VAF (inf allowed)
    k_in: Array  # MOS: KP·W/L of the input device (W = w·input_size)
    vth: Array  # MOS: |VTO|
    lam: Array  # MOS: λ

    def take(self, index: Array, family: str | None = None) -> "DeviceArrays":
        """Rows ``index`` of every parameter (optionally relabelled as one family)."""
        arrays = (getattr(self, f)[index] for f in self.__dataclass_fields__ if f != "family")
        return DeviceArrays(family or self.family, *arrays)


@dataclass(frozen=True)
class InputState:
    v_in: Array  # input voltage, measured from the mirror's rail
    unit: Array  # current of a ratio-1 output at zero output-voltage effect, / I_in
    factors: dict[str, Array]  # per-mirror gain factors (dimensionless)

    def take(self, index: Array) -> "InputState":
        return InputState(self.v_in[index], self.unit[index], {k: v[index] for k, v in self.factors.items()})


@dataclass(frozen=True)
class OutputState:
    factors: dict[str, Array]  # per-branch gain factors
    min_distance: Array  # smallest rail-to-output voltage keeping the device active


@dataclass(frozen=True)
class Topology:
    name: str
    kinds: frozenset[str]  # "bjt", "mos"
    summary: str
    terms: dict[str, tuple[str, ...]]  # family -> names of the gain factors it produces
    input: Callable[[DeviceArrays, Array, Array], InputState]
    output: Callable[[DeviceArrays, InputState, Array, Array], OutputState]


# --- simple mirror -----------------------------------------------------------


def _simple_input(dev: DeviceArrays, i_in: Array, fanout: Array) -> InputState:
    """Simple mirror input.

    BJT: every base current comes out of the input node, so
    I_in = I_C0·(1 + (1 + Σm)/β) and the unit current is I_C0/I_in
    (Gummel–Poon without parasitics; an output's IB is not Early modulated).
    MOS: no gate current; V_GS solves the diode's square law with λ.
    """
    if dev.family == "bjt":
        beta_f = 1.0 / (1.0 + (1.0 + fanout) / dev.beta)
        v_in = devices.bjt_vbe(i_in * beta_f, dev.is_in, dev.vt)
        return InputState(v_in=v_in, unit=beta_f, factors={"beta": beta_f})
    v_in = devices.mos_vgs(i_in, dev.k_in, dev.vth, dev.lam)
    return InputState(v_in=v_in, unit=np.ones_like(v_in), factors={})


def _simple_output(dev: DeviceArrays, state: InputState, distance: Array, parent_vin: Array) -> OutputState:
    """Simple mirror output at ``distance`` volts from the rail.

    BJT: factor (1 + VCB/VAF) with VCB = distance − VBE; active while VCB ≥ 0.
    MOS: factor (1 + λ·VDS)/(1 + λ·VGS), zero error at VDS = VGS; active
    while VDS ≥ VGS − VT.
    """
    del state
    if dev.family == "bjt":
        early = devices.early_factor(distance - parent_vin, dev.early)
        return OutputState(factors={"early": early}, min_distance=parent_vin + 0.0 * distance)
    lam = devices.clm_factor(distance, dev.lam) / devices.clm_factor(parent_vin, dev.lam)
    return OutputState(factors={"lambda": lam}, min_distance=parent_vin - dev.vth + 0.0 * distance)


TOPOLOGIES: dict[str, Topology] = {
    "simple": Topology(
        name="simple",
        kinds=frozenset({"bjt", "mos"}),
        summary="diode-connected input device, outputs share its base/gate",
        terms={"bjt": ("beta", "early"), "mos": ("lambda",)},
        input=_simple_input,
        output=_simple_output,
    ),
}
