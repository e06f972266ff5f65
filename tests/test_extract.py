"""Extracting a plan from a SPICE netlist (`biastree extract`, `check NETLIST --annotate`).

Oracles: (1) the round trip — each sample's netlist (biastree's own SPICE
writer) extracted back must give the same solved load currents (1e-9) and the
same tree; (2) ngspice 39 running the hand-written netlists themselves, whose
load currents biastree's solution of the extracted plan must match (the
models are the level-1 and Gummel–Poon equations both sides use); (3) the
expected tree of each hand-written netlist, written out by hand below.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from conftest import ROOT, SAMPLES
from typer.testing import CliRunner

import biastree
from biastree.analysis.solve import solve
from biastree.cli import app
from biastree.cli.extract import extract_text
from biastree.errors import BiasTreeError, PlanError
from biastree.input.model import BjtModel
from biastree.input.netlist.annotate import read_annotations
from biastree.output.spice import to_spice

NETLISTS = ROOT / "tests" / "netlists"
runner = CliRunner()


def _annotation(tmp_path: Path, text: str = "defaults: {tolerance: 5%}\n") -> Path:
    path = tmp_path / "loads.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def _extracted(netlist: Path, annotate: Path | None, top: str | None = None) -> tuple[biastree.Tree, list[str]]:
    text, notes = extract_text(netlist, annotate, top)
    return biastree.loads(text, str(netlist)), notes


def _tree_shape(tree: biastree.Tree) -> dict[str, tuple[str, str, list[tuple[str, float]]]]:
    plan = tree.plan
    return {
        name: (m.topology, plan.devices[m.device].kind, [(b.to, round(b.ratio * b.count, 12)) for b in m.branches])
        for name, m in plan.mirrors.items()
    }


# --- round trip: every sample's exported netlist ----------------------------------


# Plans whose devices are SPICE model cards (samples/sky130_bias.yaml) export PDK subcircuits
# and a `.lib` line; extraction points card devices at the same library and section, so those
# round trip too (below, with the sky130 models and ngspice for the MOS tables).
PARAMETER_SAMPLES = [p for p in SAMPLES if "model:" not in p.read_text()]
CARD_SAMPLES = [p for p in SAMPLES if "model:" in p.read_text()]


@pytest.fixture(scope="module")
def card_tables(tmp_path_factory):  # type: ignore[no-untyped-def]
    """One MOS table cache for this module's sky130 tests: the round trip and the netlist check use the
    same unit devices (nfet 2/1 µm, pfet 4/1 µm, tt, 27 °C), so each is characterised once."""
    with pytest.MonkeyPatch.context() as patch:
        folder = tmp_path_factory.mktemp("tables")
        patch.setenv("BIASTREE_TABLES", str(folder))
        yield folder


@pytest.mark.parametrize("sample", PARAMETER_SAMPLES, ids=lambda p: p.stem)
def test_round_trip_same_currents_and_structure(sample: Path, tmp_path: Path) -> None:
    _round_trip(sample, tmp_path)


@pytest.mark.sky130
@pytest.mark.ngspice
@pytest.mark.parametrize("sample", CARD_SAMPLES, ids=lambda p: p.stem)
def test_round_trip_of_card_samples(sample: Path, tmp_path: Path, sky130_root: Path, ngspice: None,
                                    card_tables: Path) -> None:
    """The exported netlist's `.lib` line and PDK subcircuits come back as card devices with the same
    library, section, model and unit W/L: the same solution (1e-9), no stand-in parameters."""
    back = _round_trip(sample, tmp_path)
    original = biastree.load(sample)
    cards = {(d.kind, d.model.lower(), Path(d.library).resolve(), d.section, d.w, d.l)
             for d in original.plan.devices.values()}
    assert {(d.kind, d.model, Path(d.library).resolve(), d.section, d.w, d.l)
            for d in back.plan.devices.values()} == cards


def _round_trip(sample: Path, tmp_path: Path) -> biastree.Tree:
    original = biastree.load(sample)
    net = to_spice(original, "nominal", str(sample))
    path = tmp_path / f"{sample.stem}.cir"
    path.write_text(net.text, encoding="utf-8")
    back, _ = _extracted(path, _annotation(tmp_path))

    # currents: biastree's solution of both plans, loads at the netlist's (nominal) voltages
    ours = solve(original, None, output_resistance=False)
    theirs = solve(back, None, output_resistance=False)
    node_of_load = {load: "o_" + amm[len("va_"):] for load, amm in net.ammeters.items()}
    for i, load in enumerate(original.loads):
        j = back.loads.index(node_of_load[load])
        want = ours.l_current[i, 1] * original.l_mult[i]  # the netlist carries every instance
        got = theirs.l_current[j, 1] * back.l_mult[j]
        assert got == pytest.approx(want, rel=1e-9), load

    # structure: the same mirrors, topologies, device kinds and branches (count folded into ratio)
    plan, bplan = original.plan, back.plan
    assert len(bplan.mirrors) == len(plan.mirrors) and len(bplan.loads) == len(plan.loads)
    assert bplan.reference.feeds == net.mirror_nodes[plan.reference.feeds]
    for i, name in enumerate(original.mirrors):
        spec, got = plan.mirrors[name], bplan.mirrors[net.mirror_nodes[name]]
        dev, bdev = plan.devices[spec.device], bplan.devices[got.device]
        mult = float(original.m_mult[i])
        assert (got.topology, bdev.kind) == (spec.topology, dev.kind), name
        unit = 1.0 if dev.kind in ("npn", "pnp") else dev.w
        bunit = 1.0 if bdev.kind in ("npn", "pnp") else bdev.w
        assert got.input_size * bunit == pytest.approx(spec.input_size * unit * mult, rel=1e-12), name
        targets = [net.mirror_nodes.get(b.to) or node_of_load[b.to] for b in spec.branches]
        assert [b.to for b in got.branches] == targets, name
        for b, bb in zip(spec.branches, got.branches):
            assert bb.ratio == pytest.approx(b.ratio * b.count, rel=1e-12), name
    return back


# --- hand-written netlists -----------------------------------------------------------


TOPOLOGY_TREE = {  # tests/netlists/topologies.spice, read by hand
    "nref": ("simple", "npn", [("pbh", 1.0), ("pcas", 2.0), ("pbig", 1.0)]),
    "pbh": ("beta_helper", "pnp", [("nwil", 1.0), ("nwil4", 1.0), ("ncas", 1.0), ("ndeg", 1.0), ("nws", 2.0)]),
    "nwil": ("wilson", "npn", [("out_wil", 2.0)]),
    "nwil4": ("wilson4", "npn", [("out_w4", 1.0)]),
    "ncas": ("cascode", "npn", [("out_cas", 1.0)]),
    "ndeg": ("degenerated", "npn", [("out_deg", 2.0)]),
    "nws": ("wide_swing", "nmos", [("out_ws", 2.0)]),
    "pcas": ("cascode", "pmos", [("out_pcas", 2.0)]),
    "pbig": ("simple", "pnp", [("out_big", 4.0)]),
}


def test_every_topology_recognised(tmp_path: Path) -> None:
    tree, notes = _extracted(NETLISTS / "topologies.spice", _annotation(tmp_path))
    assert _tree_shape(tree) == TOPOLOGY_TREE
    # every device belongs to a mirror, the reference or a load source; MOS ratios made by W are flagged
    assert [n.split(": ")[:2] for n in notes] == [[f"{NETLISTS / 'topologies.spice'}:63", "m3"],
                                                  [f"{NETLISTS / 'topologies.spice'}:70", "mp3"]]
    assert all("ratio taken from W/L" in n for n in notes)
    m = tree.plan.mirrors
    assert (m["pbh"].helper_size, m["pbh"].bleed) == (0.5, 1e-6)  # QP2 area 0.5, IBLEED 1u
    assert m["ndeg"].degeneration == 10e3  # RD1 10k
    assert m["nws"].bias_current == 40e-6 and m["nws"].swing_n == pytest.approx(1.25, rel=1e-12)
    loads = tree.plan.loads
    # target defaults to the ideal mirrored current: 20 µA × 1 (pbh) × 2 (QP7 m=2) × 2 (M3/M1)
    assert loads["out_ws"].current == pytest.approx(80e-6, rel=1e-12)
    assert loads["out_wil"].voltage == 2.0  # fixed by Vwil


@pytest.mark.ngspice
def test_topologies_match_ngspice_on_the_original_netlist(ngspice: None, tmp_path: Path) -> None:
    """ngspice simulates the hand-written netlist itself; biastree solves the extracted plan."""
    from biastree.sim.verify import run_ngspice

    tree, _ = _extracted(NETLISTS / "topologies.spice", _annotation(tmp_path))
    text = (NETLISTS / "topologies.spice").read_text().replace("\n", "\n.options filetype=ascii\n", 1)
    sim = run_ngspice(text)
    op = solve(tree, None, output_resistance=False)
    ammeter = {"out_wil": "vwil", "out_w4": "vw4", "out_cas": "vcas", "out_deg": "vdeg", "out_ws": "vws",
               "out_pcas": "vpcas", "out_big": "vbig"}
    for i, load in enumerate(tree.loads):
        simulated = abs(float(sim[f"i({ammeter[load]})"][0]))
        # 1e-6: ngspice with reltol=1e-7 against biastree's exact solution (agreement seen: ≤ 4e-8)
        assert op.l_current[i, 1] == pytest.approx(simulated, rel=1e-6), load


def test_hierarchy_parameters_multiplicity_and_annotations() -> None:
    netlist, notes_file = NETLISTS / "hierarchy.spice", NETLISTS / "hierarchy.yaml"
    tree, notes = _extracted(netlist, notes_file)
    assert _tree_shape(tree) == {
        "xcore.nref": ("simple", "nmos", [("xcore.np", 1.0), ("adc_ref", 2.0)]),  # n2={ratio_adc} = 2
        "xcore.np": ("simple", "pmos", [("adc_ota", 1.0), ("xcore.nn", 2.0)]),  # W 20u vs 10u; nf is no factor
        "xcore.nn": ("simple", "nmos", [("cmp_tail", 1.0), ("dac", 3.0)]),  # wunit=10u n2=3 (continuation lines)
    }
    plan = tree.plan
    assert plan.mirrors["xcore.nn"].input_size == 2.0  # W 10u against the 5u unit of card nch
    assert plan.reference.current == 10e-6 and plan.reference.tolerance == 0.01  # .param iref=10u
    assert plan.supply == 1.8
    loads = plan.loads
    assert loads["dac"].current == 60e-6 and loads["dac"].tolerance == 0.1  # named by its instance xcore.xn2.m2
    assert loads["adc_ota"].voltage == (0.3, 0.9)  # by node
    assert loads["adc_ref"].voltage == 0.9  # fixed by Vref
    assert loads["cmp_tail"].voltage == 0.6 and loads["cmp_tail"].current == pytest.approx(20e-6)  # defaults
    assert notes == [
        f"{netlist}:32: m5: part of load cmp_tail, not of the bias tree",
        f"{netlist}:33: m6: part of load cmp_tail, not of the bias tree",
        (f"{netlist}:17: xcore.xp.mp2: W/L 2e-05/2e-06 differs from the input's 1e-05/2e-06: ratio taken from W/L "
        "(exact for the square law; with a real model use m= copies of one unit device)"),
        f"{netlist}:31: rota: resistor of load adc_ota, not of the bias tree",
        f"{netlist}:34: rdac: resistor of load dac, not of the bias tree",
    ]


def test_top_cell_needs_a_supply(tmp_path: Path) -> None:
    netlist = NETLISTS / "hierarchy.spice"
    with pytest.raises(BiasTreeError, match=r"supply: the netlist fixes no supply node"):
        extract_text(netlist, _annotation(tmp_path, "defaults: {tolerance: 5%, voltage: 0.6V}\n"), "bias_core")
    tree, _ = _extracted(netlist, _annotation(tmp_path, "rails: {vdd: 1.8V}\ndefaults: {tolerance: 5%, voltage: 0.6V}\n"),
                         "bias_core")
    assert sorted(tree.loads) == ["out_a", "out_b", "out_c", "out_d"]  # the cell's own port names
    assert tree.plan.reference.feeds == "nref" and tree.plan.supply == 1.8


def test_unsupported_parts_listed_rest_audited(tmp_path: Path) -> None:
    netlist = NETLISTS / "unsupported.spice"
    tree, notes = _extracted(netlist, _annotation(tmp_path))
    assert _tree_shape(tree) == {"n1": ("simple", "npn", [("p1", 1.0), ("out1", 1.0)]),
                                 "p1": ("simple", "pnp", [("out2", 1.0)])}
    listed = {(int(re.match(rf"{re.escape(str(netlist))}:(\d+): ", n).group(1)), n.split(": ")[1]) for n in notes}
    assert listed == {(17, "q4"), (23, "mw3"), (26, "iloop"), (22, "mw2"), (27, "qa1"), (29, "qb1"), (20, "iw"),
                      (32, "e1")}
    text = "\n".join(notes)
    assert "control net shared across rails" in text
    assert "feedback loop na -> pb -> na" in text
    assert "feedback structure not in the registry" in text
    assert "element kind not supported" in text


# --- the commands -----------------------------------------------------------------


def test_extract_command_writes_a_plan_every_command_reads(tmp_path: Path) -> None:
    out = tmp_path / "plan.yaml"
    result = runner.invoke(app, ["extract", str(NETLISTS / "hierarchy.spice"), "--annotate",
                                 str(NETLISTS / "hierarchy.yaml"), "-o", str(out)])
    assert result.exit_code == 0, result.output
    text = out.read_text()
    assert "xcore.xn2.m2 (" in text  # the designer's instance names are kept beside each entry
    assert runner.invoke(app, ["check", str(out)]).exit_code in (0, 1)
    assert biastree.load(out).plan.loads["dac"].current == 60e-6


def test_check_netlist_in_one_step(tmp_path: Path) -> None:
    result = runner.invoke(app, ["check", str(NETLISTS / "topologies.spice"), "--annotate", str(_annotation(tmp_path))])
    assert result.exit_code in (0, 1), result.output
    assert "out_wil" in result.output and "nref > pbh > nwil" in result.output


def test_missing_budgets_are_listed_not_guessed() -> None:
    netlist = NETLISTS / "topologies.spice"
    result = runner.invoke(app, ["extract", str(netlist)])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 7  # one per load
    assert all(re.match(rf"error: {re.escape(str(netlist))}:\d+: out_\w+: no tolerance", line) for line in lines)


BROKEN = [
    ("x1 a b nosuch\n", 2, r"x1: no \.subckt named 'nosuch'"),
    ("q1 a a 0 qx\n", 2, r"q1: no \.model card named after its nodes"),
    ("r1 a 0 {1/0}\n", 2, r"division by zero"),
    ("r1 a 0 {rx}\n", 2, r"unknown parameter 'rx'"),
    (".subckt two a b\nr1 a b 1k\n.ends\nx1 n1 n2 n3 two\n", 5, r"3 nodes for subcircuit two, which has 2 ports"),
    (".model nch nmos (level=1 kp=100u vto=0.5)\nm1 a a 0 0 nch l=1u\n", 3, r"m1: no w="),
    ("+ r1 a 0 1k\n", 2, r"continuation line '\+' with no line before it"),
    ("v1 a 0 1\nr1 a 0 1k\n", 1, r"no current mirror found"),
    (".model qn npn\nv1 vdd 0 3\nq1 n n 0 qn\nq2 o n 0 qn\n", 4, r"no current source or rail resistor feeds"),
    (".include nowhere.lib\n", 2, r"file 'nowhere.lib' not found"),
    (".model nch nmos (level=1 kp=100u vto=0.5)\nvdd vdd 0 3\ni1 n 0 10u\nm1 n n 0 0 nch w=1u l=1u\n"
     "m2 o n 0 0 nch w=1u l=1u\n", 5, r"no current source or rail resistor feeds"),  # source pulls the wrong way
]


@pytest.mark.parametrize("body, line, message", BROKEN, ids=[b[2][:24] for b in BROKEN])
def test_broken_netlists_one_message_each(tmp_path: Path, body: str, line: int, message: str) -> None:
    path = tmp_path / "broken.spice"
    path.write_text("broken netlist (title line)\n" + body, encoding="utf-8")
    result = runner.invoke(app, ["extract", str(path)])
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    lines = [line for line in result.output.strip().splitlines() if line.startswith("error:")]
    assert len(lines) == 1, result.output
    assert re.match(rf"error: {re.escape(str(path))}:{line}: .*{message}", lines[0]), lines[0]


def test_annotation_file_is_strict(tmp_path: Path) -> None:
    path = _annotation(tmp_path, "defaults: {tolerance: 5%}\nloads:\n  out_wil: {tolerence: 2%}\n")
    with pytest.raises(PlanError, match=r"loads\.out_wil\.tolerence: unknown key") as info:
        read_annotations(path)
    assert f"{path}:3:" in str(info.value)
    result = runner.invoke(app, ["extract", str(NETLISTS / "topologies.spice"), "--annotate", str(path)])
    assert result.exit_code == 2 and "unknown key" in result.output


@pytest.mark.ngspice
def test_resistor_reference_solved_and_matches_ngspice(ngspice: None, tmp_path: Path) -> None:
    """I_ref = (V_supply − V_BE(I_ref))/R, solved with the plan's own mirror model; ngspice on the netlist agrees."""
    from biastree.sim.verify import run_ngspice

    netlist = NETLISTS / "resistor_reference.spice"
    tree, _ = _extracted(netlist, _annotation(tmp_path))
    op = solve(tree, None, output_resistance=False)
    i_ref = tree.plan.reference.current
    v_in = float(op.m_v_in[0, 1])
    assert i_ref == pytest.approx((3.3 - v_in) / 100e3, rel=1e-12)  # the fixed point itself
    # ideal targets follow the solved reference: Q3 (area 1) and M2 (m=3) after Q2 (area 2)
    assert tree.plan.loads["out_q"].current == pytest.approx(i_ref, rel=1e-12)
    assert tree.plan.loads["out_m"].current == pytest.approx(6 * i_ref, rel=1e-12)
    sim = run_ngspice(netlist.read_text().replace("\n", "\n.options filetype=ascii\n", 1))
    for i, (load, ammeter) in enumerate((("out_m", "vm"), ("out_q", "vq"))):
        j = tree.loads.index(load)
        assert op.l_current[j, 1] == pytest.approx(abs(float(sim[f"i({ammeter})"][0])), rel=1e-6), load


