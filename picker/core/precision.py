"""Precision on demand: continue the Monte Carlo of ranked designs until the interval is narrow.

The run's first batch of common random numbers ``u0`` has already been
counted; :func:`refine` continues the same seeded stream in batches
(:func:`stream_batches`, the sizes of :func:`picker.core.sampling.uniform_batches`)
until the Wilson half-width of every design's yield is at most ``[yield]
precision``, and :func:`reorder` ranks the designs again on the final counts.
The rows are a :class:`~picker.core.sampling.RandomRows` stream, drawn batch by
batch and never held whole, so a run of a hundred million boards takes no more
memory than one of a million. Axis convention: samples on
axis 0, columns of :meth:`~picker.core.montecarlo.Simulation.columns` on axis 1.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

from picker.core.conditional import Tally, conditional_counts, half_widths
from picker.core.montecarlo import Simulation, count_passing
from picker.core.ranking import rank_order
from picker.core.sampling import RandomRows, Rows, batch_sizes, wilson_half_width
from picker.core.search import Designs


def stream_batches(u0: Rows, *, seed: int, method: str, max_samples: int) -> Iterator[RandomRows]:
    """The batches of a precision run as views of one stream, the first being ``u0``'s rows.

    The sizes are those of :func:`picker.core.sampling.uniform_batches` with
    ``first = u0.shape[0]`` (seeded like the run, so its first batch *is*
    ``u0``); the run stops at ``max_samples`` boards (for Sobol rounded down to a
    power of two, so balance is kept), the last batch trimmed. Each batch is a
    :class:`~picker.core.sampling.RandomRows` view, drawn when counted.
    """
    cap = int(max_samples)
    if method == "sobol":
        cap = 1 << (cap.bit_length() - 1)  # a power of two <= max_samples
    k = u0.shape[1]
    if isinstance(u0, RandomRows):
        whole = u0.resized(max(cap, u0.shape[0]))
    else:
        whole = RandomRows(k, max(cap, u0.shape[0]), seed=seed, method=method)
    n = 0
    for size in batch_sizes(method, u0.shape[0]):
        size = min(size, cap - n)
        if size <= 0:
            return
        yield whole[n : n + size]
        n += size


def refine(
    sim: Simulation,
    designs: Designs,
    u0: Rows,
    passed0: np.ndarray,
    *,
    seed: int,
    method: str,
    precision: float,
    max_samples: int,
    confidence: float,
    progress: Callable[[int, int, float], None] | None = None,
) -> tuple[np.ndarray, RandomRows, bool]:
    """Continue the Monte Carlo of ``designs`` in batches until the CI is narrow enough.

    The batches are :func:`stream_batches`: the first *is* ``u0`` (whose counts
    ``passed0`` are reused) and the whole run is reproducible from the seed.
    Stops when the Wilson half-width (:func:`picker.core.sampling.wilson_interval`)
    of every design is at most ``precision``, or at the cap.

    Returns
    -------
    (passed, u, converged) : (n,) int64, the run's rows (a stream view), bool
    """
    if not 0 < precision < 1:
        raise ValueError(f"expected a precision in (0, 1), got {precision}")
    cap = int(max_samples)
    if method == "sobol":
        cap = 1 << (cap.bit_length() - 1)
    passed = None
    worst = 1.0
    u = None
    for batch in stream_batches(u0, seed=seed, method=method, max_samples=max_samples):
        got = passed0 if passed is None else count_passing(sim, designs, batch)
        got = np.asarray(got, dtype=np.int64)
        passed = got if passed is None else passed + got
        u = batch if u is None else u.resized(len(u) + len(batch))
        half = wilson_half_width(passed, len(u), confidence)
        worst = float(np.max(half)) if np.size(half) else 0.0
        if progress is not None:
            progress(len(u), cap, worst)
        if worst <= precision or len(u) >= cap:
            break
    assert passed is not None and u is not None
    return passed, u, bool(worst <= precision)


def single(designs: Designs, r: int) -> Designs:
    """Design ``r`` alone, as a struct of arrays of length one."""
    return designs.take(np.array([r]))


def reorder(passed: np.ndarray, designs: Designs, target: float) -> np.ndarray:
    """Rank order after refinement (:func:`picker.core.ranking.rank_order`)."""
    return rank_order(passed, designs.f_nominal, target)


def refine_tally(
    sim: Simulation,
    designs: Designs,
    u0: Rows,
    tally0: Tally,
    *,
    seed: int,
    method: str,
    precision: float,
    max_samples: int,
    confidence: float,
    workers: int = 1,
    progress: Callable[[int, int, float], None] | None = None,
) -> tuple[Tally, RandomRows, bool]:
    """:func:`refine` for the conditional estimator: batches until every half-width is narrow.

    The batches are :func:`stream_batches`, so the first is ``u0`` (whose
    tally ``tally0`` is reused); the
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
    tally: Tally | None = None
    u = None
    worst = 1.0
    for batch in stream_batches(u0, seed=seed, method=method, max_samples=max_samples):
        if tally is None:
            got = tally0
        else:
            got = conditional_counts(
                sim, designs, batch, integrated=tally0.integrated, workers=workers
            )
        tally = got if tally is None else tally.plus(got)
        u = batch if u is None else u.resized(len(u) + len(batch))
        worst = float(np.max(half_widths(tally, confidence))) if len(designs) else 0.0
        if progress is not None:
            progress(tally.samples, cap, worst)
        if worst <= precision or tally.samples >= cap:
            break
    assert tally is not None and u is not None
    return tally, u, bool(worst <= precision)
