"""Bill of materials export: CSV and JSON of a consolidated plan's parts.

Columns (CSV header, JSON keys), one row per distinct part id, sorted by id:

==============  =============================================================
designators     where the part goes: ``channel.position`` for a plan
                (``north.C1, south.C1``), the position for one design
                (``solve``/``evaluate --bom``: the best design)
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
currency        the stock list's ``currency`` column for its parts, else the
                spec's ``[cost] currency`` (a plan's ``currency``); "" when
                neither says
on_hand         quantity on hand (blank / null when not tracked)
short_by        how many more must be bought (0 when the stock covers the build)
==============  =============================================================

Then every column of the stock list that picker does not use itself
(manufacturer, manufacturer part number, footprint, …), in the order the
stock list has them, blank for parts it does not hold.

CSV files start with a UTF-8 byte-order mark (so a spreadsheet reads "µ" and
"±") and end lines with CRLF (RFC 4180, section 2, rule 1), like every CSV
picker writes.

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
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from picker.api.results import SolveResult
from picker.buyer.model import BomLine, generic_part_id
from picker.errors import SpecError
from picker.files import atomic_write, csv_safe
from picker.report.csvfile import BOM, CSV_LINE_END
from picker.spec.stock import StockList, load_stock, unit_price
from picker.units import format_percent, format_quantity, json_number

if TYPE_CHECKING:  # the plan runner pulls in ortools: only for the type
    from picker.api.plan import PlanRun

COLUMNS = (
    "designators",
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
    "currency",
    "on_hand",
    "short_by",
)
UNIT = {"C": "F", "L": "H"}


def _num(x: float) -> float | int | None:
    """A JSON-ready number: None for NaN/inf, ints kept whole, prices without float noise."""
    v = json_number(x)
    if v is not None and v.is_integer() and abs(v) < 2**53:
        return int(v)
    return v


def _price(x: float | None) -> float | None:
    # 1e-9 of a currency unit is far below any real price step; it removes
    # float noise such as 2.0000000000000004 from unit price x quantity
    v = json_number(x)
    return None if v is None else round(v, 9)


def _described(stocks: Sequence[StockList]) -> tuple[list[str], dict[str, dict[str, str]]]:
    """Extra column names (first appearance order, ``currency`` aside) and, per part
    id, its texts in those columns (and its currency), from every stock list."""
    names: list[str] = []
    texts: dict[str, dict[str, str]] = {}
    for st in stocks:
        for name in st.extra:
            if name.lower() != "currency" and name not in names and name not in COLUMNS:
                names.append(name)
        for i, pid in enumerate(st.ids):
            row = texts.setdefault(str(pid), {})
            for name, cells in st.extra.items():
                key = "currency" if name.lower() == "currency" else name
                row.setdefault(key, str(cells[i]))
    return names, texts


def bom_rows(
    lines: Iterable[BomLine],
    *,
    designators: Mapping[str, Sequence[str]] | None = None,
    stocks: Sequence[StockList] = (),
    currency: str = "",
) -> list[dict]:
    """BOM lines as dicts with the keys of :data:`COLUMNS` (None where unknown),
    then the stock lists' descriptive columns."""
    names, texts = _described(stocks)
    designators = designators or {}
    rows = []
    for b in lines:
        unit = UNIT.get(b.kind)
        known_value = unit is not None and math.isfinite(b.value)
        described = texts.get(b.part_id, {})
        rows.append(
            {
                "designators": ", ".join(designators.get(b.part_id, ())),
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
                "currency": described.get("currency", "") or currency,
                "on_hand": _num(b.on_hand),
                "short_by": int(b.short_by),
                **{n: described.get(n, "") for n in names},
            }
        )
    return rows


def _cell(v: object) -> str:
    if v is None:
        return ""
    if isinstance(v, str):
        return csv_safe(v)
    return repr(v) if isinstance(v, float) else str(v)


def bom_csv(
    lines: Iterable[BomLine],
    *,
    designators: Mapping[str, Sequence[str]] | None = None,
    stocks: Sequence[StockList] = (),
    currency: str = "",
) -> str:
    """The BOM as CSV text (header row first, ``\\r\\n`` line ends as RFC 4180)."""
    rows = bom_rows(lines, designators=designators, stocks=stocks, currency=currency)
    header = list(rows[0]) if rows else [*COLUMNS, *_described(stocks)[0]]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator=CSV_LINE_END)
    w.writerow(header)
    for row in rows:
        w.writerow([_cell(row[c]) for c in header])
    return buf.getvalue()


def bom_json(
    lines: Iterable[BomLine],
    *,
    designators: Mapping[str, Sequence[str]] | None = None,
    stocks: Sequence[StockList] = (),
    currency: str = "",
    **extra: object,
) -> str:
    """The BOM as a JSON object ``{"bom": [...], **extra}``, keys in a fixed order."""
    rows = bom_rows(lines, designators=designators, stocks=stocks, currency=currency)
    return json.dumps({**extra, "bom": rows}, indent=2, ensure_ascii=False) + "\n"