SKY130_NETLIST = """sky130 bias tree: X instances of the PDK's device subcircuits (invented sizes)
.lib "{root}/combined_models/sky130.lib.spice" tt
.options filetype=ascii reltol=1e-7 abstol=1e-16 vntol=1e-10 gmin=1e-18
Vdd vdd 0 1.8
* npn master fed by the reference current
Iref vdd nq 5u
XQ1 nq nq 0 0 sky130_fd_pr__npn_05v5_W1p00L1p00 m=1
XQ2 out_q nq 0 0 sky130_fd_pr__npn_05v5_W1p00L1p00 m=1
Vq out_q 0 1.2
XQ3 pin nq 0 0 sky130_fd_pr__npn_05v5_W1p00L1p00 m=2
* pfet distribution
XM4 pin pin vdd vdd sky130_fd_pr__pfet_01v8 w=4 l=1 m=1
XM5 out_p pin vdd vdd sky130_fd_pr__pfet_01v8 w=4 l=1 m=4
Vp out_p 0 0.9
XM6 nref pin vdd vdd sky130_fd_pr__pfet_01v8 w=4 l=1 m=1
* nfet sink
XM1 nref nref 0 0 sky130_fd_pr__nfet_01v8 w=2 l=1 m=1 nf=1
XM3 out_n nref 0 0 sky130_fd_pr__nfet_01v8 w=2 l=1 m=2
Vn out_n 0 0.9
.op
.end
"""


