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

from dataclasses import dataclass

import numpy as np

from picker.core.conditional import (
    BOUND_CHUNK,
    Tally,
    bound_chunk,
    conditional_counts,
    integrated_codes,
)
from picker.core.montecarlo import Simulation, count_passing
from picker.core.pilot import pilot_estimates
from picker.core.sampling import Rows, head, normal_quantile
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
PILOT_ROWS = (32, 512, 4096)
#: The conditional top-up checks at most max(CAP_MIN, TOP_UP_CAP x m) designs in full.
CAP_MIN = 4000
#: Above this many designs admitted by the bound, the screen's filter runs before the pilots.
PILOT_ALL = 200_000
#: A design's pilot upper value: its pilot estimate plus this many of its standard errors.
PILOT_SE = 6.0

#: The stop rule, as the JSON and README state it.
TIE_RULE = (
    "a design not checked in full is a tie with the N-th when its upper value (proven "
    "bound, or pilot estimate plus 6 standard errors) reaches the N-th's estimate less "
    "4 standard errors but not the upper end of the N-th's interval: checked in full it "
    "could not be told apart from the N-th"
)


@dataclass(frozen=True)
class Ranking:
    """What :func:`rank_with_ties` found.

    Attributes
    ----------
    checked : (k,) int, indices into the designs, in rank order (best first).
    tally : the :class:`~picker.core.conditional.Tally` of those, same order.
    screen : (k,) float, their screen yields, same order.
    ties : designs not checked in full that are ties with the N-th (:data:`TIE_RULE`).
    unresolved : designs the cap left unchecked although they might beat the N-th.
    resolution : the half-width of the N-th's interval: no tie can beat the N-th
        estimate by more.
    """

    checked: np.ndarray
    tally: Tally
    screen: np.ndarray
    ties: int = 0
    unresolved: int = 0
    resolution: float = 0.0


def conditional_rank(
    sim: Simulation,
    designs: Designs,
    u: Rows,
    *,
    m: int,
    top: int,
    target: float,
    workers: int = 1,
    confidence: float = 0.95,
) -> tuple[np.ndarray, Tally, np.ndarray]:
    """:func:`rank_with_ties` without the tie count: (checked, tally, screen)."""
    r = rank_with_ties(
        sim, designs, u, m=m, top=top, target=target, workers=workers, confidence=confidence
    )
    return r.checked, r.tally, r.screen


