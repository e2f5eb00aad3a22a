"""Measurements of built units: a CSV file in, a frozen struct of arrays out.

This is an edge module: it reads a file and turns every fault into a
:class:`~picker.errors.SpecError` naming the file, the row and the column.

File format
-----------
UTF-8 CSV, comma separated, one header line then one line per built unit.
Blank lines and lines whose first character is ``#`` are skipped. Column
names are matched without regard to case or surrounding spaces.

* One column per part position of the tank (``C1``, ``C2``, ``L``, plus ``C3``
  for Clapp): the unit's part value as an engineering string ("4.7n", "4n7",
  "100 uH") or a number in SI units (F, H).
* ``frequency``: the measured oscillation frequency ("251.3 kHz", or Hz).
* Optional: ``unit`` (an id, unique in the file; default "row N"),
  ``measured`` (positions whose value was measured rather than read from the
  marking, separated by spaces, ``;`` or ``|``; "all" or "none"),
  ``frequency_sigma`` (standard deviation of the frequency reading, Hz) or
  ``weight`` (a relative weight > 0; not both), and ``note`` (free text).

Values are bounded to finite physical ranges (:mod:`picker.parts.limits`: part
values 1 aF .. 10 F and 1 pH .. 100 H, frequencies 1 mHz .. 100 GHz; a
``frequency_sigma`` within 1e-15 .. 1 times the unit's frequency, a ``weight``
within 1e-12 .. 1e12), so every figure derived from them is finite.

Any other column is an error, so a typo is never silently ignored. "row N"
in a message is the line number in the file (the header is row 1).
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from picker.errors import SpecError
from picker.files import csv_fault, read_text
from picker.parts.limits import frequency_problem, value_problem
from picker.tank import TOPOLOGIES, Topology
from picker.units import parse_quantity

__all__ = ["OPTIONAL_COLUMNS", "Measurements", "load_measurements", "parse_measurements"]

#: Columns of our own that a measurements file may carry besides the positions.
OPTIONAL_COLUMNS = ("unit", "measured", "frequency_sigma", "weight", "note")
#: Accepted frequency sigma relative to the unit's frequency, and accepted weights: a
#: sigma beyond the frequency itself or finer than the best frequency standards
#: (about 1e-15), a weight ratio beyond 1e24 between units, is a typo and would
#: only overflow the weighted sums (common practice, no source).
SIGMA_RANGE = (1e-15, 1.0)
#: A plain decimal number (no prefix, no unit): parsed by float() directly.
_PLAIN = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
WEIGHT_RANGE = (1e-12, 1e12)


@dataclass(frozen=True)
class Measurements:
    """Built units and their measured frequencies. Arrays have shape (n_units,).

    Attributes
    ----------
    values:
        Position name -> part values in F or H.
    frequency:
        Measured frequencies, Hz.
    unit_ids:
        One id per unit (from the ``unit`` column, else "row N").
    measured:
        Position name -> bool array, True where that value was measured.
    frequency_sigma, weight:
        From the optional columns, else None.
    rows:
        Line number of each unit in the file.
    """

    file: str
    topology: str
    values: Mapping[str, np.ndarray]
    frequency: np.ndarray
    unit_ids: tuple[str, ...]
    measured: Mapping[str, np.ndarray]
    frequency_sigma: np.ndarray | None
    weight: np.ndarray | None
    notes: tuple[str, ...]
    rows: tuple[int, ...]

    def __len__(self) -> int:
        return int(self.frequency.size)

    def sigma(self) -> np.ndarray | None:
        """Per-unit frequency sigma (Hz) for the fit, up to a common factor.

        ``frequency_sigma`` as given; a ``weight`` w becomes a relative sigma
        of 1 ppm of the unit's frequency / √w; None when neither column is given.
        """
        if self.frequency_sigma is not None:
            return self.frequency_sigma
        if self.weight is not None:
            return 1e-6 * self.frequency / np.sqrt(self.weight)
        return None


def _number(text: str, key: str) -> float:
    """A plain finite number (for the ``weight`` column)."""
    try:
        x = float(text)
    except ValueError:
        raise SpecError(f"expected a number such as 1 or 0.5; got {text!r}", key=key) from None
    if not np.isfinite(x):
        raise SpecError(f"expected a finite number; got {text!r}", key=key)
    return x


def _positive(text: str, unit: str, file: str, key: str, *, frequency: bool = False) -> float:
    """A cell holding a quantity > 0 in ``unit`` ("1": a plain number).

    Part values (F, H) and, when ``frequency``, a frequency are bounded to
    :mod:`picker.parts.limits`' ranges.
    """
    if not text:
        raise SpecError("empty cell; expected a value", file=file, key=key)
    try:
        if unit == "1":
            x = _number(text, key)
        elif _PLAIN.fullmatch(text):  # a bare number in SI units: the fast path for big files
            x = float(text)  # correctly rounded, as parse_quantity's exact decimal is
        else:
            x = parse_quantity(text, unit)
    except SpecError as exc:
        raise SpecError(exc.message, file=file, key=key) from None
    if not x > 0:
        raise SpecError(f"expected a value > 0; got {text!r}", file=file, key=key)
    why = frequency_problem(x) if frequency else value_problem(x, unit, text)
    if why is not None:
        raise SpecError(f"{why}; got {text!r}", file=file, key=key)
    return x


def _within(x: float, lo: float, hi: float, what: str, text: str, file: str, key: str) -> float:
    """``x`` unchanged when lo <= x <= hi, else a one-line error naming the cell."""
    if not lo <= x <= hi:
        raise SpecError(f"expected {what}; got {text!r}", file=file, key=key)
    return x


def _other_tank_hint(column: str) -> str:
    """ " (C3 belongs to a Clapp tank)" when another registered tank has this position, else ""."""
    for topology in TOPOLOGIES.values():
        for p in topology.positions:
            if p.lower() == column:
                return f" ({p} belongs to a {topology.name.capitalize()} tank)"
    return ""


def _parse_measured(text: str, positions: tuple[str, ...], file: str, key: str) -> set[str]:
    """The positions named in a ``measured`` cell (names, "all" or "none")."""
    words = [w for w in text.replace(";", " ").replace("|", " ").replace(",", " ").split() if w]
    low = [w.lower() for w in words]
    if not words or low == ["none"]:
        return set()
    if low == ["all"]:
        return set(positions)
    by_lower = {p.lower(): p for p in positions}
    out = set()
    for w in words:
        if w.lower() not in by_lower:
            raise SpecError(
                f"expected position names ({', '.join(positions)}), 'all' or 'none'; got {w!r}",
                file=file,
                key=key,
            )
        out.add(by_lower[w.lower()])
    return out


def parse_measurements(text: str, topology: Topology, *, file: str = "<text>") -> Measurements:
    """Parse the text of a measurements CSV (see the module docstring).

    Raises
    ------
    SpecError
        Naming the file and the row/column of the first fault.
    """
    lines = [
        (i + 1, line)
        for i, line in enumerate(text.splitlines())
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not lines:
        raise SpecError(
            "the file is empty; expected a header line such as "
            f"'unit,{','.join(topology.positions)},frequency'",
            file=file,
        )
    try:
        rows = list(csv.reader(io.StringIO("\n".join(line for _, line in lines))))
    except csv.Error as exc:  # a cell over the csv module's limit: one line, not a traceback
        raise csv_fault(exc, file=file) from None
    if len(rows) != len(lines):  # a quoted field spanning lines
        raise SpecError("expected one unit per line; a quoted field spans lines", file=file)
    header_row, header = lines[0][0], rows[0]
    wanted = {p.lower(): p for p in topology.positions}
    wanted["frequency"] = "frequency"
    wanted.update({c: c for c in OPTIONAL_COLUMNS})
    columns: list[str] = []
    for j, raw in enumerate(header):
        name = raw.strip().lower()
        if name not in wanted:
            hint = _other_tank_hint(name)
            raise SpecError(
                f"unknown column {raw.strip()!r}{hint}; expected "
                f"{', '.join([*topology.positions, 'frequency', *OPTIONAL_COLUMNS])}",
                file=file,
                key=f"row {header_row}, column {j + 1}",
            )
        canon = wanted[name]
        if canon in columns:
            raise SpecError(
                f"column {canon!r} appears twice",
                file=file,
                key=f"row {header_row}, column {j + 1}",
            )
        columns.append(canon)
    missing = [c for c in (*topology.positions, "frequency") if c not in columns]
    if missing:
        raise SpecError(
            f"missing column(s) {', '.join(missing)}: a {topology.name} tank needs "
            f"{', '.join(topology.positions)} and frequency",
            file=file,
            key=f"row {header_row}",
        )
    if "weight" in columns and "frequency_sigma" in columns:
        raise SpecError(
            "give either a weight or a frequency_sigma column, not both",
            file=file,
            key=f"row {header_row}",
        )
    data = rows[1:]
    if not data:
        raise SpecError("the file has a header but no units", file=file)

    values: dict[str, list[float]] = {p: [] for p in topology.positions}
    freq: list[float] = []
    extra: dict[str, list] = {c: [] for c in OPTIONAL_COLUMNS}
    ids: list[str] = []
    line_numbers: list[int] = []
    seen: dict[str, int] = {}
    for (line_no, _), row in zip(lines[1:], data, strict=True):
        if len(row) != len(columns):
            raise SpecError(
                f"expected {len(columns)} fields as in the header; got {len(row)}",
                file=file,
                key=f"row {line_no}",
            )
        cells = {c: v.strip() for c, v in zip(columns, row, strict=True)}

        def key(col: str, line_no: int = line_no) -> str:
            return f"row {line_no}, column {col}"

        def positive(
            col: str,
            unit: str,
            cells: dict[str, str] = cells,
            key: Callable[[str], str] = key,
        ) -> float:
            return _positive(cells[col], unit, file, key(col), frequency=col == "frequency")

        for p in topology.positions:
            values[p].append(positive(p, topology.unit(p)))
        freq.append(positive("frequency", "Hz"))
        uid = cells.get("unit") or f"row {line_no}"
        if uid in seen:
            raise SpecError(
                f"unit id {uid!r} already used in row {seen[uid]}", file=file, key=key("unit")
            )
        seen[uid] = line_no
        ids.append(uid)
        line_numbers.append(line_no)
        if "frequency_sigma" in cells:
            f_unit = freq[-1]
            extra["frequency_sigma"].append(
                _within(
                    positive("frequency_sigma", "Hz"),
                    SIGMA_RANGE[0] * f_unit,
                    SIGMA_RANGE[1] * f_unit,
                    "a frequency sigma between 1e-15 and 1 times the unit's frequency",
                    cells["frequency_sigma"],
                    file,
                    key("frequency_sigma"),
                )
            )
        if "weight" in cells:
            extra["weight"].append(
                _within(
                    positive("weight", "1"),
                    *WEIGHT_RANGE,
                    "a weight between 1e-12 and 1e12",
                    cells["weight"],
                    file,
                    key("weight"),
                )
            )
        extra["measured"].append(
            _parse_measured(cells.get("measured", ""), topology.positions, file, key("measured"))
        )
        extra["note"].append(cells.get("note", ""))

    measured = {
        p: np.array([p in m for m in extra["measured"]], dtype=bool) for p in topology.positions
    }
    return Measurements(
        file=file,
        topology=topology.name,
        values={p: np.array(v) for p, v in values.items()},
        frequency=np.array(freq),
        unit_ids=tuple(ids),
        measured=measured,
        frequency_sigma=np.array(extra["frequency_sigma"])
        if "frequency_sigma" in columns
        else None,
        weight=np.array(extra["weight"]) if "weight" in columns else None,
        notes=tuple(extra["note"]),
        rows=tuple(line_numbers),
    )


def load_measurements(path: str | Path, topology: Topology) -> Measurements:
    """Read a measurements CSV file (see the module docstring)."""
    text = read_text(path, what="a CSV file", encoding="utf-8-sig")
    return parse_measurements(text, topology, file=str(path))