@pytest.mark.sky130
@pytest.mark.ngspice
def test_sky130_netlist_checked_with_its_own_models(sky130_root: Path, ngspice: None, card_tables: Path,
                                                    tmp_path: Path) -> None:
    """A netlist on the open 130 nm PDK's devices (package sky130), end to end with no stand-in
    parameters: extracted plan (card devices: the netlist's `.lib` file and section, the PDK
    subcircuit, unit W/L) -> check -> the solved load currents against ngspice 39 running the
    ORIGINAL netlist: within 1e-4 for the MOS loads (the bar of the MOS tables), 1e-5 for the
    bipolar load (full Gummel–Poon both sides).  The same unit devices as samples/sky130_bias.yaml,
    so the MOS tables are characterised once for this module."""
    import subprocess

    from biastree.sim.verify import parse_raw

    netlist = tmp_path / "sky.spice"
    netlist.write_text(SKY130_NETLIST.format(root=sky130_root), encoding="utf-8")
    result = runner.invoke(app, ["extract", str(netlist)])
    assert result.exit_code == 2  # budgets are not in a netlist: listed, not guessed; no device parameters asked
    assert [line.split(": ")[2] for line in result.output.strip().splitlines()] == ["out_q", "out_p", "out_n"]
    notes = _annotation(tmp_path, "defaults: {tolerance: 10%}\n")
    tree, found = _extracted(netlist, notes)
    assert found == []
    assert _tree_shape(tree) == {"nq": ("simple", "npn", [("out_q", 1.0), ("pin", 2.0)]),
                                 "pin": ("simple", "pmos", [("out_p", 4.0), ("nref", 1.0)]),
                                 "nref": ("simple", "nmos", [("out_n", 2.0)])}
    lib = (sky130_root / "combined_models" / "sky130.lib.spice").resolve()
    for dev in tree.plan.devices.values():
        assert (Path(dev.library).resolve(), dev.section) == (lib, "tt")
    nfet = tree.plan.devices["sky130_fd_pr__nfet_01v8"]
    assert (nfet.model, nfet.w, nfet.l) == ("sky130_fd_pr__nfet_01v8", pytest.approx(2e-6), pytest.approx(1e-6))
    result = runner.invoke(app, ["check", str(netlist), "--annotate", str(notes)])
    assert "3 loads" in result.output, result.output  # the audit runs on the designer's own models
    op = solve(tree, None, output_resistance=False)

    (tmp_path / ".spiceinit").write_text("set ngbehavior=hsa\nset ng_nomodcheck\n", encoding="utf-8")
    proc = subprocess.run(["ngspice", "-b", "-r", "out.raw", netlist.name], cwd=tmp_path, capture_output=True,
                          text=True, timeout=300, stdin=subprocess.DEVNULL, check=False)
    assert proc.returncode == 0, proc.stderr[-2000:]
    sim = parse_raw((tmp_path / "out.raw").read_text())[0]
    for load, ammeter, rel in (("out_q", "vq", 1e-5), ("out_p", "vp", 1e-4), ("out_n", "vn", 1e-4)):
        j = tree.loads.index(load)
        assert op.l_current[j, 1] == pytest.approx(abs(float(sim[f"i({ammeter})"][0])), rel=rel), load