def plan_designators(run: PlanRun) -> dict[str, list[str]]:
    """Part id -> ``channel.position`` of every place a plan's chosen designs use it."""
    out: dict[str, list[str]] = {}
    plan = run.result.plan
    if plan is None:
        return out
    for ch in run.channels:
        j = plan.choice[ch.name]
        for k, pos in enumerate(ch.candidates.positions):
            for pid in dict.fromkeys(ch.candidates.parts[j][k]):
                out.setdefault(pid, []).append(f"{ch.name}.{pos}")
    return out


def plan_stocks(run: PlanRun) -> list[StockList]:
    """Every stock list a plan's channels read (each once), for the BOM's extra columns."""
    seen: dict[str, StockList] = {}
    for ch in run.channels:
        for part in ch.spec.parts.values():
            st = part.stock_list
            if st is not None:
                seen.setdefault(str(st.source), st)
    ps = run.plan.spec
    if ps.stock is not None:
        src = str(run.plan.resolve(ps.stock))
        if not any(Path(k).resolve() == Path(src).resolve() for k in seen):
            seen[src] = load_stock(src)
    return list(seen.values())


def design_bom(result: SolveResult, rank: int = 1) -> tuple[list[BomLine], dict[str, list[str]]]:
    """The BOM of one design of a solve or evaluate result, and its designators.

    One line per part id (a series value gets the generic id ``C 4.7 nF 5 %``,
    as in a plan); a designator is the position (``C1``), a pair puts both of
    its parts at that position. Quantities are per board and for the spec's
    ``[cost] build_quantity``; the unit price is the stock list's at that
    quantity (its price breaks honoured) or the position's ``price`` key.
    """
    spec = result.spec
    c = result.candidates[rank - 1]
    build = int(spec.cost.build_quantity)
    found: dict[str, dict] = {}
    places: dict[str, list[str]] = {}
    for p, pp in c.parts.items():
        kind = "C" if pp.unit == "F" else "L"
        stock = spec.parts[p].stock_list
        picks = [(pp.part_id, pp.first_value, pp.tolerance)]
        if pp.is_pair:
            picks.append((pp.second_part_id, pp.second_value, pp.second_tolerance))
        for pid, value, tol in picks:
            key = pid or generic_part_id(kind, value, tol)
            e = found.setdefault(
                key,
                {"kind": kind, "value": value, "tol": tol, "count": 0, "pid": pid, "stock": stock},
            )
            e["count"] += 1
            e.setdefault("price", spec.parts[p].price)
            e.setdefault("material", spec.parts[p].dielectric or "")
            if p not in places.setdefault(key, []):
                places[key].append(p)
    lines = []
    for key in sorted(found):
        e = found[key]
        qty = e["count"] * build
        st = e["stock"]
        if e["pid"] and st is not None and e["pid"] in st.index:
            i = st.index[e["pid"]]
            price = float(unit_price(st, i, qty)[0])
            e["value"] = float(
                st.value[i]
            )  # the list's value, not a pair's total minus its partner
            on_hand = float(st.on_hand[i])
            material = str(st.material[i])
        else:
            price = math.nan if e["price"] is None else float(e["price"])
            on_hand, material = math.inf, e["material"]
        lines.append(
            BomLine(
                part_id=key,
                kind=e["kind"],
                value=float(e["value"]),
                tol=float(e["tol"]),
                qty_per_board=int(e["count"]),
                qty_build=int(qty),
                unit_price=price,
                extended_price=price * qty,
                on_hand=on_hand,
                short_by=int(max(0.0, qty - on_hand)),
                material=material,
            )
        )
    return lines, places


def plan_currency(run: PlanRun) -> str:
    """The currency of a plan's prices: the plan's ``currency``, else the one the
    channel specs' ``[cost] currency`` give ("" when none does).

    Raises
    ------
    SpecError
        Channel specs naming different currencies (their prices cannot be summed)
        while the plan names none.
    """
    if run.plan.spec.currency:
        return run.plan.spec.currency
    found = sorted({ch.spec.cost.currency for ch in run.channels} - {""})
    if len(found) > 1:
        raise SpecError(
            f"the channel specs price in {', '.join(found)}; expected one currency "
            "(set the plan's currency to the one its prices are in)",
            file=str(run.plan.path),
            key="currency",
        )
    return found[0] if found else ""


def design_stocks(result: SolveResult) -> list[StockList]:
    """The stock lists a design's positions read (each once)."""
    seen: dict[str, StockList] = {}
    for part in result.spec.parts.values():
        if part.stock_list is not None:
            seen.setdefault(str(part.stock_list.source), part.stock_list)
    return list(seen.values())


def write_bom(
    path: str | Path,
    lines: Sequence[BomLine],
    *,
    designators: Mapping[str, Sequence[str]] | None = None,
    stocks: Sequence[StockList] = (),
    force: bool = False,
    inputs: Iterable[str | Path] = (),
    key: str = "--bom",
    currency: str = "",
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
        text = BOM + bom_csv(lines, designators=designators, stocks=stocks, currency=currency)
    elif suffix == ".json":
        text = bom_json(lines, designators=designators, stocks=stocks, currency=currency)
    else:
        raise SpecError(
            f"expected a file name ending in .csv or .json; got {p.name!r}", file=str(p), key=key
        )
    return atomic_write(p, text, force=force, inputs=inputs, key=key)
