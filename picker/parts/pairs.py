"""Parallel pairs: a position filled by one part or by two parts in parallel.

Two capacitors in parallel add, C = a + b; two inductors in parallel combine
as 1/L = 1/a + 1/b (Kirchhoff's laws; any circuit-theory text). A pair is the
usual way to reach a value between two steps of a series (common practice, no
source). :func:`pair_table` turns a position's base table (series values or
stock parts) into a table of every single part plus every pair a <= b of base
entries, sorted by the pair's total value, so the exact search
(:mod:`picker.core.search`) works on totals unchanged.

Convention of the table (see :class:`picker.parts.table.ValueTable`): for a pair
entry ``values`` is the total, the *first* part is the larger one (its value,
tolerance, id in ``values - second``, ``tol``, ``part_id``) and the *second*
part the smaller one (``second``, ``second_tol``, ``second_id``); a single part
has ``second == 0``. Only capacitor pairs are built: for a capacitor the
Monte Carlo and the screen treat the total as a + b with each part drawn on its
own (:mod:`picker.core.montecarlo`, :mod:`picker.core.screen`).

Pairs whose larger part is more than ``ratio_max`` times the smaller are left
out: the small part then moves the total by less than 1/ratio_max (10 % at the
default 10), about the larger part's own tolerance band, so such a pair is a
dearer way to buy a value a single part already gives (common practice, no
source).
"""

from __future__ import annotations

import numpy as np

from picker.errors import SpecError
from picker.parts.table import ValueTable

#: Default largest ratio of the larger to the smaller part of a pair.
PAIR_RATIO_MAX = 10.0

#: Most entries (singles and pairs) a pair table may hold: at about 100 bytes an
#: entry while it is built, 0.4 GB. A stock list of 2,000 capacitors spread over
#: three decades makes about 1.3 million pairs at the default ratio of 10.
MAX_PAIR_ENTRIES = 4_000_000


def pair_count(values: np.ndarray, ratio_max: float = PAIR_RATIO_MAX) -> int:
    """How many pairs a <= b <= ratio_max·a :func:`pair_table` makes of sorted ``values``.

    Counted with one binary search per value, before anything is built.
    """
    v = np.asarray(values, dtype=float)
    stop = np.searchsorted(v, ratio_max * v * (1 + 1e-12), side="right")
    return int(np.maximum(stop - np.arange(len(v)), 0).sum())


def pair_table(base: ValueTable, ratio_max: float = PAIR_RATIO_MAX) -> ValueTable:
    """Singles plus every pair a <= b of ``base`` with b <= ratio_max·a, sorted by total.

    Parameters
    ----------
    base : ValueTable
        The position's parts (one entry per part), sorted ascending.
    ratio_max : float
        Largest allowed b / a (at least 1).

    Returns
    -------
    ValueTable
        ``len(base)`` singles plus the pairs; ``second``, ``second_tol`` and
        ``second_id`` set. A pair's ``price`` is the sum of its two parts'
        prices; its ``stock_qty`` is how many pairs the stock fills
        (min of the two on hand, half of it when both parts are one id).

    Examples
    --------
    >>> from picker.parts.table import uniform_table
    >>> t = pair_table(uniform_table(np.array([1.0, 2.2, 4.7]), 0.05, "E3"), 3.0)
    >>> [float(v) for v in t.values]
    [1.0, 2.0, 2.2, 3.2, 4.4, 4.7, 6.9, 9.4]
    """
    if not ratio_max >= 1:
        raise ValueError(f"ratio_max must be at least 1; got {ratio_max!r}")
    n = len(base)
    v = base.values
    pairs = pair_count(v, ratio_max)
    if n + pairs > MAX_PAIR_ENTRIES:
        raise SpecError(
            f"{n:,} parts make {pairs:,} parallel pairs, more than the "
            f"{MAX_PAIR_ENTRIES - n:,} a position may hold (about 0.4 GB); narrow min and max, "
            "lower pair_ratio_max or set parallel = false",
            key="parallel",
        )
    # every i <= j < stop[i] (sorted values: v[i] <= v[j] <= ratio_max·v[i]), built
    # directly rather than by filtering all n(n+1)/2 index pairs
    stop = np.searchsorted(v, ratio_max * v * (1 + 1e-12), side="right")
    count = np.maximum(stop - np.arange(n), 0)
    i = np.repeat(np.arange(n), count)  # i: the smaller part
    j = i + (np.arange(pairs) - np.repeat(np.cumsum(count) - count, count))
    single = np.arange(n)
    big = np.concatenate([single, j])  # first part: the larger one
    small = np.concatenate([np.full(n, -1), i])  # second part; -1: none
    has2 = small >= 0
    s = np.where(has2, small, 0)
    second = np.where(has2, v[s], 0.0)
    total = v[big] + second
    qty = base.stock_qty
    same = has2 & (base.part_id[s] == base.part_id[big]) & (base.part_id[big] != "")
    pair_qty = np.where(same, np.floor(qty[big] / 2), np.minimum(qty[big], qty[s]))
    order = np.lexsort((small, big, total))  # by total, then by parts (deterministic)
    return ValueTable(
        values=total[order],
        tol=base.tol[big][order],
        source=base.source,
        part_id=base.part_id[big][order],
        price=np.where(has2, base.price[big] + base.price[s], base.price[big])[order],
        stock_qty=np.where(has2, pair_qty, qty[big])[order],
        second=second[order],
        second_tol=np.where(has2, base.tol[s], base.tol[big])[order],
        second_id=np.where(has2, base.part_id[s], "").astype(object)[order],
    )


def effective_tolerance(table: ValueTable, idx: np.ndarray) -> np.ndarray:
    """Worst-case relative tolerance of entries ``idx``: (a·ta + b·tb)/(a + b) for a pair.

    The total a(1 ± ta) + b(1 ± tb) is monotone in each part, so its extremes
    are a + b ± (a·ta + b·tb) (worst-case method); shape of ``idx``.
    """
    t = table.tol[idx]
    if table.second is None:
        return t
    b = table.second[idx]
    a = table.values[idx] - b
    return (a * t + b * table.second_tol[idx]) / (a + b)