def test_full_gummel_poon_cards_become_card_devices(ngspice: None, tmp_path: Path) -> None:
    """Cards with DC parameters beyond the simple model (IKF, ISE/NE, RB, …) become card devices: the
    included file's card points at that file, the netlist's own card is carried inline, a plain card keeps
    the simple parameters. Oracle: ngspice 39 running the original netlist (full Gummel–Poon both
    sides), within the bipolar bar 1e-5."""
    import shutil
    import subprocess

    from biastree.sim.verify import parse_raw

    for name in ("gp_cards.spice", "gp_models.lib"):
        shutil.copy(NETLISTS / name, tmp_path / name)
    netlist = tmp_path / "gp_cards.spice"
    tree, found = _extracted(netlist, _annotation(tmp_path, "defaults: {tolerance: 10%}\n"))
    assert found == []
    devices = tree.plan.devices
    assert (devices["qfull"].model, Path(devices["qfull"].include)) == ("qfull", tmp_path / "gp_models.lib")
    assert devices["qlat"].card.startswith(".model qlat pnp (is=5e-17 bf=40.0")
    assert isinstance(devices["qplain"], BjtModel) and devices["qplain"].early == 80.0
    op = solve(tree, None, output_resistance=False)
    proc = subprocess.run(["ngspice", "-b", "-r", "out.raw", netlist.name], cwd=tmp_path, capture_output=True,
                          text=True, timeout=300, stdin=subprocess.DEVNULL, check=False)
    assert proc.returncode == 0, proc.stderr[-2000:]
    sim = parse_raw((tmp_path / "out.raw").read_text())[0]
    for load, ammeter in (("out_a", "va"), ("out_b", "vb"), ("out_c", "vc")):
        j = tree.loads.index(load)
        got = op.l_current[j, 1] * tree.l_mult[j]
        assert got == pytest.approx(abs(float(sim[f"i({ammeter})"][0])), rel=1e-5), load


