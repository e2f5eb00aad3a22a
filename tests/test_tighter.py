"""What to buy tighter: ladder, ranking, prices and a greedy plan.

The yield functions here are independent of the module: a closed-form
log-normal yield (scipy.stats.norm, first-order RSS; JCGM 100:2008, 5.1.2) and a
small common-random-number Monte Carlo with temperature drift.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from picker.parts.distributions import deviation, std_of
from picker.parts.drift import drift_factor, get_material, temperature_grid
from picker.production.tighter import (
    TOLERANCE_LADDER,
    greedy_plan,
    next_tighter,
    rank_changes,
    swap_for,
)
from picker.tank.colpitts import COLPITTS

# Colpitts, C1 = C2: S_L = -1/2, S_C1 = S_C2 = -1/4 (REFERENCES.md sensitivities).
SENS = {"C1": -0.25, "C2": -0.25, "L": -0.5}
TOLS = {"C1": 0.05, "C2": 0.05, "L": 0.10}
WINDOW = 0.03  # ±3 % around the nominal frequency


def lognormal_yield(tol_over, mat_over):
    tol = {**TOLS, **tol_over}
    sigma = np.sqrt(sum((SENS[p] * std_of("uniform", tol[p])) ** 2 for p in SENS))
    z = np.log(1 + WINDOW) / sigma
    return float(stats.norm.cdf(z) - stats.norm.cdf(np.log(1 - WINDOW) / sigma))


def test_ladder_is_the_customary_classes():
    # E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5/0.25/0.1 % (REFERENCES.md)
    assert TOLERANCE_LADDER == (0.20, 0.10, 0.05, 0.02, 0.01, 0.005, 0.0025, 0.001)
    assert [next_tighter(t) for t in TOLERANCE_LADDER] == [*TOLERANCE_LADDER[1:], None]
    assert next_tighter(0.15) == 0.10 and next_tighter(0.5) == 0.20
    assert swap_for("X7R") == "C0G" and swap_for("Y5V") == "C0G"
    assert swap_for("polyester") == "polypropylene" and swap_for("ferrite") == "air"
    assert swap_for("C0G") is None and swap_for(None) is None


def test_ranking_with_closed_form_yield_and_prices():
    prices = {"L": {0.10: 0.20, 0.05: 0.35}, "C1": {0.05: 0.01, 0.02: 0.03}}
    ranked = rank_changes(TOLS, lognormal_yield, prices=prices, parts_per_board={"C1": 2})
    assert [c.position for c in ranked] == ["L", "C1", "C2"]  # L has the largest S·σ
    y0 = lognormal_yield({}, {})
    for c in ranked:
        assert c.yield_before == pytest.approx(y0)
        assert c.gain == pytest.approx(c.yield_after - y0)
        assert c.gain > 0
    assert ranked[0].after == 0.05
    assert ranked[0].yield_after == pytest.approx(lognormal_yield({"L": 0.05}, {}))
    assert ranked[0].extra_cost == pytest.approx(0.15)
    assert ranked[1].extra_cost == pytest.approx(0.04)  # 2 parts x 0.02
    assert ranked[2].extra_cost is None  # C2 not priced
    # C1 and C2 are symmetric: equal gains, ties broken by price then position order
    assert ranked[1].gain == pytest.approx(ranked[2].gain)


def test_greedy_plan_reaches_a_target():
    steps = greedy_plan(TOLS, lognormal_yield, target=0.99)
    assert steps and steps[-1].yield_after >= 0.99
    ys = [s.yield_after for s in steps]
    assert all(b > a for a, b in zip(ys, ys[1:], strict=False))
    assert steps[0].position == "L"
    # every step before the last was still short of the target
    assert all(s.yield_after < 0.99 for s in steps[:-1])


def test_dielectric_swap_wins_when_drift_dominates():
    # Colpitts with an X7R C2 (EIA-198 ±15 % envelope) over −40..85 °C: a board passes
    # only if it is in the window at every grid temperature. Common random numbers:
    # one U for every evaluation, so gains are not sampling noise.
    nominal = {"C1": 1e-9, "C2": 1e-9, "L": 10e-6}
    f0 = float(COLPITTS.frequency(nominal))
    f_lo, f_hi = f0 * 0.98, f0 * 1.02
    base_tol = {"C1": 0.02, "C2": 0.02, "L": 0.02}
    base_mat = {"C1": "C0G", "C2": "X7R", "L": "air"}
    u = np.random.default_rng(3).random((4000, 6))
    temps = temperature_grid(-40.0, 85.0, 5)

    def mc_yield(tol_over, mat_over):
        tol, mat = {**base_tol, **tol_over}, {**base_mat, **mat_over}
        ok = np.ones(u.shape[0], bool)
        vals25 = {
            p: nominal[p] * (1 + deviation(u[:, j], tol[p])[:, 0])
            for j, p in enumerate(COLPITTS.positions)
        }
        drift = {
            p: drift_factor(get_material(mat[p]), temps, u[:, 3 + j])
            for j, p in enumerate(COLPITTS.positions)
        }
        for i in range(temps.size):
            v = {p: vals25[p] * (1 + drift[p][i]) for p in vals25}
            f = COLPITTS.frequency(v)
            ok &= (f >= f_lo) & (f <= f_hi)
        return float(ok.mean())

    ranked = rank_changes(base_tol, mc_yield, materials=base_mat)
    assert (ranked[0].position, ranked[0].kind, ranked[0].after) == ("C2", "material", "C0G")
    assert ranked[0].gain > 0.05 and ranked[0].gain > ranked[1].gain + 0.01
    kinds = {(c.position, c.kind) for c in ranked}
    assert ("C1", "material") not in kinds  # C0G has nothing steadier
    assert ("L", "material") not in kinds  # air core neither
