"""Spread drivers: first-order variance shares and their Monte Carlo confirmation.

Outside references: numerical derivatives from scipy.differentiate.derivative,
the Clapp sensitivities printed in REFERENCES.md, the closed-form log-normal
yield from scipy.stats.norm, and binomial standard errors for Monte Carlo bounds.
"""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose
from scipy import stats
from scipy.differentiate import derivative

from picker.core.propagation import (
    TEMPERATURE,
    first_order_shares,
    temperature_shift,
    temperature_std,
)
from picker.core.sampling import uniform_matrix
from picker.parts.distributions import deviation, std_of
from picker.parts.drift import drift_factor, get_material
from picker.production.drivers import monte_carlo_shares, regression_fit
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

# Clapp example of REFERENCES.md [derived]: L = 10 µH, C1 = C2 = 1 nF, C3 = 100 pF,
# S = (-0.5, -0.041667, -0.041667, -0.416667) for (L, C1, C2, C3).
CLAPP_VALUES = {"C1": 1e-9, "C2": 1e-9, "C3": 100e-12, "L": 10e-6}
TOL = {"C1": 0.05, "C2": 0.05, "C3": 0.02, "L": 0.10}


def _numeric_sensitivities(topology, values):
    """S_i = d ln f / d ln x_i by scipy.differentiate.derivative (independent of topology)."""
    out = {}
    for p in topology.positions:

        def lnf(s, p=p):
            v = dict(values)
            v[p] = np.exp(s)
            return np.log(topology.frequency(v))

        out[p] = float(derivative(lnf, np.log(values[p])).df)
    return out


def test_shares_sum_to_one_and_match_a_numerical_derivative():
    s_num = _numeric_sensitivities(CLAPP, CLAPP_VALUES)
    assert_allclose(
        [s_num[p] for p in CLAPP.positions], [-0.041667, -0.041667, -0.416667, -0.5], atol=1e-6
    )  # REFERENCES.md Clapp example
    sig = {p: std_of("uniform", TOL[p]) for p in CLAPP.positions}
    sh = first_order_shares(CLAPP.sensitivities(CLAPP_VALUES), sig)
    var_num = {p: (s_num[p] * sig[p]) ** 2 for p in CLAPP.positions}
    tot = sum(var_num.values())
    for p in CLAPP.positions:
        assert_allclose(sh[p], var_num[p] / tot, rtol=1e-7)  # derivative() converges to ~1e-10
    assert_allclose(sum(sh.values()), 1.0, rtol=1e-12)


def test_shares_vectorised_over_candidates():
    rng = np.random.default_rng(2)
    vals = {
        "C1": rng.uniform(1e-10, 1e-8, 50),
        "C2": rng.uniform(1e-10, 1e-8, 50),
        "L": rng.uniform(1e-6, 1e-4, 50),
    }
    sig = {"C1": std_of("uniform", 0.05), "C2": std_of("normal", 0.1), "L": 0.01}
    sh = first_order_shares(COLPITTS.sensitivities(vals), sig, temperature_std=np.full(50, 1e-3))
    assert set(sh) == {"C1", "C2", "L", TEMPERATURE}
    assert all(v.shape == (50,) for v in sh.values())
    assert_allclose(sum(sh.values()), 1.0, rtol=1e-12)
    # an exact (zero-spread) design: every share zero, no NaN
    zero = first_order_shares({"L": -0.5}, {"L": 0.0})
    assert zero["L"] == 0.0


def _clapp_boards(n, seed, materials=None, t=None, kind="uniform"):
    """Sampled boards of the Clapp example: inputs ln(1+δ), drift change and ln f."""
    pos = CLAPP.positions
    k = len(pos) * (2 if materials else 1)
    u = uniform_matrix(n, k, rng=np.random.default_rng(seed))
    d = {p: deviation(u[:, j], TOL[p], kind)[:, 0] for j, p in enumerate(pos)}
    v25 = {p: CLAPP_VALUES[p] * (1 + d[p]) for p in pos}
    ln25 = np.log(CLAPP.frequency(v25))
    if not materials:
        return d, ln25, ln25
    vt = dict(v25)
    for j, p in enumerate(pos):
        if p in materials:
            vt[p] = v25[p] * (1 + drift_factor(materials[p], [t], u[:, len(pos) + j])[0])
    lnt = np.log(CLAPP.frequency(vt))
    return d, ln25, lnt


def test_monte_carlo_regression_confirms_first_order_shares():
    n = 40_000
    d, _, lnf = _clapp_boards(n, seed=5)
    fit = regression_fit({p: np.log1p(d[p]) for p in d}, lnf)
    assert fit.r2 > 0.999  # nearly linear at these tolerances
    sig = {p: std_of("uniform", TOL[p]) for p in CLAPP.positions}
    fo = first_order_shares(CLAPP.sensitivities(CLAPP_VALUES), sig)
    for p in CLAPP.positions:
        # sample variances of uniform inputs carry ~√(0.8/n) relative error; 0.01 is > 5 SE
        assert abs(fit.shares[p] - float(fo[p])) < 0.01
        assert_allclose(fit.coef[p], CLAPP.sensitivities(CLAPP_VALUES)[p], rtol=0.02, atol=2e-3)
    assert_allclose(sum(fit.shares.values()), 1.0, rtol=1e-12)


