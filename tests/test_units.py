"""Unit parsing and display (SI prefixes; SI 2019 constants)."""

from __future__ import annotations

import pytest

from biastree.units import UnitError, format_si, parse_quantity


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("10uA", "A", 1e-05),
        ("10 µA", "A", 1e-05),
        ("3.3V", "V", 3.3),
        ("1e-17A", "A", 1e-17),
        ("1e-4", "A", 1e-4),  # YAML 1.1 leaves this a string: it must still parse
        (2e-6, "A", 2e-6),
        ("5%", "%", 0.05),
        ("500ppm", "%", 5e-4),
        ("0.05", "%", 0.05),
        ("27C", "C", 300.15),
        ("300K", "C", 300.0),
        (27, "C", 300.15),
        ("2um", "m", 2e-6),
        ("200uA/V^2", "A/V^2", 2e-4),
        ("0.05/V", "1/V", 0.05),
        ("1.5meg", "ohm", 1.5e6),
        ("1MEGV", "V", 1e6),  # SPICE's spelling of mega, any case
        ("1Megohm", "ohm", 1e6),
        ("20mA", "A", 0.02),  # 'm' is milli in SI and in SPICE alike
        ("2k", "ohm", 2000.0),
        ("1m", "A", 1e-3),
        ("1", "%", 0.01 * 100),  # a plain 1 is 100 %: the largest plain fraction
        ("-0.2", "%", -0.2),
        ("1e400", "A", None),
    ],
)
def test_parse(text: object, unit: str, expected: float | None) -> None:
    if expected is None:  # beyond any float: refused, never inf
        with pytest.raises(UnitError, match="not a finite number"):
            parse_quantity(text, unit)
        return
    assert parse_quantity(text, unit) == pytest.approx(expected, rel=1e-15)


def test_prefix_parsing_is_exact() -> None:
    # '10uA' must be the float 1e-05 itself, not 10 * 1e-6 = 9.999999999999999e-06
    assert parse_quantity("10uA", "A") == 1e-05


@pytest.mark.parametrize(
    ("text", "unit", "message"),
    [
        ("10V", "A", "has unit V, expected A"),
        ("10mA", "V", "has unit A, expected V"),
        ("abc", "A", "is not a number"),
        ("10uF", "A", "unknown unit or prefix"),
        ("-300C", "C", "below absolute zero"),
        ("20F", "C", "not a temperature"),
        (True, "A", "boolean"),
        # 'M' is mega in SI and milli in SPICE: refused with both spellings offered
        ("20MA", "A", r"'M' is mega in SI but milli in SPICE; write 20mA for milli or 20megA for mega"),
        ("1MV", "V", "write 1mV for milli or 1megV for mega"),
        ("2KA", "A", "the kilo prefix is a small 'k'"),
        # a percentage field: a plain number above 1 is a slip
        ("5", "%", r"'5' — did you mean 5%\?"),
        (5, "%", r"'5' — did you mean 5%\?"),
        ("nan", "V", "not a finite number"),
        (float("inf"), "V", "not a finite number"),
        (10**400, "V", "too large for a number"),
        ("1e99999999999999999999V", "V", "not a finite number"),
        ("1e-320A", "A", "too small to compute with"),
        (1e-320, "A", "too small to compute with"),
        ("x" * 1000, "A", r"… \(1000 characters\)"),
    ],
)
def test_parse_errors(text: object, unit: str, message: str) -> None:
    with pytest.raises(UnitError, match=message):
        parse_quantity(text, unit)


def test_format_si() -> None:
    assert format_si(9.87e-6, "A") == "9.87 µA"
    assert format_si(-0.0123, "V") == "-12.3 mV"
    assert format_si(999.96e-6, "A") == "1 mA"  # rounding carries to the next prefix
    assert format_si(0.0, "A") == "0 A"


def test_messages_quote_a_short_printable_prefix() -> None:
    with pytest.raises(UnitError) as info:
        parse_quantity("1\x00" + "9" * 500, "A")
    assert len(str(info.value)) < 250 and "\\x00" in str(info.value)


def test_temperature_needs_its_unit_in_a_plan() -> None:
    # the plan rule (README "Units"): 27C or 300K; a plain number is refused, never guessed
    from pydantic import TypeAdapter, ValidationError

    from biastree.input.model import Temperature

    adapter = TypeAdapter(Temperature)
    assert adapter.validate_python("27C") == pytest.approx(300.15)
    assert adapter.validate_python("300K") == 300.0
    for plain in ("27", 27, "0777", -500, 300.0):
        with pytest.raises(ValidationError, match="needs a unit"):
            adapter.validate_python(plain)
