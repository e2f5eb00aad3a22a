"""IEC 60063 preferred-number series (E3 ... E192) as numpy arrays.

The tables live in ``series_data/`` (one decade of mantissas per file, typed
from IEC 60063:2015 for E3..E24 and generated for E48..E192, see
``series_data/README.md``). They are read on first use and cached. In an
installed wheel the directory is ``picker/series_data`` (found through
``importlib.resources``); in a source checkout it is the top-level
``series_data/``.

Values are built from integer hundredths (4.7 -> 470) so that every value this
module returns is the float nearest to its decimal text: ``expand("E24", ...)``
contains exactly ``4.7e-09``, never ``4.700000000000001e-09``.

Only E3 ⊂ E6 ⊂ E12 ⊂ E24 and E48 ⊂ E96 ⊂ E192 nest; the E24 values are not
members of E48 (IEC 60063:2015).
"""

from __future__ import annotations

import csv
import functools
import io
import math
from decimal import Decimal, InvalidOperation
from importlib import resources
from importlib.resources.abc import Traversable
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from picker.errors import SpecError

__all__ = [
    "SERIES_NAMES",
    "default_tolerance",
    "denser",
    "expand",
    "is_member",
    "nearest",
    "neighbours",
    "series_values",
]

#: The series picker knows, coarsest first.
SERIES_NAMES: tuple[str, ...] = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")

_MATCH_RTOL = 1e-9  # relative slack on range ends, so "100 pF" includes 100 pF
_MAX_DECADES = 40  # a range wider than this is a spec mistake, not a design


def data_dir() -> Traversable | Path:
    """The series_data directory: package data in a wheel, top level in a checkout."""
    packaged = resources.files("picker") / "series_data"
    if packaged.is_dir():
        return packaged
    return Path(__file__).resolve().parents[2] / "series_data"


def _canonical(name: object, key: str | None = None) -> str:
    if isinstance(name, str):
        upper = name.strip().upper()
        if upper in SERIES_NAMES:
            return upper
    raise SpecError(
        f"expected a series name, one of {', '.join(SERIES_NAMES)}, got {name!r}", key=key
    )


def _read_text(name: str) -> str:
    return (data_dir() / name).read_text(encoding="utf-8")


@functools.cache
def _hundredths(name: str) -> np.ndarray:
    """One decade of ``name`` as integer hundredths (1.0 -> 100, 9.20 -> 920), read-only."""
    lines = [
        line.strip()
        for line in _read_text(f"{name}.csv").splitlines()
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not lines or lines[0] != "mantissa":
        raise RuntimeError(f"series_data/{name}.csv: missing 'mantissa' header")
    out = []
    for line in lines[1:]:
        try:
            d = Decimal(line)
        except InvalidOperation as exc:
            raise RuntimeError(f"series_data/{name}.csv: bad mantissa {line!r}") from exc
        h = d * 100
        if h != h.to_integral_value() or not 100 <= h < 1000:
            raise RuntimeError(f"series_data/{name}.csv: mantissa {line!r} out of [1, 10)")
        out.append(int(h))
    arr = np.array(sorted(out), dtype=np.int64)
    if np.any(np.diff(arr) == 0):
        raise RuntimeError(f"series_data/{name}.csv: repeated mantissa")
    arr.setflags(write=False)
    return arr


@functools.cache
def _tolerances() -> dict[str, float]:
    rows = [line for line in _read_text("tolerances.csv").splitlines() if not line.startswith("#")]
    reader = csv.DictReader(io.StringIO("\n".join(rows)))
    return {row["series"]: float(row["tolerance"]) for row in reader}


def _scaled(hundredths: np.ndarray, power: int) -> np.ndarray:
    """hundredths·10^power as the floats nearest to the decimal values.

    Both operands are exact in binary64 when |power| <= 22 (10^22 = 2^22·5^22
    and 5^22 < 2^53), so one IEEE multiplication or division rounds correctly.
    Outside that range fall back to decimal text.
    """
    h = np.asarray(hundredths, dtype=np.float64)
    if 0 <= power <= 22:
        return h * 10.0**power
    if -22 <= power < 0:
        return h / 10.0 ** (-power)
    return np.array([float(f"{int(x)}e{power}") for x in hundredths], dtype=np.float64)


def series_values(name: str) -> np.ndarray:
    """One decade of mantissas, sorted, in [1, 10).

    Parameters
    ----------
    name:
        Series name, any case ("E24", "e24").

    Returns
    -------
    numpy.ndarray
        Shape (N,) float array for series EN.

    Examples
    --------
    >>> series_values("E6").tolist()
    [1.0, 1.5, 2.2, 3.3, 4.7, 6.8]
    """
    return _scaled(_hundredths(_canonical(name)), -2)


def _positive(value: float, what: str, key: str | None) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError) as exc:
        raise SpecError(f"expected {what} as a number, got {value!r}", key=key) from exc
    if not math.isfinite(x) or x <= 0:
        raise SpecError(f"expected {what} > 0 and finite, got {value!r}", key=key)
    return x


