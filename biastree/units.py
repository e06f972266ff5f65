"""SI quantities: parse once at the input edge, format only in exporters.

Everything inside biastree is a plain float in SI base units (A, V, K, m,
A/V^2, 1/V, fractions for percentages).  This module is the only place that
knows about prefixes and unit symbols.

>>> parse_quantity("10uA", "A")
1e-05
>>> parse_quantity("1%", "%")
0.01
>>> format_si(9.87e-6, "A")
'9.87 µA'
"""

from __future__ import annotations

import functools
import math
import re
from decimal import Decimal, DecimalException

from biastree.errors import shown

# One table of SI prefixes.  'm' is milli (SI and SPICE agree); mega is
# written 'meg' (any case, as in SPICE).  A capital 'M' is refused: SI reads
# it as mega, SPICE (case-insensitive) as milli, so any guess is wrong for
# someone.  Stored as powers of ten so that '10uA' parses to exactly 1e-05.
PREFIXES: dict[str, int] = {
    "a": -18,
    "f": -15,
    "p": -12,
    "n": -9,
    "u": -6,
    "µ": -6,
    "μ": -6,
    "m": -3,
    "": 0,
    "k": 3,
    "meg": 6,
    "G": 9,
    "T": 12,
}

ZERO_CELSIUS = 273.15  # K

# Unit symbols a field may carry, by the field's quantity.  The first entry is
# the canonical symbol used for display.
UNIT_SYMBOLS: dict[str, tuple[str, ...]] = {
    "A": ("A",),
    "V": ("V",),
    "m": ("m",),
    "A/V^2": ("A/V^2", "A/V2", "A/V²"),
    "1/V": ("1/V", "/V", "V^-1"),
    "%": ("%",),  # a fraction; also 'ppm'
    "ohm": ("ohm", "Ohm", "Ω"),
    "1": (),  # dimensionless
    "C": ("C",),  # temperature: °C or K, stored in K
    "V/K": ("V/K", "V/C"),
    "1/K": ("1/K", "/K", "1/C", "/C"),
    "K/m": ("K/m", "C/m"),
    "K": ("K",),  # a temperature difference
    "V/m": ("V/m",),
    "eV": ("eV",),
    "V*m": (),  # matching coefficient A_VT, e.g. 5mV*um
    "%*m": (),  # matching coefficient A_beta or A_IS, e.g. 1%*um
    "m^2": (),  # area, e.g. 4um^2
}

_NUMBER = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")


class UnitError(ValueError):
    """A quantity could not be read, or carries the wrong unit."""


def _split(text: str) -> tuple[str, str]:
    match = _NUMBER.match(text)
    if not match:
        if text.strip().lower().lstrip("+-") in ("nan", "inf", "infinity", ".nan", ".inf"):
            raise UnitError(f"'{shown(text)}' is not a finite number")
        raise UnitError(f"'{shown(text)}' is not a number")
    return match.group(1), match.group(2)


def _plain_fraction(number: float, text: str) -> float:
    """A percentage field given without '%' is a fraction; above 1 it is almost
    certainly a slip (``tolerance: 5`` meant 5 %, not 500 %)."""
    if abs(number) > 1:
        raise UnitError(f"'{shown(text)}' — did you mean {shown(text)}%? (a plain number here is a fraction: 0.05 = 5%)")
    return number


def _scaled(number: str, power: int) -> float:
    # Shift the decimal exponent in text so the result is correctly rounded.
    if "e" not in number.lower():
        return float(f"{number}e{power}")
    try:
        return float(Decimal(number).scaleb(power))
    except (DecimalException, OverflowError):  # an exponent beyond any float
        return math.inf


def _prefix_value(prefix: str, text: str, unit: str) -> int:
    if prefix in PREFIXES:
        return PREFIXES[prefix]
    if prefix.lower() == "meg":
        return 6
    if prefix == "M":
        number = _NUMBER.match(text)
        n = number.group(1) if number else "1"
        rest = text[len(n):].strip()[1:] if number else ""
        raise UnitError(
            f"'{shown(text)}': 'M' is mega in SI but milli in SPICE; write {n}m{rest} for milli "
            f"or {n}meg{rest} for mega")
    if prefix == "K" and unit not in ("C", "K"):
        raise UnitError(f"'{shown(text)}': the kilo prefix is a small 'k' (write it like 2k{unit if unit != '1' else ''})")
    expected = f"a value in {unit}" if unit != "1" else "a plain number"
    raise UnitError(f"'{shown(text)}' is not {expected} (unknown unit or prefix '{shown(prefix)}')")


