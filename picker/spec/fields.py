"""Field parsers shared by the spec's sections: quantities, shares, temperature ranges.

Each parser takes what the TOML gave and returns an SI float (or a pair of
them); a bad value raises the :class:`ValueError` that pydantic turns into a
validation error, whose message says what was expected and repeats the input.
"""

from __future__ import annotations

from typing import Any

from picker import units
from picker.errors import SpecError

#: Highest temperature accepted in [yield] temperature, °C (solder reflow peaks
#: near 260 °C; common practice, no source).
MAX_TEMPERATURE = 500.0


def parse_field_quantity(text: Any, unit: str) -> float:
    """Parse a quantity, turning a SpecError into the ValueError pydantic expects."""
    try:
        return units.parse_quantity(text, unit)
    except SpecError as exc:
        raise ValueError(exc.message) from None


def parse_temperature_range(v: Any) -> tuple[float, float] | None:
    """``["-40 °C", "85 °C"]`` -> (-40.0, 85.0); ValueError otherwise."""
    if v is None:
        return None
    if not isinstance(v, list | tuple) or len(v) != 2:
        raise ValueError(
            f"expected a range of two temperatures such as ['-40 °C', '85 °C']; got {v!r}"
        )
    out = []
    for x in v:
        try:
            out.append(units.parse_quantity(x, "°C"))
        except SpecError as exc:
            raise ValueError(exc.message) from None
    if not out[0] <= out[1]:
        raise ValueError(f"expected low <= high; got {v!r}")
    if out[1] > MAX_TEMPERATURE:
        raise ValueError(
            f"expected temperatures up to {MAX_TEMPERATURE:g} °C (no tank part works beyond); "
            f"got {v!r}"
        )
    return (out[0], out[1])


def parse_share(v: Any, what: str, *, upper_open: bool = False, top: float = 1.0) -> float | None:
    """A fraction such as "99 %" inside (0, top] (or (0, top) with ``upper_open``)."""
    if v is None:
        return None
    try:
        x = units.parse_fraction(v)
    except SpecError as exc:
        raise ValueError(exc.message) from None
    ok = 0 < x < top if upper_open else 0 < x <= top
    if not ok:
        bound = f"below {top:.0%}" if upper_open else f"at most {top:.0%}"
        raise ValueError(
            f"expected {what} above 0 and {bound}; got {v!r}" + units.percent_hint(v, x)
        )
    return x


def currency_code(v: Any) -> str:
    """A currency as a three-letter code in the style of ISO 4217 ("EUR"), upper-cased.

    ISO 4217 codes are three letters A-Z (the standard's alphabetic code); the
    list itself is not checked, so a new or in-house code is accepted.
    """
    if isinstance(v, str):
        code = v.strip().upper()
        if len(code) == 3 and all("A" <= ch <= "Z" for ch in code):
            return code
    raise ValueError(f"expected a three-letter currency code such as 'EUR' (ISO 4217); got {v!r}")
