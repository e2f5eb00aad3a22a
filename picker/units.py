"""Parse and format engineering quantities ("4.7 nF", "4n7", "250 kHz", "±3 %").

This module is the only place where prefixes and unit symbols exist; everything
it returns is a float in SI base units (F, H, Hz, ohm, V, A, S, s), temperatures
in °C, temperature coefficients as a fraction per °C, and tolerances as a
positive fraction (0.05 for 5 %).

Rules
-----
* **A bare number is taken in the SI base unit that is expected** ("2.2e-6" for
  a capacitance is 2.2 µF; "470" for a resistance is 470 ohm). Exceptions, each
  because the base unit is not what anyone writes: a bare temperature is °C, a
  bare temperature coefficient is ppm/°C, and in :func:`parse_fraction` /
  :func:`parse_tolerance` a bare number is a fraction (0.03 = 3 %).
* Prefixes are case-sensitive and follow SI: f p n u µ μ m k M G (``m`` is milli,
  ``M`` is mega, so "47 M" is 47 mega). ``K`` is accepted as kilo (IEC 60062
  resistor code) and ``meg`` (any case) as mega.
* Unit symbols may be written in any case when that is unambiguous ("4.7 nf",
  "250 khz"); a single ``f`` or ``m`` after a number is always the prefix
  (femto, milli), never a unit. Symbols that belong to another dimension are an
  error, never converted ("10 uH" where a capacitance is expected).
* IEC 60062 RKM code: the prefix letter stands where the decimal point goes
  ("4n7" = 4.7 nF, "2u2" = 2.2 µF, "4K7" = 4.7 k). ``R`` as the decimal point
  ("4R7", "1R0", "R47") is accepted for resistance only: on capacitor markings
  "1R0" means 1.0 pF, so for any other dimension it is rejected as ambiguous.
  The three-digit capacitor code ("103") is not decoded: a bare "103" is 103
  in base units by the rule above.
* Temperatures: "-40 °C", "-40°C", "-40 C", "-40 degC", "-40 ℃"; kelvin
  ("233.15 K") is converted to °C (T/°C = T/K − 273.15).
* A decimal comma ("4,7 nF") is rejected with a message asking for a point.
* Anything else (NaN, infinity, empty text, booleans, other types) raises
  :class:`picker.errors.SpecError` naming ``key`` and quoting the text.

Tolerances
----------
:func:`parse_tolerance` accepts "5 %", "±5 %", "+/-5%", "0.05", "50 ppm" and the
IEC 60062 letters B 0.1 %, C 0.25 %, D 0.5 %, F 1 %, G 2 %, J 5 %, K 10 %,
M 20 %. The letters B, C, D also mean absolute ±0.1/0.25/0.5 pF on capacitors
below 10 pF; this module only knows the relative meaning. Asymmetric
tolerances (Z = +80/−20 %, "+22/-82 %") are read by
:func:`parse_tolerance_bounds`; :func:`parse_tolerance` rejects them.
"""

from __future__ import annotations

import math
import numbers
import re
from decimal import Decimal

import numpy as np

from picker.errors import SpecError

__all__ = [
    "PREFIXES",
    "format_percent",
    "format_quantity",
    "json_number",
    "parse_fraction",
    "parse_quantity",
    "parse_tolerance",
    "parse_tolerance_bounds",
]

MICRO_SIGN = "\u00b5"  # µ, used when formatting
GREEK_MU = "\u03bc"  # μ, accepted when parsing

#: SI prefixes accepted when parsing (case-sensitive), as powers of ten.
PREFIXES: dict[str, int] = {
    "a": -18,  # atto (SI Brochure, 9th edition, table 7): "1 aF", the low end of the range
    "f": -15,
    "p": -12,
    "n": -9,
    "u": -6,
    MICRO_SIGN: -6,
    GREEK_MU: -6,
    "m": -3,
    "k": 3,
    "K": 3,  # IEC 60062 resistor code writes kilo as K
    "M": 6,
    "G": 9,
}