@pytest.mark.ngspice
def test_level3_mos_card_becomes_a_card_device(ngspice: None, card_tables: Path, tmp_path: Path) -> None:
    """A MOS card of level 3 is no square-law card: it becomes an inline card device (unit W/L of the input
    device), solved through ngspice characterisation tables. Oracle: ngspice 39 running the original
    netlist, within the MOS tables' bar 1e-4."""
    import subprocess

    from biastree.sim.verify import parse_raw

    netlist = NETLISTS / "level3.spice"
    tree, found = _extracted(netlist, _annotation(tmp_path))
    assert found == []
    dev = tree.plan.devices["n3"]
    assert dev.card.startswith(".model n3 nmos (level=3.0 kp=0.00015") and (dev.w, dev.l) == (1e-5, 2e-6)
    op = solve(tree, None, output_resistance=False)
    proc = subprocess.run(["ngspice", "-b", "-r", str(tmp_path / "out.raw"), str(netlist)], cwd=tmp_path,
                          capture_output=True, text=True, timeout=300, stdin=subprocess.DEVNULL, check=False)
    assert proc.returncode == 0, proc.stderr[-2000:]
    sim = parse_raw((tmp_path / "out.raw").read_text())[0]
    j = tree.loads.index("out")
    assert op.l_current[j, 1] * tree.l_mult[j] == pytest.approx(abs(float(sim["i(vo)"][0])), rel=1e-4)