def test_temperature_share_first_order_and_monte_carlo():
    # X7R in C3 (EIA-198 ±15 % envelope) and C0G elsewhere; shares at the hot end.
    mats = {
        "C1": get_material("C0G"),
        "C2": get_material("C0G"),
        "C3": get_material("X7R"),
        "L": get_material("air"),
    }
    t_hot = 85.0
    sens = CLAPP.sensitivities(CLAPP_VALUES)
    sig = {p: std_of("uniform", TOL[p]) for p in CLAPP.positions}
    s_t = temperature_std(sens, mats, [t_hot])
    fo = first_order_shares(sens, sig, temperature_std=s_t)
    d, ln25, lnt = _clapp_boards(40_000, seed=6, materials=mats, t=t_hot)
    inputs = {p: np.log1p(d[p]) for p in d}
    inputs[TEMPERATURE] = lnt - ln25
    mc = monte_carlo_shares(inputs, lnt)
    assert_allclose(sum(mc.values()), 1.0, rtol=1e-12)
    assert fo[TEMPERATURE] > 0.05  # X7R matters here
    for name in mc:
        assert abs(mc[name] - float(fo[name])) < 0.02, name
    # the systematic shift at 85 °C is second order here (X7R moves C3 by per cents):
    # first order within 15 % of the sampled mean
    shift = temperature_shift(sens, mats, [t_hot])[0]
    assert_allclose(np.mean(lnt - ln25), shift, rtol=0.15)


def test_temperature_shift_first_order_with_small_drifts():
    # Linear classes only: the mean change of ln f is Σ S_i·α0_i·ΔT to first order
    # (JCGM 100:2008, 5.1.2); checked against sampled boards within 4 SE plus the
    # second-order term of ln(1 + Δ) = Δ − Δ²/2 + ..., bounded by Σ|S_i|·E[Δ_i²]/2 · 1.5.
    mats = {
        "C1": get_material("polyester"),
        "C2": get_material("C0G"),
        "C3": get_material("polypropylene"),
        "L": get_material("ferrite"),
    }
    sens = CLAPP.sensitivities(CLAPP_VALUES)
    t = -40.0
    d, ln25, lnt = _clapp_boards(40_000, seed=7, materials=mats, t=t)
    shift = temperature_shift(sens, mats, [t])[0]
    expect = sum(sens[p] * mats[p].tempco * (t - 25.0) for p in mats)
    assert_allclose(shift, expect, rtol=1e-12)
    se = np.std(lnt - ln25) / np.sqrt(lnt.size)
    m2 = sum(
        abs(sens[p]) * (mats[p].tempco ** 2 + mats[p].spread ** 2 / 3) * (t - 25.0) ** 2
        for p in mats
    )
    assert abs(np.mean(lnt - ln25) - shift) < 4 * se + 0.75 * m2
    assert 0.75 * m2 < 0.1 * abs(shift)  # the check still has teeth
    # σ_T is the largest over the temperatures given: the far end from 25 °C here
    s_both = temperature_std(sens, mats, [-40.0, 85.0])
    assert_allclose(s_both, temperature_std(sens, mats, [-40.0]), rtol=1e-12)


def test_gaussian_small_tolerance_yield_matches_lognormal_closed_form():
    # With normal inputs (sigma = t/3) and small tolerances ln f is normal to first
    # order; closed-form yield Φ((ln f_max − μ)/σ) − Φ((ln f_min − μ)/σ) from scipy.stats.norm.
    tol = {"C1": 0.01, "C2": 0.01, "C3": 0.005, "L": 0.01}
    sens = CLAPP.sensitivities(CLAPP_VALUES)
    sig = {p: std_of("normal", tol[p]) for p in CLAPP.positions}
    sigma = np.sqrt(sum((sens[p] * sig[p]) ** 2 for p in CLAPP.positions))
    f0 = float(CLAPP.frequency(CLAPP_VALUES))
    f_min, f_max = f0 * (1 - 0.002), f0 * (1 + 0.003)
    ref = stats.norm.cdf(np.log(f_max / f0) / sigma) - stats.norm.cdf(np.log(f_min / f0) / sigma)
    n = 200_000
    u = uniform_matrix(n, 4, rng=np.random.default_rng(8))
    v = {
        p: CLAPP_VALUES[p] * (1 + deviation(u[:, j], tol[p], "normal")[:, 0])
        for j, p in enumerate(CLAPP.positions)
    }
    f = CLAPP.frequency(v)
    k = int(np.count_nonzero((f >= f_min) & (f <= f_max)))
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=0.9999, method="wilson")
    assert ci.low <= ref <= ci.high
    assert 0.6 < ref < 0.95  # the case is not trivial
