"""Tolerance distributions: map uniform variates to relative part deviations.

A part of nominal value ``x0`` takes the value ``x0 * (1 + d)``, where ``d`` is
its relative deviation. Every distribution here is written as an inverse CDF
(quantile function) of a uniform variate ``u`` in (0, 1), so that a Monte Carlo
run can draw one matrix of common random numbers, or a scrambled Sobol
sequence, and push each column through the distribution of its position.

Shapes: ``u`` is ``(samples,)`` or ``(samples, 1)``; ``tol`` is a scalar or
``(candidates,)``; results are ``(samples, candidates)`` (samples on axis 0,
candidates on axis 1, the package's convention).

Kinds
-----
``"uniform"``
    Uniform over ±tol, the default (no information beyond the marked limits;
    GUM, JCGM 100:2008, 4.3.7, rectangular distribution).
``"normal"``
    Normal with sigma = tol/3, the convention under which ±tol covers 99.73 %
    (GUM, JCGM 100:2008, 4.3.4 and G.1; REFERENCES.md). By default it is
    *not* truncated, so 0.27 % of parts lie outside their marking, as the
    convention says (and as ``picker.core.screen`` assumes). Pass ``truncate=True``
    to cut it at ±tol, for parts whose final test rejects anything outside
    the marking (common practice, no source).
``"graded"``
    Binned parts: the tighter grade ``|d| < grade`` was sorted out and sold
    separately, so what is left is uniform on [-tol, -grade] ∪ [grade, tol]
    (common practice when parts are binned, no source).
``"graded-normal"``
    As ``"graded"`` but normal (sigma = tol/3) on the two remaining bands.
``"empirical"``
    A measured lot: ``lot`` holds the relative deviations of the measured
    parts; ``u`` maps to the lot's empirical quantile, i.e. resampling the lot
    with replacement (Efron's bootstrap); ``tol`` only sets the output shape.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import ndtr, ndtri

from picker.errors import SpecError

KINDS = ("uniform", "normal", "graded", "graded-normal", "empirical")

#: sigma = tol / COVERAGE_K for the normal kinds (GUM, JCGM 100:2008, G.1: k = 3, 99.73 %).
COVERAGE_K = 3.0

#: Default lower clip of ``u`` before Φ⁻¹ (the upper clip is always 1 − 2^-53, the
#: largest double below one); it keeps Φ⁻¹ finite if a variate is exactly 0.
U_MIN = 2.0**-53


def _shape(u: ArrayLike, tol: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Return ``u`` as a column ``(samples, 1)`` and ``tol`` as a row ``(1, candidates)``."""
    uu = np.asarray(u, dtype=float)
    if uu.ndim == 2 and uu.shape[1] == 1:
        uu = uu[:, 0]
    if uu.ndim != 1:
        raise ValueError(f"u must have shape (samples,) or (samples, 1), got {uu.shape}")
    t = np.atleast_1d(np.asarray(tol, dtype=float))
    if t.ndim != 1:
        raise ValueError(f"tol must be a scalar or have shape (candidates,), got {t.shape}")
    if np.any(t < 0):
        raise SpecError(f"expected a tolerance >= 0; got {t[t < 0][0]!r}", key="tolerance")
    return uu[:, None], t[None, :]


def _check_grade(tol: np.ndarray, grade: ArrayLike | None) -> np.ndarray:
    if grade is None:
        raise SpecError("a graded distribution needs 'grade' (the removed inner tolerance)")
    g = np.asarray(grade, dtype=float)
    if np.any(g < 0) or np.any(g >= tol):
        raise SpecError(
            f"expected 0 <= grade < tolerance; got grade {float(np.max(g))!r} "
            f"with tolerance {float(np.min(tol))!r}",
            key="grade",
        )
    return g


