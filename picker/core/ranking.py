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
#: Rows of the run's random numbers in each pilot stage (prefixes: the same boards for
#: every design); a stage runs only when it is shorter than the run.
PILOT_ROWS = (64, 512, 4096)
#: The conditional top-up checks at most max(CAP_MIN, TOP_UP_CAP x m) designs in full.
CAP_MIN = 4000
#: Above this many designs admitted by the bound, the screen's filter runs before the pilots.
PILOT_ALL = 200_000
#: A design leaves the top-up when a pilot estimate plus this many of its standard
#: errors stays below the N-th yield (less the margin).
PILOT_SE = 6.0


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

    The best ``m`` designs by screen are checked first (every board of ``u``).
    Then a design may still enter the top N only if

    1. its proven yield bound (:func:`picker.core.conditional.yield_upper_bound`)
       reaches y_N − margin, y_N the N-th best checked estimate and the margin
       four standard errors (the largest of the checked top N: the estimate of
       an unchecked design could exceed its yield by that noise);
    1b. only when more than :data:`PILOT_ALL` designs pass step 1: its screen
       yield lies within the screen's largest error seen on the checked
       designs (plus four binomial standard errors) of y_N − margin, the
       calibrated filter of :func:`monte_carlo_rank` (a heuristic), which keeps
       the pilots affordable on spaces of millions of designs; and
    2. at every pilot stage (the conditional estimator on the first
       :data:`PILOT_ROWS` boards; a stage runs only while it costs less than
       checking the cap in full), its estimate plus :data:`PILOT_SE` of its
       standard errors reaches y_N − margin too: a statistical elimination
       (six standard errors) for flat spaces, where the proof of step 1 cannot
       separate designs of nearly equal yield. After the first stage the best
       N designs by pilot are checked, so y_N is close to its final value.

    The survivors are checked, highest pilot first, ``m`` at a time, until
    none is left or max(:data:`CAP_MIN`, :data:`TOP_UP_CAP` × m) designs are checked (a flat space
    whose designs cannot be told apart from the N-th at the run's own
    precision; the benchmark space stops well below it). A design whose bound is unknown (1: drift, a Clapp design
    integrating out C3) passes step 1 and meets step 2 like any other.

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
    checked = np.zeros(n_all, dtype=bool)
    pilot = screen.copy()  # last pilot estimate (checking order; the screen before any)
    upper = np.full(n_all, np.inf)  # last pilot estimate + PILOT_SE standard errors
    total = np.zeros(n_all)
    square = np.zeros(n_all)
    passed = np.zeros(n_all, dtype=np.int64)
    samples = u.shape[0]

    def count(sel: np.ndarray, uu: np.ndarray) -> Tally:
        return conditional_counts(
            sim, designs.take(sel), uu, integrated=integrated[sel], workers=workers
        )

    def check(sel: np.ndarray) -> None:
        sel = np.sort(sel)
        t = count(sel, u)
        total[sel], square[sel], passed[sel] = t.total, t.square, t.passed
        checked[sel] = True

    def tally(sel: np.ndarray) -> Tally:
        return Tally(total[sel], square[sel], passed[sel], samples, integrated[sel])

    def floor() -> tuple[float, float]:
        """y_N − margin, and the N-th's |error| (a tie at y_N exactly goes by error)."""
        idx = np.flatnonzero(checked)
        t = tally(idx)
        y = t.mean()
        best = estimate_order(y, designs.f_nominal[idx], target)[: min(top, len(y))]
        last = best[-1]
        margin = BOUND_MARGIN_SE * float(np.max(t.std_error()[best]))
        last_err = abs(float(np.log(designs.f_nominal[idx[last]] / target)))
        return float(y[last]) - margin, last_err if margin == 0 else np.inf

    def can_reach(sel: np.ndarray, value: np.ndarray, f: tuple[float, float]) -> np.ndarray:
        """Designs whose upper value passes the floor (or meets it and wins the tie)."""
        err = np.abs(np.log(designs.f_nominal[sel] / target))
        return (value > f[0]) | ((value == f[0]) & (err <= f[1]))

    def by_pilot(sel: np.ndarray) -> np.ndarray:
        return sel[np.lexsort((sel, -pilot[sel]))]

    def screen_reach(sel: np.ndarray) -> np.ndarray:
        """The screen's calibrated filter (as in :func:`monte_carlo_rank`): screen
        yield within the largest screen error seen on checked designs, plus four
        standard errors, of y_N."""
        idx = np.flatnonzero(checked)
        y = tally(idx).mean()
        se = np.sqrt(np.maximum(y * (1 - y), 1.0 / samples) / samples)
        delta = float(np.max(np.abs(screen[idx] - y) + 4 * se))
        return screen[sel] >= floor()[0] - delta

    check(order[:m])
    alive = np.flatnonzero(~checked)
    alive = alive[can_reach(alive, bound[alive], floor())]
    if len(alive) > PILOT_ALL:
        alive = alive[screen_reach(alive)]
    cap = max(CAP_MIN, TOP_UP_CAP * m)
    for stage, rows in enumerate(PILOT_ROWS):
        if rows >= samples or len(alive) == 0 or len(alive) * rows > cap * samples:
            break  # a pilot dearer than checking the cap in full does not pay
        pt = count(alive, u[:rows])
        pilot[alive] = pt.mean()
        high = pt.mean() + PILOT_SE * pt.std_error()
        upper[alive] = high
        if stage == 0:  # the best by pilot: y_N near its final value before eliminating
            first = by_pilot(alive)[:top]
            check(first)
            high[np.isin(alive, first)] = -np.inf
        alive = alive[can_reach(alive, high, floor())]
    while True:
        f = floor()
        alive = alive[~checked[alive]]
        alive = alive[can_reach(alive, bound[alive], f) & can_reach(alive, upper[alive], f)]
        room = cap - int(np.count_nonzero(checked))
        if len(alive) == 0 or room <= 0:
            break
        check(by_pilot(alive)[: min(m, room)])
    idx = np.flatnonzero(checked)
    t = tally(idx)
    ranked = idx[estimate_order(t.mean(), designs.f_nominal[idx], target)]
    return ranked, tally(ranked), screen[ranked]
