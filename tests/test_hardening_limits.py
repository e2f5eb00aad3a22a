"""Large spaces and extreme specs: refused before they run, or solved with a warning.

* a search whose outer grid exceeds ``search.max_combinations``, or whose
  estimated feasible set exceeds twice ``search.max_designs``, is refused
  before it runs, in one line naming the key and how to narrow it (exit 2);
* the estimate of the feasible count agrees with brute force (the full-cube
  enumeration, ``picker.core.search.brute_force``) on small spaces;
* extreme but valid specs work: 1 Hz and 1 GHz targets with parts from 1 pF to
  1 F; above 300 MHz every result carries the lumped-model warning;
* a window the part ranges cannot reach at all is infeasible (exit 1) with
  advice that says so and gives the reachable extreme, checked against
  Thomson's formula f = 1 / (2π √(L·C)) with C = C1·C2/(C1+C2) + stray
  (any circuits textbook; Sedra & Smith, Colpitts section);
* frequencies outside 1 mHz .. 100 GHz are refused (exit 2).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from test_fuzz_harness import assert_clean_exit, cheap, load_demo, run_cli, set_path, to_toml

from picker import api
from picker.api.misses import reach
from picker.core.search import Problem, brute_force, estimate_designs, search
from picker.parts.limits import LUMPED_MAX_HZ
from picker.parts.series import expand
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS


def _spec(tmp_path, data: dict, name: str = "spec.toml"):
    p = tmp_path / name
    p.write_text(to_toml(data), encoding="utf-8")
    return p


def _wide(topology: str, target: str, *, series: str = "E24", window: str = "±5 %") -> dict:
    """Every capacitor from 1 pF to 1 F, the inductor from 1 nH to 10 H."""
    d = cheap(load_demo("probe_exciter.toml"))
    d["topology"] = topology
    d["frequency"] = {"target": target, "window": window}
    d["feedback"] = {"min": 0.1, "max": 1.0}
    d["parasitics"] = {}
    caps = ["C1", "C2"] + (["C3"] if topology == "clapp" else [])
    d["parts"] = {c: {"series": series, "min": "1 pF", "max": "1 F"} for c in caps}
    d["parts"]["L"] = {"series": series, "min": "1 nH", "max": "10 H"}
    return d


# --------------------------------------------------------------------------- refused early


def test_a_space_beyond_max_combinations_is_refused_before_it_runs(tmp_path):
    d = _wide("clapp", "10 MHz", series="E192")
    d["feedback"] = {"min": 0.001, "max": 1000}
    p = _spec(tmp_path, d)
    code, out, err = run_cli(["solve", str(p)])
    text = assert_clean_exit(code, out, err, files=(p,), allowed=(2,))
    assert "search.max_combinations: the search would visit" in text
    assert "narrow the part ranges" in text
    n_outer, _ = estimate_designs(api.build_problem(api.load_spec(p)))
    assert f"{n_outer:,} combinations" in text and n_outer > 1_000_000_000


def test_max_combinations_can_be_raised_and_lowered(tmp_path):
    d = cheap(load_demo("probe_exciter.toml"))
    d["search"]["max_combinations"] = 10
    code, out, err = run_cli(["solve", str(_spec(tmp_path, d))])
    assert code == 2 and "search.max_combinations" in err


def test_an_estimated_feasible_set_beyond_max_designs_is_refused_before_it_runs(tmp_path):
    d = cheap(load_demo("probe_exciter.toml"))
    problem = api.build_problem(api.spec_from_dict(d))
    exact = len(search(problem, max_designs=10**9))
    d["search"]["max_designs"] = exact // 4  # the estimate is twice over the limit
    p = _spec(tmp_path, d)
    code, out, err = run_cli(["solve", str(p)])
    text = assert_clean_exit(code, out, err, files=(p,), allowed=(2,))
    assert "search.max_designs: the search would hold about" in text


@settings(max_examples=30, derandomize=True, deadline=None, database=None)
@given(
    clapp=st.booleans(),
    decades=st.integers(1, 2),
    series=st.sampled_from(["E6", "E12", "E24"]),
    f0=st.floats(1e5, 1e7),
    window=st.floats(0.005, 0.2),
    stray=st.floats(0, 20e-12),
)
def test_the_feasible_estimate_agrees_with_brute_force(clapp, decades, series, f0, window, stray):
    topo = CLAPP if clapp else COLPITTS
    tabs = {
        p: uniform_table(expand(series, 1e-11, 1e-11 * 10**decades), 0.05, series)
        for p in topo.capacitors
    }
    tabs["L"] = uniform_table(expand(series, 1e-6, 1e-6 * 10**decades), 0.05, series)
    prob = Problem(topo, tabs, f0 * (1 - window), f0 * (1 + window), 0.1, 1.0, Parasitics(stray))
    n_outer, est = estimate_designs(prob)
    exact = len(brute_force(prob))
    # every outer combination is sampled on these small spaces, so the estimate is the
    # count before the exact re-check: never below the brute-force count, and above it
    # only by values within the 1e-9 relative widening of the bounds
    assert exact <= est <= exact + max(2, exact // 100)
    assert n_outer <= prob.space_size()


# --------------------------------------------------------------------------- extreme specs


@pytest.mark.parametrize(
    ("topology", "target", "warned"),
    [
        ("colpitts", "1 Hz", False),
        ("colpitts", "1 GHz", True),
        ("clapp", "1 Hz", False),
        ("clapp", "1 GHz", True),
        ("colpitts", "250 MHz", False),
    ],
)
def test_extreme_but_valid_specs_work(tmp_path, topology, target, warned):
    # E12 and ±1 % keep the Clapp space's feasible set near 10^5 designs
    p = _spec(tmp_path, _wide(topology, target, series="E12", window="±1 %"))
    code, out, err = run_cli(["solve", str(p), "-f", "json", "--samples", "200", "--top", "3"])
    assert code == 0, err
    data = json.loads(out)
    f = data["window"]
    for c in data["candidates"]:
        assert f["f_min_hz"] <= c["f_nominal_hz"] <= f["f_max_hz"]
        assert all(1e-12 * (1 - 1e-9) <= v["value"] <= 10 for v in c["parts"].values())
    lumped = [w for w in data["warnings"] if "lumped model is not trustworthy" in w]
    assert bool(lumped) == warned, data["warnings"]


def test_the_lumped_warning_starts_above_300_mhz():
    from picker.parts.limits import lumped_warnings

    assert LUMPED_MAX_HZ == 300e6  # the documented rule (common practice, no source)
    assert lumped_warnings(300e6) == [] and len(lumped_warnings(300.1e6)) == 1


def test_an_unreachable_window_is_infeasible_with_the_reachable_extreme(tmp_path):
    d = _wide("colpitts", "1 GHz")
    d["parts"]["L"] = {"series": "E24", "min": "1 uH", "max": "10 uH"}
    d["parasitics"] = {"stray": "2 pF"}
    p = _spec(tmp_path, d)
    code, out, err = run_cli(["solve", str(p), "-f", "json"])
    assert code == 1, err
    data = json.loads(out)
    assert data["status"] == "infeasible"
    (advice,) = data["advice"]
    assert advice.startswith("the part ranges cannot reach the window")
    # Thomson's formula with every part at its minimum: C1 = C2 = 1 pF in series
    # (0.5 pF) plus 2 pF stray, L = 1 µH
    f_hi = 1 / (2 * math.pi * math.sqrt(1e-6 * (0.5e-12 + 2e-12)))
    assert "100.658 MHz" in advice
    np.testing.assert_allclose(f_hi, 100.658e6, rtol=5e-6)  # the six digits printed
    lo, hi = reach(api.build_problem(api.load_spec(p)))
    np.testing.assert_allclose(hi, f_hi, rtol=1e-12)


def test_a_window_below_the_reach_says_raise_the_maximum(tmp_path):
    d = _wide("clapp", "1 Hz")
    d["parts"]["L"] = {"series": "E24", "min": "1 nH", "max": "1 uH"}
    code, out, err = run_cli(["solve", str(_spec(tmp_path, d)), "-f", "json"])
    assert code == 1, err
    (advice,) = json.loads(out)["advice"]
    assert "lowest frequency any combination gives" in advice and "raise the maximum" in advice


def test_an_infeasible_spec_whose_relaxed_search_is_too_large_still_exits_1(tmp_path):
    # no E192 ratio C1/C2 lies in 1.0001..1.0002 (neighbours differ by about 1.2 %), so
    # nothing is feasible; dropping the feedback window (the nearest-miss search) would
    # visit more than max_combinations, which must not turn exit 1 into exit 2
    d = _wide("clapp", "10 MHz", series="E192")
    d["feedback"] = {"min": 1.0001, "max": 1.0002}
    code, out, err = run_cli(["solve", str(_spec(tmp_path, d)), "-f", "json"])
    assert code == 1, err
    assert json.loads(out)["status"] == "infeasible"


@pytest.mark.parametrize("target", ["200 GHz", "0.1 mHz", "1e308", 1e-300])
def test_frequencies_outside_the_lumped_range_are_refused(tmp_path, target):
    d = set_path(cheap(load_demo("probe_exciter.toml")), ("frequency", "target"), target)
    p = _spec(tmp_path, d)
    code, out, err = run_cli(["solve", str(p)])
    text = assert_clean_exit(code, out, err, files=(p,), allowed=(2,))
    assert "frequency.target: expected a frequency between 1 mHz and 100 GHz" in text


def test_the_chunked_screen_gives_the_same_yields_as_one_pass(monkeypatch):
    # the screen is elementwise per design, so chunking must not change a single bit
    from picker.core import screen

    spec = api.spec_from_dict(cheap(load_demo("production_exciter.toml")))
    problem = api.build_problem(spec)
    designs = search(problem)
    sim = api.simulation_of(spec, problem)
    order_one, y_one = screen.select_for_montecarlo(sim, designs, 50)
    monkeypatch.setattr(screen, "SCREEN_CHUNK", 7)
    order_chunked, y_chunked = screen.select_for_montecarlo(sim, designs, 50)
    assert len(designs) > 7 * 3
    np.testing.assert_array_equal(y_chunked, y_one)
    np.testing.assert_array_equal(order_chunked, order_one)
