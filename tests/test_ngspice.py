"""Cross-check of the loaded model against ngspice transient simulations.

The designs below are invented test circuits (not reference data). The outside
reference is ngspice itself: each netlist from picker.circuit.netlist is simulated and the
frequency and amplitude measured on the settled tail. Nothing is stored, so there is
nothing to regenerate: the simulations run every time (about 10 s in total).
These tests fail, never skip, when ngspice is missing: CI installs it.
"""

from __future__ import annotations

import numpy as np
import pytest

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.amplitude import amplitude_estimate
from picker.circuit.netlist import write_netlist
from picker.circuit.ngspice import ngspice_path, simulate
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import bias
from picker.errors import SolverError
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

pytestmark = pytest.mark.ngspice

DESIGNS = {
    # audio range, large capacitors, lossy inductor (ESR 15 ohm, Q ≈ 5)
    "audio_large_caps_lossy_l": (
        COLPITTS,
        {"C1": 2.2e-6, "C2": 4.7e-6, "L": 10e-3},
        0.0,
        AmplifierParams(
            vcc=9,
            r_c=1000,
            r_b1=22e3,
            r_b2=4.7e3,
            r_e=1000,
            c_e=47e-6,
            c_block=47e-6,
            inductor_esr=15.0,
        ),
    ),
    "130k": (
        COLPITTS,
        {"C1": 4.7e-9, "C2": 10e-9, "L": 470e-6},
        5e-12,
        AmplifierParams(
            vcc=9,
            r_c=1000,
            r_b1=100e3,
            r_b2=15e3,
            r_e=2200,
            c_e=1e-6,
            c_block=100e-9,
            inductor_q=40,
            q_frequency=100e3,
        ),
    ),
    "1m3": (
        COLPITTS,
        {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6},
        3e-12,
        AmplifierParams(
            vcc=9, r_c=1500, r_b1=68e3, r_b2=10e3, r_e=2200, c_e=47e-9, c_block=10e-9, inductor_q=50
        ),
    ),
    "clapp_6m6": (
        CLAPP,
        {"C1": 1e-9, "C2": 2.2e-9, "C3": 150e-12, "L": 4.7e-6},
        2e-12,
        AmplifierParams(
            vcc=12, r_c=2200, r_b1=47e3, r_b2=10e3, r_e=1000, c_e=10e-9, c_block=None, inductor_q=80
        ),
    ),
    "choke_10m": (
        COLPITTS,
        {"C1": 220e-12, "C2": 470e-12, "L": 1.5e-6},
        2e-12,
        AmplifierParams(
            vcc=9,
            l_choke=22e-6,
            r_choke=2.0,
            r_b1=47e3,
            r_b2=10e3,
            r_e=4700,
            c_e=470e-12,
            c_block=1e-9,
            inductor_q=30,
        ),
    ),
    # ~22 MHz: junction capacitances pull the frequency > 2 % below the ideal formula
    "22m": (
        COLPITTS,
        {"C1": 68e-12, "C2": 150e-12, "L": 1e-6},
        2e-12,
        AmplifierParams(
            vcc=9,
            r_c=470,
            r_b1=33e3,
            r_b2=10e3,
            r_e=3300,
            c_e=4.7e-9,
            c_block=470e-12,
            inductor_q=70,
        ),
    ),
    # too little loop gain: must not start
    "weak_1m2": (
        COLPITTS,
        {"C1": 1e-9, "C2": 4.7e-9, "L": 22e-6},
        3e-12,
        AmplifierParams(
            vcc=9, r_c=470, r_b1=100e3, r_b2=10e3, r_e=2200, c_e=47e-9, c_block=10e-9, inductor_q=30
        ),
    ),
}


@pytest.fixture(scope="module")
def runs():
    try:
        ngspice_path()
    except SolverError as exc:
        pytest.fail(f"{exc} (these tests do not skip; CI installs ngspice)")
    out = {}
    for name, (topo, values, stray, params) in DESIGNS.items():
        model = loaded_response(topo, values, stray, params)
        amp = amplitude_estimate(topo, values, stray, params, model)
        sim = simulate(write_netlist(topo, values, stray, params, title=name))
        out[name] = (topo, values, stray, model, amp, sim)
    return out


def test_designs_span_audio_to_20mhz(runs):
    f = [float(r[0].frequency(r[1], r[2])) for r in runs.values()]
    assert min(f) < 20e3 and max(f) > 20e6 and len(runs) >= 6


