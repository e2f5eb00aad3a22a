"""Conditional Monte Carlo (picker.core.conditional): unbiased, and its intervals hold.

The truth of each case is computed here, independently of picker: Thomson's formula
f = 1/(2π√(L·C_eff)) (REFERENCES.md, Colpitts and Clapp) written out in the test, the
part distributions from scipy.stats, and the expectation over the other parts by
product Gauss-Legendre quadrature (Colpitts: C1 and C2 outside, L's probability in
closed form) or by a plain Monte Carlo of 2^22 boards (Clapp). The coverage test runs the estimator
over 1,000 seeds and counts how often the interval holds the truth; the interval is the
normal (CLT) interval on the mean of the conditional probabilities (Owen, *Monte Carlo
theory, methods and examples*, 2013, ch. 2 and ch. 8; section numbers from memory).
A 95 % interval must cover 93-97 % of the time: with 1,000 seeds the binomial standard
deviation of the coverage is 0.7 %, so the band is about ±2.9 of them.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from picker.core.conditional import conditional_counts, integrated_positions
from picker.core.montecarlo import PartVariation, Simulation, count_passing
from picker.core.search import Designs, Problem
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

TWO_PI = 2 * math.pi
L0, C10, C20 = 1e-3, 1e-9, 2.2e-9
T_C, T_L = 0.05, 0.05


def _colpitts_case(dist_c: str, dist_l: str, grade: float | None = None):
    ce0 = C10 * C20 / (C10 + C20)
    f0 = 1 / (TWO_PI * math.sqrt(L0 * ce0))
    # window off the nominal, so the L window edges move with C1, C2 and meet L's support
    f_min, f_max = f0 * 0.985, f0 * 1.055
    tabs = {
        "C1": uniform_table(np.array([C10]), T_C, "list"),
        "C2": uniform_table(np.array([C20]), T_C, "list"),
        "L": uniform_table(np.array([L0]), T_L, "list"),
    }
    problem = Problem(COLPITTS, tabs, f_min, f_max, 0.0, 10.0, Parasitics())
    parts = {
        "C1": PartVariation(dist_c),
        "C2": PartVariation(dist_c),
        "L": PartVariation(dist_l, grade=grade),
    }
    sim = Simulation(problem, parts)
    idx = {p: np.zeros(1, dtype=np.int32) for p in ("C1", "C2", "L")}
    designs = Designs(idx, np.array([f0]), np.array([C10 / C20]))
    return sim, designs, f_min, f_max


def _dist(kind: str, t: float, grade: float | None = None):
    """The relative deviation's distribution, from scipy.stats (independent of picker)."""
    if kind == "uniform":
        return stats.uniform(loc=-t, scale=2 * t)
    if kind == "normal":
        return stats.norm(scale=t / 3)  # sigma = tol/3 (GUM G.1, 99.73 %)
    if kind == "graded":  # uniform on [-t, -g] ∪ [g, t], half the mass on each band

        class Graded:
            def cdf(self, x):
                x = np.asarray(x, dtype=float)
                band = np.clip((np.abs(x) - grade) / (t - grade), 0, 1)
                return 0.5 + np.sign(x) * band / 2

            def pdf(self, x):
                x = np.asarray(x, dtype=float)
                return np.where((np.abs(x) >= grade) & (np.abs(x) <= t), 0.5 / (t - grade), 0.0)

        return Graded()
    raise AssertionError(kind)


def _truth_colpitts(dist_c: str, dist_l: str, f_min: float, f_max: float, grade=None) -> float:
    dc = _dist(dist_c, T_C)
    dl = _dist(dist_l, T_L, grade)
    lc_lo = 1 / (TWO_PI * f_max) ** 2  # Thomson: f in [f_min, f_max] <=> L·C_eff in [lc_lo, lc_hi]
    lc_hi = 1 / (TWO_PI * f_min) ** 2

    reach = T_C if dist_c == "uniform" else 8 * T_C / 3
    # composite Gauss-Legendre over C1's and C2's deviations: 400 panels x 6 nodes each way
    x, w = np.polynomial.legendre.leggauss(6)
    edges = np.linspace(-reach, reach, 401)
    mid, half = (edges[1:] + edges[:-1]) / 2, (edges[1:] - edges[:-1]) / 2
    nodes = (mid[:, None] + half[:, None] * x[None, :]).ravel()
    weights = (half[:, None] * w[None, :]).ravel() * dc.pdf(nodes)
    d1, d2 = nodes[:, None], nodes[None, :]
    c1, c2 = C10 * (1 + d1), C20 * (1 + d2)
    ce = c1 * c2 / (c1 + c2)
    lo, hi = lc_lo / (L0 * ce) - 1, lc_hi / (L0 * ce) - 1
    inner = dl.cdf(hi) - dl.cdf(lo)
    return float(weights @ inner @ weights)


CASES = [("uniform", "uniform", None), ("normal", "normal", None), ("uniform", "graded", 0.02)]


@pytest.mark.parametrize(("dist_c", "dist_l", "grade"), CASES)
def test_conditional_estimate_is_unbiased_and_narrower_than_plain(dist_c, dist_l, grade):
    sim, designs, f_min, f_max = _colpitts_case(dist_c, dist_l, grade)
    truth = _truth_colpitts(dist_c, dist_l, f_min, f_max, grade)
    assert 0.2 < truth < 0.95  # a case with teeth: neither sure to pass nor to fail
    u = np.random.default_rng(11).random((200_000, 3))
    t = conditional_counts(sim, designs, u)
    assert t.integrated.tolist() == ["L"]
    se = float(t.std_error()[0])
    assert abs(t.mean()[0] - truth) < 4 * se  # 4 standard errors of the estimator
    plain = count_passing(sim, designs, u)[0] / u.shape[0]
    plain_se = math.sqrt(truth * (1 - truth) / u.shape[0])  # binomial standard error
    assert abs(plain - truth) < 4 * plain_se
    assert se < 0.8 * plain_se  # the conditioning pays (Rao-Blackwell: never worse)
    # the plain count of the same boards is recorded beside the conditional estimate
    assert int(t.passed[0]) == int(count_passing(sim, designs, u)[0])