# Prefixes used when formatting: exponent -> symbol.
_FORMAT_PREFIXES = {
    -15: "f",
    -12: "p",
    -9: "n",
    -6: MICRO_SIGN,
    -3: "m",
    0: "",
    3: "k",
    6: "M",
    9: "G",
}

# Expected unit (canonical) -> (dimension name, example, symbols, prefixes allowed).
# The first symbol is the one used when formatting.
_UNITS: dict[str, tuple[str, str, tuple[str, ...], bool]] = {
    "F": ("capacitance", "4.7 nF", ("F",), True),
    "H": ("inductance", "10 µH", ("H",), True),
    "Hz": ("frequency", "250 kHz", ("Hz",), True),
    "ohm": ("resistance", "4.7 kΩ", ("Ω", "ohm", "ohms", "\u2126", "R"), True),
    "V": ("voltage", "3.3 V", ("V",), True),
    "A": ("current", "10 mA", ("A",), True),
    "S": ("conductance", "10 mS", ("S",), True),
    "s": ("time", "10 ms", ("s",), True),
    "W": ("power", "10 mW", ("W",), True),
    "°C": ("temperature", "-40 °C", ("°C", "C", "degC", "deg C", "\u2103"), False),
    "ppm/°C": (
        "temperature coefficient",
        "-30 ppm/°C",
        ("ppm/°C", "ppm/C", "ppm/degC", "ppm/K", "ppm/\u2103"),
        False,
    ),
}

# Aliases for the ``unit`` argument itself.
_UNIT_ALIASES = {
    "Ω": "ohm",
    "\u2126": "ohm",
    "Ohm": "ohm",
    "ohms": "ohm",
    "degC": "°C",
    "C": "°C",
    "\u2103": "°C",
    "ppm/K": "ppm/°C",
    "ppm/C": "ppm/°C",
}

_UNSIGNED = r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_NUMBER = rf"[+-]?{_UNSIGNED}"
_NUMBER_RE = re.compile(rf"^\s*({_NUMBER})\s*(.*?)\s*$", re.DOTALL)
# RKM code: digits, a letter in place of the decimal point, digits, optional unit.
_RKM_RE = re.compile(
    rf"^\s*([+-]?)(\d*)([pnu{MICRO_SIGN}{GREEK_MU}mkKMGR])(\d+)\s*(.*?)\s*$", re.DOTALL
)
_MAX_TEXT = 200  # longer text is quoted truncated in messages

# Characters normalised before parsing: minus sign, various spaces, ohm sign.
_TRANSLATE = str.maketrans(
    {
        "\u2212": "-",  # minus sign
        "\u2013": "-",  # en dash used as minus
        "\u00a0": " ",  # no-break space
        "\u202f": " ",  # narrow no-break space
        "\u2009": " ",  # thin space
        "\u2126": "Ω",  # ohm sign -> Greek capital omega
    }
)


def _quote(text: object) -> str:
    s = text if isinstance(text, str) else repr(text)
    s = " ".join(s.split())
    if len(s) > _MAX_TEXT:
        s = s[:_MAX_TEXT] + "..."
    return f"'{s}'"


def _fail(message: str, key: str | None) -> SpecError:
    return SpecError(message, key=key)


def _canonical_unit(unit: str) -> str:
    u = _UNIT_ALIASES.get(unit, unit)
    if u not in _UNITS:
        raise ValueError(f"unknown unit {unit!r}; known units: {', '.join(_UNITS)}")
    return u


def _expected(unit: str) -> str:
    dim, example, symbols, _ = _UNITS[unit]
    return f"a {dim} in {symbols[0] if unit != 'ohm' else 'Ω'} (e.g. '{example}')"


def _finite_number(value: object, what: str, key: str | None) -> float | None:
    """Return a float for a real number input, ``None`` for a string, else raise."""
    if isinstance(value, str):
        return None
    if isinstance(value, bool | np.bool_):
        raise _fail(f"expected {what}, got a boolean {_quote(value)}", key)
    if isinstance(value, numbers.Real):
        try:
            x = float(value)
        except OverflowError:  # an integer of hundreds of digits (TOML allows them)
            raise _fail(f"expected {what}, got an integer too large to be a number", key) from None
        if not math.isfinite(x):
            raise _fail(f"expected {what}, got {_quote(value)} (not a finite number)", key)
        return x
    raise _fail(f"expected {what} as text or a number, got {type(value).__name__}", key)


