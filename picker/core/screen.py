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

from picker.core.montecarlo import Simulation
from picker.core.propagation import temperature_shift, temperature_variance
from picker.core.search import Designs, Problem
from picker.parts.drift import Material, drift_factor
from picker.parts.pairs import effective_tolerance
from picker.tank.board import board_frequency, board_sensitivities


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


def sigma_lnf(sim: Simulation, designs: Designs, extra_var: float | np.ndarray = 0.0) -> np.ndarray:
    """First-order standard deviation of ln f for every design, shape (n,).

    The sections of a tapped coil (:attr:`picker.core.montecarlo.Simulation.shared`)
    are one part: fully correlated, their sensitivities add (JCGM 100:2008, 5.2.2 with
    r = 1)."""
    problem = sim.problem
    vals = designs.values(problem)
    sens = board_sensitivities(problem.topology, vals, problem.parasitics)
    sigs = part_sigmas(sim, designs)
    # positions that are one part (a tapped coil's sections, Simulation.shared) take one
    # variate: their terms add before squaring, Σ over parts of (Σ_sections S_i·σ_i)²
    parts: dict[str, np.ndarray] = {}
    for p, s in sens.items():
        q = sim.shared.get(p, p)
        parts[q] = parts.get(q, 0.0) + s * sigs[p]
    var = np.zeros(len(designs)) + extra_var
    for term in parts.values():
        var = var + term**2
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


def _drifting(sim: Simulation) -> dict[str, Material]:
    """The drift class of every drifting position, in position order."""
    return {p: v.material for p, v in sim.parts.items() if v.material is not None}


