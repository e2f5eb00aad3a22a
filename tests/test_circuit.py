"""Loaded oscillator model: idealised reductions, vectorisation, root finder, cross-checks."""

from __future__ import annotations

import math

import numpy as np
from numpy.testing import assert_allclose
from scipy.optimize import brentq

from picker.circuit import oscillation
from picker.circuit.amplifier import AmplifierParams, ideal_params
from picker.circuit.amplitude import amplitude_estimate, capacitor_stress, cautions
from picker.circuit.network import loop_gain, loop_gain_matrix
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import bias, get_stage, small_signal
from picker.circuit.stages.common_emitter import bessel_ratio
from picker.tank.base import TWO_PI
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

REAL = AmplifierParams(
    vcc=9.0,
    r_c=2200.0,
    r_b1=47e3,
    r_b2=10e3,
    r_e=1000.0,
    c_e=100e-9,
    c_block=10e-9,
    inductor_q=60.0,
    capacitor_esr={"C1": 0.05},
)
CHOKE = AmplifierParams(
    vcc=12.0,
    l_choke=1e-3,
    r_choke=5.0,
    r_b1=33e3,
    r_b2=6.8e3,
    r_e=470.0,
    c_e=None,
    c_block=4.7e-9,
    inductor_esr=2.0,
    f_t=250e6,
    c_mu=2.5e-12,
)


def test_ideal_colpitts_reduces_to_textbook():
    # Sedra & Smith, Microelectronic Circuits, Colpitts section: ω0² = (C1+C2)/(L·C1·C2),
    # loop gain at ω0 is gm·R·C1/C2 (start-up when gm·R > C2/C1).
    rng = np.random.default_rng(3)
    c1 = rng.uniform(100e-12, 10e-9, (7, 5))
    c2 = rng.uniform(100e-12, 10e-9, (7, 5))
    l_ = rng.uniform(1e-6, 1e-3, (7, 5))
    gm, r = 0.02, 1500.0
    res = loaded_response(COLPITTS, {"C1": c1, "C2": c2, "L": l_}, 0.0, ideal_params(gm, r))
    f0 = 1 / (TWO_PI * np.sqrt(l_ * c1 * c2 / (c1 + c2)))
    assert res.f_hz.shape == (7, 5) and res.margin.shape == (7, 5)
    assert_allclose(res.f_hz, f0, rtol=1e-9)  # root-finder tolerance 1e-11, margin for rounding
    assert_allclose(res.margin, gm * r * c1 / c2, rtol=1e-9)


def test_startup_edge_is_margin_one():
    # Sedra & Smith: oscillation is sustained exactly at gm·R = C2/C1.
    c1, c2 = 1e-9, 3.3e-9
    gm = (c2 / c1) / 1000.0
    res = loaded_response(COLPITTS, {"C1": c1, "C2": c2, "L": 22e-6}, 0.0, ideal_params(gm, 1000.0))
    assert_allclose(res.margin, 1.0, rtol=1e-9)


def test_input_resistance_example_derived():
    # REFERENCES.md [derived, checked numerically; no textbook]: L = 10 µH, C1 = 1 nF,
    # C2 = 4 nF, R = 1 kΩ, R_in = 2.5 kΩ -> gm_crit = 4.1044 mS, f = 1.78012 MHz
    # (ideal 1.77941 MHz). Published digits: 5 and 6 significant figures.
    v = {"C1": 1e-9, "C2": 4e-9, "L": 10e-6}
    gm = 0.01
    res = loaded_response(COLPITTS, v, 0.0, ideal_params(gm, 1000.0, r_in=2500.0))
    assert_allclose(gm / res.margin, 4.1044e-3, rtol=2e-5)
    assert_allclose(res.f_hz, 1.78012e6, rtol=5e-6)
    assert_allclose(COLPITTS.frequency(v), 1.77941e6, rtol=5e-6)


def test_ideal_clapp_with_stray_matches_tank_formula():
    # REFERENCES.md Clapp: C_eff = 1/(1/C1 + 1/C2 + 1/C3); stray adds across L.
    v = {"C1": 1e-9, "C2": 1e-9, "C3": 100e-12, "L": 10e-6}
    for stray in (0.0, 5e-12):
        res = loaded_response(CLAPP, v, stray, ideal_params(0.05, 5000.0))
        assert_allclose(res.f_hz, CLAPP.frequency(v, stray), rtol=1e-9)
    assert_allclose(CLAPP.frequency(v), 5.513289e6, rtol=1e-7)  # REFERENCES.md worked example