def test_remote_offsets_on_card_devices_are_reported(tmp_path: Path) -> None:
    """The plan applies floorplan offsets to simple devices only: on a card device they are said, not
    dropped silently, and the rest is audited (the line of the offset device is named)."""
    import shutil

    shutil.copy(NETLISTS / "gp_models.lib", tmp_path / "gp_models.lib")
    text = (NETLISTS / "gp_cards.spice").read_text(encoding="utf-8")
    text = text.replace("Q5 out_b np vcc QLAT area=2", "Vcc2 vcc2 0 3.28\nQ5 out_b np vcc2 QLAT area=2 dtemp=5")
    netlist = tmp_path / "remote.spice"
    netlist.write_text(text, encoding="utf-8")
    tree, found = _extracted(netlist, _annotation(tmp_path))
    assert found == [f"{netlist}:16: q5: rail offset or dtemp on a device given by its model card: the plan "
                     "cannot apply it to card devices yet, ignored (audited as a local output)"]
    assert tree.plan.floorplan is None or not tree.plan.floorplan.remote
    assert biastree.check(tree).summary()["loads"] == 3


def test_multiplicity_down_the_hierarchy_and_four_terminal_bipolars(tmp_path: Path) -> None:
    """X-instance m= multiplies every device inside; Q with a substrate node; .global nets; dummies listed."""
    netlist = tmp_path / "cells.spice"
    netlist.write_text(
        "unit-cell style (invented)\n"
        ".global VCC\n"
        ".model qn npn (is=1e-16 bf=100 vaf=80)\n"
        ".SUBCKT unit c b PARAMS: a=1\n"
        "Q0 c b 0 sub qn {a}\n"  # four terminals, area from the cell parameter
        ".ENDS\n"
        "vcc vcc 0 5\n"
        "iref vcc n 10u\n"
        "xin n n unit\n"
        "xout o n unit m=3 a=2\n"  # 3 copies of area 2: ratio 6
        "vo o 0 2\n"
        "qdummy vcc 0 0 sub qn\n",  # base on ground: a dummy
        encoding="utf-8")
    tree, notes = _extracted(netlist, _annotation(tmp_path))
    assert _tree_shape(tree) == {"n": ("simple", "npn", [("o", 6.0)])}
    assert tree.plan.loads["o"].current == pytest.approx(60e-6)
    assert notes == [(f"{netlist}:12: qdummy: its base/gate is on the fixed node 0: a dummy or biased device, "
                     "not a mirror")]