def _check_lot(lot: ArrayLike | None) -> np.ndarray:
    if lot is None:
        raise SpecError("an empirical distribution needs a measured lot")
    x = np.sort(np.asarray(lot, dtype=float).ravel())
    if x.size == 0 or not np.all(np.isfinite(x)):
        raise SpecError("expected a non-empty lot of finite relative deviations")
    return x


def _pdf(z: ArrayLike) -> np.ndarray:
    """Standard normal density φ(z) = exp(−z²/2)/√(2π)."""
    zz = np.asarray(z, dtype=float)
    return np.exp(-0.5 * zz * zz) / np.sqrt(2.0 * np.pi)


def _half_normal_band(v: np.ndarray, a: ArrayLike, b: float) -> np.ndarray:
    """Quantile of |z| for a standard normal restricted to a <= |z| <= b, v in (0, 1)."""
    pa, pb = ndtr(a), ndtr(b)
    return ndtri(pa + v * (pb - pa))


def deviation(
    u: ArrayLike,
    tol: ArrayLike,
    kind: str = "uniform",
    *,
    grade: ArrayLike | None = None,
    lot: ArrayLike | None = None,
    truncate: bool = False,
    u_min: float = U_MIN,
) -> np.ndarray:
    """Relative deviations ``d`` (value = nominal·(1+d)) from uniform variates.

    Parameters
    ----------
    u : array_like, shape (samples,) or (samples, 1)
        Uniform variates in (0, 1); one column of the common random numbers.
    tol : float or array_like, shape (candidates,)
        Relative tolerance of each candidate's part at this position (0.05 = ±5 %).
    kind : str
        One of ``KINDS`` (see the module docstring).
    grade : float, optional
        Inner tolerance removed from the centre (``"graded"``, ``"graded-normal"``).
    lot : array_like, optional
        Relative deviations of a measured lot (``"empirical"``).
    truncate : bool
        Truncate ``"normal"`` at ±tol (default ``False``). The graded-normal
        kind is always cut at ±tol (its outer band edge).
    u_min : float
        Lower clip of ``u`` for ``"normal"`` (default :data:`U_MIN`); the upper
        clip is 1 − 2^-53. Variates from :mod:`picker.core.sampling` already
        lie in [2^-53, 1 − 2^-53], so the clip only matters for other inputs.

    Returns
    -------
    numpy.ndarray, shape (samples, candidates)
        Relative deviations. Each column is a non-decreasing function of ``u``.

    Examples
    --------
    >>> deviation([0.0, 0.5, 1.0], [0.05, 0.1]).round(3).tolist()
    [[-0.05, -0.1], [0.0, 0.0], [0.05, 0.1]]
    """
    uc, t = _shape(u, tol)
    if kind == "uniform":
        # rectangular over ±t: d = t·(2u - 1)
        return t * (2.0 * uc - 1.0)
    if kind == "normal":
        uc = np.clip(uc, u_min, 1.0 - U_MIN)  # keep Φ⁻¹ finite if a variate is exactly 0
        if truncate:
            # inverse CDF of the normal truncated to ±k·sigma: z = Φ⁻¹(Φ(-k) + u·(Φ(k) - Φ(-k)))
            lo, hi = ndtr(-COVERAGE_K), ndtr(COVERAGE_K)
            z = ndtri(lo + uc * (hi - lo))
        else:
            z = ndtri(uc)
        # sigma = t/k; d = (z/k)·t, in this order so that the Monte Carlo's numbers stay as they were
        return z / COVERAGE_K * t
    if kind in ("graded", "graded-normal"):
        g = _check_grade(t, grade)
        # fold u onto a magnitude v in [0, 1] and a sign, keeping d monotone in u
        w = 2.0 * uc - 1.0
        v, sign = np.abs(w), np.sign(w)
        if kind == "graded":
            mag = g + (t - g) * v  # uniform on [g, t]
        else:
            sigma = t / COVERAGE_K  # > 0, since tol > grade >= 0
            mag = sigma * _half_normal_band(v, g / sigma, COVERAGE_K)
        return np.broadcast_to(sign * mag, np.broadcast_shapes(uc.shape, t.shape)).copy()
    if kind == "empirical":
        x = _check_lot(lot)
        # inverse empirical CDF: F⁻¹(u) = x_(⌈n·u⌉), i.e. each lot value with weight 1/n
        idx = np.clip(np.floor(uc * x.size).astype(int), 0, x.size - 1)
        return np.broadcast_to(x[idx], np.broadcast_shapes(uc.shape, t.shape)).copy()
    raise SpecError(f"expected a distribution, one of {', '.join(KINDS)}; got {kind!r}")


