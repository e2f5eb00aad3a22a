"""The values one part position may take: :class:`ValueTable`.

A table is a struct of arrays, one entry per value the position may take,
sorted ascending by value, with the facts the search, the Monte Carlo and the
buyer need about each entry (tolerance, stock part id, price, quantity on
hand, and the second part when the entry is a parallel pair, see
:mod:`picker.parts.pairs`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, init=False)
class ValueTable:
    """The values one position may take, sorted ascending, with per-value facts.

    Every array has one entry per value (shape (n,)). The per-entry facts a
    caller leaves out are filled in: no part id (""), unknown price (NaN),
    unlimited stock (inf), no second part (id "", tolerance 0).

    Attributes
    ----------
    values : (n,) float, SI units, sorted ascending.
    tol : (n,) float, relative tolerance of each value.
    source : str, series name ("E12"), "list" or "stock".
    part_id : (n,) object, a stock part id or "" for a series value.
    price : (n,) float, unit price (NaN when unknown).
    stock_qty : (n,) float, quantity on hand (inf when unlimited).
    second : (n,) float or None, value of a second part in parallel (0 where
        the entry is a single part); ``values`` is then the pair's total and
        ``values - second`` the first part. ``None``: a table of single parts.
    second_tol : (n,) float, relative tolerance of the second part (read only
        where ``second`` is set).
    second_id : (n,) object, stock part id of the second part ("" for a
        series value or a single part).
    """

    values: np.ndarray
    tol: np.ndarray
    source: str
    part_id: np.ndarray
    price: np.ndarray
    stock_qty: np.ndarray
    second: np.ndarray | None
    second_tol: np.ndarray
    second_id: np.ndarray

    def __init__(
        self,
        values: np.ndarray,
        tol: np.ndarray,
        source: str = "list",
        part_id: np.ndarray | None = None,
        price: np.ndarray | None = None,
        stock_qty: np.ndarray | None = None,
        second: np.ndarray | None = None,
        second_tol: np.ndarray | None = None,
        second_id: np.ndarray | None = None,
    ) -> None:
        n = len(values)
        if n and np.any(np.diff(values) < 0):
            raise ValueError("ValueTable.values must be sorted ascending")
        filled = {
            "values": values,
            "tol": tol,
            "source": source,
            "part_id": np.full(n, "", dtype=object) if part_id is None else part_id,
            "price": np.full(n, np.nan) if price is None else price,
            "stock_qty": np.full(n, np.inf) if stock_qty is None else stock_qty,
            "second": second,
            "second_tol": np.zeros(n) if second_tol is None else second_tol,
            "second_id": np.full(n, "", dtype=object) if second_id is None else second_id,
        }
        for name, value in filled.items():
            object.__setattr__(self, name, value)

    def __len__(self) -> int:
        return len(self.values)


def uniform_table(values: np.ndarray, tol: float, source: str) -> ValueTable:
    """A table where every value carries the same relative tolerance.

    Examples
    --------
    >>> t = uniform_table(np.array([1e-9, 2.2e-9]), 0.05, "E3")
    >>> t.tol.tolist(), t.price.tolist(), t.stock_qty.tolist()
    ([0.05, 0.05], [nan, nan], [inf, inf])
    """
    v = np.asarray(values, dtype=float)
    return ValueTable(v, np.full(v.shape, float(tol)), source)
