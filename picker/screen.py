"""Deterministic spread analyses: first-order yield screen and worst-case corners.

The screen orders every feasible design by an approximate yield so that the
Monte Carlo pass only needs the best few hundred. It treats ln f as normal
with standard deviation sigma_lnf = √Σ(S_i·σ_i)² (root-sum-square, first
order; JCGM 100:2008 §5.1.2 law of propagation), where S_i = ∂ln f/∂ln x_i and
σ_i is the relative standard deviation of part i (uniform over ±t: t/√3, GUM
JCGM 100:2008 §4.3.7; normal with σ = t/3, the 99.73 % convention).
"""

from __future__ import annotations

import numpy as np
from scipy.special import ndtr

from picker.search import Designs, Problem
from picker.topology import board_frequency, board_sensitivities

SQRT3 = np.sqrt(3.0)


def relative_sigma(tol, distribution: str):
    """Relative standard deviation of a part whose tolerance is ``tol``."""
    if distribution == "uniform":
        return np.asarray(tol) / SQRT3
    if distribution == "normal":
        return np.asarray(tol) / 3.0
    raise ValueError(f"unknown distribution {distribution!r}")


def sigma_lnf(problem: Problem, designs: Designs, distribution: str, extra_var=0.0) -> np.ndarray:
    """First-order standard deviation of ln f for every design, shape (n,)."""
    vals = designs.values(problem)
    sens = board_sensitivities(problem.topology, vals, problem.parasitics)
    var = np.zeros(len(designs)) + extra_var
    for p, s in sens.items():
        sig = relative_sigma(problem.tables[p].tol[designs.idx[p]], distribution)
        var = var + (s * sig) ** 2
    return np.sqrt(var)


def lnf_bias(problem: Problem, designs: Designs, distribution: str) -> np.ndarray:
    """Second-order shift of the mean of ln f: Σ S_i·E[ln(1 + d_i)] ≈ -Σ S_i·σ_i²/2.

    (Taylor expansion of ln(1 + d) to second order; E[d] = 0, E[d²] = σ².)
    """
    vals = designs.values(problem)
    sens = board_sensitivities(problem.topology, vals, problem.parasitics)
    out = np.zeros(len(designs))
    for p, s in sens.items():
        sig = relative_sigma(problem.tables[p].tol[designs.idx[p]], distribution)
        out = out - s * sig**2 / 2
    return out


def screen_yield(problem: Problem, designs: Designs, distribution: str) -> np.ndarray:
    """Approximate yield (share in window) of every design from the log-normal model."""
    sig = sigma_lnf(problem, designs, distribution)
    mu = np.log(designs.f_nominal) + lnf_bias(problem, designs, distribution)
    with np.errstate(divide="ignore", invalid="ignore"):
        hi = (np.log(problem.f_max) - mu) / sig
        lo = (np.log(problem.f_min) - mu) / sig
    y = ndtr(hi) - ndtr(lo)
    # A design with zero spread is in the window for sure (it is feasible).
    return np.where(sig > 0, y, 1.0)


def select_for_montecarlo(
    problem: Problem, designs: Designs, distribution: str, m: int
) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the best ``m`` designs by screen yield, and every screen yield.

    Order: screen yield (descending), then |nominal error| (ascending), then
    the design's position in the index-sorted list (deterministic).
    """
    y = screen_yield(problem, designs, distribution)
    target = np.sqrt(problem.f_min * problem.f_max)
    err = np.abs(np.log(designs.f_nominal / target))
    order = np.lexsort((np.arange(len(designs)), err, -np.round(y, 12)))
    return order[:m], y


def corner_span(problem: Problem, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest frequency over every tolerance corner, shape (n,) each.

    Each part is set to nominal·(1 ± t) in all 2^k combinations (the
    worst-case method; the extremes of a monotone function lie at corners).
    """
    topo = problem.topology
    vals = designs.values(problem)
    tols = {p: problem.tables[p].tol[designs.idx[p]] for p in topo.positions}
    lo = np.full(len(designs), np.inf)
    hi = np.full(len(designs), -np.inf)
    k = len(topo.positions)
    for corner in range(2**k):
        v = {}
        for j, p in enumerate(topo.positions):
            sign = 1.0 if (corner >> j) & 1 else -1.0
            v[p] = vals[p] * (1.0 + sign * tols[p])
        f = board_frequency(topo, v, problem.parasitics)
        lo = np.minimum(lo, f)
        hi = np.maximum(hi, f)
    return lo, hi
