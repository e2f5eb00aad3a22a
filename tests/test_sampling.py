"""Uniform variates, Sobol balance and adaptive batching.

Known answers come from outside the module: a closed-form yield (uniform L
only), a two-input yield integrated with scipy.integrate.quad, the Wilson
intervals tabulated in REFERENCES.md, and the (0, m, 1)-net property of
scrambled Sobol points (Owen 1995; scipy.stats.qmc documentation).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, stats

from picker.core.sampling import (
    adaptive_batches,
    compare_methods,
    sobol_size,
    uniform_batches,
    uniform_matrix,
    wilson_half_width,
)

T = 0.05  # ±5 % uniform part tolerance in the known-answer cases


def _one_input_case():
    # f ∝ L^(-1/2); with L = L0·(1+d), d uniform ±T, the window maps to d in [a, b],
    # so the yield is (b - a)/(2T) in closed form.
    a, b = -0.03, 0.04

    def ind(u):
        d = T * (2 * u[:, 0] - 1)
        return (d >= a) & (d <= b)

    return ind, (b - a) / (2 * T)


def _two_input_case():
    # f ∝ (L·C)^(-1/2) with L and C uniform ±T: pass if (1+dL)(1+dC) in [z_lo, z_hi].
    # Exact answer: scipy.integrate.quad over dL of the conditional probability.
    z_lo, z_hi = 0.97, 1.04

    def cond(x):
        lo = max(z_lo / (1 + x) - 1, -T)
        hi = min(z_hi / (1 + x) - 1, T)
        return max(hi - lo, 0.0) / (2 * T)

    kinks = [z_lo / (1 + T) - 1, z_hi / (1 + T) - 1, z_lo / (1 - T) - 1, z_hi / (1 - T) - 1]
    kinks = [k for k in kinks if -T < k < T]
    exact, _ = integrate.quad(lambda x: cond(x) / (2 * T), -T, T, points=kinks, epsabs=1e-13)

    def ind(u):
        d = T * (2 * u - 1)
        z = (1 + d[:, 0]) * (1 + d[:, 1])
        return (z >= z_lo) & (z <= z_hi)

    return ind, exact


def test_uniform_matrix_shapes_and_range():
    rng = np.random.default_rng(1)
    u = uniform_matrix(1000, 3, method="random", rng=rng)
    assert u.shape == (1000, 3) and u.min() > 0 and u.max() < 1
    s = uniform_matrix(1000, 3, method="sobol", rng=rng)
    assert s.shape == (sobol_size(1000), 3) == (1024, 3)
    assert s.min() > 0 and s.max() < 1
    for col in range(3):  # each column uniform (Kolmogorov-Smirnov, scipy)
        assert stats.kstest(u[:, col], "uniform").pvalue > 1e-3
    a = uniform_matrix(64, 2, method="sobol", rng=np.random.default_rng(5))
    b = uniform_matrix(64, 2, method="sobol", rng=np.random.default_rng(5))
    assert np.array_equal(a, b)  # seeded, reproducible
    with pytest.raises(ValueError):
        uniform_matrix(10, 2, method="latin", rng=rng)


def test_sobol_points_are_balanced():
    # Scrambled Sobol points of size 2^m form a (0, m, 1)-net in each coordinate:
    # exactly one point in each of the 2^m equal intervals (Owen 1995).
    m = 8
    s = uniform_matrix(2**m, 5, method="sobol", rng=np.random.default_rng(2))
    for col in range(5):
        counts = np.bincount(np.floor(s[:, col] * 2**m).astype(int), minlength=2**m)
        assert np.all(counts == 1)
    # continuing the stream in doubling batches keeps the balance of the total
    stream = uniform_batches(3, method="sobol", rng=np.random.default_rng(3), first=64)
    total = np.vstack([next(stream) for _ in range(4)])  # 64 + 64 + 128 + 256 = 512
    assert total.shape[0] == 512
    counts = np.bincount(np.floor(total[:, 0] * 512).astype(int), minlength=512)
    assert np.all(counts == 1)


@pytest.mark.parametrize("case", [_one_input_case, _two_input_case])
def test_sobol_error_shrinks_faster_than_plain_sampling(case):
    ind, exact = case()
    k = 1 if case is _one_input_case else 2
    ns = [256, 1024, 4096, 16384]
    r = compare_methods(ind, exact, k, ns, reps=20, seed=3)
    slope_random = np.polyfit(np.log(ns), np.log(r["random"]), 1)[0]
    slope_sobol = np.polyfit(np.log(ns), np.log(r["sobol"]), 1)[0]
    # plain Monte Carlo: error ∝ n^(-1/2) (binomial SE); a loose band around it
    assert -0.75 < slope_random < -0.25
    # the random error at n matches the binomial standard error √(p(1-p)/n) within
    # the spread of an RMS over 20 repetitions (chi distribution; generous bound)
    se = np.sqrt(exact * (1 - exact) / np.asarray(ns))
    assert np.all((r["random"] > 0.5 * se) & (r["random"] < 1.6 * se))
    # Sobol converges faster, and is far more accurate at equal samples
    assert slope_sobol < slope_random - 0.1
    assert np.all(r["sobol"][1:] < r["random"][1:] / 3)


def test_wilson_half_width_matches_published_values():
    # REFERENCES.md (Wilson 1927): 7/50 -> 0.069508..0.261862; 95/100 -> 0.888250..0.978456
    assert_allclose(wilson_half_width(7, 50), (0.261862 - 0.069508) / 2, atol=2e-6)
    assert_allclose(wilson_half_width(np.array([95]), 100), [(0.978456 - 0.888250) / 2], atol=2e-6)


@pytest.mark.parametrize("method", ["random", "sobol"])
def test_adaptive_batches_reach_the_precision(method):
    ind, exact = _two_input_case()
    calls = []
    res = adaptive_batches(
        lambda u: np.array([ind(u).sum(), ind(u[:, ::-1]).sum()]),
        2,
        precision=0.005,
        max_samples=10**6,
        rng=np.random.default_rng(9),
        method=method,
        first=1024,
        progress=lambda n, cap, hw: calls.append((n, hw)),
    )
    assert res.converged and np.all(res.half_width <= 0.005)
    assert len(calls) == res.batches and calls[-1][0] == res.samples
    # the previous batch had not yet reached the precision (it stopped as soon as it could)
    if len(calls) > 1:
        assert calls[-2][1] > 0.005
    est = res.passed / res.samples
    se = np.sqrt(exact * (1 - exact) / res.samples)
    assert np.all(np.abs(est - exact) < 4 * se)
    if method == "sobol":
        assert res.samples & (res.samples - 1) == 0  # a power of two


def test_adaptive_batches_stop_at_the_cap():
    ind, _ = _one_input_case()
    res = adaptive_batches(
        lambda u: np.array([ind(u).sum()]),
        1,
        precision=1e-4,
        max_samples=5000,
        rng=np.random.default_rng(4),
        first=1024,
    )
    assert res.samples == 5000 and not res.converged
    # a tracked subset: candidates outside the mask do not hold the run up
    res2 = adaptive_batches(
        lambda u: np.array([ind(u).sum(), np.zeros(len(u), int).sum() + len(u) // 2]),
        1,
        precision=0.02,
        max_samples=10**6,
        rng=np.random.default_rng(4),
        first=1024,
        track=lambda passed, n: np.array([True, False]),
    )
    assert res2.converged and res2.half_width[0] <= 0.02
