"""Where picker's lumped model holds, and how big a search may get (core, pure).

Rules (README, "Limits"):

* **Frequencies** outside 1 mHz .. 100 GHz are refused as input: no tank of
  lumped inductors and capacitors works there, and the numbers would only
  overflow. Between :data:`LUMPED_MAX_HZ` (300 MHz) and 100 GHz picker still
  computes, but every result carries a warning: above a few hundred MHz the
  parts' self-resonance, lead and board inductance and the layout's
  capacitance are no longer small against the tank's own L and C, so the
  lumped formula is not to be trusted (common practice, no source; the figure
  is a round number at which ordinary SMD parts' self-resonance, from a few
  hundred MHz to a few GHz, comes within a decade of the tank frequency).
* **Part values** outside 1 aF .. 10 F (capacitors) and 1 pH .. 100 H
  (inductors) are refused for the same reason: no tank part exists there, and
  a value beyond them is a unit typed wrongly. The upper ends also catch the
  three-digit capacitor code, which picker does not decode: a bare "103"
  would be 103 F under the bare-number rule, and is refused with a hint.
* **Search size**: :func:`search_cost` says, before a search runs, how many
  outer combinations it visits; above :data:`MAX_OUTER` it is refused with
  advice on how to narrow it, instead of running for hours.
"""

from __future__ import annotations

import math
import re

from picker.units import format_quantity

#: Frequencies accepted as input, Hz.
F_MIN_HZ = 1e-3
F_MAX_HZ = 1e11
#: Narrowest frequency window accepted, relative (max / min - 1): 1 ppm. Below
#: it no part tolerance or frequency counter gives a meaningful answer, and a
#: window of a few ulp breaks the arithmetic (common practice, no source).
MIN_WINDOW = 1e-6
#: Above this the lumped model gets a warning, Hz (common practice, no source).
LUMPED_MAX_HZ = 300e6
#: Part values accepted as input, per SI unit.
VALUE_RANGE = {"F": (1e-18, 10.0), "H": (1e-12, 100.0)}
#: Feedback fractions beta = C1/C2 accepted: the amplifier needs a gain of at
#: least 1/beta, and no single stage gives 1000 at the tank (common practice, no source).
BETA_RANGE = (1e-3, 1e3)
#: Outer combinations a search may visit (the Clapp benchmark space visits
#: about 1e8 in 1.5 s, so this is about a minute on the 2-core benchmark machine).
MAX_OUTER = 4_000_000_000


def frequency_problem(f: float) -> str | None:
    """Why ``f`` (Hz) is not a frequency picker accepts, or None."""
    if not (math.isfinite(f) and F_MIN_HZ <= f <= F_MAX_HZ):
        return (
            f"expected a frequency between {format_quantity(F_MIN_HZ, 'Hz')} and "
            f"{format_quantity(F_MAX_HZ, 'Hz')} (a tank of lumped parts)"
        )
    return None


def value_problem(x: float, unit: str, text: object = None) -> str | None:
    """Why ``x`` (F or H) is not a part value picker accepts, or None.

    ``text`` is what was written; a bare whole number of three digits gets a
    note that the three-digit capacitor code is not decoded.
    """
    if unit not in VALUE_RANGE:
        return None
    lo, hi = VALUE_RANGE[unit]
    if not (math.isfinite(x) and lo <= x <= hi):
        why = (
            f"expected a value between {format_quantity(lo, unit)} and {format_quantity(hi, unit)}"
        )
        if isinstance(text, int | str) and re.fullmatch(r"\s*\d{3}\s*", str(text)):
            why += (
                " (a bare number is in base units; the three-digit code is not read: "
                "write '10 nF' for 103)"
            )
        return why
    return None


def lumped_warnings(f_max: float) -> list[str]:
    """Warnings about the lumped model for a window reaching up to ``f_max`` (Hz)."""
    if f_max <= LUMPED_MAX_HZ:
        return []
    return [
        f"frequency: above {format_quantity(LUMPED_MAX_HZ, 'Hz')} the lumped model is not "
        "trustworthy (parts' self-resonance, lead and board inductance and layout capacitance "
        "dominate); treat these values as a starting point for an RF layout simulation"
    ]
