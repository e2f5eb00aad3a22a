"""The top-up proves instead of over-checking (picker.core.ranking.conditional_rank).

Brute-force reference: the conditional Monte Carlo of *every* feasible design on the
same boards, ranked by the same rule. The ranking that checks only the designs whose
upper value can still beat the N-th by more than the N-th's interval half-width (the
rest are counted as ties, :data:`picker.core.ranking.TIE_RULE`) must rank every
*separated* design as the brute force does: a design of the brute-force top N whose
95 % interval lies wholly above the brute-force N-th's keeps its rank, and every design
whose interval lies wholly above the N-th interval of the ranking is in its top N. The
bound itself must lie above every design's yield (checked against the estimate plus 4
standard errors, and against an exact closed form in a case where only L varies).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from picker.core.conditional import conditional_counts, integrated_positions, yield_upper_bound
from picker.core.montecarlo import Simulation
from picker.core.ranking import Ranking, estimate_order, rank_with_ties
from picker.core.search import Designs, Problem, search
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


Z95 = 1.959963984540054  # the 97.5 % point of the standard normal (tables; from memory)


def _assert_separated_same(sim, designs, u, *, m: int, top: int, f0: float) -> Ranking:
    """The ranking with ties against checking every design (module docstring)."""
    t = conditional_counts(sim, designs, u)
    mean, se = t.mean(), t.std_error()
    lo, hi = mean - Z95 * se, mean + Z95 * se
    want = estimate_order(mean, designs.f_nominal, f0)[:top]
    r = rank_with_ties(sim, designs, u, m=m, top=top, target=f0)
    got = r.checked[:top]
    # the checked designs' figures are the brute force's (the same boards)
    np.testing.assert_array_equal(r.tally.total, t.total[r.checked])
    # separated from the brute-force N-th: the same design at the same rank
    for k, i in enumerate(want):
        if lo[i] > hi[want[-1]]:
            assert got[k] == i, (k, i, got.tolist(), want.tolist())
    # separated above the ranking's own N-th: in its top N
    above = np.flatnonzero(lo > hi[got[-1]])
    assert set(above.tolist()) <= set(got.tolist())
    # ties and checked designs never exceed the designs
    assert r.ties + r.unresolved + len(r.checked) <= len(designs)
    return r


@pytest.mark.parametrize("dist", ["uniform", "normal"])
@pytest.mark.parametrize(("window", "tol_c", "tol_l"), [(0.03, 0.05, 0.10), (0.01, 0.01, 0.05)])
def test_top_n_equals_checking_everything(dist, window, tol_c, tol_l):
    p = _problem(window, tol_c, tol_l)
    designs = search(p)
    sim = Simulation.simple(p, dist)
    u = np.random.default_rng(3).random((4000, 3))
    r = _assert_separated_same(sim, designs, u, m=5, top=10, f0=310e3)
    # the bound and the pilots prove most designs out: far fewer than all are checked
    assert len(r.checked) < len(designs)


def test_bound_lies_above_every_yield():
    p = _problem(0.02, 0.05, 0.10)
    designs = search(p)
    for dist in ("uniform", "normal"):
        sim = Simulation.simple(p, dist)
        u = np.random.default_rng(9).random((20000, 3))
        t = conditional_counts(sim, designs, u)
        bound = yield_upper_bound(sim, designs, integrated_positions(sim, designs))
        assert np.all(bound >= t.mean() - 4 * t.std_error())
        assert np.mean(bound < 1) > 0.9  # a bound is known for the designs


def test_bound_is_exact_when_only_l_varies():
    # C1, C2 fixed (tolerance 0): the window of L is one interval, so the bound is the
    # yield itself: P(d_L in [lc_lo/(L·C_eff) - 1, lc_hi/(L·C_eff) - 1]), uniform over ±t
    # (Thomson's formula written out here, REFERENCES.md)
    p = _problem(0.03, 0.0, 0.10)
    designs = search(p)
    sim = Simulation.simple(p, "uniform")
    bound = yield_upper_bound(sim, designs, integrated_positions(sim, designs))
    v = designs.values(p)
    ce = v["C1"] * v["C2"] / (v["C1"] + v["C2"]) + 15e-12
    lc_lo = 1 / (2 * math.pi * p.f_max) ** 2
    lc_hi = 1 / (2 * math.pi * p.f_min) ** 2
    lo = np.clip(lc_lo / (v["L"] * ce) - 1, -0.1, 0.1)
    hi = np.clip(lc_hi / (v["L"] * ce) - 1, -0.1, 0.1)
    exact = (hi - lo) / 0.2
    np.testing.assert_allclose(bound, exact, atol=1e-9)  # rounding of the edges only


@settings(max_examples=15, deadline=None)
@given(
    window=st.sampled_from([0.01, 0.02, 0.05]),
    tol_c=st.sampled_from([0.01, 0.02, 0.05]),
    tol_l=st.sampled_from([0.02, 0.05, 0.1]),
    f0=st.sampled_from([100e3, 310e3, 1e6]),
    m=st.integers(1, 8),
    top=st.integers(1, 12),
    seed=st.integers(0, 2**16),
)
def test_top_n_equals_brute_force_on_random_spaces(window, tol_c, tol_l, f0, m, top, seed):
    p = _problem(window, tol_c, tol_l, f0)
    designs = search(p)
    if len(designs) == 0:
        return
    sim = Simulation.simple(p, "uniform")
    u = np.random.default_rng(seed).random((1000, 3))
    _assert_separated_same(sim, designs, u, m=m, top=top, f0=f0)


@settings(max_examples=30, deadline=None)
@given(st.integers(1, 400), st.integers(0, 2**20), st.booleans())
def test_best_m_by_screen_equals_the_full_sort(m: int, seed: int, ties: bool) -> None:
    """The screen's best m (a partition, then a sort of the few that can be among them)
    equal the first m of the full sort by (screen yield desc, |error| asc, index): the
    reference is numpy's lexsort over every design, written here. Ties in the yield
    (rounded to 12 digits) are forced half the time."""
    from picker.core import screen as scr

    p = _problem(0.01, 0.01, 0.05)
    designs = search(p)
    sim = Simulation.simple(p, "uniform")
    levels = 5 if ties else 100_003  # few levels: long runs of equal yields

    def fake_screen(_s: Simulation, d: Designs) -> np.ndarray:
        """A yield that is a fixed function of the design's parts (any chunk)."""
        k = d.idx["C1"].astype(np.int64) * 7919 + d.idx["C2"] * 104729 + d.idx["L"] * 1299709
        return ((k + seed) % levels) / levels

    real = scr.screen_yield
    try:
        scr.screen_yield = fake_screen  # type: ignore[assignment]
        got, y_got = scr.select_for_montecarlo(sim, designs, m)
    finally:
        scr.screen_yield = real
    target = math.sqrt(p.f_min * p.f_max)
    err = np.abs(np.log(designs.f_nominal / target))
    want = np.lexsort((np.arange(len(y_got)), err, -np.round(y_got, 12)))[:m]
    assert got.tolist() == want.tolist()
