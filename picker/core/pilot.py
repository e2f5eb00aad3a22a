"""Pilot estimates for the top-up: the conditional estimator with the rows' inputs as controls.

The top-up of :func:`picker.core.ranking.conditional_rank` runs a short pilot
(the first few rows of the run's random numbers) on every design still in play,
and keeps a design only while an upper value of its yield can still reach the
top N. The pilot's value is the conditional pass probability Y of each board
(:func:`picker.core.conditional.conditional_rows`), regressed on the board's
uniform inputs: every column of ``u`` but the integrated part's own is uniform
on [0, 1), so its mean is known (1/2) and it serves as a control variate. The
regression estimator (Owen, *Monte Carlo theory, methods and examples*, 2013,
ch. 8, the section on control variates; section number from memory) is

    ŷ = Ȳ − b·(X̄ − 1/2),   b = Sxx⁻¹·Sxy (least squares of Y on the controls X),

and its standard error is that of a least-squares fitted value at the point
x = 1/2 (Draper & Smith, *Applied regression analysis*, 3rd ed., ch. 5, the
variance of a predicted mean response; from memory):

    se² = s²·(1/n + (X̄ − 1/2)ᵀ·Sxx⁻¹·(X̄ − 1/2)),   s² = RSS/(n − k − 1),

with Sxx the centred cross-products of the k controls. On a flat space Y is
nearly linear in the other parts' deviations (Y ∝ 1/K, K their product), so
the residual is second order and the pilot's standard error is one to two
orders of magnitude below the plain sample mean's: a 64-row pilot then tells
designs apart at the full run's own resolution. The pilot only decides which
designs are checked in full; every reported yield is the full run's estimate.

Sums run over fixed chunks of designs in design order, each chunk's arithmetic
independent of the others and of the worker count (byte-identical JSON).
Axis convention: samples on axis 0, designs on axis 1.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np

from picker.core.conditional import conditional_rows
from picker.core.montecarlo import Simulation
from picker.core.search import Designs

#: Design-rows per chunk of the pilot (2^19 values of Y: 4 MB).
CELLS = 1 << 19


def pilot_estimates(
    sim: Simulation,
    designs: Designs,
    sel: np.ndarray,
    u: np.ndarray,
    names: np.ndarray,
    codes: np.ndarray,
    *,
    workers: int = 1,
) -> tuple[np.ndarray, np.ndarray]:
    """Regression (control-variate) estimate of the yield of designs ``sel`` (indices
    into ``designs``) on the rows of ``u``, and its standard error, shapes (len(sel),)
    (module docstring).

    ``names[codes]`` is the position each design integrates out
    (:func:`picker.core.conditional.integrated_codes`; all non-empty: the
    conditional estimator applies). Designs are taken a chunk at a time (no copy
    of five million designs).
    """
    n, rows = len(sel), u.shape[0]
    est, se = np.zeros(n), np.zeros(n)
    cols = sim.columns()
    per = max(1, CELLS // max(rows, 1))
    sel_codes = codes[sel]
    jobs: list[tuple[str, np.ndarray]] = []
    for c in np.unique(sel_codes).tolist():
        members = np.flatnonzero(sel_codes == c)
        p = str(names[c])
        jobs.extend((p, members[s : s + per]) for s in range(0, len(members), per))
    del sel_codes
    fits = {p: _controls(u, [j for j in range(u.shape[1]) if j != cols[p]]) for p, _ in jobs}

    def run(job: tuple[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        p, at = job
        y = conditional_rows(sim, designs.take(sel[at]), p, u)
        e, s = _regression(y, *fits[p])
        return at, e, s

    if workers > 1 and len(jobs) > 1:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            for at, e, s in pool.map(run, jobs):
                est[at], se[at] = e, s
    else:
        for job in jobs:
            at, e, s = run(job)
            est[at], se[at] = e, s
    return est, se


def _controls(u: np.ndarray, ctrl: list[int]) -> tuple[np.ndarray, np.ndarray, float, int]:
    """The controls' centred values Xc (rows, k), Sxx⁻¹·(X̄ − 1/2) (k,), the leverage
    term (X̄ − 1/2)ᵀ·Sxx⁻¹·(X̄ − 1/2) and k; no controls when too few rows or Sxx is singular."""
    rows = u.shape[0]
    x = u[:, ctrl]
    k = x.shape[1]
    if k == 0 or rows <= k + 2:
        return np.zeros((rows, 0)), np.zeros(0), 0.0, 0
    xc = x - x.mean(axis=0)
    sxx = xc.T @ xc
    if np.linalg.cond(sxx) > 1e12:  # a constant column: plain mean instead
        return np.zeros((rows, 0)), np.zeros(0), 0.0, 0
    dev = x.mean(axis=0) - 0.5
    w = np.linalg.solve(sxx, dev)
    return xc, w, float(dev @ w), k


def _regression(
    y: np.ndarray, xc: np.ndarray, w: np.ndarray, lev: float, k: int
) -> tuple[np.ndarray, np.ndarray]:
    """ŷ and its standard error per column of ``y`` (rows, c) (module docstring).

    With b = Sxx⁻¹·Sxy: b·(X̄ − 1/2) = Sxyᵀ·Sxx⁻¹·(X̄ − 1/2) = Sxyᵀ·w, and
    RSS = Σ(Y − Ȳ)² − Sxyᵀ·Sxx⁻¹·Sxy.
    """
    rows = y.shape[0]
    mean = y.mean(axis=0)
    yc = y - mean
    ss = np.einsum("ij,ij->j", yc, yc)
    if k == 0:
        return mean, np.sqrt(ss / max(rows - 1, 1) / rows)
    sxy = np.einsum("ik,ij->kj", xc, yc)  # (k, c)
    sxx_inv_sxy = np.linalg.solve(xc.T @ xc, sxy)
    est = mean - w @ sxy
    rss = np.maximum(ss - np.einsum("kj,kj->j", sxy, sxx_inv_sxy), 0.0)
    s2 = rss / (rows - k - 1)
    return est, np.sqrt(s2 * (1.0 / rows + lev))