def parse_quantity(value: object, unit: str) -> float:
    """Read ``value`` (number or string such as ``'10uA'``) as a float in SI units.

    ``unit`` names the quantity the field holds (a key of ``UNIT_SYMBOLS``).
    Plain numbers are taken as SI already (a percentage field takes a fraction).

    >>> parse_quantity("2.5meg", "ohm")
    2500000.0
    >>> parse_quantity(1e-17, "A")
    1e-17
    """
    if isinstance(value, bool):
        raise UnitError(f"'{value}' is a boolean, not a quantity")
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:
            raise UnitError(f"'{shown(value)}' is too large for a number") from None
        number = _finite(number, str(value))
        if unit == "C":
            return _temperature(str(value), "", str(value))
        if unit == "%":
            return _plain_fraction(number, str(value))
        return number
    if not isinstance(value, str):
        raise UnitError(f"expected a quantity, got {type(value).__name__}")
    return _parse_text(value, unit)


@functools.lru_cache(maxsize=4096)
def _parse_text(value: str, unit: str) -> float:
    # Cached: large plans repeat the same few strings ('10%', '1.5V') many times.
    text = value.strip()
    number, suffix = _split(text)
    if unit == "%":
        if suffix == "%":
            return _finite(_scaled(number, -2), text)
        if suffix == "ppm":
            return _finite(_scaled(number, -6), text)
        return _plain_fraction(_finite(_scaled(number, _prefix_value(suffix, text, "%")), text), text)
    if unit == "C":
        return _temperature(number, suffix, text)
    if unit in ("V*m", "%*m"):
        return _finite(_scaled(number, _product(suffix, text, unit)), text)
    if unit == "m^2":
        return _finite(_scaled(number, _area(suffix, text)), text)
    if unit in _RATIOS:
        return _finite(_scaled(number, _ratio(suffix, text, unit)), text)
    symbols = UNIT_SYMBOLS[unit]
    for symbol in sorted(symbols, key=len, reverse=True):
        if suffix.endswith(symbol):
            prefix = suffix[: -len(symbol)].strip()
            return _finite(_scaled(number, _prefix_value(prefix, text, unit)), text)
    for other, other_symbols in UNIT_SYMBOLS.items():
        if other != unit and any(suffix.endswith(s) and s for s in other_symbols):
            if other in ("m",) and suffix in PREFIXES:
                break  # '1m' in a current field is 1 mA, not a length
            want = symbols[0] if symbols else "no unit"
            raise UnitError(f"'{shown(text)}' has unit {other}, expected {want}")
    return _finite(_scaled(number, _prefix_value(suffix, text, unit)), text)


def _split_product(suffix: str) -> tuple[str, str] | None:
    for sep in ("*", "·", "."):
        if sep in suffix:
            left, _, right = suffix.partition(sep)
            return left.strip(), right.strip()
    return None


def _product(suffix: str, text: str, unit: str) -> int:
    """Power of ten of a matching coefficient such as '5mV*um' (V·m) or '1%*um' (fraction·m)."""
    if suffix == "":
        return 0
    parts = _split_product(suffix)
    first = "V" if unit == "V*m" else "%"
    if parts is None or not parts[0].endswith(first) or not parts[1].endswith("m"):
        like = "5mV*um" if unit == "V*m" else "1%*um"
        raise UnitError(f"'{shown(text)}' is not a matching coefficient (write it like {like})")
    left = parts[0][: -len(first)]
    power = -2 if first == "%" else 0
    return power + _prefix_value(left, text, unit) + _prefix_value(parts[1][:-1], text, unit)


# units written as numerator/denominator, each part with its own prefix
_RATIOS = {"K/m": ("K", "m"), "V/m": ("V", "m"), "1/K": ("", "K")}
_FRACTIONS = {"ppm": -6, "%": -2, "1": 0, "": 0}


def _ratio(suffix: str, text: str, unit: str) -> int:
    """Power of ten of '2K/mm', '1mV/mm', '50ppm/K' (prefixes on both sides)."""
    if suffix == "":
        return 0
    num_unit, den_unit = _RATIOS[unit]
    num, sep, den = suffix.partition("/")
    if not sep or not den.endswith(den_unit):
        raise UnitError(f"'{shown(text)}' is not a value in {unit}")
    power = -_prefix_value(den[: -len(den_unit)], text, unit)
    if num_unit == "":
        if num not in _FRACTIONS:
            raise UnitError(f"'{shown(text)}' is not a value in {unit} (use e.g. 50ppm/K or 0.005/K)")
        return power + _FRACTIONS[num]
    if not num.endswith(num_unit):
        raise UnitError(f"'{shown(text)}' is not a value in {unit}")
    return power + _prefix_value(num[: -len(num_unit)], text, unit)


