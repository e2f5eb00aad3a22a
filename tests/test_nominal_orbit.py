"""The nominal orbit in the pipeline (picker.circuit.nominal_orbit, picker.circuit.loaded).

Outside references: ngspice's transients of picker's netlists of validation designs
(``tests/validation/large_signal.json``, measured by picker.circuit.waveform). The
offset approximation (O1) of picker.circuit.nominal_orbit is checked against the orbit
of every board itself (the approximation against what it approximates; the orbit
itself is checked against ngspice here and in tests/test_shooting.py).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import DEMO, write_spec
from pinned import pinned

from picker import api
from picker.circuit.loaded import LoadedModel
from picker.circuit.loaded_search import loaded_search
from picker.circuit.network import Network
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.periodic import periodic_state
from picker.circuit.steady import steady_state
from picker.core.montecarlo import PartVariation, Simulation, count_passing, sampled_values
from picker.core.sampling import uniform_matrix
from picker.tank.base import TWO_PI
from picker.tank.board import board_values


@pytest.mark.slow
@pytest.mark.parametrize("ident", ["d015", "d019"])
def test_offset_approximation_on_boards_around_nominal(ident):
    # d015, d019: saturated, the describing function 8.8 % and 3.5 % off ngspice. Six
    # boards with every part within ±5 % of nominal: the fast model shifted by the
    # nominal orbit's offset (O1) within 0.6 % of each board's own orbit, where the
    # fast model alone is more than 2 % off
    d, ref = pinned(ident)
    nom = board_orbits([Network.build(d.topo, d.values, d.stray, d.params)])[0][0]
    assert nom is not None and not nom.bursting
    assert nom.f_hz == pytest.approx(ref["f_hz"], rel=2e-3)  # ngspice
    pos = d.topo.positions
    dev = np.random.default_rng(3).uniform(-0.05, 0.05, (6, len(pos)))
    vals = {p: d.values[p] * np.exp(dev[:, i]) for i, p in enumerate(pos)}
    fast = steady_state(d.topo, vals, d.stray, d.params).f_hz
    full = board_orbits([Network.build(d.topo, vals, d.stray, d.params)])[0]
    for j, o in enumerate(full):
        assert o is not None
        assert abs(fast[j] / o.f_hz - 1.0) > 0.02
        assert fast[j] * math.exp(nom.shift) == pytest.approx(o.f_hz, rel=6e-3)


@pytest.mark.slow
def test_start_up_from_rest_finds_a_burst_the_stable_orbit_hides():
    # ngspice (the reference file): d035 bursts and d019 runs steady; both saturate and
    # both orbits are stable by their Floquet multipliers, so (O2) alone calls both
    # steady. The start-up from rest (O3, picker.circuit.startup_run) collapses on d035
    # only; without it, or with a collapse threshold far off the measurement's 0.2,
    # the verdicts fail
    (d35, r35), (d19, r19) = pinned("d035"), pinned("d019")
    assert (r35["state"], r19["state"]) == ("bursting", "steady")
    nets = [Network.build(d.topo, d.values, d.stray, d.params) for d in (d35, d19)]
    burst, steady = (o[0] for o in board_orbits(nets))
    assert burst is not None and steady is not None
    assert burst.converged and burst.multiplier < 1.0 and burst.bursting
    assert steady.converged and steady.multiplier < 1.0 and not steady.bursting


@pytest.mark.slow
@pytest.mark.parametrize("ident", ["d087", "d103"])
def test_lightly_driven_orbit_against_ngspice(ident):
    # d087, d103: start-up margin 1.02 and 1.05, steady in ngspice; the orbit of a barely
    # driven circuit is near-sinusoidal, its frequency ngspice's to 0.02 % and its
    # amplitude within the waveform measurement's 6 % (tests/test_shooting.py)
    d, ref = pinned(ident)
    assert ref["state"] == "steady"
    st = steady_state(d.topo, d.values, d.stray, d.params)
    assert float(st.margin) < 1.05
    net = Network.build(d.topo, d.values, d.stray, d.params)
    ps = periodic_state(
        net, np.array([0]), np.array([TWO_PI * float(st.f_hz)]), np.array([0.1]), np.array([np.nan])
    )
    assert bool(ps.ok[0]) and not bool(ps.unstable[0])
    assert ps.w[0] / TWO_PI == pytest.approx(ref["f_hz"], rel=2e-4)
    assert ps.top[0] == pytest.approx(ref["amplitude_v"], rel=0.06)


SATURATED = """
[amplifier]
kind = "bjt"
stage = "common-emitter"
supply = "9 V"
r_load = "1.5 kohm"
r_bias_top = "47 kohm"
r_bias_bottom = "10 kohm"
r_emitter = "470 ohm"
c_emitter = "22 nF"
c_coupling = "1 nF"
min_margin = 2.0
max_margin = 50
"""


def _saturated_spec(tmp_path):
    """The demo with a harder-driven stage (r_emitter 470 ohm, r_load 1.5 kohm): its
    loaded-feasible designs saturate (invented data, as the demo)."""
    text = (DEMO / "colpitts_bjt.toml").read_text(encoding="utf-8")
    head, rest = text.split("\n[amplifier]\n", 1)
    tail = rest[rest.index("\n[") :]
    spec = api.load_spec(write_spec(tmp_path, head + "\n" + SATURATED.strip() + "\n" + tail))
    return spec, api.build_problem(spec), spec.amplifier.to_params(spec.parts)


@pytest.mark.slow
def test_monte_carlo_counts_boards_with_the_orbit_offset(tmp_path):
    # the full model on every board with the nominal orbits of three designs: reference
    # per board, written out here with the unpatched large-signal model on board values:
    # starts, margin within max_margin, not bursting by the orbit's verdict (O2), steady
    # frequency times the orbit's offset (O1) in the window
    spec, pb, params = _saturated_spec(tmp_path)
    d = loaded_search(pb, params, min_margin=2.0).designs.take(np.arange(3))
    model = LoadedModel(pb, params, "full", max_margin=spec.amplifier.max_margin)
    sim = Simulation(pb, {p: PartVariation("uniform") for p in pb.topology.positions}, model=model)
    u = uniform_matrix(400, sim.n_columns, rng=np.random.default_rng(7))
    before = count_passing(sim, d, u)
    assert model.refine_orbits(d)
    orbits = model.orbits(d)
    got = count_passing(sim, d, u)
    vals = sampled_values(sim, d, u)
    st = steady_state(
        pb.topology, board_values(pb.topology, vals, pb.parasitics), pb.parasitics.stray, params
    )
    has = np.array([o is not None for o in orbits])
    shift = np.array([o.shift if o is not None else 0.0 for o in orbits])
    burst = np.where(has, [o is not None and o.bursting for o in orbits], st.bursting)
    f = st.f_hz * np.exp(shift)
    ref = st.starts & ~burst & (st.margin <= spec.amplifier.max_margin)
    ref &= (f >= pb.f_min) & (f <= pb.f_max)
    np.testing.assert_array_equal(got, ref.sum(axis=0))
    assert np.any(got != before)  # the offset moves boards across the window's edges


@pytest.mark.slow
def test_solve_reports_the_nominal_orbit(tmp_path):
    # each candidate's large_signal object is its nominal orbit (computed here directly
    # on its board values), and its f_loaded_hz the orbit's frequency
    spec, pb, params = _saturated_spec(tmp_path)
    res = api.solve(spec, samples=300, top=3)
    shot = 0
    for c in res.candidates:
        marked = {p: np.array([c.values[p]]) for p in pb.topology.positions}
        bv = board_values(pb.topology, marked, pb.parasitics)
        o = board_orbits([Network.build(pb.topology, bv, pb.parasitics.stray, params)])[0][0]
        if o is None:
            continue
        shot += 1
        ls = c.extra["large_signal"]
        assert ls["f_hz"] == o.f_hz
        assert ls["amplitude_v"] == o.amplitude_v
        assert ls["envelope"] == ("bursting" if o.bursting else "steady")
        assert c.extra["f_loaded_hz"] == o.f_hz
    assert shot >= 2


@pytest.mark.slow
def test_solve_with_orbits_is_the_same_with_one_or_two_workers(tmp_path):
    # the orbits are solved once, in the caller's thread, on the reported designs (one
    # batch per netlist shape, each orbit converging on its own): the result does not
    # depend on the Monte Carlo's threads
    spec, _, _ = _saturated_spec(tmp_path)
    one = api.solve(spec, samples=300, top=3, workers=1).to_dict()
    two = api.solve(spec, samples=300, top=3, workers=2).to_dict()
    assert one == two
    assert any(c["large_signal"]["overdriven"] for c in one["candidates"])


@pytest.mark.slow
def test_evaluate_reproduces_solve_with_orbits(tmp_path):
    # evaluate(spec, candidate) shoots the one design alone; solve shot it beside the
    # other reported designs: the same orbit, so the same large_signal object and count
    spec, _, _ = _saturated_spec(tmp_path)
    res = api.solve(spec, samples=300, top=3)
    for c in res.candidates:
        e = api.evaluate(spec, c, samples=300).candidates[0]
        assert e.extra["large_signal"] == c.extra["large_signal"]
        assert e.yield_.passed == c.yield_.passed