@pytest.mark.parametrize(("dist_c", "dist_l", "grade"), CASES)
@pytest.mark.parametrize(("confidence", "band"), [(0.95, (0.93, 0.97)), (0.8, (0.77, 0.83))])
def test_interval_coverage_over_many_seeds(dist_c, dist_l, grade, confidence, band):
    sim, designs, f_min, f_max = _colpitts_case(dist_c, dist_l, grade)
    truth = _truth_colpitts(dist_c, dist_l, f_min, f_max, grade)
    seeds, n = 1000, 1000
    covered = 0
    for seed in range(seeds):
        u = np.random.default_rng(seed).random((n, 3))
        lo, hi = conditional_counts(sim, designs, u).interval(confidence)
        covered += bool(lo[0] <= truth <= hi[0])
    assert band[0] <= covered / seeds <= band[1], covered / seeds


def _clapp_case():
    c1, c2, c3, l0 = 1e-9, 1e-9, 47e-12, 10e-6
    tabs = {
        "C1": uniform_table(np.array([c1]), 0.02, "list"),
        "C2": uniform_table(np.array([c2]), 0.02, "list"),
        "C3": uniform_table(np.array([c3]), 0.10, "list"),
        "L": uniform_table(np.array([l0]), 0.05, "list"),
    }
    ce = 1 / (1 / c1 + 1 / c2 + 1 / c3)
    f0 = 1 / (TWO_PI * math.sqrt(l0 * ce))
    problem = Problem(CLAPP, tabs, f0 * 0.98, f0 * 1.04, 0.0, 10.0, Parasitics())
    sim = Simulation.simple(problem, "uniform")
    idx = {p: np.zeros(1, dtype=np.int32) for p in CLAPP.positions}
    return (
        sim,
        Designs(idx, np.array([f0]), np.array([1.0])),
        (c1, c2, c3, l0),
        (f0 * 0.98, f0 * 1.04),
    )


def test_clapp_integrates_out_c3_and_covers():
    sim, designs, (c1, c2, c3, l0), (f_min, f_max) = _clapp_case()
    assert integrated_positions(sim, designs).tolist() == ["C3"]  # the largest share
    # truth: a plain Monte Carlo of 2^22 boards with Thomson's formula written out here
    rng = np.random.default_rng(2024)
    n_ref = 1 << 22
    d = rng.uniform(-1, 1, (n_ref, 4)) * np.array([0.02, 0.02, 0.10, 0.05])
    ce = 1 / (1 / (c1 * (1 + d[:, 0])) + 1 / (c2 * (1 + d[:, 1])) + 1 / (c3 * (1 + d[:, 2])))
    f = 1 / (TWO_PI * np.sqrt(l0 * (1 + d[:, 3]) * ce))
    truth = float(np.mean((f >= f_min) & (f <= f_max)))
    truth_se = math.sqrt(truth * (1 - truth) / n_ref)  # 2.4e-4: small against the intervals
    assert 0.2 < truth < 0.9
    covered, seeds = 0, 600
    for seed in range(seeds):
        u = np.random.default_rng(10_000 + seed).random((300, 4))
        lo, hi = conditional_counts(sim, designs, u).interval(0.95)
        covered += bool(lo[0] <= truth <= hi[0])
    # 600 seeds: binomial sd 0.9 %; the band allows the reference's own error too
    assert 0.925 <= covered / seeds <= 0.975, (covered / seeds, truth_se)


def test_conditional_matches_plain_on_the_demo_designs():
    # every feasible design of a small Colpitts space: the conditional and the plain
    # estimates of the same boards agree within 4 combined standard errors
    from picker.core.search import search
    from picker.parts.series import expand

    tabs = {
        "C1": uniform_table(expand("E12", 100e-12, 100e-9), 0.05, "E12"),
        "C2": uniform_table(expand("E12", 100e-12, 1e-6), 0.05, "E12"),
        "L": uniform_table(expand("E12", 1e-6, 10e-3), 0.10, "E12"),
    }
    problem = Problem(COLPITTS, tabs, 300.7e3, 319.3e3, 0.1, 0.5, Parasitics(stray=15e-12))
    designs = search(problem)
    sim = Simulation.simple(problem, "normal")
    u = np.random.default_rng(5).random((20_000, 3))
    t = conditional_counts(sim, designs, u)
    k = count_passing(sim, designs, u)
    p = k / u.shape[0]
    se_plain = np.sqrt(np.maximum(p * (1 - p), 1e-4) / u.shape[0])
    z = np.abs(t.mean() - p) / np.hypot(t.std_error(), se_plain)
    assert np.all(z < 4)
    assert np.array_equal(t.passed, k)  # the same boards pass under both counts


def test_workers_do_not_change_a_bit():
    sim, designs, *_ = _colpitts_case("normal", "normal")
    many = designs.take(np.zeros(40, dtype=np.int64))
    u = np.random.default_rng(3).random((50_000, 3))
    one = conditional_counts(sim, many, u, workers=1)
    two = conditional_counts(sim, many, u, workers=2)
    assert one.total.tobytes() == two.total.tobytes()
    assert one.square.tobytes() == two.square.tobytes()
    # a design's sums do not depend on the other designs of its block
    alone = conditional_counts(sim, designs, u, workers=1)
    assert alone.total[0] == one.total[7]