def test_boylestad_worked_example_ideal_limit():
    # Boylestad & Nashelsky FET Colpitts example (attribution [memory]): C1 = 750 pF,
    # C2 = 2500 pF, L = 40 µH -> f = 1.047686 MHz.
    v = {"C1": 750e-12, "C2": 2500e-12, "L": 40e-6}
    res = loaded_response(COLPITTS, v, 0.0, ideal_params(0.01, 2000.0))
    assert_allclose(res.f_hz, 1.047686e6, rtol=1e-6)


def test_root_finder_matches_brentq_single_elements():
    # scipy.optimize.brentq on the phase of the same loop gain, element by element.
    rng = np.random.default_rng(11)
    checked = 0
    for params in (REAL, CHOKE):
        for topo in (COLPITTS, CLAPP):
            for _ in range(3):
                v = {
                    "C1": rng.uniform(300e-12, 3e-9),
                    "C2": rng.uniform(1e-9, 6e-9),
                    "C3": rng.uniform(100e-12, 1e-9),
                    "L": rng.uniform(2e-6, 50e-6),
                }
                v = {p: v[p] for p in topo.positions}
                res = loaded_response(topo, v, 3e-12, params)
                f0 = float(topo.frequency(v, 3e-12))
                # dense scan: every zero-phase crossing (phase changes sign by less than π)
                fs = f0 * np.geomspace(0.3, 2.0, 200_001)
                ph = np.angle(loop_gain(topo, v, 3e-12, params, fs))
                i = np.nonzero(
                    (np.sign(ph[1:]) != np.sign(ph[:-1])) & (np.abs(np.diff(ph)) < np.pi)
                )[0]
                if np.isnan(res.f_hz):
                    assert i.size == 0 and res.margin == 0.0
                    continue
                checked += 1

                def phase(f, v=v, topo=topo, params=params):
                    return float(np.angle(loop_gain(topo, v, 3e-12, params, f)))

                near = i[np.argmin(np.abs(fs[i] - res.f_hz))]
                ref = brentq(phase, fs[near], fs[near + 1], xtol=1e-6)
                assert_allclose(res.f_hz, ref, rtol=1e-9)  # brentq xtol 1e-6 Hz at MHz
                t = loop_gain(topo, v, 3e-12, params, ref)
                assert_allclose(res.margin, abs(t), rtol=1e-8)
    assert checked >= 10


def test_closed_form_matches_stacked_linalg_solve():
    # Schur/cofactor elimination against numpy.linalg.solve on the full 4-node matrix.
    rng = np.random.default_rng(5)
    n = 50
    f = rng.uniform(0.5e6, 5e6, n)
    for params in (REAL, CHOKE):
        for topo in (COLPITTS, CLAPP):
            v = {
                "C1": rng.uniform(300e-12, 3e-9, n),
                "C2": rng.uniform(1e-9, 6e-9, n),
                "C3": rng.uniform(100e-12, 1e-9, n),
                "L": rng.uniform(2e-6, 50e-6, n),
            }
            a = loop_gain(topo, v, 2e-12, params, f)
            b = loop_gain_matrix(topo, v, 2e-12, params, f)
            assert_allclose(a, b, rtol=1e-9, atol=1e-12)  # both exact; LAPACK rounding only
    # with shorts (no C_B, grounded emitter) the matrix uses 1 MS: error ~ 1e-6 relative
    p = ideal_params(0.01, 1000.0, r_in=2500.0)
    v = {"C1": 1e-9, "C2": 4e-9, "L": 10e-6}
    assert_allclose(
        loop_gain(COLPITTS, v, 0, p, 1.7e6), loop_gain_matrix(COLPITTS, v, 0, p, 1.7e6), rtol=1e-5
    )


def test_vectorised_shapes_and_chunking_agree_elementwise(monkeypatch):
    monkeypatch.setattr(oscillation, "CHUNK", 64)  # force several chunks and a ragged last one
    rng = np.random.default_rng(9)
    samples, cands = 37, 5
    nominal = {
        "C1": np.geomspace(470e-12, 2.2e-9, cands),
        "C2": np.full(cands, 3.3e-9),
        "L": np.full(cands, 10e-6),
    }
    v = {
        p: x[None, :] * (1 + 0.05 * rng.standard_normal((samples, cands)))
        for p, x in nominal.items()
    }
    res = loaded_response(COLPITTS, v, 2e-12, REAL)
    assert res.f_hz.shape == (samples, cands)
    for i, j in [(0, 0), (36, 4), (17, 2), (12, 3)]:
        one = loaded_response(COLPITTS, {p: x[i, j] for p, x in v.items()}, 2e-12, REAL)
        assert_allclose(res.f_hz[i, j], one.f_hz, rtol=1e-10)
        assert_allclose(res.margin[i, j], one.margin, rtol=1e-8)
    f, m = res  # unpacks like a pair
    assert f is res.f_hz and m is res.margin