def _split_suffix(suffix: str, unit: str) -> tuple[int, str] | None:
    """Match ``suffix`` (the text after the number) against one unit.

    Returns ``(power_of_ten, kind)`` where kind is "exact" (symbol with or
    without a prefix, exact case), "prefix" (a lone prefix letter such as "n"
    or "f", always read as a prefix) or "loose" (case-insensitive symbol), or
    ``None`` when the suffix does not belong to this unit.
    """
    _, _, symbols, prefixed = _UNITS[unit]
    if suffix in symbols:
        return 0, "exact"
    candidates: list[tuple[str, int]] = []
    if prefixed:
        if suffix.casefold().startswith("meg"):
            candidates.append((suffix[3:], 6))
        if suffix[:1] in PREFIXES:
            candidates.append((suffix[1:], PREFIXES[suffix[:1]]))
    for rest, power in candidates:
        if rest in symbols:
            return power, "exact"
    for rest, power in candidates:
        if rest == "":
            return power, "prefix"
    folded = {sym.casefold() for sym in symbols}
    for rest, power in candidates:
        if rest.casefold() in folded:
            return power, "loose"
    if suffix.casefold() in folded:
        return 0, "loose"
    return None


def _other_dimension(suffix: str, unit: str, *, exact_only: bool) -> str | None:
    """Name the dimension ``suffix`` belongs to, if it is a symbol of another unit."""
    found = None
    for other in _UNITS:
        if other == unit:
            continue
        m = _split_suffix(suffix, other)
        if m is None or m[1] == "prefix":
            continue
        if m[1] == "exact":
            return _UNITS[other][0]
        if not exact_only and found is None:
            found = _UNITS[other][0]
    return found


def _article(word: str) -> str:
    return f"an {word}" if word[0] in "aeiou" else f"a {word}"


