"""The reported yield is passed / samples and its interval follows ``[yield] confidence``.

References written out here, independent of scipy's binomtest and of the code:
the Wilson score interval (Wilson 1927, JASA 22, eq. for the score interval),
the Clopper–Pearson interval from beta quantiles (Clopper & Pearson 1934,
Biometrika 26), and at 0.95 the published check values of REFERENCES.md.
The screen's mean of ln f is checked against a Monte Carlo mean of the textbook
Colpitts frequency (second-order term included: E[ln(1 + d)] ≈ −σ²/2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import DEMO
from numpy.testing import assert_allclose
from scipy.stats import beta as beta_dist
from scipy.stats import norm

from picker import api
from picker.core.montecarlo import Designs, Simulation, estimate_yield
from picker.core.screen import lnf_bias, screen_yield, sigma_lnf
from picker.core.search import Problem
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics
from picker.tank.colpitts import COLPITTS


def _wilson(k: int, n: int, c: float) -> tuple[float, float]:
    """Wilson (1927) score interval, written out."""
    z = norm.ppf(1 - (1 - c) / 2)
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return max(0.0, centre - half), min(1.0, centre + half)


def _clopper_pearson(k: int, n: int, c: float) -> tuple[float, float]:
    """Clopper–Pearson (1934) exact interval from beta quantiles."""
    a = 1 - c
    lo = 0.0 if k == 0 else beta_dist.ppf(a / 2, k, n - k + 1)
    hi = 1.0 if k == n else beta_dist.ppf(1 - a / 2, k + 1, n - k)
    return float(lo), float(hi)


@pytest.mark.parametrize("confidence", [0.8, 0.9, 0.95, 0.99, 0.999])
@pytest.mark.parametrize(("k", "n"), [(7, 50), (95, 100), (0, 100), (100, 100), (512, 4000)])
def test_interval_at_several_confidence_levels(k, n, confidence):
    w = estimate_yield(k, n, confidence=confidence, method="wilson", seed=0)
    assert_allclose([w.ci_low, w.ci_high], _wilson(k, n, confidence), rtol=1e-9, atol=1e-12)
    e = estimate_yield(k, n, confidence=confidence, method="exact", seed=0)
    assert_allclose([e.ci_low, e.ci_high], _clopper_pearson(k, n, confidence), rtol=1e-7)
    assert w.estimate == k / n and e.estimate == k / n  # the plain share, not (k+1)/(n+2)
    assert w.passed == k and w.samples == n and w.confidence == confidence


def test_published_wilson_values_at_095():
    # REFERENCES.md check values (6 decimals): the written-out formula and the code agree.
    for (k, n), (lo, hi) in {
        (7, 50): (0.069508, 0.261862),
        (95, 100): (0.888250, 0.978456),
    }.items():
        assert_allclose(_wilson(k, n, 0.95), (lo, hi), atol=1e-6)
        y = estimate_yield(k, n, confidence=0.95, method="wilson", seed=0)
        assert_allclose((y.ci_low, y.ci_high), (lo, hi), atol=1e-6)


@pytest.mark.parametrize(("confidence", "method"), [(0.8, "wilson"), (0.99, "exact")])
def test_solve_reports_passed_over_samples_and_the_spec_confidence(confidence, method):
    s = api.load_spec(
        DEMO / "colpitts_bjt.toml",
        overrides={
            "yield": {"confidence": confidence, "ci_method": method, "samples": 1000},
        },
    )
    r = api.solve(s, top=5)
    assert r.candidates
    ref = _wilson if method == "wilson" else _clopper_pearson
    for c in r.candidates:
        y = c.yield_
        assert y.samples >= 1000
        assert y.estimate == y.passed / y.samples
        assert y.confidence == confidence
        assert_allclose((y.ci_low, y.ci_high), ref(y.passed, y.samples, confidence), rtol=1e-7)


def test_screen_mean_of_ln_f_keeps_its_second_order_term():
    # One design, every part uniform on ±20 %: the Monte Carlo mean of ln f (textbook formula,
    # numpy draws) sits well below ln f_nominal; the screen's mean must match it to 4 standard
    # errors, and ln f_nominal alone must not (so dropping the −σ²/2 terms fails).
    c1, c2, l, t = 1e-9, 2.2e-9, 100e-6, 0.2
    tabs = {
        "C1": uniform_table(np.array([c1]), t, "given"),
        "C2": uniform_table(np.array([c2]), t, "given"),
        "L": uniform_table(np.array([l]), t, "given"),
    }
    f0 = 1 / (2 * math.pi * math.sqrt(l * c1 * c2 / (c1 + c2)))
    p = Problem(COLPITTS, tabs, f0 * 0.9, f0 * 1.1, 0.0, np.inf, Parasitics())
    idx = {k: np.zeros(1, dtype=np.int64) for k in tabs}
    d = Designs(idx, np.array([f0]), np.array([c1 / c2]))
    sim = Simulation.simple(p, "uniform")
    rng = np.random.default_rng(11)
    n = 1_000_000
    a, b, ll = (v * (1 + rng.uniform(-t, t, n)) for v in (c1, c2, l))
    lnf = -np.log(2 * math.pi) - 0.5 * np.log(ll * a * b / (a + b))
    se = lnf.std() / math.sqrt(n)
    mu = math.log(f0) + float(lnf_bias(sim, d)[0])
    assert abs(lnf.mean() - math.log(f0)) > 10 * se  # the second-order term is visible
    # the screen keeps each part's own −σ²/2 term but not the curvature of ln C_eff in
    # ln C1, ln C2 (about 17 % of the shift here): 25 % of the shift, plus 4 SE
    assert abs(mu - lnf.mean()) < 4 * se + 0.25 * abs(lnf.mean() - math.log(f0))
    # and the screen's yield uses that mean: an upper-only window recovers it
    hi = Problem(COLPITTS, tabs, f0 * 1e-3, f0, 0.0, np.inf, Parasitics())
    y = float(screen_yield(Simulation.simple(hi, "uniform"), d)[0])
    sig = float(sigma_lnf(sim, d)[0])
    mu_screen = math.log(f0) - sig * norm.ppf(y)
    assert_allclose(mu_screen, mu, atol=1e-9)
