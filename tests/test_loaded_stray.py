"""A board's own stray (``[parasitics] stray_tolerance``) with the loaded model ([amplifier]).

Reference: picker.circuit.steady.steady_state called here on each board's board values
with that board's own stray, the counting rule written out (starts, runs steady, margin
at most max_margin, steady frequency in the window), not through LoadedModel. The fast
path adds the stray to first order ((X1) in picker.circuit.loaded); both sides see the
same boards (common random numbers), so their difference is the approximation's alone.
Bounds: yields within 3 combined binomial standard errors (Wilson 1927; JCGM 101:2008
§7), as tests/test_loaded_fit.py; but at most 3 % of a design's boards decided otherwise,
not 0.5 %: (X1) is fitted at the design's marked values, and the stray's effect on the
steady frequency varies across the boards (their parts move the drive), so boards within
about 0.3 % of a window edge can fall on the other side (measured 2.75 % worst here; on 12
demo designs and 3,000 boards, 2.4 % worst, yields within 0.7 combined SE). Their
errors fall on both edges, so the yields stay within their standard errors.
A uniform stray over ±t (GUM JCGM 100:2008, 4.3.7) is drawn per board.
"""

from __future__ import annotations

import copy
import math
import tomllib

import numpy as np
import pytest
from conftest import DEMO

from picker import api
from picker.circuit.loaded import LoadedModel
from picker.circuit.loaded_search import loaded_search
from picker.circuit.steady import steady_state
from picker.core.montecarlo import sampled_values
from picker.core.sampling import head
from picker.tank.board import board_values

#: the largest share of one design's boards decided otherwise (docstring)
MAX_DISAGREE = 0.03


def read_toml(path):
    with open(path, "rb") as fh:
        return tomllib.load(fh)


@pytest.fixture(scope="module")
def demo():
    raw = read_toml(DEMO / "colpitts_bjt.toml")
    raw = copy.deepcopy(raw)
    raw["parasitics"] = {"stray": "4 pF", "stray_tolerance": "±3 pF"}
    spec = api.spec_from_dict(raw)
    pb = api.build_problem(spec)
    params = spec.amplifier.to_params(spec.parts)
    ls = loaded_search(pb, params, min_margin=2.0, max_margin=spec.amplifier.max_margin)
    return spec, pb, params, ls.designs


def _reference(pb, params, vals, stray, max_margin):
    bv = board_values(pb.topology, {p: vals[p] for p in pb.topology.positions}, pb.parasitics)
    with np.errstate(all="ignore"):
        st = steady_state(pb.topology, bv, stray, params)
    ok = st.starts & ~st.bursting & ~(st.margin > max_margin)
    return ok & (st.f_hz >= pb.f_min) & (st.f_hz <= pb.f_max)


def test_own_stray_counts_like_the_large_signal_model_on_every_board(demo):
    spec, pb, params, designs = demo
    sim = api.simulation_of(spec, pb)
    assert sim.stray_tol == pytest.approx(3e-12)
    n = 400
    u = head(api.random_inputs(spec, sim, n, 5), n)
    vals = sampled_values(sim, designs, u)
    assert vals["stray"].shape == (n, 1) and np.ptp(vals["stray"]) > 4e-12
    sel = np.arange(min(6, len(designs)))
    sub = {p: v[:, sel] if v.shape[1] > 1 else v for p, v in vals.items()}
    d = designs.take(sel)
    fast = LoadedModel(
        pb, params, "surrogate", max_margin=spec.amplifier.max_margin, stray_tol=sim.stray_tol
    )(sub, d)
    stray = np.broadcast_to(vals["stray"], fast.shape)
    ref = _reference(pb, params, sub, stray, spec.amplifier.max_margin)
    one = _reference(pb, params, sub, pb.parasitics.stray, spec.amplifier.max_margin)
    y_f, y_r, y_1 = fast.mean(axis=0), ref.mean(axis=0), one.mean(axis=0)
    p = np.clip(y_r, 1 / n, 1 - 1 / n)
    se = np.sqrt(2 * p * (1 - p) / n)
    print(f"fast {y_f}\nfull {y_r}\none stray {y_1}")
    assert np.all(np.abs(y_f - y_r) <= 3 * se)
    assert np.all((fast != ref).mean(axis=0) <= MAX_DISAGREE)
    # teeth: the spread of the stray matters here (one stray for every board would count
    # some design far off), so a model that dropped the board's own stray would fail above
    assert np.max(np.abs(y_1 - y_r) / se) > 3


def test_solve_runs_with_a_stray_spread(demo):
    spec, *_ = demo
    res = api.solve(spec, top=2, samples=600)
    assert res.status == "ok" and len(res.candidates) == 2
    spec0 = api.spec_from_dict(
        {**read_toml(DEMO / "colpitts_bjt.toml"), "parasitics": {"stray": "4 pF"}}
    )
    res0 = api.solve(spec0, top=2, samples=600)
    # the same designs with one stray yield otherwise (common random numbers per run)
    assert [c.yield_estimate for c in res.candidates] != [c.yield_estimate for c in res0.candidates]
    assert all(math.isfinite(c.yield_estimate) for c in res.candidates)


def test_stray_share_in_the_drivers_is_the_yield_models(demo):
    # the stray's first-order share of the spread (the drivers table) takes the loaded
    # model's slope: it agrees with the Monte Carlo boards' own regression share (GUM
    # 5.1.2 against a least-squares fit of ln f over the same boards); on this small-C
    # design the ideal tank's slope alone gave 0.74 against the boards' 0.31
    spec, *_ = demo
    c = api.evaluate(spec, {"C1": "39p", "C2": "100p", "L": "33u"}).candidates[0]
    first, boards = c.extra["drivers"]["stray"], c.extra["drivers_mc"]["shares"]["stray"]
    assert boards > 0.2  # the stray matters on this design
    assert abs(first - boards) < 0.08, (first, boards)