def rank_with_ties(
    sim: Simulation,
    designs: Designs,
    u: Rows,
    *,
    m: int,
    top: int,
    target: float,
    workers: int = 1,
    confidence: float = 0.95,
) -> Ranking:
    """Rank designs by conditional Monte Carlo yield (:mod:`picker.core.conditional`).

    The best ``m`` designs by screen are checked first (every board of ``u``).
    With y_N the N-th best checked estimate, h_N the half-width of its interval
    at ``confidence`` and the margin four standard errors (the largest of the
    checked top N: the estimate of an unchecked design could exceed its yield
    by that noise), every other design gets an upper value U:

    1. its proven yield bound (:func:`picker.core.conditional.yield_upper_bound`);
       a design with U below y_N − margin is out;
    1b. only when more than :data:`PILOT_ALL` designs pass step 1: its screen
       yield must lie within the screen's largest error seen on the checked
       designs (plus four binomial standard errors) of y_N − margin, the
       calibrated filter of :func:`monte_carlo_rank` (a heuristic), which keeps
       the pilots affordable on spaces of millions of designs;
    2. at each pilot stage (:func:`picker.core.pilot.pilot_estimates` on the
       first :data:`PILOT_ROWS` boards: the conditional estimator with the
       boards' inputs as control variates; a stage runs only while it costs
       less than checking the cap in full), U becomes the smaller of U and the
       pilot estimate plus :data:`PILOT_SE` of its standard errors (a
       statistical bound), and again a design below y_N − margin is out. After
       the first stage the best N by pilot are checked, so y_N is close to its
       final value.

    **Stop rule** (:data:`TIE_RULE`): a design whose U reaches y_N − margin but
    not y_N + h_N could enter the top N only as a tie with the N-th (its
    interval, checked in full, would overlap the N-th's), so it is counted as
    a tie, not checked. Only designs with U above y_N + h_N go on to the next
    pilot stage and then to full checks, highest pilot first, ``m`` at a time,
    until none is left or max(:data:`CAP_MIN`, :data:`TOP_UP_CAP` × m) designs
    are checked (the rest are counted as unresolved). A design whose bound is
    unknown (1: drift, a Clapp design integrating out C3) passes step 1 and
    meets step 2 like any other.
    """
    first, screen = select_for_montecarlo(sim, designs, m)
    first = np.sort(first)
    names, codes = integrated_codes(sim, designs)
    samples = u.shape[0]
    f_nom = designs.f_nominal
    z = normal_quantile(confidence)
    # Memory (five million designs): the checked designs' sums live in small arrays
    # (at most the cap), the designs still in play in arrays aligned with ``alive``
    # (design order, filtered together), everything else in one byte or none.
    checked = np.zeros(len(designs), dtype=bool)
    c_idx = np.zeros(0, dtype=np.int64)
    c_tally = Tally(np.zeros(0), np.zeros(0), np.zeros(0, dtype=np.int64), samples, names[:0])

    def check(sel: np.ndarray) -> None:
        nonlocal c_idx, c_tally
        sel = np.sort(sel)
        t = conditional_counts(
            sim, designs.take(sel), u, integrated=names[codes[sel]], workers=workers
        )
        checked[sel] = True
        c_idx = np.concatenate([c_idx, sel])
        c_tally = _joined(c_tally, t)
        o = np.argsort(c_idx, kind="stable")  # design order: ties by index as before
        c_idx, c_tally = c_idx[o], c_tally.take(o)

    def floor() -> tuple[float, float]:
        return _floor(f_nom[c_idx], c_tally, top=top, target=target)

    def ceiling() -> float:
        return _ceiling(f_nom[c_idx], c_tally, top=top, target=target, z=z)

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
    alive, a_upper = _bound_survivors(sim, designs, names, codes, checked, floor(), target)
    if len(alive) > PILOT_ALL:  # step 1b: the screen's calibrated filter
        y = c_tally.mean()
        se = np.sqrt(np.maximum(y * (1 - y), 1.0 / samples) / samples)
        delta = float(np.max(np.abs(screen[c_idx] - y) + 4 * se))
        near = screen[alive] >= floor()[0] - delta
        alive = alive[near]
        a_upper = None if a_upper is None else a_upper[near]
    a_pilot: np.ndarray | None = None  # None: the screen (no pilot has run)
    cap = max(CAP_MIN, TOP_UP_CAP * m)

    def needing(upper: np.ndarray | None) -> tuple[slice | np.ndarray, int]:
        """The designs in play whose upper value exceeds y_N + h_N (the rest can only
        tie): a slice when it is every one (five million designs: no index copies)."""
        c = ceiling()
        if upper is None:  # every upper value 1
            return (slice(None), len(alive)) if 1.0 > c else (np.zeros(0, dtype=np.int64), 0)
        high = upper > c
        k = int(high.sum())
        return (slice(None), k) if k == len(alive) else (np.flatnonzero(high), k)

    for stage, rows in enumerate(PILOT_ROWS):
        need, n_need = needing(a_upper)
        if rows >= samples or n_need == 0 or n_need * rows > cap * samples:
            break  # a pilot dearer than checking the cap in full does not pay
        est, se = pilot_estimates(
            sim, designs, alive[need], head(u, rows), names, codes, workers=workers
        )
        if a_pilot is None and n_need == len(alive):
            a_pilot = est
        else:
            if a_pilot is None:
                a_pilot = screen[alive]
            a_pilot[need] = est
        upper = est + PILOT_SE * se
        del se
        if a_upper is None:
            a_upper = np.ones(len(alive))
        a_upper[need] = np.minimum(a_upper[need], upper)
        del upper
        if stage == 0:  # the best by pilot: y_N near its final value before eliminating
            check(by_pilot(alive[need], est, top))
        del est
        ok = ~checked[alive] & can_reach(alive, a_upper, floor())
        alive, a_upper = alive[ok], a_upper[ok]
        a_pilot = a_pilot[ok]
    unresolved = 0
    while True:
        ok = ~checked[alive] & can_reach(alive, a_upper, floor())
        alive = alive[ok]
        a_upper = None if a_upper is None else a_upper[ok]
        a_pilot = None if a_pilot is None else a_pilot[ok]
        need, n_need = needing(a_upper)
        room = cap - len(c_idx)
        if n_need == 0 or room <= 0:
            unresolved = n_need
            break
        # the gathered screen is freed before the check (40 MB at five million designs)
        sel = alive[need]
        nxt = by_pilot(sel, screen[sel] if a_pilot is None else a_pilot[need], min(m, room))
        del sel
        check(nxt)
    o = estimate_order(c_tally.mean(), f_nom[c_idx], target)
    best = o[: min(top, len(o))]
    resolution = float(z * c_tally.std_error()[best[-1]]) if len(best) else 0.0
    return Ranking(
        c_idx[o],
        c_tally.take(o),
        screen[c_idx[o]],
        ties=len(alive) - unresolved,
        unresolved=unresolved,
        resolution=resolution,
    )


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


def _ceiling(f_nominal: np.ndarray, t: Tally, *, top: int, target: float, z: float) -> float:
    """y_N + h_N: the upper end of the N-th checked design's interval (−inf with fewer
    than N checked: any design may still enter the top N, none is a mere tie)."""
    y = t.mean()
    if len(y) < top:
        return -np.inf
    last = estimate_order(y, f_nominal, target)[top - 1]
    return float(y[last] + z * t.std_error()[last])


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