def std_of(
    kind: str,
    tol: ArrayLike,
    *,
    grade: ArrayLike | None = None,
    lot: ArrayLike | None = None,
    truncate: bool = False,
) -> np.ndarray:
    """Closed-form relative standard deviation of ``deviation(..., kind)``.

    Parameters
    ----------
    kind, tol, grade, lot, truncate
        As for :func:`deviation`.

    Returns
    -------
    numpy.ndarray, shape of ``tol``
        Standard deviation of the relative deviation ``d``.

    Notes
    -----
    - uniform over ±t: t/√3 (GUM, JCGM 100:2008, 4.3.7).
    - normal, sigma = t/3: t/3 untruncated; truncated at ±3·sigma the variance
      is sigma²·(1 - 2k·φ(k)/(2Φ(k) - 1)) with k = 3 (truncated-normal
      variance, Johnson, Kotz & Balakrishnan, *Continuous Univariate
      Distributions* vol. 1, ch. 13), i.e. 0.98658·t/3.
    - graded uniform on [-t,-g] ∪ [g,t]: E[d²] = (t³ - g³)/(3(t - g)) = (t² + t·g + g²)/3
      (the second moment of a uniform on [g, t]; derived).
    - graded normal: E[z²] = 1 + (a·φ(a) - b·φ(b))/(Φ(b) - Φ(a)) for a normal
      restricted to a <= |z| <= b (same reference), a = g/sigma, b = 3.
    - empirical: the lot's population standard deviation (ddof = 0), which is
      exactly the standard deviation of resampling it.

    Examples
    --------
    >>> float(std_of("uniform", 0.05).round(6))
    0.028868
    """
    t = np.asarray(tol, dtype=float)
    if kind == "uniform":
        return t / np.sqrt(3.0)
    if kind == "normal":
        sigma = t / COVERAGE_K
        if not truncate:
            return sigma
        k = COVERAGE_K
        factor = 1.0 - 2.0 * k * _pdf(k) / (2.0 * ndtr(k) - 1.0)
        return sigma * np.sqrt(factor)
    if kind == "graded":
        g = _check_grade(np.atleast_1d(t), grade)
        return np.sqrt((t * t + t * g + g * g) / 3.0)
    if kind == "graded-normal":
        g = _check_grade(np.atleast_1d(t), grade)
        sigma = t / COVERAGE_K
        a, b = g / sigma, COVERAGE_K
        m2 = 1.0 + (a * _pdf(a) - b * _pdf(b)) / (ndtr(b) - ndtr(a))
        return sigma * np.sqrt(m2)
    if kind == "empirical":
        x = _check_lot(lot)
        return np.broadcast_to(np.std(x), t.shape).astype(float)
    raise SpecError(f"expected a distribution, one of {', '.join(KINDS)}; got {kind!r}")


def mean_of(kind: str, tol: ArrayLike, *, lot: ArrayLike | None = None) -> np.ndarray:
    """Mean relative deviation: zero for the symmetric kinds, the lot mean for a lot.

    Returns
    -------
    numpy.ndarray, shape of ``tol``
    """
    t = np.asarray(tol, dtype=float)
    if kind == "empirical":
        return np.broadcast_to(np.mean(_check_lot(lot)), t.shape).astype(float)
    if kind not in KINDS:
        raise SpecError(f"expected a distribution, one of {', '.join(KINDS)}; got {kind!r}")
    return np.zeros_like(t)