def test_frequency_within_2_percent_and_closer_than_ideal(runs):
    # ngspice transient (trapezoidal, ≥ 60 steps per period; frequency from ~90 periods)
    far = 0
    for name, (topo, values, stray, model, _, sim) in runs.items():
        if model.margin < 1.5:
            continue
        f_model = float(model.f_hz)
        f_ideal = float(topo.frequency(values, stray))
        assert abs(sim.frequency_hz / f_model - 1) < 0.02, name
        if abs(f_model / f_ideal - 1) > 0.02:
            far += 1
            assert abs(sim.frequency_hz - f_model) < abs(sim.frequency_hz - f_ideal), name
    assert far >= 1  # at least one design where the loaded model matters


def test_startup_margin_predicts_oscillation(runs):
    low = high = 0
    for name, (*_, model, _, sim) in runs.items():
        if model.margin < 0.8:
            low += 1
            assert not sim.oscillating, name
        elif model.margin > 1.5:
            high += 1
            assert sim.oscillating, name
    assert low >= 1 and high >= 5


def test_amplitude_within_30_percent_when_not_overdriven(runs):
    checked = 0
    for name, (*_, model, amp, sim) in runs.items():
        if model.margin > 1.5 and not bool(amp.overdriven):
            checked += 1
            assert abs(float(amp.tank) / sim.amplitude_v - 1) < 0.30, name
    assert checked >= 5


def test_netlists_parse_without_warnings_and_meas_agrees(runs):
    for name, (*_, sim) in runs.items():
        assert sim.warnings == (), name
        if sim.oscillating:
            # ngspice's own .meas (20 periods) against the zero-crossing fit
            np.testing.assert_allclose(sim.meas["f_osc"], sim.frequency_hz, rtol=2e-3)
            np.testing.assert_allclose(sim.meas["amp"], sim.amplitude_v, rtol=1e-3)


def test_bias_point_matches_ngspice_operating_point():
    # DC bias solver against ngspice's operating point (mean base voltage with the
    # oscillation suppressed: a weak design, whose kick decays).
    topo, values, stray, params = DESIGNS["weak_1m2"]
    sim = simulate(write_netlist(topo, values, stray, params), node="b")
    assert sim.amplitude_v < 1e-3
    # the .meas vmax is of v(t), which sits at the base's DC voltage through L
    np.testing.assert_allclose(sim.meas["vmax"], bias(params).vb, rtol=2e-3)


def test_ideal_lc_tank_frequency_after_undoing_the_trapezoidal_warp():
    # An ideal LC tank rung by a pulse: f = 1/(2π√(LC)) (textbook). ngspice's trapezoidal
    # rule at 60 steps per period runs it slow by about (ωh)²/12 = 0.09 % (bilinear
    # transform warping, Oppenheim & Schafer); simulate() undoes that from the step.
    from picker.circuit.ngspice import transient, trapezoid_frequency
    from picker.circuit.waveform import measure

    l, c = 10e-6, 1e-9
    f0 = 1 / (2 * np.pi * np.sqrt(l * c))
    period = 1 / f0
    deck = (
        "ideal LC tank\nL1 t 0 1e-05\nC1 t 0 1e-09\nR1 t 0 1e9\n"
        f"I1 0 t PULSE(0 1m {period} {period / 40} {period / 40} {period / 2} 1)\n"
        f".tran {period / 60} {400 * period} 0 {period / 60}\n.end\n"
    )
    raw = transient(deck)
    sim = simulate(deck, f_hint=f0)
    step = float(np.median(np.diff(raw.time)))
    # the warped resonance: tan(ω_d·h/2) = ω·h/2
    warped = np.arctan(np.pi * f0 * step) / (np.pi * step)
    assert sim.waveform.state == "steady"
    assert warped / f0 - 1 == pytest.approx(-((2 * np.pi * f0 * step) ** 2) / 12, rel=0.01)
    # the measured carrier before the correction sits on the warped one, after it on f0
    assert measure(raw.time, raw.v, f_hint=f0).f_hz == pytest.approx(warped, rel=2e-5)
    assert sim.frequency_hz == pytest.approx(f0, rel=2e-5)
    assert trapezoid_frequency(warped, step) == pytest.approx(f0, rel=1e-9)
