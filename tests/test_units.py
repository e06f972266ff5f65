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
        ("2k", "ohm", 2000.0),
        ("1m", "A", 1e-3),
    ],
)
def test_parse(text: object, unit: str, expected: float) -> None:
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
