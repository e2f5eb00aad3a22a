"""Precision on demand: continue the Monte Carlo of ranked designs until the interval is narrow.

The run's first batch of common random numbers ``u0`` has already been
counted; :func:`refine` continues the same seeded stream
(:func:`picker.core.sampling.adaptive_batches`) until the Wilson half-width of
every design's yield is at most ``[yield] precision``, and :func:`reorder`
ranks the designs again on the final counts. Axis convention: samples on
axis 0, columns of :meth:`~picker.core.montecarlo.Simulation.columns` on axis 1.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from picker.core.conditional import Tally, conditional_counts, half_widths
from picker.core.montecarlo import Simulation, count_passing
from picker.core.ranking import rank_order
from picker.core.sampling import adaptive_batches, uniform_batches
from picker.core.search import Designs


def refine(
    sim: Simulation,
    designs: Designs,
    u0: np.ndarray,
    passed0: np.ndarray,
    *,
    seed: int,
    method: str,
    precision: float,
    max_samples: int,
    confidence: float,
    progress: Callable[[int, int, float], None] | None = None,
) -> tuple[np.ndarray, np.ndarray, bool]:
    """Continue the Monte Carlo of ``designs`` in batches until the CI is narrow enough.

    The batch stream is :func:`picker.core.sampling.adaptive_batches` seeded like
    the run, so its first batch *is* ``u0`` (whose counts ``passed0`` are
    reused) and the whole run is reproducible from the seed.

    Returns
    -------
    (passed, u, converged) : (n,) int64, (samples, k) float, bool
    """
    batches: list[np.ndarray] = []

    def count(u: np.ndarray) -> np.ndarray:
        first = not batches
        batches.append(u)
        if first and u.shape == u0.shape and np.array_equal(u, u0):
            return passed0
        return count_passing(sim, designs, u)

    res = adaptive_batches(
        count,
        u0.shape[1],
        precision=precision,
        max_samples=max_samples,
        rng=np.random.default_rng(seed),
        method=method,
        first=u0.shape[0],
        confidence=confidence,
        progress=progress,
    )
    return res.passed, np.vstack(batches), res.converged


def single(designs: Designs, r: int) -> Designs:
    """Design ``r`` alone, as a struct of arrays of length one."""
    return designs.take(np.array([r]))


def reorder(passed: np.ndarray, designs: Designs, target: float) -> np.ndarray:
    """Rank order after refinement (:func:`picker.core.ranking.rank_order`)."""
    return rank_order(passed, designs.f_nominal, target)


def refine_tally(
    sim: Simulation,
    designs: Designs,
    u0: np.ndarray,
    tally0: Tally,
    *,
    seed: int,
    method: str,
    precision: float,
    max_samples: int,
    confidence: float,
    workers: int = 1,
    progress: Callable[[int, int, float], None] | None = None,
) -> tuple[Tally, np.ndarray, bool]:
    """:func:`refine` for the conditional estimator: batches until every half-width is narrow.

    The stream is :func:`picker.core.sampling.uniform_batches` seeded like the
    run, so its first batch is ``u0`` (whose tally ``tally0`` is reused); the
    half-width is the estimator's own (:func:`picker.core.conditional.half_widths`:
    z·s/√n, or Wilson for a design sampled plainly). The sample cap is
    ``max_samples`` (for Sobol rounded down to a power of two).

    Returns
    -------
    (tally, u, converged)
    """
    if not 0 < precision < 1:
        raise ValueError(f"expected a precision in (0, 1), got {precision}")
    cap = int(max_samples)
    if method == "sobol":
        cap = 1 << (cap.bit_length() - 1)
    batches: list[np.ndarray] = []
    tally: Tally | None = None
    worst = 1.0
    stream = uniform_batches(
        u0.shape[1], method=method, rng=np.random.default_rng(seed), first=u0.shape[0]
    )
    for u in stream:
        n = 0 if tally is None else tally.samples
        if n + u.shape[0] > cap:
            u = u[: cap - n]
        if u.shape[0] == 0:
            break
        if tally is None and u.shape == u0.shape and np.array_equal(u, u0):
            got = tally0
        else:
            got = conditional_counts(sim, designs, u, integrated=tally0.integrated, workers=workers)
        tally = got if tally is None else tally.plus(got)
        batches.append(u)
        worst = float(np.max(half_widths(tally, confidence))) if len(designs) else 0.0
        if progress is not None:
            progress(tally.samples, cap, worst)
        if worst <= precision or tally.samples >= cap:
            break
    assert tally is not None
    return tally, np.vstack(batches), bool(worst <= precision)
