"""Monte Carlo yield against closed forms and scipy; the screen keeps the Monte Carlo top N."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import binomtest

from picker.core.montecarlo import (
    Simulation,
    binomial_interval,
    count_passing,
    estimate_yield,
)
from picker.core.ranking import monte_carlo_rank
from picker.core.sampling import uniform_matrix
from picker.core.screen import corner_span, screen_yield, sigma_lnf
from picker.core.search import Designs, Problem, search
from picker.parts.series import expand
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics, board_frequency
from picker.tank.colpitts import COLPITTS


def _u(seed: int, samples: int, k: int) -> np.ndarray:
    """The run's common random numbers, as ``picker.api`` draws them (plain random)."""
    return uniform_matrix(samples, k, rng=np.random.default_rng(seed))


def _one_design(c1, c2, l, tols, f_min, f_max):
    tabs = {
        "C1": uniform_table(np.array([c1]), tols[0], "given"),
        "C2": uniform_table(np.array([c2]), tols[1], "given"),
        "L": uniform_table(np.array([l]), tols[2], "given"),
    }
    p = Problem(COLPITTS, tabs, f_min, f_max, 0.0, np.inf, Parasitics())
    idx = {k: np.zeros(1, dtype=np.int64) for k in tabs}
    v = {k: tabs[k].values for k in tabs}
    d = Designs(idx, board_frequency(COLPITTS, v, p.parasitics), v["C1"] / v["C2"])
    return p, d


def test_only_l_varies_uniform_yield_is_interval_ratio():
    # Closed form (derived): f ∝ L^-1/2, so a board passes iff L lies in
    # [1/((2π f_max)² C), 1/((2π f_min)² C)]; with L uniform on L0·(1 ± t) the
    # yield is the overlap length divided by 2·t·L0.
    c1, c2, l0, t = 1e-9, 3.3e-9, 100e-6, 0.10
    f0 = float(board_frequency(COLPITTS, {"C1": c1, "C2": c2, "L": l0}, Parasitics()))
    f_min, f_max = f0 * 0.97, f0 * 1.02
    p, d = _one_design(c1, c2, l0, (0.0, 0.0, t), f_min, f_max)
    c = c1 * c2 / (c1 + c2)
    l_lo = 1 / ((2 * np.pi * f_max) ** 2 * c)
    l_hi = 1 / ((2 * np.pi * f_min) ** 2 * c)
    exact = (min(l_hi, l0 * (1 + t)) - max(l_lo, l0 * (1 - t))) / (2 * t * l0)
    n = 200_000
    sim = Simulation.simple(p, "uniform")
    k = int(count_passing(sim, d, _u(42, n, 3))[0])
    se = np.sqrt(exact * (1 - exact) / n)
    assert abs(k / n - exact) < 4 * se  # 4 binomial standard errors
    lo, hi = binomial_interval(k, n, 0.9999, "wilson")
    assert lo <= exact <= hi


