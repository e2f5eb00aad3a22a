"""A board's own coupling k (``[tank] coupling_tolerance``) with the loaded model ([amplifier]).

Reference: picker.circuit.steady.steady_state called here on each board with the tank
configured to that board's own k (one call per sample: the Monte Carlo draws k once a
board), the counting rule written out (starts, runs steady, margin at most max_margin,
steady frequency in the window), not through LoadedModel. The fast path takes each board's
k in the ideal tank exactly and the rest of the large-signal model's dependence on k
through the quadratic (X1) of picker.circuit.board_spread; both sides see the same boards
(common random numbers), so their difference is the approximation's alone. Bounds: yields
within one combined binomial standard error (Wilson 1927; JCGM 101:2008 §7) and at most
3 % of a design's boards decided otherwise, as tests/test_loaded_stray.py.
A uniform k over k0 ± t (GUM JCGM 100:2008, 4.3.7) is drawn per board.
"""

from __future__ import annotations

import copy
import tomllib
from dataclasses import replace

import numpy as np
import pytest
from conftest import DEMO

from picker import api
from picker.circuit import loaded as loaded_mod
from picker.circuit.board_fit import point_quantities
from picker.circuit.loaded import LoadedModel, loaded_nominal
from picker.circuit.loaded_search import loaded_search
from picker.circuit.steady import steady_state
from picker.core.montecarlo import STRAY, sampled_values
from picker.core.sampling import head
from picker.tank.base import COUPLING
from picker.tank.board import board_frequency, board_values

#: the largest share of one design's boards decided otherwise (docstring)
MAX_DISAGREE = 0.03
K0, T = 0.3, 0.1
N = 200