def parse_quantity(text: str | float | int, unit: str, *, key: str | None = None) -> float:
    """Parse an engineering quantity into a float in SI units.

    Parameters
    ----------
    text:
        "4.7 nF", "4n7", "470p", "0.47 µF", "1e-9 F", "250 kHz", "-20 °C",
        "4K7", "4R7" (resistance only), or a number (taken in base units).
    unit:
        The unit expected: "F", "H", "Hz", "ohm" (or "Ω"), "V", "A", "S", "s",
        "W", "°C", "ppm/°C".
    key:
        Where the value came from, for the error message.

    Returns
    -------
    float
        The value in SI base units; °C for temperature; a fraction per °C for
        "ppm/°C" (so "30 ppm/°C" gives 3e-5; a bare number is ppm/°C).

    Raises
    ------
    SpecError
        For anything that is not a finite quantity of the expected dimension.

    Examples
    --------
    >>> parse_quantity("4n7", "F")
    4.7e-09
    >>> parse_quantity("250 kHz", "Hz")
    250000.0
    >>> parse_quantity("4K7", "ohm")
    4700.0
    """
    u = _canonical_unit(unit)
    what = _expected(u)
    x = _finite_number(text, what, key)
    if x is not None:
        return _scale(x, -6) if u == "ppm/°C" else x
    assert isinstance(text, str)
    raw = text
    s = text.translate(_TRANSLATE).strip()
    if not s:
        raise _fail(f"expected {what}, got an empty value", key)
    if "," in s:
        raise _fail(
            f"expected {what} with a decimal point, got {_quote(raw)} "
            "(commas are not accepted as decimal or thousands separators)",
            key,
        )
    if "±" in s or "+/-" in s:
        raise _fail(f"expected a single value, {what}, got a tolerance {_quote(raw)}", key)

    m = _NUMBER_RE.match(s)
    number: Decimal
    suffix: str
    rkm_power: int | None = None
    if m is not None and not _RKM_RE.match(s):
        number = Decimal(m.group(1))
        suffix = m.group(2)
    else:
        r = _RKM_RE.match(s)
        if r is None or (r.group(2) == "" and r.group(4) == ""):
            raise _fail(f"expected {what}, got {_quote(raw)} (no number found)", key)
        sign, whole, letter, frac, suffix = r.groups()
        if letter == "R":
            if u != "ohm":
                raise _fail(
                    f"expected {what}, got {_quote(raw)}: 'R' as a decimal point is read "
                    "only for resistance (on capacitor markings 1R0 means 1.0 pF); "
                    "write the value with its prefix instead",
                    key,
                )
            rkm_power = 0
        else:
            rkm_power = PREFIXES[letter]
            if not _UNITS[u][3]:
                raise _fail(f"expected {what}, got {_quote(raw)} (no prefixes here)", key)
        number = Decimal(f"{sign}{whole or '0'}.{frac}")

    if rkm_power is not None:
        # After an RKM code only the bare unit symbol may follow ("4n7F", "4K7 Ω").
        if suffix and suffix.casefold() not in {x.casefold() for x in _UNITS[u][2]}:
            raise _fail(f"expected {what}, got {_quote(raw)}", key)
        value = _dscale(number, rkm_power)
        return _finish(value, u, raw, what, key)

    if u == "°C":
        return _parse_temperature(number, suffix, raw, what, key)

    if suffix == "":
        power = 0
    else:
        matched = _split_suffix(suffix, u)
        if matched is None:
            other = _other_dimension(suffix, u, exact_only=False)
            if other is not None:
                raise _fail(f"expected {what}, got {_quote(raw)} (that is {_article(other)})", key)
            raise _fail(f"expected {what}, got {_quote(raw)} (unknown unit or prefix)", key)
        power, kind = matched
        if kind == "loose":
            # A case-insensitive match is refused when the text is exactly another unit
            # ("ms" is milliseconds, not millisiemens) or when m/M would decide the value.
            other = _other_dimension(suffix, u, exact_only=True)
            if other is not None:
                raise _fail(f"expected {what}, got {_quote(raw)} (that is {_article(other)})", key)
            if suffix[:1] in ("m", "M") and power in (-3, 6):
                raise _fail(
                    f"expected {what}, got {_quote(raw)}: ambiguous prefix; write the unit "
                    "symbol in its proper case so m (milli) and M (mega) are clear",
                    key,
                )
    if u == "ppm/°C":
        return _finish(_dscale(number, -6), u, raw, what, key)
    return _finish(_dscale(number, power), u, raw, what, key)


def _dscale(number: Decimal, power: int) -> float:
    """number·10^power from the exact decimal text, correctly rounded to a float.

    Working in decimal keeps "0.47 uF" at exactly float("4.7e-7") instead of
    0.47 / 1e6 = 4.6999999999999995e-07. Overflow gives inf (rejected later).
    """
    try:
        return float(number.scaleb(power))
    except ArithmeticError:
        return math.inf


def _scale(number: float, power: int) -> float:
    """number·10^power, correctly rounded when number has few digits."""
    # Dividing by an exact power of ten keeps "4.7" * 1e-9 from turning into
    # 4.7000000000000004e-09; 10**n is exact in binary64 for n <= 22.
    if power >= 0:
        return number * 10.0**power
    return number / 10.0 ** (-power)


def _finish(value: float, unit: str, raw: str, what: str, key: str | None) -> float:
    if not math.isfinite(value):
        raise _fail(f"expected {what}, got {_quote(raw)} (not a finite number)", key)
    if unit == "°C" and value < -273.15:
        raise _fail(f"expected {what}, got {_quote(raw)} (below absolute zero)", key)
    return float(value)