def cdf(
    d: ArrayLike,
    tol: ArrayLike,
    kind: str = "uniform",
    *,
    grade: ArrayLike | None = None,
    lot: ArrayLike | None = None,
    truncate: bool = False,
) -> np.ndarray:
    """Distribution function F(d) = P(D <= d) of the relative deviation :func:`deviation` draws.

    Parameters
    ----------
    d : array_like
        Relative deviations, any shape that broadcasts with ``tol``.
    tol, kind, grade, lot, truncate
        As for :func:`deviation`.

    Returns
    -------
    numpy.ndarray, the broadcast shape of ``d`` and ``tol``.

    Notes
    -----
    - uniform over ±t: F(d) = (d + t)/(2t) clipped to [0, 1] (rectangular
      distribution, GUM JCGM 100:2008, 4.3.7); a zero tolerance is a step at 0.
    - normal, sigma = t/3: F(d) = Φ(d/sigma); truncated at ±t:
      (Φ(d/sigma) − Φ(−3))/(Φ(3) − Φ(−3)) clipped (truncated normal, Johnson,
      Kotz & Balakrishnan, *Continuous Univariate Distributions* vol. 1, ch. 13).
    - graded, uniform on [−t, −g] ∪ [g, t] with half the mass on each band:
      F = (d + t)/(2(t − g)) on the lower band, 1/2 between the bands,
      1/2 + (d − g)/(2(t − g)) on the upper band (derived from the density).
    - graded-normal: 1/2 + sign(d)·M(|d|)/2 with
      M(m) = (Φ(m/sigma) − Φ(g/sigma))/(Φ(3) − Φ(g/sigma)) clipped to [0, 1]
      (the normal restricted to g <= |d| <= t, symmetric; derived).
    - empirical: the share of lot values at most d (each value weight 1/n,
      which is what :func:`deviation` resamples).

    Examples
    --------
    >>> cdf([-0.05, 0.0, 0.025], 0.05).round(3).tolist()
    [0.0, 0.5, 0.75]
    """
    dd = np.asarray(d, dtype=float)
    t = np.asarray(tol, dtype=float)
    if np.any(t < 0):
        raise SpecError(f"expected a tolerance >= 0; got {float(np.min(t))!r}", key="tolerance")
    step = (dd >= 0).astype(float)  # a part with zero tolerance sits at its marked value
    with np.errstate(divide="ignore", invalid="ignore"):
        if kind == "uniform":
            out = np.clip((dd + t) / (2.0 * t), 0.0, 1.0)
        elif kind == "normal":
            z = dd * COVERAGE_K / t  # d / sigma, sigma = t/3
            if truncate:
                lo, hi = ndtr(-COVERAGE_K), ndtr(COVERAGE_K)
                out = np.clip((ndtr(z) - lo) / (hi - lo), 0.0, 1.0)
            else:
                out = ndtr(z)
        elif kind in ("graded", "graded-normal"):
            g = _check_grade(np.atleast_1d(t), grade)
            m = np.abs(dd)
            if kind == "graded":
                band = np.clip((m - g) / (t - g), 0.0, 1.0)  # share of one band below |d|
            else:
                sigma = t / COVERAGE_K
                pa, pb = ndtr(g / sigma), ndtr(COVERAGE_K)
                band = np.clip((ndtr(m / sigma) - pa) / (pb - pa), 0.0, 1.0)
            out = 0.5 + np.sign(dd) * band / 2.0
        elif kind == "empirical":
            x = _check_lot(lot)
            # F(d) = #{x_i <= d}/n
            out = np.searchsorted(x, dd, side="right") / x.size + 0.0 * t
            return np.asarray(out, dtype=float)
        else:
            raise SpecError(f"expected a distribution, one of {', '.join(KINDS)}; got {kind!r}")
    return np.asarray(np.where(t > 0, out, step), dtype=float)