def temperature_terms(sim: Simulation, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """First-order drift of ln f at each grid temperature: mean shift and variance.

    Δln f(T) ≈ Σ S_i·Δ_i(T) with the drift Δ_i of each drifting part
    (:func:`picker.core.propagation.temperature_shift`; its variance Σ S_i²·std(Δ_i)²,
    :func:`picker.core.propagation.temperature_variance`, parts drifting independently).

    Returns
    -------
    (shift, var) : arrays, shape (n_temps, n); (1, n) zeros without drift.
    """
    n = len(designs)
    mats = _drifting(sim)
    if not mats:
        return np.zeros((1, n)), np.zeros((1, n))
    problem = sim.problem
    sens = board_sensitivities(problem.topology, designs.values(problem), problem.parasitics)
    temps = np.asarray(sim.temperatures, dtype=float)
    shift = temperature_shift(sens, mats, temps).reshape(len(temps), n)
    var = temperature_variance(sens, mats, temps).reshape(len(temps), n)
    return shift, var


#: Gauss-Legendre nodes over the dominant drifting part's curve variate (screen only).
DRIFT_NODES = 16


def _window(
    mu: np.ndarray, sig: np.ndarray, lo: float | np.ndarray, hi: float | np.ndarray
) -> np.ndarray:
    """P(lo <= N(mu, sig²) <= hi), 0 for an empty interval; a point mass when sig = 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        y = ndtr((hi - mu) / sig) - ndtr((lo - mu) / sig)
    point = ((mu >= lo) & (mu <= hi)).astype(float)
    return np.where(sig > 0, np.maximum(y, 0.0), point)


def screen_yield(sim: Simulation, designs: Designs) -> np.ndarray:
    """Approximate yield (share in window) of every design from the log-normal model.

    Without drift: P(ln f_min <= ln f <= ln f_max) with ln f normal, mean
    ln f_nominal + :func:`lnf_bias`, sd :func:`sigma_lnf`.

    With drifting parts a board must pass at every grid temperature. Both
    drift models are affine in their part's curve variate u (Δ_i(T, u) =
    c_i(T) + e_i(T)·u, :func:`picker.parts.drift.drift_factor`), so for a given u
    of the design's dominant drifting part (largest |S_i·e_i(T)|) the shift
    of ln f at each T is known and a board passes everywhere exactly when
    ln f(25 °C) lies in the intersection of the shifted windows,
    [ln f_min − min_T shift_T, ln f_max − max_T shift_T]. The other drifting
    parts enter through their mean shift and, as extra variance, their
    largest variance over T (first order, JCGM 100:2008, 5.1.2); u is
    integrated by Gauss-Legendre quadrature (:data:`DRIFT_NODES` nodes).
    """
    problem = sim.problem
    sig = sigma_lnf(sim, designs)
    mu = np.log(designs.f_nominal) + lnf_bias(sim, designs)
    lo, hi = np.log(problem.f_min), np.log(problem.f_max)
    mats = _drifting(sim)
    if not mats:
        return _window(mu, sig, lo, hi)
    n = len(designs)
    temps = np.asarray(sim.temperatures, dtype=float)
    sens = board_sensitivities(problem.topology, designs.values(problem), problem.parasitics)
    s = np.stack([np.broadcast_to(sens[p], (n,)) for p in mats])  # (P, n)
    d01 = [drift_factor(m, temps, [0.0, 1.0]) for m in mats.values()]
    c = np.stack([d[:, 0] for d in d01])  # (P, T): drift at u = 0
    e = np.stack([d[:, 1] - d[:, 0] for d in d01])  # (P, T): slope in u
    mean_shift = np.einsum("pn,pt->tn", s, c + e / 2)  # (T, n)
    amp = s[:, None, :] * e[:, :, None]  # (P, T, n)
    dom = np.argmax(np.max(np.abs(amp), axis=1), axis=0)  # (n,)
    amp_d = amp[dom, :, np.arange(n)].T  # (T, n)
    var_other = (amp**2).sum(axis=0) / 12 - amp_d**2 / 12  # uniform u: var = e²/12
    sd = np.sqrt(sig**2 + np.max(np.maximum(var_other, 0.0), axis=0))
    x, w = np.polynomial.legendre.leggauss(DRIFT_NODES)
    y = np.zeros(n)
    for xk, wk in zip(x, w, strict=True):
        shift = mean_shift + amp_d * ((xk + 1) / 2 - 0.5)
        y += wk / 2 * _window(mu, sd, lo - shift.min(axis=0), hi - shift.max(axis=0))
    return y


#: Designs screened at a time (bounds the screen's temporaries to a few tens of MB).
SCREEN_CHUNK = 1 << 18


def select_for_montecarlo(
    sim: Simulation, designs: Designs, m: int
) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the best ``m`` designs by screen yield, and every screen yield.

    Order: screen yield (descending), then |nominal error| (ascending), then
    the design's position in the index-sorted list (deterministic).
    """
    problem = sim.problem
    n = len(designs)
    # in chunks, into one preallocated array: the per-design temporaries stay bounded
    y = np.empty(n)
    for i in range(0, n, SCREEN_CHUNK):
        y[i : i + SCREEN_CHUNK] = screen_yield(
            sim, designs.take(np.arange(i, min(i + SCREEN_CHUNK, n)))
        )
    target = np.sqrt(problem.f_min * problem.f_max)
    key = -np.round(y, 12)
    if m <= 0:
        return np.zeros(0, dtype=np.int64), y
    # only the designs that can be among the best m are sorted (the same order as a
    # full sort: every design ranked before the m-th has a key no larger than its)
    cand = np.flatnonzero(key <= np.partition(key, m - 1)[m - 1]) if m < n else np.arange(n)
    err = np.abs(np.log(designs.f_nominal[cand] / target))
    order = cand[np.lexsort((cand, err, key[cand]))]
    return order[:m], y


def corner_span(problem: Problem, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest frequency over every tolerance corner, shape (n,) each.

    Each part is set to nominal·(1 ± t) in all 2^k combinations (the
    worst-case method; the extremes of a monotone function lie at corners).
    A parallel pair a + b is monotone in each of its parts, so its corners are
    a + b ± (a·ta + b·tb) (:func:`picker.parts.pairs.effective_tolerance`).
    """
    topo = problem.topology
    vals = designs.values(problem)
    tols = {p: effective_tolerance(problem.tables[p], designs.idx[p]) for p in topo.positions}
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
