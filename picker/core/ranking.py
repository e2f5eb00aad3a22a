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
    BOUND_CHUNK,
    Tally,
    bound_chunk,
    conditional_counts,
    integrated_codes,
)
from picker.core.montecarlo import Simulation, count_passing
from picker.core.sampling import Rows
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
    u: Rows,
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
    u: Rows,
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
    first, screen = select_for_montecarlo(sim, designs, m)
    first = np.sort(first)
    names, codes = integrated_codes(sim, designs)
    samples = u.shape[0]
    f_nom = designs.f_nominal
    # Memory (five million designs): the checked designs' sums live in small arrays
    # (at most the cap), the designs still in play in arrays aligned with ``alive``
    # (design order, filtered together), everything else in one byte or none.
    checked = np.zeros(len(designs), dtype=bool)
    c_idx = np.zeros(0, dtype=np.int64)
    c_tally = Tally(np.zeros(0), np.zeros(0), np.zeros(0, dtype=np.int64), samples, names[:0])

    def count(sel: np.ndarray, uu: Rows) -> Tally:
        return conditional_counts(
            sim, designs.take(sel), uu, integrated=names[codes[sel]], workers=workers
        )

    def check(sel: np.ndarray) -> None:
        nonlocal c_idx, c_tally
        sel = np.sort(sel)
        t = count(sel, u)
        checked[sel] = True
        c_idx = np.concatenate([c_idx, sel])
        c_tally = _joined(c_tally, t)
        o = np.argsort(c_idx, kind="stable")  # design order: ties by index as before
        c_idx, c_tally = c_idx[o], c_tally.take(o)

    def floor() -> tuple[float, float]:
        return _floor(f_nom[c_idx], c_tally, top=top, target=target)

    def can_reach(sel: np.ndarray, value: np.ndarray | None, f: tuple[float, float]) -> np.ndarray:
        return _can_reach(f_nom, sel, value, f, target)

    def by_pilot(sel: np.ndarray, pilot: np.ndarray, k: int) -> np.ndarray:
        """The first k of ``sel`` by pilot (descending), then index: only the designs
        that can be among them are sorted (the same k as a full sort)."""
        if 0 < k < len(sel):
            near = pilot >= np.partition(pilot, len(sel) - k)[len(sel) - k]  # k-th largest
            sel, pilot = sel[near], pilot[near]
        return sel[np.lexsort((sel, -pilot))][:k]

    check(first)
    alive, a_bound = _bound_survivors(sim, designs, names, codes, checked, floor(), target)
    if len(alive) > PILOT_ALL:  # step 1b: the screen's calibrated filter
        y = c_tally.mean()
        se = np.sqrt(np.maximum(y * (1 - y), 1.0 / samples) / samples)
        delta = float(np.max(np.abs(screen[c_idx] - y) + 4 * se))
        near = screen[alive] >= floor()[0] - delta
        alive = alive[near]
        a_bound = None if a_bound is None else a_bound[near]
    a_pilot: np.ndarray | None = None  # None: the screen (no pilot has run)
    a_upper: np.ndarray | None = None  # None: +inf
    cap = max(CAP_MIN, TOP_UP_CAP * m)
    for stage, rows in enumerate(PILOT_ROWS):
        if rows >= samples or len(alive) == 0 or len(alive) * rows > cap * samples:
            break  # a pilot dearer than checking the cap in full does not pay
        pt = count(alive, u[:rows])
        a_pilot = pt.mean()
        high = pt.mean() + PILOT_SE * pt.std_error()
        a_upper = high.copy()
        if stage == 0:  # the best by pilot: y_N near its final value before eliminating
            best = by_pilot(alive, a_pilot, top)
            check(best)
            high[np.isin(alive, best)] = -np.inf
        ok = can_reach(alive, high, floor())
        alive, a_pilot, a_upper = alive[ok], a_pilot[ok], a_upper[ok]
        a_bound = None if a_bound is None else a_bound[ok]
    while True:
        f = floor()
        ok = ~checked[alive] & can_reach(alive, a_bound, f)
        if a_upper is not None:
            ok &= can_reach(alive, a_upper, f)
        alive = alive[ok]
        a_bound = None if a_bound is None else a_bound[ok]
        a_pilot = None if a_pilot is None else a_pilot[ok]
        a_upper = None if a_upper is None else a_upper[ok]
        room = cap - len(c_idx)
        if len(alive) == 0 or room <= 0:
            break
        # the gathered screen is freed before the check (40 MB at five million designs)
        nxt = by_pilot(alive, screen[alive] if a_pilot is None else a_pilot, min(m, room))
        check(nxt)
    o = estimate_order(c_tally.mean(), f_nom[c_idx], target)
    return c_idx[o], c_tally.take(o), screen[c_idx[o]]