def _parse_temperature(number: Decimal, suffix: str, raw: str, what: str, key: str | None) -> float:
    symbols = _UNITS["°C"][2]
    if suffix == "" or suffix in symbols or suffix.casefold() in ("c", "degc", "deg c"):
        return _finish(_dscale(number, 0), "°C", raw, what, key)
    if suffix == "K":
        # T/°C = T/K − 273.15 (SI Brochure, 9th ed., degree Celsius), exact in decimal
        return _finish(_dscale(number - Decimal("273.15"), 0), "°C", raw, what, key)
    raise _fail(f"expected {what} (or kelvin, '233.15 K'), got {_quote(raw)}", key)


# --------------------------------------------------------------------------- fractions

_PLUS_MINUS_RE = re.compile(r"^(?:±|\+/-|\+-|-/\+|\+/−)\s*")
_FRACTION_UNITS = {"%": -2, "ppm": -6}  # powers of ten

#: IEC 60062 tolerance letters (relative meaning), as fractions.
TOLERANCE_LETTERS: dict[str, float] = {
    "B": 0.001,
    "C": 0.0025,
    "D": 0.005,
    "F": 0.01,
    "G": 0.02,
    "J": 0.05,
    "K": 0.10,
    "M": 0.20,
}
#: IEC 60062 asymmetric letter: Z = +80/−20 %, as (minus, plus).
ASYMMETRIC_LETTERS: dict[str, tuple[float, float]] = {"Z": (0.20, 0.80)}

_FRACTION_EXPECTED = "a fraction such as '3 %', '±3 %', '30 ppm' or 0.03"
_TOL_EXPECTED = (
    "a tolerance such as '5 %', '±5 %', '50 ppm', 0.05 or an IEC 60062 letter "
    f"({', '.join(TOLERANCE_LETTERS)})"
)


def _parse_magnitude(s: str, raw: str, what: str, key: str | None) -> tuple[float, bool]:
    """Parse "3 %", "30 ppm" or "0.03" (no sign handling). Returns (fraction, had_unit)."""
    m = _NUMBER_RE.match(s)
    if m is None:
        raise _fail(f"expected {what}, got {_quote(raw)}", key)
    number = Decimal(m.group(1))
    suffix = m.group(2)
    if suffix == "":
        frac = _dscale(number, 0)
        had_unit = False
    elif suffix.casefold() in _FRACTION_UNITS:
        frac = _dscale(number, _FRACTION_UNITS[suffix.casefold()])
        had_unit = True
    else:
        raise _fail(f"expected {what}, got {_quote(raw)} (unknown unit {_quote(suffix)})", key)
    if not math.isfinite(frac):
        raise _fail(f"expected {what}, got {_quote(raw)} (not a finite number)", key)
    return frac, had_unit


def _clean_fraction_text(text: str, what: str, key: str | None) -> str:
    s = text.translate(_TRANSLATE).strip()
    if not s:
        raise _fail(f"expected {what}, got an empty value", key)
    if "," in s:
        raise _fail(
            f"expected {what} with a decimal point, got {_quote(text)} "
            "(commas are not accepted as separators)",
            key,
        )
    return s


def parse_fraction(text: str | float | int, *, key: str | None = None) -> float:
    """Parse a non-negative relative amount: "3 %", "±3 %", "+/-3%", "30 ppm", 0.03.

    A bare number is a fraction (0.03 = 3 %). A leading ± (or "+/-") is allowed
    and ignored; a leading "-" is rejected because the result is a magnitude.

    Returns
    -------
    float
        The fraction, >= 0.

    Examples
    --------
    >>> parse_fraction("±3 %")
    0.03
    >>> parse_fraction("30 ppm")
    3e-05
    """
    what = _FRACTION_EXPECTED
    x = _finite_number(text, what, key)
    if x is not None:
        frac = x
        raw = repr(text)
    else:
        assert isinstance(text, str)
        raw = text
        s = _clean_fraction_text(text, what, key)
        s = _PLUS_MINUS_RE.sub("", s, count=1)
        if s.startswith("-"):
            raise _fail(f"expected {what} (a magnitude), got {_quote(raw)}", key)
        frac, _ = _parse_magnitude(s, raw, what, key)
    if frac < 0:
        raise _fail(f"expected {what} (a magnitude, >= 0), got {_quote(raw)}", key)
    return float(frac)


