"""Unit price from quantity price breaks (pure, vectorised).

A part's price list is a set of breaks ``(min_qty, unit_price)``: buying ``q``
units costs ``q`` times the unit price of the largest break whose ``min_qty`` is
at most ``q``. A quantity below the first break is priced at the first break
(the first break is then the minimum order; you pay its price on what you use).
This is how distributors quote (common practice, no source). A part with no
break at all has an unknown price, reported as NaN.

Breaks are stored padded, one row per part: ``break_qty`` (n, k), ascending
over its finite entries, with ``inf`` in unused slots (anywhere in the row),
``break_price`` (n, k) with NaN in unused slots.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike


def pad_breaks(breaks: list[tuple[tuple[float, float], ...]]) -> tuple[np.ndarray, np.ndarray]:
    """Pack per-part break lists into padded arrays.

    Parameters
    ----------
    breaks:
        One tuple of ``(min_qty, unit_price)`` pairs per part, ascending in ``min_qty``.

    Returns
    -------
    break_qty, break_price:
        Arrays of shape (n, k), k = the longest list (at least 1); unused slots
        hold ``inf`` and NaN.
    """
    n = len(breaks)
    k = max([len(b) for b in breaks] + [1])
    qty = np.full((n, k), np.inf)
    price = np.full((n, k), np.nan)
    for i, b in enumerate(breaks):
        for j, (q, p) in enumerate(b):
            qty[i, j] = q
            price[i, j] = p
    return qty, price


def unit_price_from_breaks(
    break_qty: np.ndarray, break_price: np.ndarray, qty: ArrayLike
) -> np.ndarray:
    """Unit price of each part for a purchase of ``qty`` units.

    Parameters
    ----------
    break_qty, break_price:
        Padded break arrays of shape (n, k) (see :func:`pad_breaks`).
    qty:
        Quantity bought, scalar or shape (n,).

    Returns
    -------
    numpy.ndarray
        Shape (n,): the unit price (NaN where the part has no price).

    Examples
    --------
    >>> q, p = pad_breaks([((1, 0.05), (100, 0.03), (1000, 0.01))])
    >>> [float(unit_price_from_breaks(q, p, x)[0]) for x in (1, 99, 100, 5000)]
    [0.05, 0.05, 0.03, 0.01]
    """
    break_qty = np.atleast_2d(np.asarray(break_qty, dtype=float))
    break_price = np.atleast_2d(np.asarray(break_price, dtype=float))
    qty = np.broadcast_to(np.asarray(qty, dtype=float), break_qty.shape[:1])
    applies = break_qty <= qty[:, None]
    # index of the last break that applies; -1 where none applies
    last = break_qty.shape[1] - 1 - np.argmax(applies[:, ::-1], axis=1)
    first = np.argmax(np.isfinite(break_qty), axis=1)
    last = np.where(applies.any(axis=1), last, first)  # below the first break: first break
    return break_price[np.arange(break_qty.shape[0]), last]