def _area(suffix: str, text: str) -> int:
    """Power of ten of an area such as '4um^2' (the prefix is squared)."""
    if suffix == "":
        return 0
    for tail in ("m^2", "m2", "m²"):
        if suffix.endswith(tail):
            return 2 * _prefix_value(suffix[: -len(tail)], text, "m^2")
    raise UnitError(f"'{shown(text)}' is not an area (write it like 4um^2)")


def _temperature(number_text: str, suffix: str, text: str) -> float:
    number = _finite(float(number_text), text)
    if suffix in ("", "C", "°C", "degC"):
        kelvin = number + ZERO_CELSIUS
    elif suffix == "K":
        kelvin = number
    else:
        raise UnitError(f"'{shown(text)}' is not a temperature (use 27C or 300K)")
    if kelvin <= 0:
        raise UnitError(f"'{shown(text)}' is at or below absolute zero")
    return kelvin


TINY = 1e-60  # below any physical value a plan holds; near it, divisions overflow


def _finite(number: float, text: str) -> float:
    if not math.isfinite(number):
        raise UnitError(f"'{shown(text)}' is not a finite number")
    if number != 0 and abs(number) < TINY:
        raise UnitError(f"'{shown(text)}' is too small to compute with (nonzero values must exceed {TINY:g})")
    return number


_DISPLAY_PREFIXES = ("a", "f", "p", "n", "µ", "m", "", "k", "M", "G", "T")  # 1e-18 … 1e12


def format_si(value: float, unit: str = "", digits: int = 3) -> str:
    """Engineering notation with an SI prefix, for display only.

    >>> format_si(4.0e-5, "A")
    '40 µA'
    >>> format_si(-0.0123, "V")
    '-12.3 mV'
    """
    if value is None or not math.isfinite(value):
        return f"{value} {unit}".strip()
    if value == 0:
        return f"0 {unit}".strip()
    group = min(4, max(-6, math.floor(math.log10(abs(value)) / 3)))
    text = f"{value / 1000.0**group:.{digits}g}"
    if group < 4 and abs(float(text)) >= 1000:  # rounding carried over to the next prefix
        group += 1
        text = f"{value / 1000.0**group:.{digits}g}"
    prefix = _DISPLAY_PREFIXES[group + 6]
    return f"{text} {prefix}{unit}" if unit or prefix else text


def format_si_list(values: list[float], unit: str = "", digits: int = 3) -> list[str]:
    """``[format_si(v, unit, digits) for v in values]``, the same arithmetic
    inlined (and repeated values formatted once), for whole table columns.

    >>> format_si_list([4e-5, 0.0, 999.96e-6, 4e-5], "A")
    ['40 µA', '0 A', '1 mA', '40 µA']
    """
    log10, floor, isfinite = math.log10, math.floor, math.isfinite
    prefixes = _DISPLAY_PREFIXES
    spec = f".{digits}g"
    seen: dict[float, str] = {}
    out = []
    for value in values:
        text = seen.get(value)
        if text is None:
            if not isfinite(value) or value == 0:
                text = format_si(value, unit, digits)
            else:
                group = min(4, max(-6, floor(log10(abs(value)) / 3)))
                number = format(value / 1000.0**group, spec)
                if group < 4 and abs(float(number)) >= 1000:
                    group += 1
                    number = format(value / 1000.0**group, spec)
                prefix = prefixes[group + 6]
                text = f"{number} {prefix}{unit}" if unit or prefix else number
            if len(seen) < 100_000:
                seen[value] = text
        out.append(text)
    return out


def signed_percent(fraction: float, decimals: int = 2) -> str:
    """A fraction as a signed percentage with fixed decimals: ``-0.0198 -> '-1.98%'``."""
    return f"{fraction * 100:+.{decimals}f}%"


def format_percent(fraction: float, digits: int = 3) -> str:
    """A fraction as a percentage with sign: ``-0.0198 -> '-1.98 %'``."""
    return f"{fraction * 100:+.{digits}g} %"


def kelvin_to_celsius(kelvin: float) -> float:
    return kelvin - ZERO_CELSIUS
