"""Monte Carlo yield with common random numbers.

One matrix of uniform variates U, shape (samples, k) with one column per part
position, is drawn per run from a seeded ``numpy.random.Generator`` and reused
for every candidate, so differences between candidates are not sampling noise
(common random numbers; JCGM 101:2008 §7 for Monte Carlo propagation).

Axis convention (everywhere in this module): samples on axis 0, candidates on
axis 1.

A board passes when its frequency lies in ``[f_min, f_max]``. Yield is the
share of passing boards, reported with a binomial confidence interval from
``scipy.stats.binomtest(...).proportion_ci`` (Wilson 1927 or Clopper-Pearson
1934).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.special import ndtri
from scipy.stats import binomtest

from picker.search import Designs, Problem
from picker.topology import TWO_PI, board_frequency, board_values

#: Boards evaluated per block (samples x candidates); bounds memory.
BLOCK = 1 << 21

#: A board model maps sampled part values, position -> (samples, c), to a
#: pass mask of the same shape.
BoardModel = Callable[[dict[str, np.ndarray]], np.ndarray]


@dataclass(frozen=True)
class YieldEstimate:
    """A yield estimate with its interval, sample count and seed."""

    estimate: float
    ci_low: float
    ci_high: float
    samples: int
    passed: int
    confidence: float
    method: str
    seed: int

    def as_dict(self) -> dict:
        return {
            "estimate": self.estimate,
            "ci_low": self.ci_low,
            "ci_high": self.ci_high,
            "samples": self.samples,
            "passed": self.passed,
            "confidence": self.confidence,
            "method": self.method,
            "seed": self.seed,
        }


def binomial_interval(k: int, n: int, confidence: float = 0.95, method: str = "wilson"):
    """Two-sided interval for a proportion k/n from scipy (Wilson or exact)."""
    ci = binomtest(int(k), int(n)).proportion_ci(confidence_level=confidence, method=method)
    return float(ci.low), float(ci.high)


def estimate_yield(k: int, n: int, *, confidence: float, method: str, seed: int) -> YieldEstimate:
    lo, hi = binomial_interval(k, n, confidence, method)
    return YieldEstimate(k / n, lo, hi, n, int(k), confidence, method, seed)


def draw_uniform(seed: int, samples: int, k: int) -> np.ndarray:
    """The run's common random numbers: U(0,1), shape (samples, k)."""
    rng = np.random.default_rng(seed)
    return rng.random((samples, k))


def unit_deviation(u: np.ndarray, distribution: str) -> np.ndarray:
    """Map U(0,1) variates to deviations per unit of tolerance.

    ``uniform``: 2u - 1, uniform on [-1, 1]. ``normal``: Φ⁻¹(u)/3, so that a
    part's tolerance is three standard deviations (99.73 % coverage; not
    truncated).
    """
    if distribution == "uniform":
        return 2.0 * u - 1.0
    if distribution == "normal":
        return ndtri(u) / 3.0
    raise ValueError(f"unknown distribution {distribution!r}")


def ideal_model(problem: Problem) -> BoardModel:
    """Pass test with the ideal tank: f_min <= f <= f_max, tested on L·C_eff."""
    par = problem.parasitics
    lc_lo = 1.0 / (TWO_PI * problem.f_max) ** 2
    lc_hi = 1.0 / (TWO_PI * problem.f_min) ** 2
    topo = problem.topology

    def passes(vals: dict[str, np.ndarray]) -> np.ndarray:
        bv = board_values(vals, par)
        lc = bv["L"] * topo.c_eff(bv, par.stray)
        return (lc >= lc_lo) & (lc <= lc_hi)

    return passes


def sampled_values(problem: Problem, designs: Designs, dev: np.ndarray) -> dict[str, np.ndarray]:
    """Part values of every simulated board, position -> (samples, n)."""
    out = {}
    for j, p in enumerate(problem.topology.positions):
        t = problem.tables[p]
        nom = t.values[designs.idx[p]]
        tol = t.tol[designs.idx[p]]
        out[p] = nom[None, :] * (1.0 + dev[:, j, None] * tol[None, :])
    return out


def count_passing(
    problem: Problem, designs: Designs, dev: np.ndarray, model: BoardModel | None = None
) -> np.ndarray:
    """Passing boards per design, shape (n,) int64, evaluated in memory-bounded blocks."""
    model = model or ideal_model(problem)
    n = len(designs)
    per = max(1, BLOCK // max(1, dev.shape[0]))
    out = np.zeros(n, dtype=np.int64)
    for s in range(0, n, per):
        sel = np.arange(s, min(s + per, n))
        vals = sampled_values(problem, designs.take(sel), dev)
        out[sel] = model(vals).sum(axis=0)
    return out


def frequency_samples(problem: Problem, designs: Designs, dev: np.ndarray) -> np.ndarray:
    """Frequency of every simulated board with the ideal tank, shape (samples, n)."""
    vals = sampled_values(problem, designs, dev)
    return board_frequency(problem.topology, vals, problem.parasitics)
