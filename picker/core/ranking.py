"""Two-stage ranking: first-order screen, then Monte Carlo with a safety top-up.

The screen (:mod:`picker.core.screen`) orders every feasible design; the best ``m``
go to the Monte Carlo pass. Because the screen is only approximate, the pass
then *tops up*: with y_N the Monte Carlo yield of the N-th best design so far
and δ the largest disagreement between screen and Monte Carlo seen on the
checked designs (plus four binomial standard errors), every unchecked design
whose screen yield is at least y_N − δ is checked too, until none is left.
This is what keeps the screen from dropping a design that Monte Carlo would
rank in the top N.
"""

from __future__ import annotations

import numpy as np

from picker.core.montecarlo import Simulation, count_passing
from picker.core.screen import select_for_montecarlo
from picker.core.search import Designs

#: At most this many times m designs are Monte Carlo checked.
TOP_UP_CAP = 20


def rank_order(passed: np.ndarray, f_nominal: np.ndarray, target: float) -> np.ndarray:
    """Monte Carlo yield first, then |nominal error|, then the search order."""
    err = np.abs(np.log(f_nominal / target))
    return np.lexsort((np.arange(len(passed)), err, -passed))


def monte_carlo_rank(
    sim: Simulation,
    designs: Designs,
    u: np.ndarray,
    *,
    m: int,
    top: int,
    target: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rank designs by Monte Carlo yield.

    Returns
    -------
    checked : (k,) int, indices into ``designs`` that were Monte Carlo checked,
        in rank order (best first).
    passed : (k,) int, passing boards of each, same order.
    screen : (k,) float, screen yield of each, same order.
    """
    n = u.shape[0]
    order, screen = select_for_montecarlo(sim, designs, len(designs))
    checked = np.zeros(len(designs), dtype=bool)
    passed = np.zeros(len(designs), dtype=np.int64)
    first = order[:m]
    passed[first] = count_passing(sim, designs.take(first), u)
    checked[first] = True
    cap = min(len(designs), TOP_UP_CAP * m)
    while checked.sum() < cap:
        idx = np.flatnonzero(checked)
        y = passed[idx] / n
        se = np.sqrt(np.maximum(y * (1 - y), 1.0 / n) / n)
        delta = float(np.max(np.abs(screen[idx] - y) + 4 * se))
        y_n = np.sort(y)[::-1][min(top, len(y)) - 1]
        rest = order[~checked[order]]
        more = rest[screen[rest] >= y_n - delta]
        if len(more) == 0:
            break
        more = more[: cap - int(checked.sum())]
        passed[more] = count_passing(sim, designs.take(more), u)
        checked[more] = True
    idx = np.flatnonzero(checked)
    ranked = idx[rank_order(passed[idx], designs.f_nominal[idx], target)]
    return ranked, passed[ranked], screen[ranked]
