"""Uniform variates for the Monte Carlo: plain random or scrambled Sobol, and batching.

Axis convention: samples on axis 0, variates (part positions, drift columns)
on axis 1. Every variate is strictly inside (0, 1), so inverse CDFs such as
``scipy.stats.norm.ppf`` stay finite.

Sobol points keep their balance only in blocks of n = 2^m (scipy.stats.qmc.Sobol
documentation; REFERENCES.md), so ``method="sobol"`` rounds the sample count up
to the next power of two, and :func:`adaptive_batches` grows a Sobol run in
doubling batches so that the running total stays a power of two. Scrambling
(Owen-type, scipy's ``scramble=True``) makes the estimate unbiased and lets the
binomial interval be used as for plain sampling (a conservative reading: the
true error of a scrambled Sobol estimate is usually smaller).

Streaming (:class:`RandomRows`): the run's matrix of variates is never held
whole. Its row ``r`` is a fixed function of the seed, the column count and
the method alone: the ``r``-th row of one seeded stream (PCG64 jumped ahead
with ``advance``, or the scrambled Sobol engine moved on with
``fast_forward``), exactly what ``uniform_matrix`` would have drawn. Any
batch of rows, of any size, drawn in any order, is therefore the same
numbers, and every sum over the rows is taken over a fixed grid of row chunks
by its consumer, so the results do not depend on the batch size.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from typing import TypeAlias

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import ndtri

METHODS = ("random", "sobol")
_EPS = 2.0**-53


def _open_interval(u: np.ndarray) -> np.ndarray:
    """Map [0, 1) variates into (0, 1) by nudging exact zeros (probability 2^-53 each)."""
    return np.clip(u, _EPS, 1.0 - _EPS, out=u)  # in place: no second copy of a large matrix


def sobol_size(n: int) -> int:
    """Smallest power of two >= n (the Sobol block size used for n samples).

    Examples
    --------
    >>> sobol_size(1000), sobol_size(1024), sobol_size(1)
    (1024, 1024, 1)
    """
    if n < 1:
        raise ValueError(f"expected at least one sample, got {n}")
    return 1 << (int(n) - 1).bit_length()


def uniform_matrix(
    n: int, k: int, *, method: str = "random", rng: np.random.Generator
) -> np.ndarray:
    """A matrix of uniform variates in (0, 1).

    Parameters
    ----------
    n : int
        Samples wanted. With ``method="sobol"`` the result has
        ``sobol_size(n)`` rows (n rounded up to a power of two).
    k : int
        Number of columns (independent variates per sample).
    method : {"random", "sobol"}
        ``"random"``: ``rng.random((n, k))``. ``"sobol"``: scrambled Sobol points,
        ``scipy.stats.qmc.Sobol(k, scramble=True, rng=rng).random_base2(m)``.
    rng : numpy.random.Generator
        Source of randomness (the Sobol scrambling is drawn from it too).

    Returns
    -------
    numpy.ndarray, shape (n', k)
        ``n' = n`` for random, ``sobol_size(n)`` for Sobol.
    """
    if method == "random":
        return _open_interval(rng.random((int(n), int(k))))
    if method == "sobol":
        from scipy.stats import qmc  # scipy.stats costs ~0.5 s to import: only for Sobol

        m = sobol_size(n).bit_length() - 1
        return _open_interval(qmc.Sobol(int(k), scramble=True, rng=rng).random_base2(m))
    raise ValueError(f"expected a sampling method, one of {', '.join(METHODS)}; got {method!r}")


#: Up to this many variates (16 MB of floats) the rows of a stream are drawn once and
#: kept; longer runs draw each batch again when it is needed (bounded memory).
CACHE_VALUES = 1 << 21


class RandomRows:
    """The run's uniform variates as a (rows, columns) matrix drawn on demand, never whole.

    Row ``r`` is the ``r``-th row of ``uniform_matrix(·, columns, method=method,
    rng=numpy.random.default_rng(seed))`` (module docstring): the PCG64 stream
    jumped ahead by ``r·columns`` draws (``numpy.random.PCG64.advance``) or the
    scrambled Sobol engine moved on by ``r`` points
    (``scipy.stats.qmc.Sobol.fast_forward``). A slice ``rows[a:b]`` is another
    view of the same stream; :meth:`chunks` yields its rows in batches and
    :meth:`array` draws it whole (for the callers that bound the rows first).

    Parameters
    ----------
    columns : int
        Variates per row.
    rows : int
        Rows of this view (its shape is ``(rows, columns)``).
    seed : int
        Seed of the stream.
    method : {"random", "sobol"}
    start : int
        First row of the view in the stream.
    """

    __slots__ = ("_cache", "columns", "method", "seed", "start", "stop")

    def __init__(
        self,
        columns: int,
        rows: int,
        *,
        seed: int,
        method: str = "random",
        start: int = 0,
        cache: np.ndarray | None = None,
    ) -> None:
        if method not in METHODS:
            raise ValueError(
                f"expected a sampling method, one of {', '.join(METHODS)}; got {method!r}"
            )
        if rows < 0 or start < 0 or columns < 1:
            raise ValueError(f"expected rows >= 0, start >= 0, columns >= 1; got {rows, start}")
        self.columns, self.seed, self.method = int(columns), int(seed), method
        self.start, self.stop = int(start), int(start) + int(rows)
        if cache is None and start == 0 and 0 < rows * columns <= CACHE_VALUES:
            cache = self._draw(0, self.stop)
            cache.flags.writeable = False  # shared by every view: nobody writes into it
        self._cache = cache

    @property
    def shape(self) -> tuple[int, int]:
        return (self.stop - self.start, self.columns)

    def __len__(self) -> int:
        return self.stop - self.start

    def __repr__(self) -> str:
        return (
            f"RandomRows(columns={self.columns}, rows={len(self)}, seed={self.seed}, "
            f"method={self.method!r}, start={self.start})"
        )

    def __getitem__(self, key: slice) -> RandomRows:
        """Rows ``key`` of this view (a slice with step 1), as another view."""
        if not isinstance(key, slice):
            raise TypeError(f"expected a slice of rows, got {key!r}")
        a, b, step = key.indices(len(self))
        if step != 1:
            raise ValueError("expected a slice of rows with step 1")
        return self._view(self.start + a, max(b - a, 0))

    def resized(self, rows: int) -> RandomRows:
        """The view from the same first row with ``rows`` rows (longer or shorter)."""
        return self._view(self.start, rows)

    def _view(self, start: int, rows: int) -> RandomRows:
        return RandomRows(
            self.columns,
            rows,
            seed=self.seed,
            method=self.method,
            start=start,
            cache=self._cache if self._cache is not None else _NO_CACHE,
        )

    def _cached(self, a: int, b: int) -> np.ndarray | None:
        c = self._cache
        if c is not None and c.shape[0] and b <= c.shape[0]:
            return c[a:b]
        return None

    def _engine(self, a: int) -> np.random.Generator | object:
        """A generator standing at row ``a`` of the stream."""
        if self.method == "random":
            bits = np.random.PCG64(self.seed)  # what default_rng(seed) wraps
            if a:
                bits.advance(a * self.columns)  # one 64-bit draw per double
            return np.random.Generator(bits)
        from scipy.stats import qmc  # scipy.stats costs ~0.5 s to import: only for Sobol

        engine = qmc.Sobol(self.columns, scramble=True, rng=np.random.default_rng(self.seed))
        if a:
            engine.fast_forward(a)
        return engine

    def _next(self, engine: object, n: int) -> np.ndarray:
        if isinstance(engine, np.random.Generator):
            return _open_interval(engine.random((n, self.columns)))
        with warnings.catch_warnings():  # pieces of a power-of-two run: balance is kept
            warnings.simplefilter("ignore", UserWarning)
            return _open_interval(engine.random(n))  # type: ignore[attr-defined]

    def _draw(self, a: int, b: int) -> np.ndarray:
        """Rows [a, b) of the stream (absolute row numbers)."""
        return self._next(self._engine(a), b - a)

    def array(self) -> np.ndarray:
        """Every row of the view, shape (rows, columns): bound the rows first."""
        got = self._cached(self.start, self.stop)
        return got if got is not None else self._draw(self.start, self.stop)

    def chunks(self, size: int) -> Iterator[np.ndarray]:
        """The view's rows in order, ``size`` rows at a time (the last may be shorter).

        The pieces start at rows 0, size, 2·size, ... of the view, whatever was
        drawn before; the numbers are those of :meth:`array`.
        """
        size = max(1, int(size))
        engine = None
        for a in range(self.start, self.stop, size):
            b = min(a + size, self.stop)
            got = self._cached(a, b)
            if got is None:
                engine = self._engine(a) if engine is None else engine
                got = self._next(engine, b - a)
            yield got


_NO_CACHE = np.zeros((0, 0))

#: The run's variates: a whole matrix (tests, small runs) or a stream drawn on demand.
Rows: TypeAlias = np.ndarray | RandomRows


def random_rows(n: int, k: int, *, method: str = "random", seed: int) -> RandomRows:
    """The stream of :func:`uniform_matrix` ``(n, k, method, default_rng(seed))``, drawn on demand.

    ``n`` rows for random, ``sobol_size(n)`` for Sobol, as there.
    """
    if method == "sobol":
        n = sobol_size(n)
    return RandomRows(k, n, seed=seed, method=method)


def row_chunks(u: Rows, size: int) -> Iterator[np.ndarray]:
    """Rows of ``u`` (a matrix or a :class:`RandomRows`) in pieces of ``size`` rows."""
    if isinstance(u, RandomRows):
        yield from u.chunks(size)
        return
    for a in range(0, u.shape[0], max(1, int(size))):
        yield u[a : a + size]


def head(u: Rows, n: int) -> np.ndarray:
    """The first ``n`` rows of ``u`` as a matrix (a bounded subsample of the run)."""
    return u[:n].array() if isinstance(u, RandomRows) else u[:n]


def batch_sizes(method: str, first: int, max_batch: int = 1 << 16) -> Iterator[int]:
    """Sizes of the successive batches of :func:`uniform_batches` (endless).

    ``"random"``: ``first``, then doubling up to ``max(max_batch, first)``;
    ``"sobol"``: ``sobol_size(first)``, then the running total (doubling it).
    """
    if method == "random":
        size = int(first)
        while True:
            yield size
            size = min(2 * size, max(int(max_batch), int(first)))
    elif method == "sobol":
        size = sobol_size(first)
        yield size
        total = size
        while True:
            yield total
            total *= 2
    else:
        raise ValueError(f"expected a sampling method, one of {', '.join(METHODS)}; got {method!r}")


def uniform_batches(
    k: int,
    *,
    method: str = "random",
    rng: np.random.Generator,
    first: int = 4096,
    max_batch: int = 1 << 16,
) -> Iterator[np.ndarray]:
    """An endless stream of batches of uniform variates, shape (batch, k) each.

    ``"random"`` yields ``first`` rows, then doubles the batch up to
    ``max_batch`` rows (few batches, bounded memory). ``"sobol"`` continues one
    scrambled Sobol sequence in doubling batches (first, first, 2·first,
    4·first, ...; ``max_batch`` does not apply), so that after every batch the
    total is a power of two and the points stay balanced.
    """
    sizes = batch_sizes(method, first, max_batch)
    if method == "random":
        for size in sizes:
            yield _open_interval(rng.random((size, int(k))))
    else:
        from scipy.stats import qmc  # only for Sobol (slow import)

        engine = qmc.Sobol(int(k), scramble=True, rng=rng)
        size = next(sizes)
        yield _open_interval(engine.random_base2(size.bit_length() - 1))
        for size in sizes:
            yield _open_interval(engine.random(size))


def normal_quantile(confidence: float) -> float:
    """Two-sided normal quantile z = Φ⁻¹(1/2 + confidence/2) (1.959964 at 95 %)."""
    return float(ndtri(0.5 + confidence / 2.0))


def wilson_interval(
    k: ArrayLike, n: int, confidence: float = 0.95
) -> tuple[np.ndarray, np.ndarray]:
    """Wilson score interval (Wilson 1927, JASA 22) for counts ``k`` of ``n``, vectorised.

    centre = (2np + z²)/(2(n + z²)), half-width = z/(2(n + z²))·√(4np(1 − p) + z²),
    p = k/n, z = Φ⁻¹(1/2 + confidence/2), low 0 at k = 0 and high 1 at k = n,
    without continuity correction (Newcombe 1998, Statistics in Medicine 17; as
    ``scipy.stats.binomtest(k, n).proportion_ci(method="wilson")``, which the
    tests compare with). Returns (low, high), each of the shape of ``k``.
    """
    kk = np.asarray(k, dtype=float)
    z = float(ndtri(0.5 + 0.5 * confidence))
    nn = float(n)
    # the same expressions in the same order as Newcombe (1998), eq. for the score
    # interval, so the figures agree with scipy.stats to the last bit
    p = kk / nn
    denom = 2 * (nn + z**2)
    centre = (2 * nn * p + z**2) / denom
    delta = z / denom * np.sqrt(4 * nn * p * (1 - p) + z**2)
    lo = np.where(kk == 0, 0.0, centre - delta)
    hi = np.where(kk == nn, 1.0, centre + delta)
    return lo, hi


def wilson_half_width(k: ArrayLike, n: int, confidence: float = 0.95) -> np.ndarray:
    """Half-width of the Wilson score interval (:func:`wilson_interval`) for each count in ``k``.

    Returns
    -------
    numpy.ndarray, shape of ``k``
    """
    lo, hi = wilson_interval(k, n, confidence)
    return np.asarray((hi - lo) / 2.0)


@dataclass(frozen=True)
class BatchResult:
    """Outcome of an adaptive Monte Carlo run.

    Attributes
    ----------
    passed : numpy.ndarray, shape (candidates,)
        Passing boards per candidate.
    samples : int
        Boards simulated per candidate.
    half_width : numpy.ndarray, shape (candidates,)
        Wilson half-width at ``confidence`` after the last batch.
    batches : int
    converged : bool
        ``True`` when every tracked half-width reached ``precision``.
    """

    passed: np.ndarray
    samples: int
    half_width: np.ndarray
    batches: int
    converged: bool


def adaptive_batches(
    count: Callable[[np.ndarray], np.ndarray],
    k: int,
    *,
    precision: float,
    max_samples: int,
    rng: np.random.Generator,
    method: str = "random",
    first: int = 4096,
    confidence: float = 0.95,
    track: Callable[[np.ndarray, int], np.ndarray] | None = None,
    progress: Callable[[int, int, float], None] | None = None,
) -> BatchResult:
    """Run Monte Carlo batches until the yield interval is narrow enough.

    Parameters
    ----------
    count : callable
        ``count(u) -> passed``: given a batch of uniform variates, shape
        (batch, k), return the passing boards per candidate, shape
        (candidates,). The same batch serves every candidate (common random
        numbers).
    k : int
        Columns of each batch.
    precision : float
        Stop when the Wilson half-width (:func:`wilson_interval`)
        of every tracked candidate is at most this (0.005 = ±0.5 %).
    max_samples : int
        Stop once this many boards are simulated (the last batch may be
        trimmed so the cap holds; for Sobol the cap is rounded down to a power
        of two so balance is kept).
    rng, method, first
        As for :func:`uniform_batches`.
    confidence : float
        Confidence level of the interval.
    track : callable, optional
        ``track(passed, samples) -> mask`` of the candidates whose precision
        matters (default: all), e.g. only those that can still be the best.
    progress : callable, optional
        ``progress(samples, max_samples, worst_half_width)`` after every batch
        (the CLI draws its progress bar from this; the core prints nothing).

    Returns
    -------
    BatchResult
    """
    if not 0 < precision < 1:
        raise ValueError(f"expected a precision in (0, 1), got {precision}")
    cap = int(max_samples)
    if method == "sobol":
        cap = 1 << (cap.bit_length() - 1)  # a power of two <= max_samples
    passed = None
    n = 0
    batches = 0
    half = np.array([1.0])
    for u in uniform_batches(k, method=method, rng=rng, first=first):
        if n + u.shape[0] > cap:
            u = u[: cap - n]
        if u.shape[0] == 0:
            break
        got = np.asarray(count(u), dtype=np.int64)
        passed = got if passed is None else passed + got
        n += u.shape[0]
        batches += 1
        mask = np.ones(passed.shape, bool) if track is None else np.asarray(track(passed, n))
        half = wilson_half_width(passed, n, confidence)
        worst = float(np.max(half[mask])) if np.any(mask) else 0.0
        if progress is not None:
            progress(n, cap, worst)
        if worst <= precision or n >= cap:
            break
    assert passed is not None
    return BatchResult(passed, n, np.atleast_1d(half), batches, bool(worst <= precision))


def samples_for_precision(p: float, precision: float, confidence: float = 0.95) -> int:
    """Rough sample count for a ±precision interval at yield p (normal approximation).

    n ≈ z²·p(1 − p)/precision², z the two-sided normal quantile; a planning
    figure only, the run itself checks the Wilson interval.
    """
    z = normal_quantile(confidence)
    p = min(max(p, 1e-6), 1 - 1e-6)
    return int(math.ceil(z * z * p * (1 - p) / (precision * precision)))


def compare_methods(
    indicator: Callable[[np.ndarray], np.ndarray],
    exact: float,
    k: int,
    ns: Iterable[int],
    *,
    reps: int = 20,
    seed: int = 0,
) -> dict[str, np.ndarray]:
    """Root-mean-square error of random and Sobol yield estimates against a known answer.

    Parameters
    ----------
    indicator : callable
        ``indicator(u) -> bool array (n,)``: does each sample pass.
    exact : float
        The known yield.
    k : int
        Columns of U.
    ns : sequence of int
        Sample counts (powers of two, so both methods use the same n).
    reps : int
        Independent repetitions per method and n (seeds derived from ``seed``).

    Returns
    -------
    dict
        ``{"n": array, "random": rms errors, "sobol": rms errors}``, each shape (len(ns),).
    """
    ns = [int(n) for n in ns]
    out = {"n": np.asarray(ns), "random": np.empty(len(ns)), "sobol": np.empty(len(ns))}
    for method in METHODS:
        ss = np.random.SeedSequence([seed, METHODS.index(method)])
        gens = [np.random.default_rng(s) for s in ss.spawn(reps)]
        for j, n in enumerate(ns):
            err = [
                np.mean(indicator(uniform_matrix(n, k, method=method, rng=g))) - exact for g in gens
            ]
            out[method][j] = float(np.sqrt(np.mean(np.square(err))))
    return out