@pytest.fixture(scope="module")
def demo():
    with open(DEMO / "hartley_beacon.toml", "rb") as fh:
        raw = copy.deepcopy(tomllib.load(fh))
    raw["tank"] = {"coupling": K0, "coupling_tolerance": T}
    raw["frequency"]["window"] = "±5 %"
    raw["amplifier"]["max_margin"] = 20
    spec = api.spec_from_dict(raw)
    pb = api.build_problem(spec)
    params = spec.amplifier.to_params(spec.parts)
    ls = loaded_search(pb, params, min_margin=2.0, max_margin=20.0)
    designs = ls.designs.take(np.array([0, len(ls.designs) // 2, len(ls.designs) - 1]))
    return spec, pb, params, designs


def _state(topo, pb, params, vals):
    bv = board_values(topo, {p: vals[p] for p in topo.positions}, pb.parasitics)
    with np.errstate(all="ignore"):
        return steady_state(topo, bv, pb.parasitics.stray, params)


def _counts(st, pb, max_margin):
    ok = st.starts & ~st.bursting & ~(st.margin > max_margin)
    return ok & (st.f_hz >= pb.f_min) & (st.f_hz <= pb.f_max)


def test_fitted_k_terms_follow_the_large_signal_model_between_the_fit_points(demo):
    # (X1) is fitted at k0 − t, k0, k0 + t; at k0 ± t/2 the large-signal model itself
    # (the tank configured to that k) against the quadratic, for L = ln f_steady − ln f_ideal
    # and ln m
    _, pb, params, designs = demo
    model = LoadedModel(pb, params, coupling_tol=T)
    coef = model.spread_terms(designs, COUPLING)
    vals = designs.values(pb)
    mid = pb.topology.configured(K0)
    st0 = _state(mid, pb, params, vals)
    l0 = np.log(st0.f_hz) - np.log(board_frequency(mid, vals, pb.parasitics))
    s0 = point_quantities(*loaded_nominal(mid, vals, pb.parasitics, params), st0, params)[2]
    for d in (-T / 2, T / 2):
        tank = pb.topology.configured(K0 + d)
        st = _state(tank, pb, params, vals)
        l_ref = np.log(st.f_hz) - np.log(board_frequency(tank, vals, pb.parasitics))
        # measured at most 2.5e-4 (the third design, since the two-junction balance carries
        # twelve harmonics on strongly driven boards; 1.2e-4 before): 5e-4 is a thirtieth of
        # the demo's ±1.5 % window, and a missing k term is off by 1e-2
        assert np.all(np.abs(l0 + coef[0] * d + coef[1] * d * d - l_ref) < 5e-4)
        m_ref = np.log(st.margin)
        m_fit = np.log(st0.margin) + coef[2] * d + coef[3] * d * d
        assert np.all(np.abs(m_fit - m_ref) < 0.01)
        # the board fit's bursting conditions (A3) likewise
        lin_f, lin_m = loaded_nominal(tank, vals, pb.parasitics, params)
        steady = point_quantities(lin_f, lin_m, st, params)[2]
        c_fit = s0 + coef[4::2] * d + coef[5::2] * d * d
        print("conditions", steady, c_fit, sep="\n")
        assert np.allclose(c_fit, steady, rtol=0.02, atol=1e-3 * np.abs(s0).max())
    # teeth: the margin moves with k here (the feedback fraction (L2 + M)/(L1 + M) moves)
    assert np.all(np.abs(coef[2]) > 0.3)


def test_own_k_counts_like_the_large_signal_model_on_every_board(demo, monkeypatch):
    spec, pb, params, designs = demo
    sim = api.simulation_of(spec, pb)
    assert sim.coupling_tol == pytest.approx(T)
    u = head(api.random_inputs(spec, sim, N, 5), N)
    vals = sampled_values(sim, designs, u)
    assert vals[COUPLING].shape == (N, 1) and np.ptp(vals[COUPLING]) > 1.6 * T
    # the margin ceiling at the middle design's nominal margin: k moves the margin across it
    nominal = _state(pb.topology, pb, params, designs.values(pb))
    top = float(nominal.margin[1])
    fast = LoadedModel(pb, params, "surrogate", max_margin=top, coupling_tol=T)(vals, designs)
    ref = np.zeros(fast.shape, dtype=bool)
    for s in range(N):
        tank = pb.topology.configured(float(vals[COUPLING][s, 0]))
        ref[s] = _counts(_state(tank, pb, params, {p: v[s] for p, v in vals.items()}), pb, top)
    one = _counts(_state(pb.topology, pb, params, vals), pb, top)  # every board at k0
    y_f, y_r, y_1 = fast.mean(axis=0), ref.mean(axis=0), one.mean(axis=0)
    p = np.clip(y_r, 1 / N, 1 - 1 / N)
    se = np.sqrt(2 * p * (1 - p) / N)
    print(f"fast {y_f}\nfull {y_r}\none k {y_1}\ndisagree {(fast != ref).mean(axis=0)}")
    assert np.all(np.abs(y_f - y_r) <= se)
    assert np.all((fast != ref).mean(axis=0) <= MAX_DISAGREE)
    # teeth: one k for every board counts some design far off
    assert np.max(np.abs(y_1 - y_r) / se) > 3
    # teeth for (X1): with the ideal tank's k alone (the k terms dropped) the margin no
    # longer follows k, and the middle design's boards are decided otherwise by the score
    real = LoadedModel.spread_terms

    def ideal_only(self, d, key):
        return 0.0 * real(self, d, key) if key == COUPLING else real(self, d, key)

    monkeypatch.setattr(loaded_mod.LoadedModel, "spread_terms", ideal_only)
    bare = LoadedModel(pb, params, "surrogate", max_margin=top, coupling_tol=T)(vals, designs)
    print(f"without (X1) {bare.mean(axis=0)}, disagree {(bare != ref).mean(axis=0)}")
    assert np.max((bare != ref).mean(axis=0)) > 3 * MAX_DISAGREE


def test_k_share_in_the_drivers_is_the_yield_models(demo):
    # a spec with [amplifier] and a spread of k is taken (it was refused before); k's
    # first-order share of the spread (the drivers table: the ideal tank's ∂ln f/∂k plus
    # the large-signal model's own slope a_f of (X1)) agrees with the Monte Carlo boards'
    # regression share (GUM 5.1.2 against a least-squares fit of ln f over the same boards)
    spec, *_ = demo
    c = api.evaluate(spec, {"L1": "560n", "L2": "220n", "C": "2n"}, samples=1000).candidates[0]
    first, boards = c.extra["drivers"][COUPLING], c.extra["drivers_mc"]["shares"][COUPLING]
    assert boards > 0.5  # k drives most of this design's spread
    assert abs(first - boards) < 0.03, (first, boards)
    assert 0.0 < c.yield_estimate < 1.0


def test_the_stray_and_k_terms_add(demo):
    # board_spread leaves out the cross term of the two spreads (the stray moves C_eff, k
    # moves L_eff): at the four corners (stray ± 1 pF, k ± t) the sum of the two fitted
    # quadratics against the large-signal model itself. Measured 3.6e-5 in ln f and 3.4e-5
    # in ln m at most on the three designs (the k term alone reaches 1.9e-3 in ln f);
    # the bound is the between-points tolerance of the k fit above
    _, pb, params, designs = demo
    s0, ts = float(pb.parasitics.stray), 1e-12
    model = LoadedModel(pb, params, coupling_tol=T, stray_tol=ts)
    ck = model.spread_terms(designs, COUPLING)
    cs = model.spread_terms(designs, STRAY)
    vals = designs.values(pb)

    def logs(k, s):
        tank, par = pb.topology.configured(k), replace(pb.parasitics, stray=s)
        bv = board_values(tank, {p: vals[p] for p in tank.positions}, par)
        with np.errstate(all="ignore"):
            st = steady_state(tank, bv, s, params)
        return np.log(st.f_hz) - np.log(board_frequency(tank, vals, par)), np.log(st.margin)

    l0, m0 = logs(K0, s0)
    for dk in (-T, T):
        for ds in (-ts, ts):
            l_ref, m_ref = logs(K0 + dk, s0 + ds)
            l_fit = l0 + ck[0] * dk + ck[1] * dk * dk + cs[0] * ds + cs[1] * ds * ds
            m_fit = m0 + ck[2] * dk + ck[3] * dk * dk + cs[2] * ds + cs[3] * ds * ds
            assert np.all(np.abs(l_fit - l_ref) < 5e-4)
            assert np.all(np.abs(m_fit - m_ref) < 0.01)
            # teeth: leaving out the k terms misses by more than the bound
            assert np.max(np.abs(l_fit - ck[0] * dk - ck[1] * dk * dk - l_ref)) > 5e-4
