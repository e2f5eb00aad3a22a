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

from picker.core.conditional import (
    Tally,
    conditional_counts,
    integrated_positions,
    yield_upper_bound,
)
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


def estimate_order(mean: np.ndarray, f_nominal: np.ndarray, target: float) -> np.ndarray:
    """Yield estimate first (descending), then |nominal error|, then the given order."""
    err = np.abs(np.log(f_nominal / target))
    return np.lexsort((np.arange(len(mean)), err, -mean))


#: Standard errors of margin between a design's proven bound and the N-th estimate.
BOUND_MARGIN_SE = 4.0


def conditional_rank(
    sim: Simulation,
    designs: Designs,
    u: np.ndarray,
    *,
    m: int,
    top: int,
    target: float,
    workers: int = 1,
) -> tuple[np.ndarray, Tally, np.ndarray]:
    """Rank designs by conditional Monte Carlo yield (:mod:`picker.core.conditional`).

    The best ``m`` designs by screen are checked first. Then every unchecked
    design whose proven yield bound (:func:`picker.core.conditional.yield_upper_bound`)
    reaches the N-th best estimate so far, less four standard errors (the
    largest of the checked top N; the estimate of an unchecked design could
    exceed its yield by sampling noise), may still enter the top N: those are
    checked, highest bound first, ``m`` at a time, until no unchecked bound
    reaches it. A design whose bound is unknown (1: a circuit model, drift, a
    Clapp design integrating out C3) falls back to the screen's top-up of
    :func:`monte_carlo_rank` (screen yield within the largest screen error seen
    plus four standard errors, at most :data:`TOP_UP_CAP` × m designs).

    Returns
    -------
    checked : (k,) int, indices into ``designs`` in rank order (best first).
    tally : the :class:`~picker.core.conditional.Tally` of those, same order.
    screen : (k,) float, their screen yields, same order.
    """
    n_all = len(designs)
    order, screen = select_for_montecarlo(sim, designs, n_all)
    integrated = integrated_positions(sim, designs)
    bound = yield_upper_bound(sim, designs, integrated)
    proven = bound < 1.0
    checked = np.zeros(n_all, dtype=bool)
    total = np.zeros(n_all)
    square = np.zeros(n_all)
    passed = np.zeros(n_all, dtype=np.int64)
    samples = u.shape[0]

    def check(sel: np.ndarray) -> None:
        t = conditional_counts(
            sim, designs.take(sel), u, integrated=integrated[sel], workers=workers
        )
        total[sel], square[sel], passed[sel] = t.total, t.square, t.passed
        checked[sel] = True

    def tally(sel: np.ndarray) -> Tally:
        return Tally(total[sel], square[sel], passed[sel], samples, integrated[sel])

    check(order[:m])
    cap = min(n_all, TOP_UP_CAP * m)
    while True:
        idx = np.flatnonzero(checked)
        t = tally(idx)
        y = t.mean()
        best = np.argsort(-y, kind="stable")[: min(top, len(y))]
        y_n = float(y[best[-1]])
        margin = BOUND_MARGIN_SE * float(np.max(t.std_error()[best]))
        rest = np.flatnonzero(~checked)
        # proven designs that may still reach the top N, highest bound first
        reach = rest[proven[rest] & (bound[rest] >= y_n - margin)]
        reach = reach[np.lexsort((reach, -bound[reach]))][:m]
        # unproven designs: the screen's top-up, capped
        se = np.sqrt(np.maximum(y * (1 - y), 1.0 / samples) / samples)
        delta = float(np.max(np.abs(screen[idx] - y) + 4 * se))
        loose = order[~checked[order] & ~proven[order]]
        n_loose = int(np.count_nonzero(checked & ~proven))
        loose = loose[screen[loose] >= y_n - delta][: max(0, cap - n_loose)]
        more = np.concatenate([reach, loose])
        if len(more) == 0:
            break
        check(np.sort(more))
    idx = np.flatnonzero(checked)
    t = tally(idx)
    ranked = idx[estimate_order(t.mean(), designs.f_nominal[idx], target)]
    return ranked, tally(ranked), screen[ranked]