_ASYM_RE = re.compile(
    rf"^([+-])\s*({_UNSIGNED})\s*(%|ppm)?\s*/\s*([+-])\s*({_UNSIGNED})\s*(%|ppm)?$",
    re.IGNORECASE,
)


def parse_tolerance_bounds(
    text: str | float | int, *, key: str | None = None
) -> tuple[float, float]:
    """Parse a possibly asymmetric tolerance into ``(minus, plus)`` fractions.

    Accepts everything :func:`parse_tolerance` accepts (giving equal bounds),
    the IEC 60062 letter Z (+80/−20 %) and explicit pairs such as "+80/-20 %",
    "+22 %/-82 %" or "-20/+80 %". Both bounds are returned as positive
    magnitudes: "+80/-20 %" gives ``(0.2, 0.8)``. The lower bound must be
    below 100 % (a part cannot shrink to nothing); at least one must be > 0.

    Examples
    --------
    >>> parse_tolerance_bounds("Z")
    (0.2, 0.8)
    >>> parse_tolerance_bounds("±5 %")
    (0.05, 0.05)
    """
    what = _TOL_EXPECTED + " or an asymmetric pair such as '+80/-20 %'"
    if isinstance(text, str):
        s = _clean_fraction_text(text, what, key)
        letter = s.upper()
        if letter in ASYMMETRIC_LETTERS:
            return ASYMMETRIC_LETTERS[letter]
        m = _ASYM_RE.match(s)
        if m is not None:
            sign1, n1, u1, sign2, n2, u2 = m.groups()
            if sign1 == sign2:
                raise _fail(f"expected {what}, got {_quote(text)} (need one + and one -)", key)
            unit = (u1 or u2 or "").casefold()
            if u1 and u2 and u1.casefold() != u2.casefold():
                raise _fail(f"expected {what}, got {_quote(text)} (mixed units)", key)
            if unit == "":
                raise _fail(f"expected {what}, got {_quote(text)} (give '%' or 'ppm')", key)
            power = _FRACTION_UNITS[unit]
            a, b = _dscale(Decimal(n1), power), _dscale(Decimal(n2), power)
            plus, minus = (a, b) if sign1 == "+" else (b, a)
            if not (math.isfinite(plus) and math.isfinite(minus)):
                raise _fail(f"expected {what}, got {_quote(text)} (not finite)", key)
            if minus >= 1.0 or (plus == 0 and minus == 0) or plus >= 100:
                raise _fail(
                    f"expected {what} with the lower bound below 100 %, got {_quote(text)}", key
                )
            return (minus, plus)
    t = parse_tolerance(text, key=key)
    return (t, t)


def parse_tolerance(text: str | float | int, *, key: str | None = None) -> float:
    """Parse a symmetric tolerance into a fraction in (0, 1).

    Accepts the forms of :func:`parse_fraction` ("5 %", "±5 %", "50 ppm",
    0.05; a bare number is a fraction) and the IEC 60062 letters B 0.1 %,
    C 0.25 %, D 0.5 %, F 1 %, G 2 %, J 5 %, K 10 %, M 20 % (any case).
    Asymmetric tolerances (Z, "+80/-20 %") raise SpecError pointing to
    :func:`parse_tolerance_bounds`.

    Examples
    --------
    >>> parse_tolerance("J")
    0.05
    >>> parse_tolerance("±0.5 %")
    0.005
    """
    what = _TOL_EXPECTED
    if isinstance(text, str):
        s = text.strip()
        if s.upper() in TOLERANCE_LETTERS:
            return TOLERANCE_LETTERS[s.upper()]
        if s.upper() in ASYMMETRIC_LETTERS or _ASYM_RE.match(
            s.translate(_TRANSLATE).strip() if "," not in s else ""
        ):
            raise _fail(
                f"expected a symmetric tolerance ({what}), got the asymmetric {_quote(text)}; "
                "asymmetric tolerances are not accepted here",
                key,
            )
    try:
        t = parse_fraction(text, key=key)
    except SpecError as exc:
        raise _fail(f"expected {what}, got {_quote(text)}", key) from exc
    if not 0.0 < t < 1.0:
        raise _fail(
            f"expected {what}, greater than 0 and below 100 %, got {_quote(text)}"
            + percent_hint(text, t),
            key,
        )
    return t