def expand(name: str, lo: float, hi: float, *, key: str | None = None) -> np.ndarray:
    """Every value of series ``name`` between ``lo`` and ``hi`` (inclusive), in SI units.

    The ends are compared with a relative slack of 1e-9 so that a range given
    as "100 pF" includes 100 pF whatever rounding the parser did.

    Parameters
    ----------
    name:
        Series name.
    lo, hi:
        Range ends, same unit as the result (e.g. F), 0 < lo <= hi.
    key:
        Spec key for error messages.

    Returns
    -------
    numpy.ndarray
        Shape (n,) float array, sorted ascending, unique; may be empty.

    Examples
    --------
    >>> expand("E6", 1e-9, 10e-9).tolist()
    [1e-09, 1.5e-09, 2.2e-09, 3.3e-09, 4.7e-09, 6.8e-09, 1e-08]
    """
    table = _hundredths(_canonical(name, key))
    lo = _positive(lo, "a range minimum", key)
    hi = _positive(hi, "a range maximum", key)
    if lo > hi * (1 + _MATCH_RTOL):
        raise SpecError(f"expected range minimum <= maximum, got {lo!r} > {hi!r}", key=key)
    k_lo = math.floor(math.log10(lo)) - 1
    k_hi = math.floor(math.log10(hi)) + 1
    if k_hi - k_lo > _MAX_DECADES:
        raise SpecError(
            f"expected a range of at most {_MAX_DECADES} decades, got {lo!r} .. {hi!r}", key=key
        )
    parts = [_scaled(table, k - 2) for k in range(k_lo, k_hi + 1)]
    values = np.concatenate(parts)
    keep = (values >= lo * (1 - _MATCH_RTOL)) & (values <= hi * (1 + _MATCH_RTOL))
    return np.unique(values[keep])


def is_member(name: str, value: ArrayLike, rtol: float = 1e-6) -> bool | np.ndarray:
    """Whether ``value`` is a value of series ``name`` (times a power of ten).

    Parameters
    ----------
    name:
        Series name.
    value:
        Scalar or array of values (any unit); non-positive or non-finite
        values are never members.
    rtol:
        Relative tolerance of the comparison.

    Returns
    -------
    bool or numpy.ndarray
        A bool for a scalar input, else a bool array of the input's shape.

    Examples
    --------
    >>> is_member("E12", 4.7e-9), is_member("E12", 5.1e-9)
    (True, False)
    """
    table = _hundredths(_canonical(name)) / 100.0
    # 10.0 covers a mantissa that lands just below 10 through rounding of log10.
    candidates = np.append(table, 10.0)
    v = np.asarray(value, dtype=np.float64)
    ok = np.isfinite(v) & (v > 0)
    safe = np.where(ok, v, 1.0)
    mant = safe / 10.0 ** np.floor(np.log10(safe))
    hit = np.any(np.abs(mant[..., None] - candidates) <= rtol * candidates, axis=-1) & ok
    return bool(hit) if hit.ndim == 0 else hit


def nearest(name: str, value: float) -> float:
    """The series value nearest to ``value`` in log distance (ties go to the lower one).

    Examples
    --------
    >>> nearest("E12", 5.0e-9)
    4.7e-09
    >>> nearest("E12", 9.5e3)
    10000.0
    """
    x = _positive(value, "a value", None)
    table = _hundredths(_canonical(name))
    below, above = _bracket(table, x)
    # Log distance: compare x/below with above/x.
    return below if math.log(x / below) <= math.log(above / x) else above


def _bracket(table: np.ndarray, x: float) -> tuple[float, float]:
    """Largest series value <= x and smallest >= x."""
    k = math.floor(math.log10(x))
    values = np.concatenate([_scaled(table, j - 2) for j in (k - 1, k, k + 1)])
    i = int(np.searchsorted(values, x, side="right"))
    below = float(values[i - 1])
    j = int(np.searchsorted(values, x, side="left"))
    above = float(values[j])
    return below, above


def neighbours(name: str, value: float) -> tuple[float, float]:
    """The series values just below and just above ``value`` (both strictly).

    A value that is itself a member (within 1e-9 relative) is excluded, so
    ``neighbours("E12", 4.7e-9)`` is ``(3.9e-09, 5.6e-09)``.

    Returns
    -------
    tuple of float
        ``(below, above)``.

    Examples
    --------
    >>> neighbours("E24", 5.0e-9)
    (4.7e-09, 5.1e-09)
    """
    x = _positive(value, "a value", None)
    table = _hundredths(_canonical(name))
    k = math.floor(math.log10(x))
    values = np.concatenate([_scaled(table, j - 2) for j in (k - 1, k, k + 1, k + 2)])
    below = values[values < x * (1 - _MATCH_RTOL)]
    above = values[values > x * (1 + _MATCH_RTOL)]
    return float(below[-1]), float(above[0])


def default_tolerance(name: str) -> float:
    """Tolerance customarily paired with a series, as a fraction.

    The pairing (E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5 %) is a
    convention, not part of IEC 60063:2015; E3 = 20 % is common practice, no
    source. See ``series_data/tolerances.csv``.

    Examples
    --------
    >>> default_tolerance("e24")
    0.05
    """
    return _tolerances()[_canonical(name)]


def denser(name: str) -> str | None:
    """The next denser series (E12 -> E24, ..., E192 -> None).

    E24 -> E48 is denser but not a superset: E48 does not contain the E24 values.

    Examples
    --------
    >>> denser("E12"), denser("E192")
    ('E24', None)
    """
    i = SERIES_NAMES.index(_canonical(name))
    return SERIES_NAMES[i + 1] if i + 1 < len(SERIES_NAMES) else None


def canonical_name(name: object, key: str | None = None) -> str:
    """The series name in its standard spelling ("e24" -> "E24"); SpecError if unknown."""
    return _canonical(name, key)
