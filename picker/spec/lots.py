"""Measured lots: read a CSV of measured part values and check it is plausible.

A lot file is what incoming inspection gives: one measured value per row. The
format (our own):

* lines starting with ``#`` and blank lines are ignored;
* the first other row is a header naming the columns; the measured values are
  in the column called ``value`` (any case). Other columns (a serial number,
  a note) are ignored. A file with a single column may leave the header out;
* each value is a quantity as picker reads it everywhere ("4.71 nF", "4n71",
  "4.71e-9"; a bare number is in the SI base unit, see :mod:`picker.units`).

The result is the lot's relative deviations from the nominal value,
``x/nominal - 1``, which :func:`picker.parts.distributions.deviation` resamples with
``kind="empirical"``.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from picker import units
from picker.errors import SpecError
from picker.files import csv_rows, read_text

#: Fewest measured parts accepted as a lot. Below about 20 the empirical
#: quantiles say little about the tails (common practice, no source).
MIN_LOT_SIZE = 20


def lot_deviations(
    values: ArrayLike, nominal: float, tol: float, *, unit: str = "F", file: str | None = None
) -> np.ndarray:
    """Relative deviations of a measured lot, after a plausibility check.

    Parameters
    ----------
    values : array_like, shape (n,)
        Measured values in SI units.
    nominal : float
        The nominal (marked) value of the part, SI units.
    tol : float
        The part's relative tolerance; the lot's median must lie within it.
    unit : str
        "F" or "H", for the message.
    file : str, optional
        Named in error messages.

    Returns
    -------
    numpy.ndarray, shape (n,)
        ``values / nominal - 1`` in the input order.

    Raises
    ------
    SpecError
        Fewer than ``MIN_LOT_SIZE`` values, a value that is not positive, or a
        median outside ``nominal·(1 ± tol)`` (a lot of another value, or a
        value typed in the wrong unit).
    """
    x = np.asarray(values, dtype=float).ravel()
    if not nominal > 0:
        raise SpecError(
            f"expected a positive nominal value for the lot; got {nominal!r}", file=file
        )
    if x.size < MIN_LOT_SIZE:
        raise SpecError(
            f"expected at least {MIN_LOT_SIZE} measured values in the lot; got {x.size}", file=file
        )
    bad = np.flatnonzero(~(x > 0))
    if bad.size:
        raise SpecError(
            f"expected positive measured values; value number {bad[0] + 1} is {x[bad[0]]!r}",
            file=file,
        )
    med = float(np.median(x))
    rel = med / nominal - 1.0
    if abs(rel) > tol:
        raise SpecError(
            f"lot median {units.format_quantity(med, unit)} lies "
            f"{rel:+.1%} from the nominal; expected it within the part's tolerance ±{tol:.3g}"
            " (is this a lot of another value?)",
            file=file,
        )
    return x / nominal - 1.0


def _rows(text: str, file: str = "<text>") -> Iterator[tuple[int, list[str]]]:
    """(record number, stripped cells) of each CSV record that is not blank or a comment."""
    for lineno, row in enumerate(csv_rows(text, file=file), start=1):
        if not row or not "".join(row).strip() or row[0].lstrip().startswith("#"):
            continue
        yield lineno, [c.strip() for c in row]


def read_lot_csv(path: str | Path, unit: str) -> np.ndarray:
    """Measured values of a lot file in SI units, file order.

    Parameters
    ----------
    path : str or pathlib.Path
        The CSV file (format in the module docstring).
    unit : str
        The SI unit expected ("F" or "H").

    Returns
    -------
    numpy.ndarray, shape (n,)

    Raises
    ------
    SpecError
        Unreadable file, no ``value`` column, or a cell that is not a quantity
        of the expected dimension; the message names the file, row and column.
    """
    name = str(path)
    unreadable = "cannot read the lot file ({strerror})"
    text = read_text(
        path,
        what="a lot file",
        encoding="utf-8-sig",
        missing=unreadable,
        directory=unreadable,
        unreadable=unreadable,
        undecodable="expected a UTF-8 text CSV file",
    )
    rows = list(_rows(text, name))
    if not rows:
        raise SpecError("expected a CSV with a 'value' column; the file is empty", file=name)
    lineno, first = rows[0]
    header = [c.lower() for c in first]
    if "value" in header:
        col, body = header.index("value"), rows[1:]
    elif len(first) == 1:
        col, body = 0, rows  # one column, no header
    else:
        raise SpecError(  # the row is not quoted: the spec merely names this file
            "expected a lot file: a header row with a 'value' column, or one column of "
            "values; the first row is neither",
            file=name,
            key=f"row {lineno}",
        )
    out = []
    for lineno, row in body:
        where = f"row {lineno}, column {col + 1}"
        if col >= len(row) or not row[col]:
            raise SpecError("expected a measured value; the cell is empty", file=name, key=where)
        try:
            out.append(units.parse_quantity(row[col], unit))
        except SpecError as exc:
            if not out and body is rows:  # no header and no value yet: not a lot file at all
                raise SpecError(
                    "expected a lot file: a header row with a 'value' column, or one column of "
                    "values; the first row is neither",
                    file=name,
                    key=where,
                ) from None
            raise SpecError(exc.message, file=name, key=where) from None
    return np.asarray(out, dtype=float)


def load_lot_csv(path: str | Path, nominal: float, unit: str, *, tol: float) -> np.ndarray:
    """Read a lot file and return its relative deviations from ``nominal``.

    Parameters
    ----------
    path : str or pathlib.Path
        The CSV file.
    nominal : float
        Nominal value of the part, SI units.
    unit : str
        "F" or "H".
    tol : float
        The part's relative tolerance (plausibility check on the median).

    Returns
    -------
    numpy.ndarray, shape (n,)
        Relative deviations ``x/nominal - 1`` for ``deviation(kind="empirical")``.
    """
    values = read_lot_csv(path, unit)
    return lot_deviations(values, nominal, tol, unit=unit, file=str(path))