@pytest.mark.parametrize(
    ("k", "n", "method", "lo", "hi"),
    [
        # REFERENCES.md table: Wilson (1927) and Clopper-Pearson (1934) intervals.
        (7, 50, "exact", 0.058192, 0.267396),
        (7, 50, "wilson", 0.069508, 0.261862),
        (95, 100, "exact", 0.887165, 0.983568),
        (95, 100, "wilson", 0.888250, 0.978456),
        (0, 100, "exact", 0.0, 0.036217),
        (0, 100, "wilson", 0.0, 0.036993),
    ],
)
def test_confidence_interval_matches_published_values(k, n, method, lo, hi):
    y = estimate_yield(k, n, confidence=0.95, method=method, seed=0)
    assert_allclose([y.ci_low, y.ci_high], [lo, hi], atol=1e-6)  # 6 published decimals
    ref = binomtest(k, n).proportion_ci(0.95, method=method)
    # picker computes these with scipy.special (no scipy.stats import on the command path):
    # the closed-form Wilson interval agrees to rounding; Clopper-Pearson inverts the beta
    # function with betaincinv, which agrees with scipy.stats's beta.ppf to about 1e-11.
    assert_allclose([y.ci_low, y.ci_high], [ref.low, ref.high], rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("confidence", [0.5, 0.8, 0.9, 0.95, 0.99, 0.999])
@pytest.mark.parametrize(("k", "n"), [(0, 10), (1, 3), (7, 50), (500, 1000), (19999, 20000)])
@pytest.mark.parametrize("method", ["wilson", "exact"])
def test_binomial_interval_matches_scipy_stats(k, n, confidence, method):
    # the reference is scipy.stats.binomtest(...).proportion_ci (Wilson 1927; Clopper-Pearson 1934)
    ref = binomtest(k, n).proportion_ci(confidence, method=method)
    lo, hi = binomial_interval(k, n, confidence, method)
    assert_allclose([lo, hi], [ref.low, ref.high], rtol=1e-9, atol=1e-15)


def test_worst_case_corners_reference_example():
    # REFERENCES.md: Colpitts, all parts ±5 %: exact corners +5.263 % / -4.762 %.
    p, d = _one_design(1e-9, 1e-9, 1e-5, (0.05, 0.05, 0.05), 1.0, 1e12)
    lo, hi = corner_span(p, d)
    assert_allclose(hi / d.f_nominal - 1, 0.05263, atol=5e-6)
    assert_allclose(lo / d.f_nominal - 1, -0.04762, atol=5e-6)


def test_rss_reference_example():
    # REFERENCES.md: Colpitts, C1 = C2, all parts ±5 %: RSS = 3.062 % (of ±t, first order).
    p, d = _one_design(1e-9, 1e-9, 1e-5, (0.05, 0.05, 0.05), 1.0, 1e12)
    # With sigma = t (distribution "normal" gives t/3, so scale by 3).
    assert_allclose(sigma_lnf(Simulation.simple(p, "normal"), d)[0] * 3, 0.03062, atol=5e-6)


@pytest.mark.parametrize("distribution", ["uniform", "normal"])
@pytest.mark.parametrize("window", [0.01, 0.03, 0.08])
def test_screen_never_drops_a_monte_carlo_top_design(distribution, window):
    tabs = {
        "C1": uniform_table(expand("E12", 100e-12, 100e-9), 0.05, "E12"),
        "C2": uniform_table(expand("E12", 100e-12, 1e-6), 0.05, "E12"),
        "L": uniform_table(expand("E12", 1e-6, 10e-3), 0.10, "E12"),
    }
    f0 = 310e3
    p = Problem(COLPITTS, tabs, f0 * (1 - window), f0 * (1 + window), 0.1, 0.5, Parasitics(15e-12))
    d = search(p)
    assert len(d) > 50
    sim = Simulation.simple(p, distribution)
    u = _u(1, 20000, 3)
    passed = count_passing(sim, d, u)
    err = np.abs(np.log(d.f_nominal / f0))
    mc_top = set(np.lexsort((np.arange(len(d)), err, -passed))[:10].tolist())
    ranked, _, _ = monte_carlo_rank(sim, d, u, m=25, top=10, target=f0)
    assert mc_top <= set(ranked.tolist())
    assert set(ranked[:10].tolist()) == mc_top


def test_screen_agrees_with_monte_carlo_roughly():
    p, d = _one_design(1e-9, 2.2e-9, 47e-6, (0.02, 0.02, 0.02), 0, 0)
    f0 = d.f_nominal[0]
    p = Problem(p.topology, p.tables, f0 * 0.985, f0 * 1.015, 0, np.inf, p.parasitics)
    sim = Simulation.simple(p, "normal")
    mc = count_passing(sim, d, _u(2, 100_000, 3))[0] / 100_000
    # log-normal first-order model is near-exact for small normal tolerances
    assert abs(screen_yield(sim, d)[0] - mc) < 0.01
