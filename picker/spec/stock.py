"""Stock lists: the parts a buyer can actually get, loaded from CSV.

File format (our own; one header row, then one part per row; column names are
case-insensitive and may come in any order):

============  ========  =================================================================
column        required  meaning
============  ========  =================================================================
id            yes       our part id, unique in the file (any text, e.g. ``CAP-0042``)
kind          yes       ``C`` (capacitor) or ``L`` (inductor)
value         yes       SI number (``4.7e-9``) or a quantity with prefix/unit
                        (``4.7 nF``, ``4n7``, ``220 uH``); a bare number is SI (F or H)
tolerance     yes       ``5 %``, ``0.05``, ``±2 %`` or an IEC 60062 letter (``J``)
dielectric    no        capacitor dielectric (``C0G``, ``X7R``); blank for inductors
core          no        inductor core (``air``, ``ferrite``); blank for capacitors
voltage       no        voltage rating, ``50`` or ``50 V``; blank when unknown
on_hand       no        whole number on the shelf; blank = not tracked (no limit)
price         no        unit price for any quantity (a break at quantity 1); blank = unknown
price_breaks  no        ``qty:price`` pairs separated by ``;`` (``100:0.021;1000:0.012``),
                        quantities strictly increasing; a price break at ``qty``
                        applies to purchases of at least ``qty`` units
============  ========  =================================================================

Columns picker does not know (a manufacturer, a manufacturer part number, a
footprint, a currency: whatever an ERP export carries) are kept as text
(:attr:`StockList.extra`) and carried to the bill of materials; the command
line prints a one-line note naming them. The delimiter is detected from the
header line: ``,``, ``;`` or a tab (:func:`detect_delimiter`).

Errors are :class:`picker.errors.SpecError` with ``file`` the CSV path and
``key`` like ``row 12, column value`` (row numbers are the file's line numbers,
the header being row 1), so the CLI prints one line and exits 2.

Loading is vectorised: a column of plain SI numbers is converted by numpy in one
call; other strings are parsed once per distinct text (a cache), so a
100,000-row list loads in a fraction of a second (``picker.bench.consolidate``).
"""

from __future__ import annotations

import csv
import io
import os
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike

from picker.errors import SpecError
from picker.files import read_text
from picker.parts.limits import VALUE_RANGE, value_problem
from picker.parts.pricing import unit_price_from_breaks
from picker.units import parse_quantity, parse_tolerance

COLUMNS = (
    "id",
    "kind",
    "value",
    "tolerance",
    "dielectric",
    "core",
    "voltage",
    "on_hand",
    "price",
    "price_breaks",
)
REQUIRED = ("id", "kind", "value", "tolerance")
KIND_UNIT = {"C": "F", "L": "H"}

#: How :func:`picker.files.read_text` reads a stock list and words its faults.
_READING = {
    "what": "a stock-list CSV file",
    "encoding": "utf-8-sig",
    "missing": "expected {what}; no such file",
    "directory": "expected {what}; got a directory",
    "undecodable": "expected UTF-8 text; {reason} at byte {start}",
}