def test_loaded_frequency_below_ideal_with_device_capacitance():
    # Junction capacitances add to C1 and C2, so the loaded tank runs low. Direction from
    # the Sedra & Smith circuit with C_pi ∥ C2 and C_mu bridging the tank; size ~ C/C_tank.
    v = {"C1": 100e-12, "C2": 220e-12, "L": 1e-6}
    res = loaded_response(COLPITTS, v, 0.0, REAL)
    f_ideal = COLPITTS.frequency(v)
    c_pi = small_signal(REAL).c_pi
    f_pi_only = COLPITTS.frequency({**v, "C2": v["C2"] + c_pi})
    assert res.f_hz < f_pi_only < f_ideal


def test_no_oscillation_gives_nan_and_zero():
    # A tank with no feedback path at the right phase: gm of the wrong sign flips T by π.
    p = ideal_params(-0.01, 1000.0)
    res = loaded_response(COLPITTS, {"C1": 1e-9, "C2": 1e-9, "L": 1e-6}, 0.0, p)
    assert np.isnan(res.f_hz) and res.margin == 0.0


def test_amplitude_large_drive_limit_is_twice_bias_current_times_load():
    # Large-drive limit: fundamental current 2·I (Toumazou, Moschytz & Gilbert's
    # V ≈ 2·I·R_L form; Clarke & Hess large-signal gm). In the ideal Colpitts the
    # collector amplitude is then 2·I·R and the base amplitude 2·I·R·C1/C2.
    i_dc, r = 1e-3, 5000.0
    p = AmplifierParams(kind="fet", gm=0.04, i_bias=i_dc, r_o=math.inf, c_pi=0.0, c_mu=0.0, r_c=r)
    v = {"C1": 1e-9, "C2": 2e-9, "L": 10e-6}
    a = amplitude_estimate(COLPITTS, v, 0.0, p)
    assert_allclose(a.collector, 2 * i_dc * r, rtol=1e-9)
    assert_allclose(a.base, 2 * i_dc * r * 0.5, rtol=1e-9)


def test_bessel_describing_function_limits():
    # 2·I1(x)/(x·I0(x)) -> 1 - x²/8 for small x and -> 2/x for large x (series of I0, I1;
    # Abramowitz & Stegun 9.6.10 and 9.7.1).
    assert_allclose(
        bessel_ratio(np.array([1e-3, 200.0])),
        [1 - 1e-6 / 8, 2 / 200 * (1 - 0.5 / 200)],
        rtol=1e-4,
    )


def test_stress_and_cautions():
    v = {"C1": 1e-9, "C2": 2.2e-9, "L": 10e-6}
    st = capacitor_stress(COLPITTS, v, 0.0, REAL)
    b = bias(REAL)
    assert set(st) == {"C1", "C2", "CB"}
    assert st["C2"] > b.vb and st["C1"] > b.vb  # DC bias on both tank caps plus AC
    msgs = cautions(
        COLPITTS,
        v,
        REAL,
        {k: float(x) for k, x in st.items()},
        voltage_rating={"C1": 6.3, "C2": 50.0},
    )
    assert any("C1" in m and "rating" in m for m in msgs) == (float(st["C1"]) > 3.15)
    assert not any("C2" in m and "rating" in m for m in msgs)
    no_cb = AmplifierParams(vcc=9.0, r_c=2200.0, r_b1=47e3, r_b2=10e3, r_e=1000.0)
    assert any("blocking" in m for m in cautions(COLPITTS, v, no_cb, {}))
    big = {"C1": 10e-6, "C2": 22e-6, "L": 1e-3}
    assert any("electrolytic" in m for m in cautions(COLPITTS, big, REAL, {}))


def test_common_emitter_and_common_source_need_the_textbook_gain():
    # Sedra & Smith, Microelectronic Circuits, Colpitts section: gm·R ≥ C2/C1 (the fet's
    # common-source Colpitts is the same loop with r_pi = ∞)
    v = {"C1": np.array([1e-9, 470e-12]), "C2": np.array([2.2e-9, 3.3e-9]), "L": 1e-6}
    for name in ("common-emitter", "common-source"):
        assert_allclose(get_stage(name).required_gain(COLPITTS, v), v["C2"] / v["C1"], rtol=1e-12)