def test_annotation_names_that_match_nothing_are_errors(tmp_path: Path) -> None:
    path = _annotation(tmp_path, "defaults: {tolerance: 5%}\nloads:\n  out_wil: {tolerance: 2%}\n"
                                 "  out_nowhere: {tolerance: 2%}\ndevices:\n  qx: {beta: 50}\n")
    result = runner.invoke(app, ["extract", str(NETLISTS / "topologies.spice"), "--annotate", str(path)])
    assert result.exit_code == 2
    errors = [line for line in result.output.splitlines() if line.startswith("error:")]
    assert errors == [
        (f"error: {path}:4: loads.out_nowhere: no load node, or instance on a load node, of that name in the "
        "extracted tree"),
    ]
    _, notes = extract_text(NETLISTS / "topologies.spice", _annotation(tmp_path, "defaults: {tolerance: 5%}\n"
                                                                       "devices:\n  qx: {beta: 50}\n"))
    assert "annotation devices.qx: no mirror uses a card of that name (cards: nch, pch, qlp, qn)" in notes


def test_schematic_tool_style_pdk_netlist(tmp_path: Path) -> None:
    """The style a schematic tool writes for an open PDK: X instances of device subcircuits with
    layout parameters (ad='int(…)' is never evaluated), mult= and m=, GND, `**` comments, a .lib section."""
    notes = _annotation(tmp_path, "defaults: {tolerance: 5%, voltage: 0.9V}\ndevices:\n"  # invented stand-ins
                        "  sky130_fd_pr__nfet_01v8: {kp: 250uA/V^2, vth: 0.5V, lambda: 0.05/V}\n"
                        "  sky130_fd_pr__pfet_01v8: {kp: 50uA/V^2, vth: 0.9V, lambda: 0.05/V}\n")
    tree, found = _extracted(NETLISTS / "xschem_style.spice", notes)
    assert found == []
    assert _tree_shape(tree) == {"net1": ("simple", "nmos", [("net2", 4.0)]),
                                 "net2": ("simple", "pmos", [("ota_tail", 2.0)])}
    assert tree.plan.devices["sky130_fd_pr__pfet_01v8"].w == pytest.approx(4e-6)  # scale from the .lib section
    assert tree.plan.loads["ota_tail"].current == pytest.approx(40e-6)