def probability(
    lo: ArrayLike,
    hi: ArrayLike,
    tol: ArrayLike,
    kind: str = "uniform",
    *,
    grade: ArrayLike | None = None,
    lot: ArrayLike | None = None,
    truncate: bool = False,
) -> np.ndarray:
    """P(lo <= D <= hi) for the relative deviation D of :func:`deviation`; 0 where lo > hi.

    A difference of :func:`cdf` for the continuous kinds; for a measured lot
    the share of lot values inside the closed interval (a sum over the lot),
    so a lot value exactly on an edge counts, as the pass test counts it.

    Returns
    -------
    numpy.ndarray, the broadcast shape of ``lo``, ``hi`` and ``tol``.

    Examples
    --------
    >>> float(probability(-0.02, 0.03, 0.05)[()])
    0.5
    """
    a = np.asarray(lo, dtype=float)
    b = np.asarray(hi, dtype=float)
    t = np.asarray(tol, dtype=float)
    if kind in ("uniform", "normal") and not truncate and t.size and np.all(t > 0):
        # the common kinds, written out with few temporaries (the Monte Carlo's inner loop)
        if kind == "uniform":
            # (min(hi, t) − max(lo, −t))/(2t), the rectangular distribution's share
            out = np.asarray(np.minimum(b, t) - np.maximum(a, -t))
            out = out / (2.0 * t)
        else:
            k = COVERAGE_K / t  # 1/sigma
            out = np.asarray(ndtr(b * k) - ndtr(a * k))
        return np.asarray(np.maximum(out, 0.0))
    if kind == "empirical":
        x = _check_lot(lot)
        t = np.asarray(tol, dtype=float)
        inside = np.searchsorted(x, b, side="right") - np.searchsorted(x, a, side="left")
        out = np.maximum(inside, 0) / x.size + 0.0 * t
    else:
        kw = dict(grade=grade, lot=lot, truncate=truncate)
        out = cdf(b, tol, kind, **kw) - cdf(a, tol, kind, **kw)  # type: ignore[arg-type]
        t = np.asarray(tol, dtype=float)
        if np.any(t == 0):  # a point mass at 0: inside exactly when lo <= 0 <= hi
            point = ((a <= 0) & (b >= 0)).astype(float)
            out = np.where(t > 0, out, point)
    return np.asarray(np.where(a <= b, np.maximum(out, 0.0), 0.0), dtype=float)


#: Tail mass left outside the support box of an unbounded (normal) part: ±6 sigma.
TAIL_SIGMAS = 6.0


def support(
    kind: str,
    tol: ArrayLike,
    *,
    grade: ArrayLike | None = None,
    lot: ArrayLike | None = None,
    truncate: bool = False,
) -> tuple[np.ndarray, np.ndarray, float]:
    """Smallest and largest relative deviation, and the probability outside them.

    Bounded kinds return their exact support and 0; the untruncated normal
    returns ±6 sigma (sigma = t/3) and its two-sided tail mass 2·Φ(−6) ≈ 2e-9
    (used to keep an upper bound of a yield rigorous).

    Returns
    -------
    (lo, hi, outside) : arrays of the shape of ``tol``, and a float.
    """
    t = np.asarray(tol, dtype=float)
    if kind == "normal" and not truncate:
        half = TAIL_SIGMAS * t / COVERAGE_K
        return -half, half, float(2.0 * ndtr(-TAIL_SIGMAS))
    if kind == "empirical":
        x = _check_lot(lot)
        return np.full(t.shape, x[0]), np.full(t.shape, x[-1]), 0.0
    if kind not in KINDS:
        raise SpecError(f"expected a distribution, one of {', '.join(KINDS)}; got {kind!r}")
    return -t, t.copy(), 0.0