@dataclass(frozen=True, eq=False)
class StockList:
    """A loaded stock list: one entry per part, struct of arrays, SI units.

    Attributes
    ----------
    ids : numpy.ndarray of str, shape (n,)
    kind : numpy.ndarray of str, shape (n,), ``"C"`` or ``"L"``
    value : numpy.ndarray, shape (n,), F or H
    tol : numpy.ndarray, shape (n,), relative tolerance (0.05 for 5 %)
    material : numpy.ndarray of str, shape (n,), dielectric or core, "" if blank
    voltage : numpy.ndarray, shape (n,), V, NaN if blank
    on_hand : numpy.ndarray, shape (n,), ``inf`` if not tracked
    break_qty, break_price : numpy.ndarray, shape (n, k), padded price breaks
        (see :mod:`picker.parts.pricing`); the ``price`` column is a break at quantity 1
    source : str or None, the file it came from
    lines : the file line number of each part, looked up on demand by :meth:`row`
    """

    ids: np.ndarray
    kind: np.ndarray
    value: np.ndarray
    tol: np.ndarray
    material: np.ndarray
    voltage: np.ndarray
    on_hand: np.ndarray
    break_qty: np.ndarray
    break_price: np.ndarray
    source: str | None = field(default=None)
    lines: _LineNumbers | None = field(default=None, repr=False)
    #: Columns picker does not use (``mpn``, ``manufacturer``, ``footprint``, …):
    #: header name as written -> one text per part, carried to the BOM.
    extra: dict[str, np.ndarray] = field(default_factory=dict, repr=False)

    def __len__(self) -> int:
        return int(self.ids.shape[0])

    def row(self, i: int) -> int | None:
        """File line number of part ``i`` (None for a list not read from a file)."""
        return None if self.lines is None else self.lines[i]

    @cached_property
    def index(self) -> dict[str, int]:
        """Map from part id to its position in the arrays."""
        return {str(p): i for i, p in enumerate(self.ids)}

    def lookup(self, part_id: str) -> int:
        """Position of ``part_id``; SpecError if the stock list has no such part."""
        try:
            return self.index[part_id]
        except KeyError:
            raise SpecError(
                f"expected a part id from the stock list; got {part_id!r}", file=self.source
            ) from None


def unit_price(stock: StockList, idx: ArrayLike, qty: ArrayLike) -> np.ndarray:
    """Unit price of stock parts ``idx`` for a purchase of ``qty`` units each.

    Parameters
    ----------
    stock:
        The stock list.
    idx:
        Integer index or array of indices into the stock list.
    qty:
        Quantity bought, scalar or broadcastable to ``idx``.

    Returns
    -------
    numpy.ndarray
        Same shape as ``idx`` (at least 1-d): the unit price from the largest
        price break not above ``qty`` (NaN where the part has no price).
    """
    idx = np.atleast_1d(np.asarray(idx, dtype=np.intp))
    q = np.broadcast_to(np.asarray(qty, dtype=float), idx.shape)
    flat = unit_price_from_breaks(
        stock.break_qty[idx.ravel()], stock.break_price[idx.ravel()], q.ravel()
    )
    return flat.reshape(idx.shape)


def stock_table(
    stock: StockList,
    kind: str,
    lo: float,
    hi: float,
    *,
    tolerance_max: float | None = None,
    dielectric: str | Iterable[str] | None = None,
    min_voltage: float | None = None,
    qty: float = 1.0,
) -> dict[str, np.ndarray]:
    """Value table of the stock parts that may fill one position.

    Parameters
    ----------
    stock:
        The stock list.
    kind:
        ``"C"`` or ``"L"``.
    lo, hi:
        Value range in SI units, inclusive (a relative slack of 1e-9 absorbs
        float noise from parsing the same text two ways).
    tolerance_max:
        Keep parts whose tolerance is at most this (relative), if given.
    dielectric:
        Keep parts whose dielectric/core is this text (case-insensitive), or is
        one of these texts when a collection is given.
    min_voltage:
        Keep parts rated at least this many volts (parts with no rating are dropped).
    qty:
        Purchase quantity at which ``price`` is quoted (default 1).

    Returns
    -------
    dict
        ``values`` (F or H), ``tol``, ``part_id``, ``price``, ``stock_qty``
        (``inf`` when not tracked) and ``index`` (into the stock list), all of
        shape (m,), sorted by value, then price (unknown last), then part id.
    """
    kind = kind.strip().upper()
    keep = (
        (stock.kind == kind) & (stock.value >= lo * (1 - 1e-9)) & (stock.value <= hi * (1 + 1e-9))
    )
    if tolerance_max is not None:
        keep &= stock.tol <= tolerance_max * (1 + 1e-9)
    if dielectric is not None:
        texts = [dielectric] if isinstance(dielectric, str) else list(dielectric)
        wanted = np.array([w.strip().lower() for w in texts])
        keep &= np.isin(np.char.lower(stock.material.astype(str)), wanted)
    if min_voltage is not None:
        keep &= stock.voltage >= min_voltage  # NaN compares False: unrated parts are dropped
    idx = np.flatnonzero(keep)
    price = unit_price(stock, idx, qty) if idx.size else np.zeros(0)
    price_key = np.where(np.isnan(price), np.inf, price)
    order = np.lexsort((stock.ids[idx].astype(str), price_key, stock.value[idx]))
    idx = idx[order]
    return {
        "values": stock.value[idx].astype(float),
        "tol": stock.tol[idx].astype(float),
        "part_id": stock.ids[idx].astype(object),
        "price": price[order].astype(float),
        "stock_qty": stock.on_hand[idx].astype(float),
        "index": idx,
    }


