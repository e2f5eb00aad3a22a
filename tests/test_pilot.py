"""The top-up's pilot (picker.core.pilot): a control-variate regression estimate.

Reference: ordinary least squares written here with numpy's ``lstsq`` on the design
matrix [1, X − 1/2] (X the rows' uniform inputs of the other parts, whose mean 1/2 is
known): the intercept is the estimate at the known mean, and its standard error is
s·√((AᵀA)⁻¹)₀₀ with s² = RSS/(n − k − 1) (Draper & Smith, *Applied regression
analysis*, 3rd ed., ch. 5; from memory). Then the pilot's upper value must lie above
the full run's estimate for (nearly) every design.
"""

from __future__ import annotations

import numpy as np
import pytest

from picker.core.conditional import (
    conditional_counts,
    conditional_rows,
    integrated_codes,
    integrated_positions,
)
from picker.core.montecarlo import Simulation
from picker.core.pilot import pilot_estimates
from picker.core.search import Problem, search
from picker.parts.series import expand
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics
from picker.tank.colpitts import COLPITTS


def _problem(window: float, tol_c: float, tol_l: float, f0: float = 310e3) -> Problem:
    tabs = {
        "C1": uniform_table(expand("E24", 100e-12, 100e-9), tol_c, "E24"),
        "C2": uniform_table(expand("E24", 100e-12, 1e-6), tol_c, "E24"),
        "L": uniform_table(expand("E12", 1e-6, 10e-3), tol_l, "E12"),
    }
    return Problem(
        COLPITTS, tabs, f0 * (1 - window), f0 * (1 + window), 0.1, 0.5, Parasitics(stray=15e-12)
    )


@pytest.mark.parametrize("rows", [8, 32, 512])
@pytest.mark.parametrize("dist", ["uniform", "normal"])
def test_pilot_is_least_squares_at_the_known_mean(rows, dist):
    p = _problem(0.01, 0.01, 0.05)
    designs = search(p)
    sim = Simulation.simple(p, dist)
    u = np.random.default_rng(5).random((rows, sim.n_columns))
    integ = integrated_positions(sim, designs)
    assert set(integ.tolist()) == {"L"}
    names, codes = integrated_codes(sim, designs)
    everything = np.arange(len(designs))
    est, se = pilot_estimates(sim, designs, everything, u, names, codes, workers=2)
    y = conditional_rows(sim, designs, "L", u)  # (rows, designs)
    ctrl = [j for name, j in sim.columns().items() if name != "L"]
    a = np.column_stack([np.ones(rows), u[:, ctrl] - 0.5])
    coef, *_ = np.linalg.lstsq(a, y, rcond=None)
    resid = y - a @ coef
    s2 = (resid**2).sum(axis=0) / (rows - a.shape[1])
    se_ref = np.sqrt(s2 * np.linalg.inv(a.T @ a)[0, 0])
    np.testing.assert_allclose(est, coef[0], rtol=0, atol=1e-12)
    np.testing.assert_allclose(se, se_ref, rtol=1e-6, atol=1e-13)


def test_pilot_upper_value_lies_above_the_full_estimate():
    # a flat space (window ±1 %, C ±1 %, L ±5 %): yields within a few 1e-5 of each other
    p = _problem(0.01, 0.01, 0.05)
    designs = search(p)
    sim = Simulation.simple(p, "uniform")
    u = np.random.default_rng(11).random((20000, sim.n_columns))
    integ = integrated_positions(sim, designs)
    full = conditional_counts(sim, designs, u, integrated=integ)
    names, codes = integrated_codes(sim, designs)
    est, se = pilot_estimates(sim, designs, np.arange(len(designs)), u[:32], names, codes)
    upper = est + 6.0 * se
    # beyond the full run's own noise (four of its standard errors), none lies above
    assert np.mean(full.mean() > upper + 4 * full.std_error()) == 0.0
    # and the pilot is tight: on most designs 20 times narrower than the plain pilot mean's
    plain_se = conditional_counts(sim, designs, u[:32], integrated=integ).std_error()
    assert np.median(se / np.maximum(plain_se, 1e-300)) < 0.05
