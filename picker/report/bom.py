"""Bill of materials export: CSV and JSON of a consolidated plan's parts.

Columns (CSV header, JSON keys), one row per distinct part id, sorted by id:

==============  =============================================================
part_id         stock id, or a generic id such as ``C 4.7 nF 5 %``
kind            ``C`` or ``L``
value           formatted value (``4.7 nF``)
value_si        value in F or H
tolerance       formatted tolerance (``5 %``)
material        dielectric or core ("" when unknown)
qty_per_board   parts of this id on one board (a parallel pair counts twice)
qty_build       qty_per_board × build quantity
unit_price      unit price at qty_build (blank / null when unknown)
extended_price  unit_price × qty_build (blank / null when unknown)
on_hand         quantity on hand (blank / null when not tracked)
short_by        how many more must be bought (0 when the stock covers the build)
==============  =============================================================

Text cells a spreadsheet would read as a formula (starting with ``=``, ``+``,
``-``, ``@``, a tab or a carriage return) are prefixed with a single quote, the
usual guard against CSV injection (OWASP, "CSV Injection"; common practice).
Files are written atomically (temporary file, then rename), never over an
existing file unless forced, never over an input file.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Iterable, Sequence
from pathlib import Path

from picker.buyer.model import BomLine
from picker.errors import SpecError
from picker.files import atomic_write, csv_safe
from picker.units import format_percent, format_quantity

COLUMNS = (
    "part_id",
    "kind",
    "value",
    "value_si",
    "tolerance",
    "material",
    "qty_per_board",
    "qty_build",
    "unit_price",
    "extended_price",
    "on_hand",
    "short_by",
)
UNIT = {"C": "F", "L": "H"}


def _num(x: float) -> float | int | None:
    """A JSON-ready number: None for NaN/inf, ints kept whole, prices without float noise."""
    if x is None or not math.isfinite(x):
        return None
    if float(x).is_integer() and abs(x) < 2**53:
        return int(x)
    return float(x)


def _price(x: float | None) -> float | None:
    # 1e-9 of a currency unit is far below any real price step; it removes
    # float noise such as 2.0000000000000004 from unit price x quantity
    return None if x is None or not math.isfinite(x) else round(float(x), 9)


def bom_rows(lines: Iterable[BomLine]) -> list[dict]:
    """BOM lines as dicts with the keys of :data:`COLUMNS` (None where unknown)."""
    rows = []
    for b in lines:
        unit = UNIT.get(b.kind)
        known_value = unit is not None and math.isfinite(b.value)
        rows.append(
            {
                "part_id": b.part_id,
                "kind": b.kind,
                "value": format_quantity(b.value, unit) if unit and known_value else "",
                "value_si": float(b.value) if known_value else None,
                "tolerance": format_percent(b.tol) if math.isfinite(b.tol) else "",
                "material": b.material,
                "qty_per_board": int(b.qty_per_board),
                "qty_build": int(b.qty_build),
                "unit_price": _price(b.unit_price),
                "extended_price": _price(b.extended_price),
                "on_hand": _num(b.on_hand),
                "short_by": int(b.short_by),
            }
        )
    return rows


def _cell(v: object) -> str:
    if v is None:
        return ""
    if isinstance(v, str):
        return csv_safe(v)
    return repr(v) if isinstance(v, float) else str(v)


def bom_csv(lines: Iterable[BomLine]) -> str:
    """The BOM as CSV text (header row first, ``\\r\\n`` line ends as RFC 4180)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow(COLUMNS)
    for row in bom_rows(lines):
        w.writerow([_cell(row[c]) for c in COLUMNS])
    return buf.getvalue()


def bom_json(lines: Iterable[BomLine], **extra: object) -> str:
    """The BOM as a JSON object ``{"bom": [...], **extra}``, keys in a fixed order."""
    return json.dumps({**extra, "bom": bom_rows(lines)}, indent=2, ensure_ascii=False) + "\n"


def write_bom(
    path: str | Path,
    lines: Sequence[BomLine],
    *,
    force: bool = False,
    inputs: Iterable[str | Path] = (),
    key: str = "--bom",
) -> Path:
    """Write the BOM to ``path`` as CSV or JSON, chosen by the suffix.

    Raises
    ------
    SpecError
        For a suffix other than ``.csv`` or ``.json``, an existing file without
        ``force``, a path that is one of ``inputs``, or a missing folder.
    """
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix == ".csv":
        text = bom_csv(lines)
    elif suffix == ".json":
        text = bom_json(lines)
    else:
        raise SpecError(
            f"expected a file name ending in .csv or .json; got {p.name!r}", file=str(p), key=key
        )
    return atomic_write(p, text, force=force, inputs=inputs, key=key)