# ---------------------------------------------------------------------------
# loading


def load_stock(path: str | os.PathLike[str]) -> StockList:
    """Load and check a stock-list CSV (format in the module docstring).

    Raises
    ------
    SpecError
        With ``file`` and ``key`` (``row N, column NAME``) for every fault:
        missing file, unknown or missing or repeated columns, a row with the
        wrong number of cells, a bad value, tolerance, voltage, quantity or
        price, and a repeated id.
    """
    src = os.fspath(path)
    text = read_text(src, **_READING)
    delim = detect_delimiter(text)
    lines = _LineNumbers(src, delim)
    header, columns = _split_fast(text, delim)
    if header is None:
        try:
            records = list(csv.reader(io.StringIO(text, newline=""), delimiter=delim))
        except csv.Error as exc:
            raise SpecError(f"expected CSV; {exc}", file=src) from None
        if not records:
            raise SpecError("expected a header row; the file is empty", file=src)
        header, rows = records[0], [r for r in records[1:] if r]  # csv gives [] for a blank line
        width = len(header)
        if any(len(r) != width for r in rows):
            i = next(i for i, r in enumerate(rows) if len(r) != width)
            raise SpecError(
                f"expected {width} cells as in the header; got {len(rows[i])}",
                file=src,
                key=f"row {lines[i]}",
            )
        columns = list(zip(*rows, strict=True)) if rows else []
    cols, extra = _check_header(header, src)
    if not columns or not columns[0]:
        raise SpecError("expected at least one part row after the header; got none", file=src)
    st = _build(columns, lines, cols, src)
    carried = {name: np.array([c.strip() for c in columns[j]], dtype=object) for name, j in extra}
    return replace(st, extra=carried) if carried else st


#: Delimiters a stock list may use, tried in this order (the first wins a tie).
DELIMITERS = (",", ";", "\t")


def detect_delimiter(text: str) -> str:
    """The delimiter of a stock list: the one that splits the header line into the
    most known column names (``,`` on a tie or when none does).

    >>> detect_delimiter("id;kind;value;tolerance\\nA;C;1n;5 %\\n")
    ';'
    """
    first = text.lstrip("\r\n").split("\n", 1)[0]
    best, score = ",", 0
    for d in DELIMITERS:
        names = {n.strip().strip('"').lower() for n in first.split(d)}
        k = len(names & set(COLUMNS))
        if k > score:
            best, score = d, k
    return best


def unknown_columns_note(stock: StockList) -> str | None:
    """One line naming the columns picker does not use (carried to the BOM), or None."""
    if not stock.extra:
        return None
    names = ", ".join(stock.extra)
    return f"{stock.source}: columns not used by picker, carried to the BOM: {names}"