def test_conditions_spread_and_matched_pairs_pass_into_the_plan(tmp_path: Path) -> None:
    notes = _annotation(tmp_path, "defaults: {tolerance: 5%}\n"
                        "conditions: {temperatures: [-40C, 27C, 125C], corners: {weak: {beta: -20%}}}\n"
                        "spread: {k_sigma: 4}\n"
                        "matched:\n  pair: {loads: [out_wil, out_w4], tolerance: 2%}\n")
    tree, _ = _extracted(NETLISTS / "topologies.spice", notes)
    plan = tree.plan
    assert [round(t - 273.15, 9) for t in plan.conditions.temperatures] == [-40.0, 27.0, 125.0]
    assert plan.conditions.corners["weak"].beta == -0.2 and plan.spread.k_sigma == 4.0
    assert plan.matched["pair"].loads == ["out_wil", "out_w4"]
    assert biastree.check(tree).matched()[0]["loads"] == ["out_wil", "out_w4"]


@pytest.mark.parametrize("source, root_kind", [
    ("i1 n 0 dc 10u", "pmos"),  # a pmos root sources its input current: the source pulls it to ground
    ("i1 0 n dc -10u", "pmos"),  # the same source written the other way round
    ("i1 vdd n 10u", "nmos"),  # an nmos root sinks it: the source pushes it in from the supply
    ("i1 n vdd -10u", "nmos"),
])
def test_reference_direction(tmp_path: Path, source: str, root_kind: str) -> None:
    """SPICE current sources: positive current flows from n+ through the source to n-."""
    netlist = tmp_path / "ref.spice"
    model = "pch pmos (level=1 kp=50u vto=-0.6)" if root_kind == "pmos" else "nch nmos (level=1 kp=100u vto=0.5)"
    rail = "vdd vdd" if root_kind == "pmos" else "0 0"
    card = model.split()[0]
    netlist.write_text(f"reference direction\n.model {model}\nvdd vdd 0 3\n{source}\n"
                       f"m1 n n {rail} {card} w=10u l=1u\nm2 o n {rail} {card} w=10u l=1u m=2\nvo o 0 1.5\n",
                       encoding="utf-8")
    tree, _ = _extracted(netlist, _annotation(tmp_path))
    assert tree.plan.reference.current == 10e-6 and tree.plan.loads["o"].current == pytest.approx(20e-6)


def test_model_library_inside_a_package_is_written_portably(tmp_path: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """An extracted plan names a model file inside an installed Python package as package:NAME/rest,
    which resolves back to the same file (so the plan works on another machine); others stay as given."""
    import importlib

    from biastree.input.cards import portable_path, resolve_path

    (tmp_path / "fakepdk" / "models").mkdir(parents=True)
    (tmp_path / "fakepdk" / "__init__.py").write_text("", encoding="utf-8")
    lib = tmp_path / "fakepdk" / "models" / "all.lib"
    lib.write_text("* empty\n", encoding="utf-8")
    monkeypatch.syspath_prepend(str(tmp_path))
    importlib.invalidate_caches()
    assert portable_path(str(lib)) == "package:fakepdk/models/all.lib"
    assert resolve_path(portable_path(str(lib)), None).resolve() == lib.resolve()
    outside = tmp_path / "elsewhere.lib"
    assert portable_path(str(outside)) == str(outside)