def _joined(a: Tally, b: Tally) -> Tally:
    """Two tallies of different designs over the same boards, one after the other."""
    return Tally(
        np.concatenate([a.total, b.total]),
        np.concatenate([a.square, b.square]),
        np.concatenate([a.passed, b.passed]),
        a.samples,
        np.concatenate([a.integrated, b.integrated]),
    )


def _floor(f_nominal: np.ndarray, t: Tally, *, top: int, target: float) -> tuple[float, float]:
    """y_N − margin of the checked designs (``f_nominal`` and ``t`` theirs, in design
    order), and the N-th's |error| (a tie at y_N exactly goes by error)."""
    y = t.mean()
    if len(y) < top:  # fewer checked than N: any design may still enter the top N
        return -np.inf, np.inf
    best = estimate_order(y, f_nominal, target)[:top]
    last = best[-1]
    margin = BOUND_MARGIN_SE * float(np.max(t.std_error()[best]))
    last_err = abs(float(np.log(f_nominal[last] / target)))
    return float(y[last]) - margin, last_err if margin == 0 else np.inf


def _can_reach(
    f_nominal: np.ndarray,
    sel: np.ndarray,
    value: np.ndarray | None,
    f: tuple[float, float],
    target: float,
) -> np.ndarray:
    """Designs ``sel`` whose upper value (None: 1 for all) passes the floor, or meets
    it and wins the tie by |nominal error| (computed for the ties only)."""
    if value is None:  # every value 1: one comparison, no array of ones
        out = np.full(len(sel), 1.0 > f[0])
        tie = np.arange(len(sel)) if 1.0 == f[0] else np.zeros(0, dtype=np.int64)
    else:
        out = value > f[0]
        tie = np.flatnonzero(value == f[0])
    if len(tie):
        out[tie] = np.abs(np.log(f_nominal[sel[tie]] / target)) <= f[1]
    return out


def _bound_survivors(
    sim: Simulation,
    designs: Designs,
    names: np.ndarray,
    codes: np.ndarray,
    checked: np.ndarray,
    f: tuple[float, float],
    target: float,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Step 1 of :func:`conditional_rank` in chunks: the unchecked designs whose proven
    bound reaches the floor ``f`` (int32, design order), and their bounds (None: all 1)."""
    n = len(designs)
    keep, bounds = [np.zeros(0, dtype=np.int32)], [np.zeros(0)]
    for s in range(0, n, BOUND_CHUNK):
        sel = np.arange(s, min(s + BOUND_CHUNK, n), dtype=np.int32)  # n <= 5e6 < 2^31
        sel = sel[~checked[sel]]
        b = bound_chunk(sim, designs.take(sel), names[codes[sel]])
        ok = _can_reach(designs.f_nominal, sel, b, f, target)
        keep.append(sel[ok])
        bounds.append(b[ok])
    alive = np.concatenate(keep)
    del keep
    # no design with a bound below 1 (a Clapp integrating C3): keep no array of ones
    if all(bool(np.all(b == 1.0)) for b in bounds):
        return alive, None
    return alive, np.concatenate(bounds)
