"""p-type devices and bias networks on the stages other than the common-emitter one.

Outside references:

- ngspice: the mirrored (PNP, p-channel JFET and MOSFET) netlist of every stage has the
  n-type netlist's operating point negated, node by node, to ngspice's printed
  precision, and the model's bias current within 1 %; its transient runs at the n-type
  one's frequency and amplitude, and at the model's frequency within 2 % (the symmetry:
  SPICE's device models write the p-type device as the n-type one with a type sign;
  Massobrio & Antognetti, *Semiconductor Device Modeling with SPICE*, 2nd ed., ch. 2-4);
- ngspice's operating point of the emitter follower and the common-base stage with a
  single base resistor, and the textbook emitter-bias closed form
  I_B = (V_CC − V_BE)/(R_B + (β + 1)·R_E) (Boylestad & Nashelsky, *Electronic Devices
  and Circuit Theory*, 10th ed., section 4.4, from memory: the follower's collector on
  the supply is that circuit with R_C = 0);
- the collector-feedback closed form (B1) I_B = (V_CC − V_BE)/(R_F + (β + 1)·(R_C + R_E))
  (Boylestad & Nashelsky 4.6; Sedra & Smith, *Microelectronic Circuits*, 5th ed., 5.7.3;
  from memory) for the common-base stage, whose bypassed base changes nothing at DC;
- the degenerated transconductance gm/(1 + gm·R_S) of a common-source stage with an
  unbypassed source resistance (Sedra & Smith, common-source amplifier with a source
  resistance) in the idealised stage's start-up margin;
- the spec's keys: one-line errors naming the file and the key.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from ngspice_op import need_ngspice, ngspice_op
from numpy.testing import assert_allclose

from picker.circuit.fet import GENERIC_NJFET
from picker.circuit.netlist import write_netlist
from picker.circuit.ngspice import simulate
from picker.circuit.oscillation import loaded_response
from picker.circuit.polarity import P_TYPE_CAUTION, mirror_netlist
from picker.circuit.stages import STAGES
from picker.circuit.steady import steady_state
from picker.errors import SpecError
from picker.spec.load import spec_from_dict
from picker.tank.colpitts import COLPITTS

TANK = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}
OTHERS = ["common-collector", "common-base", "common-source", "common-drain", "common-gate"]
VT27 = 1.380649e-23 * 300.15 / 1.602176634e-19  # k·T/q at 27 °C (SI 2019 constants)


def _nodes(lines: list[str]) -> list[str]:
    """Every node of the element lines but ground (two nodes for R, L, C, V, I; three
    for Q and J; four for M)."""
    count = {"Q": 3, "J": 3, "M": 4}
    out: dict[str, None] = {}
    for line in lines:
        w = line.split()
        if not w or w[0][0].upper() not in "RLCVIQJM":
            continue
        n = count.get(w[0][0].upper(), 2)
        for node in w[1 : 1 + n]:
            if node != "0":
                out[node] = None
    return list(out)


def _op(lines: list[str], models: list[str]) -> dict[str, float]:
    """ngspice's operating point: every node voltage and the device's terminal current
    (``dev``: Q1's collector current, J1's or M1's drain current)."""
    device = next(w.split()[0].lower() for w in lines if w[:2].upper() in ("Q1", "J1", "M1"))
    current = "ic" if device == "q1" else "id"
    probe = [f"v({n})" for n in _nodes(lines)]
    return ngspice_op(lines, models, lets={"dev": f"@{device}[{current}]"}, prints=probe)


def _p_type_cases():
    cases = [pytest.param(STAGES[n], STAGES[n].typical_variants()["p-type"], id=n) for n in OTHERS]
    # a p-channel JFET: the common-source stage with the generic JFET class, self-biased
    cs = STAGES["common-source"]
    jfet = replace(
        cs.typical_params(),
        fet=GENERIC_NJFET,
        i_bias=None,
        overdrive_voltage=None,
        early_voltage=None,
        c_pi=None,
        c_mu=None,
        r_b1=None,
        r_b2=1e6,
        r_e=220.0,
        p_type=True,
    )
    cases.append(pytest.param(cs, jfet, id="common-source-jfet"))
    return cases


@pytest.mark.ngspice
@pytest.mark.parametrize(("stage", "params"), _p_type_cases())
def test_p_type_operating_point_is_the_mirrored_n_type_and_the_model(stage, params):
    need_ngspice()
    assert "p-type" in stage.options
    n = stage.netlist(COLPITTS, TANK, 0.0, 1.0, replace(params, p_type=False))
    a, b = _op(n.elements, n.models), _op(*_lines(mirror_netlist(n)))
    assert len(a) >= 5 and set(a) == set(b)
    # ngspice prints 7 digits; it reports a fet's drain current (JFET, level-1 MOSFET)
    # with the n-type sign for either type (observed here), so that one is compared in size
    fet = stage.device == "fet"
    for key, x in a.items():
        sign = 1.0 if (fet and key == "dev") else -1.0
        assert_allclose(b[key], sign * x, rtol=1e-5, atol=1e-9)
    i_model = stage.small_signal(params).i_dc  # the model's (n-type) bias current
    assert abs(abs(b["dev"]) / i_model - 1) < 0.01
    text = write_netlist(COLPITTS, TANK, 0.0, params)
    assert "VCC vcc 0 DC -9" in text
    assert re.search(r"\.model \S+ (PNP|PJF|PMOS) ", text)
    assert not re.search(r"\.model \S+ (NPN|NJF|NMOS) ", text)
    assert "PICKER_N" not in text  # the card's name follows its type, in both its lines


def _lines(part):
    return part.elements, part.models


@pytest.mark.ngspice
@pytest.mark.parametrize("name", OTHERS)
def test_p_type_transient_equals_the_n_type_and_the_model(name):
    need_ngspice()
    stage = STAGES[name]
    p = stage.typical_variants()["p-type"]
    n = replace(p, p_type=False)
    s_n = simulate(write_netlist(COLPITTS, TANK, 3e-12, n))
    s_p = simulate(write_netlist(COLPITTS, TANK, 3e-12, p))
    assert s_n.waveform.state == s_p.waveform.state == "steady"
    assert_allclose(s_p.frequency_hz, s_n.frequency_hz, rtol=1e-4)
    # a peak read from 60 samples per period falls short by up to 1 − cos(π/60) = 0.14 %,
    # differently in the two runs (their time steps differ)
    assert_allclose(s_p.amplitude_v, s_n.amplitude_v, rtol=3e-3)
    vals = {k: np.array([x]) for k, x in TANK.items()}
    st_p, st_n = steady_state(COLPITTS, vals, 3e-12, p), steady_state(COLPITTS, vals, 3e-12, n)
    for field in ("margin", "f_hz", "amplitude_v", "startup_time_s"):
        assert_allclose(getattr(st_p, field), getattr(st_n, field), rtol=0)
    assert abs(s_p.frequency_hz / float(st_p.f_hz[0]) - 1) < 0.02  # ngspice vs model


# ------------------------------------------------------------------ bias networks

BASE_RESISTOR = [
    pytest.param("common-collector", 220e3, id="common-collector"),
    pytest.param("common-base", 1e6, id="common-base"),
]


@pytest.mark.parametrize(("name", "r_b"), BASE_RESISTOR)
def test_base_resistor_meets_the_emitter_bias_closed_form(name, r_b):
    # Boylestad & Nashelsky 4.4: I_B = (V_CC − V_BE)/(R_B + (β + 1)·R_E); the Early
    # effect switched off (the textbook's transistor); β = 150, the generic card's BF
    stage = STAGES[name]
    p = replace(stage.typical_params(), r_b1=r_b, r_b2=None, early_voltage=1e9)
    b = stage.bias(p)
    assert_allclose(b.ib, (p.vcc - b.vbe) / (r_b + 151.0 * p.r_e), rtol=1e-6)
    assert_allclose(b.vbe, VT27 * math.log(b.ic / 1e-14), rtol=1e-6)  # I_C = IS·e^{V_BE/V_T}


@pytest.mark.ngspice
@pytest.mark.parametrize(("name", "r_b"), BASE_RESISTOR)
def test_base_resistor_bias_matches_ngspice_operating_point(name, r_b):
    need_ngspice()
    stage = STAGES[name]
    p = replace(stage.typical_params(), r_b1=r_b, r_b2=None)
    b = stage.bias(p)
    part = stage.netlist(COLPITTS, TANK, 0.0, 1.0, p)
    assert not any(w.startswith("RB2 ") for w in part.elements)
    op = _op(part.elements, part.models)
    assert abs(op["dev"] / b.ic - 1) < 0.01
    assert abs(op["v(b)"] / b.vb - 1) < 0.01


@pytest.mark.parametrize("r_e", [470.0, 2200.0])
def test_common_base_collector_feedback_meets_the_textbook_closed_form(r_e):
    # (B1): I_B = (V_CC − V_BE)/(R_F + (β + 1)·(R_C + R_E)) (Boylestad & Nashelsky 4.6);
    # the base bypass carries no DC
    cb = STAGES["common-base"]
    p = replace(
        cb.typical_params(), r_b1=None, r_b2=None, r_feedback=220e3, r_e=r_e, early_voltage=1e9
    )
    b = cb.bias(p)
    assert_allclose(b.ib, (p.vcc - b.vbe) / (p.r_feedback + 151.0 * (p.r_c + r_e)), rtol=1e-6)
    part = cb.netlist(COLPITTS, TANK, 0.0, 1.0, p)
    assert "RF c b 220000" in part.elements and "CBASE b 0 1e-07" in part.elements


def test_common_base_feedback_resistor_loads_the_collector_as_a_resistor_beside_the_load():
    # the base is at AC ground, so R_F lies from the collector to AC ground: the ideal
    # stage with R_F is the ideal stage with R_C ∥ R_F (resistors in parallel)
    cb = STAGES["common-base"]
    r, r_f = 2000.0, 10e3
    with_rf = replace(cb.ideal_params(0.05, r), r_feedback=r_f)
    parallel = cb.ideal_params(0.05, r * r_f / (r + r_f))
    a = loaded_response(COLPITTS, TANK, 0.0, with_rf)
    b = loaded_response(COLPITTS, TANK, 0.0, parallel)
    assert_allclose(float(a.margin), float(b.margin), rtol=1e-9)
    assert_allclose(float(a.f_hz), float(b.f_hz), rtol=1e-9)
    assert float(a.margin) < 0.9 * float(
        loaded_response(COLPITTS, TANK, 0.0, cb.ideal_params(0.05, r)).margin
    )


def test_unbypassed_source_resistance_degenerates_the_ideal_common_source_stage():
    # Sedra & Smith, CS amplifier with a source resistance: G_m = gm/(1 + gm·R_S); the
    # ideal Colpitts starts at G_m·R = C2/C1, so the margin is gm over the gm at the edge,
    # g_edge/(1 + g_edge·R_S) = C2/(C1·R)
    cs = STAGES["common-source"]
    gm, r, r_s1 = 0.02, 1000.0, 33.0
    p = replace(cs.ideal_params(gm, r), r_e=r_s1 + 470.0, c_e=1.0, r_e_unbypassed=r_s1)
    need = TANK["C2"] / (TANK["C1"] * r)
    assert_allclose(
        float(loaded_response(COLPITTS, TANK, 0.0, p).margin),
        gm * (1 - need * r_s1) / need,
        rtol=1e-6,
    )
    lines = cs.netlist(COLPITTS, TANK, 0.0, 1.0, cs.typical_variants()["emitter-split"]).elements
    assert {"RE1 e es 22", "RE es 0 448", "CE es 0 4.7e-08"} <= set(lines)


# ------------------------------------------------------------------ the spec's keys

DEMOS = Path(__file__).resolve().parents[1] / "demo_specs"


def _spec(demo: str, **amp):
    d = tomllib.loads((DEMOS / demo).read_text(encoding="utf-8"))
    d["amplifier"] = {k: v for k, v in {**d["amplifier"], **amp}.items() if v is not None}
    return spec_from_dict(d, file="demo.toml")


def test_spec_polarity_on_every_stage():
    s = _spec("jfet_follower_vfo.toml", polarity="p-channel")
    p = s.amplifier.to_params(s.parts)
    assert p.p_type and p.fet.vto == -2.0  # a PJF card's pinch-off is negative too
    s = _spec(
        "jfet_follower_vfo.toml",
        device="generic-nmos",
        idss=None,
        vto="-1.5 V",
        r_bias_top="1 Mohm",
        polarity="p-channel",
    )
    assert s.amplifier.to_params().fet.vto == 1.5  # the mirrored NMOS card's threshold
    for demo in ("follower_vfo.toml", "base_vhf.toml"):
        assert _spec(demo, polarity="pnp").amplifier.to_params().p_type
    assert not _spec("jfet_follower_vfo.toml", polarity="n-channel").amplifier.to_params().p_type
    s = _spec("base_vhf.toml", r_bias_top=None, r_feedback="47k", bias="collector-feedback")
    assert s.amplifier.to_params().r_feedback == 47e3


@pytest.mark.parametrize(
    ("demo", "amp", "words"),
    [
        ("jfet_follower_vfo.toml", {"polarity": "pnp"}, "'n-channel' or 'p-channel'"),
        ("follower_vfo.toml", {"polarity": "p-channel"}, "'npn' or 'pnp'"),
        (
            "jfet_follower_vfo.toml",
            {"device": "generic-nmos", "idss": None, "vto": "1.5 V", "polarity": "p-channel"},
            "negative threshold vto for a p-channel",
        ),
        (
            "follower_vfo.toml",
            {"r_bias_top": None, "r_feedback": "100k"},
            "no collector voltage to feed back",
        ),
        (
            "base_vhf.toml",
            {"c_emitter": "10n", "r_emitter_unbypassed": "22"},
            "all of it is unbypassed already",
        ),
        (
            "follower_vfo.toml",
            {"c_emitter": "10n", "r_emitter_unbypassed": "22"},
            "carries its output",
        ),
    ],
)
def test_bad_option_keys_name_the_file_and_key_and_say_why(demo, amp, words):
    with pytest.raises(SpecError) as info:
        _spec(demo, **amp)
    msg = str(info.value)
    assert msg.startswith("demo.toml: amplifier") and words in msg and "\n" not in msg


def test_p_type_caution_on_every_stage():
    from picker.circuit.amplitude import cautions

    for name in OTHERS:
        p = STAGES[name].typical_variants()["p-type"]
        assert cautions(COLPITTS, TANK, p, {}).count(P_TYPE_CAUTION) == 1
        assert P_TYPE_CAUTION not in cautions(COLPITTS, TANK, replace(p, p_type=False), {})