def _split_fast(text: str, delim: str = ",") -> tuple[list[str] | None, list[Sequence[str]]]:
    """Split a CSV text without quotes in C-speed string operations.

    Returns ``(None, [])`` when the text needs the csv module (it has quotes,
    lone carriage returns or rows of the wrong width), else the header and one
    list of cells per column.
    """
    if '"' in text or not text:
        return None, []
    if "\r" in text:
        text = text.replace("\r\n", "\n")
        if "\r" in text:
            return None, []
    rows = [line for line in text.split("\n") if line]
    width = rows[0].count(delim) + 1
    body = rows[1:]
    if not body:
        return rows[0].split(","), []
    commas = np.fromiter(map(str.count, body, [delim] * len(body)), dtype=np.int64, count=len(body))
    if np.any(commas != width - 1):
        return None, []
    flat = delim.join(body).split(delim)
    return rows[0].split(delim), [flat[j::width] for j in range(width)]


class _LineNumbers:
    """File line number of each data row, worked out only when an error needs one.

    Row ``i`` is normally line ``i + 2``; blank lines and quoted cells holding
    line breaks shift that, so on demand the file is read again with
    ``csv.reader.line_num``.
    """

    def __init__(self, src: str, delim: str = ",") -> None:
        self.src = src
        self.delim = delim
        self._lines: list[int] | None = None

    def __getitem__(self, i: int) -> int:
        if self._lines is None:
            reader = csv.reader(
                io.StringIO(read_text(self.src, **_READING), newline=""), delimiter=self.delim
            )
            next(reader)
            self._lines = [reader.line_num for r in reader if r]
        return self._lines[i]

    def array(self, n: int) -> np.ndarray:
        return np.array([self[i] for i in range(n)], dtype=np.int64)


def _check_header(header: list[str], src: str) -> tuple[dict[str, int], list[tuple[str, int]]]:
    """Known columns -> index, and the other columns (name as written, index), kept
    so that descriptive columns (manufacturer, part number, footprint) reach the BOM."""
    cols: dict[str, int] = {}
    extra: list[tuple[str, int]] = []
    seen: set[str] = set()
    for j, name in enumerate(header):
        key = name.strip().lower()
        if key in seen:
            raise SpecError(f"column {key!r} appears twice", file=src, key=f"row 1, column {j + 1}")
        if key:
            seen.add(key)
        if key in COLUMNS:
            cols[key] = j
        elif key:
            extra.append((name.strip(), j))
        # a blank header cell (a trailing delimiter) names nothing: its column is dropped
    missing = [c for c in REQUIRED if c not in cols]
    if missing and not cols:
        # no known column: the file is not a stock list, and its first line is not
        # echoed (it may be any file the spec names, e.g. a system file)
        raise SpecError(
            f"expected a stock list: a header row with the columns {', '.join(REQUIRED)}; "
            "the first line names none of them",
            file=src,
            key="row 1",
        )
    if missing:
        others = f" (columns it does not know: {', '.join(n for n, _ in extra)})" if extra else ""
        raise SpecError(
            f"expected columns {', '.join(REQUIRED)}; missing {', '.join(missing)}{others}",
            file=src,
            key="row 1",
        )
    return cols, extra


class _Column:
    """One column's cells plus what is needed to locate an error in it."""

    def __init__(
        self, cells: Sequence[str] | None, n: int, lines: _LineNumbers, name: str, src: str
    ) -> None:
        self.name = name
        self.src = src
        self.lines = lines
        self.present = cells is not None
        self.cells = list(map(str.strip, cells)) if cells is not None else [""] * n

    def error(self, i: int, expected: str, got: str | None = None) -> SpecError:
        got = self.cells[i] if got is None else got
        return SpecError(
            f"expected {expected}; got {got!r}",
            file=self.src,
            key=f"row {self.lines[i]}, column {self.name}",
        )

    def floats(
        self,
        parse: Callable[[str, str], float],
        expected: str,
        *,
        blank: float = np.nan,
        kinds: Sequence[str] | None = None,
        fast: bool = True,
    ) -> np.ndarray:
        """Convert the column to floats: numpy fast path, then once per distinct text.

        ``parse(text, kind)`` converts one non-blank cell or raises SpecError/ValueError.
        With ``fast`` a column of plain finite numbers is converted by numpy in one call.
        """
        if not self.present:
            return np.full(len(self.cells), blank, dtype=float)
        if fast and _is_float(self.cells[0]):
            try:
                arr = np.array(self.cells, dtype=float)  # every cell a plain number
                if np.all(np.isfinite(arr)):
                    return arr
            except ValueError:
                pass
        keys = (
            self.cells
            if kinds is None
            else [k + "|" + t for k, t in zip(kinds, self.cells, strict=True)]
        )
        table: dict[str, float] = {}
        for key in dict.fromkeys(keys):  # distinct texts, in order of first appearance
            kind, _, text = key.rpartition("|") if kinds is not None else ("", "", key)
            if not text:
                table[key] = blank
                continue
            try:
                got = float(parse(text, kind))
            except SpecError as exc:
                raise self._at(keys.index(key), exc.message) from None
            except ValueError:
                raise self.error(keys.index(key), expected, text) from None
            if not np.isfinite(got):
                raise self.error(keys.index(key), expected, text)
            table[key] = got
        return np.array([table[k] for k in keys], dtype=float)

    def _at(self, i: int, message: str) -> SpecError:
        """A SpecError with ``message`` at row ``i`` of this column."""
        return SpecError(message, file=self.src, key=f"row {self.lines[i]}, column {self.name}")


