"""Deterministic spread analyses: first-order yield screen and worst-case corners.

The screen orders every feasible design by an approximate yield so that the
Monte Carlo pass only needs the best few hundred. It treats ln f as normal
with standard deviation sigma_lnf = √Σ(S_i·σ_i)² (root-sum-square, first
order; JCGM 100:2008 §5.1.2 law of propagation), where S_i = ∂ln f/∂ln x_i and
σ_i is the relative standard deviation of part i (uniform over ±t: t/√3, GUM
JCGM 100:2008 §4.3.7; normal with σ = t/3, the 99.73 % convention).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from scipy.special import ndtr

from picker.search import Designs, Problem

if TYPE_CHECKING:
    from picker.montecarlo import Simulation
from picker.topology import board_frequency, board_sensitivities

SQRT3 = np.sqrt(3.0)


def relative_sigma(tol, distribution: str):
    """Relative standard deviation of a part whose tolerance is ``tol``."""
    if distribution == "uniform":
        return np.asarray(tol) / SQRT3
    if distribution == "normal":
        return np.asarray(tol) / 3.0
    raise ValueError(f"unknown distribution {distribution!r}")


def part_sigmas(sim: Simulation, designs: Designs) -> dict[str, np.ndarray]:
    """Relative standard deviation of each position's value, position -> (n,).

    A parallel pair a + b with independent parts has σ = √((a·σa)² + (b·σb)²)/(a + b).
    """
    out = {}
    for p, var in sim.parts.items():
        t = sim.problem.tables[p]
        i = designs.idx[p]
        sig = np.asarray(var.std(t.tol[i]), dtype=float)
        if t.second is not None:
            b = t.second[i]
            a = t.values[i] - b
            sb = np.asarray(var.std(t.second_tol[i]), dtype=float)
            sig = np.sqrt((a * sig) ** 2 + (b * sb) ** 2) / (a + b)
        out[p] = sig
    return out


def sigma_lnf(sim: Simulation, designs: Designs, extra_var=0.0) -> np.ndarray:
    """First-order standard deviation of ln f for every design, shape (n,)."""
    problem = sim.problem
    vals = designs.values(problem)
    sens = board_sensitivities(problem.topology, vals, problem.parasitics)
    sigs = part_sigmas(sim, designs)
    var = np.zeros(len(designs)) + extra_var
    for p, s in sens.items():
        var = var + (s * sigs[p]) ** 2
    return np.sqrt(var)


def lnf_bias(sim: Simulation, designs: Designs) -> np.ndarray:
    """Second-order shift of the mean of ln f: Σ S_i·E[ln(1 + d_i)] ≈ -Σ S_i·σ_i²/2.

    (Taylor expansion of ln(1 + d) to second order; E[d] = 0, E[d²] = σ².)
    """
    problem = sim.problem
    vals = designs.values(problem)
    sens = board_sensitivities(problem.topology, vals, problem.parasitics)
    sigs = part_sigmas(sim, designs)
    out = np.zeros(len(designs))
    for p, s in sens.items():
        out = out - s * sigs[p] ** 2 / 2
    return out


def temperature_terms(sim: Simulation, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """First-order drift of ln f at each grid temperature: mean shift and variance.

    Δln f(T) ≈ Σ S_i·Δ_i(T) with the drift Δ_i of each drifting part
    (:func:`picker.drivers.temperature_shift`; its variance Σ S_i²·std(Δ_i)²,
    JCGM 100:2008, 5.1.2, parts drifting independently).

    Returns
    -------
    (shift, var) : arrays, shape (n_temps, n); (1, n) zeros without drift.
    """
    n = len(designs)
    mats = {p: v.material for p, v in sim.parts.items() if v.material is not None}
    if not mats:
        return np.zeros((1, n)), np.zeros((1, n))
    from picker.drift import drift_moments
    from picker.drivers import temperature_shift

    problem = sim.problem
    sens = board_sensitivities(problem.topology, designs.values(problem), problem.parasitics)
    temps = np.asarray(sim.temperatures, dtype=float)
    shift = temperature_shift(sens, mats, temps).reshape(len(temps), n)
    var = np.zeros((len(temps), n))
    for p, m in mats.items():
        _, std = drift_moments(m, temps)
        var = var + (np.asarray(sens[p])[None, :] * std[:, None]) ** 2
    return shift, var


def screen_yield(sim: Simulation, designs: Designs) -> np.ndarray:
    """Approximate yield (share in window) of every design from the log-normal model.

    With drifting parts the window probability is evaluated at every grid
    temperature (mean shifted and variance widened by :func:`temperature_terms`)
    and the smallest is taken: a board must pass at every temperature, so the
    true yield is at most this (the top-up in :mod:`picker.ranking` absorbs
    the difference).
    """
    problem = sim.problem
    shift, tvar = temperature_terms(sim, designs)
    sig = np.sqrt(sigma_lnf(sim, designs) ** 2 + tvar)
    mu = np.log(designs.f_nominal) + lnf_bias(sim, designs) + shift
    with np.errstate(divide="ignore", invalid="ignore"):
        hi = (np.log(problem.f_max) - mu) / sig
        lo = (np.log(problem.f_min) - mu) / sig
    y = ndtr(hi) - ndtr(lo)
    # A design with zero spread is in the window for sure if its centre is.
    inside = (mu >= np.log(problem.f_min)) & (mu <= np.log(problem.f_max))
    return np.min(np.where(sig > 0, y, inside.astype(float)), axis=0)


def select_for_montecarlo(
    sim: Simulation, designs: Designs, m: int
) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the best ``m`` designs by screen yield, and every screen yield.

    Order: screen yield (descending), then |nominal error| (ascending), then
    the design's position in the index-sorted list (deterministic).
    """
    problem = sim.problem
    y = screen_yield(sim, designs)
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