def percent_hint(text: object, fraction: float) -> str:
    """A hint for a bare number that was meant in per cent ("5" for 5 %), else "".

    The rule is that a bare number is a fraction (0.05 = 5 %); a bare number
    from 1 to 100 where a fraction below 1 is expected was almost surely
    meant in per cent, so the message suggests the text with "%".
    """
    bare = (isinstance(text, numbers.Real) and not isinstance(text, bool | np.bool_)) or (
        isinstance(text, str) and re.fullmatch(rf"\s*{_NUMBER}\s*", text) is not None
    )
    if bare and 1.0 <= fraction < 100.0:
        shown = text.strip() if isinstance(text, str) else f"{text:g}"
        return f" (a bare number is a fraction, 0.05 = 5 %; did you mean '{shown} %'?)"
    return ""


# --------------------------------------------------------------------------- formatting


def format_quantity(value: float, unit: str, *, digits: int | None = None) -> str:
    """Format a value in SI units with an engineering prefix.

    Parameters
    ----------
    value:
        The value in SI base units (°C for temperature, fraction per °C for
        "ppm/°C").
    unit:
        As for :func:`parse_quantity`.
    digits:
        Significant digits (default 6); trailing zeros are dropped, so the
        text is the shortest one that equals the value to that many digits.

    Examples
    --------
    >>> format_quantity(4.7e-9, "F")
    '4.7 nF'
    >>> format_quantity(220e-6, "H")
    '220 µH'
    >>> format_quantity(1.047686e6, "Hz", digits=6)
    '1.04769 MHz'
    >>> format_quantity(0, "F")
    '0 F'
    """
    u = _canonical_unit(unit)
    d = 6 if digits is None else int(digits)
    if d < 1:
        raise ValueError(f"digits must be >= 1, got {digits}")
    symbol = "Ω" if u == "ohm" else _UNITS[u][2][0]
    x = float(value)
    if u == "ppm/°C":
        return f"{_fmt(_scale(x, 6), d)} {symbol}"
    if not math.isfinite(x) or x == 0 or not _UNITS[u][3]:
        return f"{_fmt(x, d)} {symbol}"
    rounded = float(f"{x:.{d - 1}e}")  # round first so 999.9999 -> 1000 picks the next prefix
    exp3 = 3 * math.floor(math.log10(abs(rounded)) / 3)
    exp3 = max(-15, min(9, exp3))
    mantissa = _scale(rounded, -exp3)
    return f"{_fmt(mantissa, d)} {_FORMAT_PREFIXES[exp3]}{symbol}"


def _fmt(x: float, digits: int) -> str:
    if x == 0:
        return "0"
    if not math.isfinite(x):
        return str(x)
    s = f"{x:.{digits}g}"
    if "e" in s:  # outside the prefix range: plain exponent without padding
        mant, exp = s.split("e")
        s = f"{mant}e{int(exp)}"
    return s


def format_percent(x: float, digits: int = 3) -> str:
    """Format a fraction as a percentage: 0.03 -> "3 %", 0.0025 -> "0.25 %".

    Examples
    --------
    >>> format_percent(0.0025)
    '0.25 %'
    """
    return f"{_fmt(float(x) * 100.0, digits)} %"


def json_number(x: object) -> float | None:
    """An SI value as the JSON output writes it: a float, or None (null) where it is missing or not finite.

    JSON has no NaN or infinity, so every machine-readable output passes its
    numbers through this one helper; a NumPy scalar or 0-d array becomes a float.

    Examples
    --------
    >>> json_number(np.float64(2.5e-9)), json_number(float("nan")), json_number(None)
    (2.5e-09, None, None)
    """
    if x is None:
        return None
    v = float(np.asarray(x))
    return v if math.isfinite(v) else None