def _is_float(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _plain_float(text: str, _kind: str = "") -> float:
    return float(text)


def _parse_value(text: str, kind: str) -> float:
    try:
        return float(text)
    except ValueError:
        return parse_quantity(text, KIND_UNIT[kind])


def _parse_tolerance(text: str, _kind: str = "") -> float:
    return parse_tolerance(text)


def _parse_voltage(text: str, _kind: str = "") -> float:
    try:
        return float(text)
    except ValueError:
        return parse_quantity(text, "V")


def _parse_breaks(text: str, col: _Column, i: int) -> tuple[tuple[float, float], ...]:
    out: list[tuple[float, float]] = []
    for part in text.split(";"):
        part = part.strip()
        if not part:
            continue
        q, sep, p = part.partition(":")
        try:
            qv, pv = float(q), float(p)
        except ValueError:
            raise col.error(
                i, "qty:price pairs separated by ';' like 100:0.021;1000:0.012"
            ) from None
        if not sep or not (np.isfinite(qv) and qv >= 1 and qv == int(qv)):
            raise col.error(i, "a whole quantity of at least 1 before ':'", part)
        if not (np.isfinite(pv) and pv >= 0):
            raise col.error(i, "a price of zero or more after ':'", part)
        if out and qv <= out[-1][0]:
            raise col.error(i, "break quantities strictly increasing", text)
        out.append((qv, pv))
    return tuple(out)


def _first_bad(mask: np.ndarray) -> int | None:
    bad = np.flatnonzero(mask)
    return int(bad[0]) if bad.size else None


def _build(
    by_index: Sequence[Sequence[str]], lines: _LineNumbers, cols: Mapping[str, int], src: str
) -> StockList:
    """Check every column and build the StockList (``by_index``: cells per column, file order)."""
    n = len(by_index[0])

    def col(name: str) -> _Column:
        j = cols.get(name)
        return _Column(by_index[j] if j is not None else None, n, lines, name, src)

    # ids: non-blank and unique
    c_id = col("id")
    ids = np.array(c_id.cells, dtype=object)
    if (i := _first_bad(ids == "")) is not None:
        raise c_id.error(i, "a part id")
    if len(set(c_id.cells)) != n:
        seen: dict[str, int] = {}
        for i, text in enumerate(c_id.cells):
            if text in seen:
                raise SpecError(
                    f"expected unique part ids; {text!r} already used in row {lines[seen[text]]}",
                    file=src,
                    key=f"row {lines[i]}, column id",
                )
            seen[text] = i

    c_kind = col("kind")
    kind = np.char.upper(np.array(c_kind.cells, dtype=str))
    if (i := _first_bad(~np.isin(kind, list(KIND_UNIT)))) is not None:
        raise c_kind.error(i, "C or L")
    kind = kind.astype("<U1")

    c_val = col("value")
    value = c_val.floats(
        _parse_value, "a capacitance or inductance like 4.7 nF", kinds=kind.tolist()
    )
    if (i := _first_bad(~(value > 0))) is not None:
        raise c_val.error(i, "a positive finite value")
    lo = np.where(kind == "C", VALUE_RANGE["F"][0], VALUE_RANGE["H"][0])
    hi = np.where(kind == "C", VALUE_RANGE["F"][1], VALUE_RANGE["H"][1])
    if (i := _first_bad((value < lo) | (value > hi))) is not None:
        why = value_problem(float(value[i]), KIND_UNIT[str(kind[i])], c_val.cells[i])
        raise c_val._at(i, f"{why}; got {c_val.cells[i]!r}")

    c_tol = col("tolerance")
    # every tolerance text goes through units.parse_tolerance (few distinct texts)
    tol = c_tol.floats(_parse_tolerance, "a tolerance like 5 % or J", fast=False)
    if (i := _first_bad(~((tol > 0) & (tol < 1)))) is not None:
        raise c_tol.error(i, "a tolerance above 0 and below 100 %")

    material = np.full(n, "", dtype=object)
    for name, wrong in (("dielectric", "L"), ("core", "C")):
        c = col(name)
        if not c.present:
            continue
        cells = np.array(c.cells, dtype=object)
        given = cells != ""
        if (i := _first_bad(given & (kind == wrong))) is not None:
            what = "capacitors" if name == "dielectric" else "inductors"
            raise c.error(i, f"blank ({name} is for {what} only)")
        material[given] = cells[given]

    c_v = col("voltage")
    voltage = c_v.floats(_parse_voltage, "a voltage rating like 50 V")
    if (i := _first_bad(voltage <= 0)) is not None:
        raise c_v.error(i, "a positive voltage rating")

    c_q = col("on_hand")
    on_hand = c_q.floats(_plain_float, "a whole number of parts on hand", blank=np.inf)
    whole = (on_hand >= 0) & ((on_hand == np.floor(on_hand)) | np.isinf(on_hand))
    if (i := _first_bad(~whole)) is not None:
        raise c_q.error(i, "a whole number of parts on hand, zero or more")

    c_p = col("price")
    price = c_p.floats(_plain_float, "a unit price, zero or more")
    if (i := _first_bad(price < 0)) is not None:
        raise c_p.error(i, "a unit price, zero or more")

    # price column = a break at quantity 1 in slot 0; the price_breaks column fills slots 1..
    c_b = col("price_breaks")
    texts = c_b.cells
    parsed: dict[str, tuple[tuple[float, float], ...]] = {}
    for text in dict.fromkeys(texts):
        parsed[text] = _parse_breaks(text, c_b, texts.index(text)) if text else ()
    k = 1 + max(len(b) for b in parsed.values())
    uniq = list(parsed)
    u_qty = np.full((len(uniq), k), np.inf)
    u_price = np.full((len(uniq), k), np.nan)
    for u, text in enumerate(uniq):
        for j, (q, p) in enumerate(parsed[text], start=1):
            u_qty[u, j], u_price[u, j] = q, p
    pos = {t: u for u, t in enumerate(uniq)}
    which = np.array([pos[t] for t in texts], dtype=np.intp)
    break_qty = u_qty[which]
    break_price = u_price[which]
    priced = ~np.isnan(price)
    if (i := _first_bad(priced & (break_qty[:, min(1, k - 1)] == 1.0) & (k > 1))) is not None:
        raise c_b.error(i, "no break at quantity 1 when the price column is given")
    break_qty[:, 0] = np.where(priced, 1.0, np.inf)
    break_price[:, 0] = price

    return StockList(
        ids=ids,
        kind=kind,
        value=value,
        tol=tol,
        material=material,
        voltage=voltage,
        on_hand=on_hand,
        break_qty=break_qty,
        break_price=break_price,
        lines=lines,
        source=src,
    )
