"""The bias networks of the bipolar stages (picker.circuit.bias) against outside references.

- the textbook closed forms of the base-resistor and collector-feedback biases
  (Boylestad & Nashelsky, *Electronic Devices and Circuit Theory*, 10th ed., sections 4.4
  and 4.6; Sedra & Smith, *Microelectronic Circuits*, 5th ed., section 5.7.3; section
  numbers from memory), written out here;
- the linearised DC loop (B2)/(B3) against ngspice's operating point of the stage's own
  netlist at two supply voltages (the outside reference for the slope);
- the unbypassed emitter resistance in the idealised stage against the textbook
  degenerated transconductance gm/(1 + gm·R_E) (Sedra & Smith, common-emitter amplifier
  with an emitter resistance);
- the spec's keys: one-line errors naming the file and the key.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import replace
from pathlib import Path

import pytest
from ngspice_op import need_ngspice, ngspice_op
from numpy.testing import assert_allclose

from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import STAGES
from picker.errors import SpecError
from picker.spec.load import spec_from_dict
from picker.tank.colpitts import COLPITTS

CE = STAGES["common-emitter"]
TANK = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}
VT27 = 1.380649e-23 * 300.15 / 1.602176634e-19  # k·T/q at 27 °C (SI 2019 constants)


def _flat(**kw):
    """The typical stage with the Early effect switched off (the textbook's transistor)."""
    return replace(CE.typical_params(), early_voltage=1e9, **kw)


def test_base_resistor_with_emitter_resistor_meets_the_emitter_bias_closed_form():
    # Boylestad & Nashelsky 4.4: I_B = (V_CC − V_BE)/(R_B + (β + 1)·R_E)
    p = _flat(r_b1=1.5e6, r_b2=None)
    b = CE.bias(p)
    beta = 150.0  # the generic card's BF
    expected = (p.vcc - b.vbe) / (p.r_b1 + (beta + 1) * p.r_e)
    assert_allclose(b.ib, expected, rtol=1e-6)
    assert_allclose(b.ic, beta * b.ib, rtol=1e-6)


@pytest.mark.parametrize("r_e", [None, 470.0, 2200.0])
def test_collector_feedback_meets_the_textbook_closed_form(r_e):
    # (B1): I_B = (V_CC − V_BE)/(R_F + (β + 1)·(R_C + R_E)); the current through R_C is
    # I_C + I_B (Boylestad & Nashelsky 4.6; Sedra & Smith 5.7.3)
    p = _flat(r_b1=None, r_b2=None, r_feedback=220e3, r_c=2200.0, r_e=r_e)
    b = CE.bias(p)
    beta, r_e_ = 150.0, r_e or 0.0
    expected = (p.vcc - b.vbe) / (p.r_feedback + (beta + 1) * (p.r_c + r_e_))
    assert_allclose(b.ib, expected, rtol=1e-6)
    assert_allclose(b.vc, p.vcc - (b.ic + b.ib) * p.r_c, rtol=1e-9)
    # V_BE itself from the junction law I_C = IS·exp(V_BE/V_T) (Gummel-Poon, forward)
    assert_allclose(b.vbe, VT27 * math.log(b.ic / 1e-14), rtol=1e-6)


def test_collector_feedback_worked_example():
    # Boylestad & Nashelsky's collector-feedback example (from memory): V_CC = 10 V,
    # R_F = 250 kΩ, R_C = 4.7 kΩ, R_E = 1.2 kΩ, β = 90 give I_B = 11.91 µA, I_C = 1.07 mA
    # with V_BE = 0.7 V and β in place of β + 1; the card's IS is set so that V_BE is
    # 0.7 V at 1.07 mA, and the book's approximation (β for β + 1) is within 2 %
    is_ = 1.07e-3 / math.exp(0.7 / VT27)
    dev = replace(CE.typical_params().device, is_=is_, bf=90.0, vaf=1e9)
    p = replace(
        CE.typical_params(),
        vcc=10.0,
        r_b1=None,
        r_b2=None,
        r_feedback=250e3,
        r_c=4.7e3,
        r_e=1.2e3,
        device=dev,
    )
    b = CE.bias(p)
    assert abs(b.ib / 11.91e-6 - 1) < 0.02
    assert abs(b.ic / 1.07e-3 - 1) < 0.02


def _op(params, vcc: float) -> dict[str, float]:
    """ngspice's operating point of the stage's own netlist at supply ``vcc``."""
    part = CE.netlist(COLPITTS, TANK, 0.0, 1.0, replace(params, vcc=vcc))
    probes = {"icq": "@q1[ic]"}
    return ngspice_op(part.elements, part.models, lets=probes, prints=["v(b)", "v(e)"])


@pytest.mark.ngspice
@pytest.mark.parametrize(
    "kw",
    [
        {"r_b1": None, "r_b2": None, "r_feedback": 220e3, "r_c": 2200.0, "r_e": 470.0},
        {"r_b1": None, "r_b2": 47e3, "r_feedback": 100e3, "r_c": 2200.0, "r_e": 470.0},
        {"r_b1": 1.5e6, "r_b2": None},
        {"r_e_unbypassed": 100.0},
    ],
    ids=["feedback", "feedback-divider", "base-resistor", "emitter-split"],
)
def test_linear_dc_loop_matches_ngspice_operating_points(kw):
    # (B2): V_BE = V_th' − r_dc·I_C, so between two supplies V_BE changes by
    # ΔV_th' − r_dc·ΔI_C; ngspice's two operating points (Early effect off, so the loop
    # is linear) give the slope the large-signal model's bias shift uses
    need_ngspice()
    p = _flat(**kw)
    loop = CE.bias_loop(p, CE.small_signal(p))
    a, b = _op(p, 9.0), _op(p, 10.0)
    d_vbe = (b["v(b)"] - b["v(e)"]) - (a["v(b)"] - a["v(e)"])
    d_ic = b["icq"] - a["icq"]
    # V_th' per volt of supply: the divider's ratio (1 for a base resistor), k·m (B3)
    if p.r_feedback is not None:
        r_b2 = p.r_b2 if p.r_b2 is not None else math.inf
        k = 1.0 if math.isinf(r_b2) else r_b2 / (p.r_feedback + r_b2)
        m = 1.0 if math.isinf(r_b2) else (p.r_feedback + r_b2) / (p.r_feedback + r_b2 + p.r_c)
        dv_th = k * m
    else:
        dv_th = 1.0 if p.r_b2 is None else p.r_b2 / (p.r_b1 + p.r_b2)
    assert_allclose(loop.r_dc, (dv_th - d_vbe) / d_ic, rtol=0.01)


def test_unbypassed_emitter_resistance_degenerates_the_ideal_stage():
    # Sedra & Smith, CE amplifier with an emitter resistance: G_m = gm/(1 + gm·R_E); the
    # ideal common-emitter Colpitts starts at G_m·R = C2/C1 (Colpitts section), so the
    # margin (gm over the gm at the edge) is gm/g_edge with g_edge/(1 + g_edge·R_E) = C2/(C1·R)
    gm, r, r_e1 = 0.04, 1000.0, 47.0
    ideal = CE.ideal_params(gm, r)
    p = replace(ideal, r_e=r_e1 + 1000.0, c_e=1.0, r_e_unbypassed=r_e1)
    res = loaded_response(COLPITTS, TANK, 0.0, p)
    need = TANK["C2"] / (TANK["C1"] * r)
    g_edge = need / (1 - need * r_e1)
    assert_allclose(float(res.margin), gm / g_edge, rtol=1e-6)
    plain = loaded_response(COLPITTS, TANK, 0.0, replace(p, r_e_unbypassed=None))
    assert_allclose(float(plain.margin), gm * r * TANK["C1"] / TANK["C2"], rtol=1e-6)
    f0 = 1 / (2 * math.pi * math.sqrt(TANK["L"] * TANK["C1"] * TANK["C2"] / 3.2e-9))
    assert_allclose(float(res.f_hz), f0, rtol=1e-6)


# ------------------------------------------------------------------ the spec's keys

DEMO = Path(__file__).resolve().parents[1] / "demo_specs" / "clapp_vfo.toml"
AMP = {
    "supply": "12 V",
    "r_load": "2k2",
    "r_bias_top": "47 kohm",
    "r_bias_bottom": "10k",
    "r_emitter": "1 kΩ",
    "c_emitter": "10n",
    "c_coupling": "1 nF",
}
FEEDBACK = {k: v for k, v in AMP.items() if k not in ("r_bias_top", "r_bias_bottom")}


def _spec(amp):
    d = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    d["amplifier"] = amp
    return spec_from_dict(d, file="demo.toml")


def test_spec_keys_reach_the_model():
    s = _spec({**FEEDBACK, "r_feedback": "220k", "bias": "collector-feedback"})
    p = s.amplifier.to_params(s.parts)
    assert p.r_feedback == 220e3 and p.r_b1 is None and CE.bias(p).ic > 0
    s = _spec({**AMP, "r_emitter_unbypassed": "47 ohm"})
    p = s.amplifier.to_params(s.parts)
    assert p.r_e == 1047.0 and p.r_e_unbypassed == 47.0
    assert _spec({**AMP, "bias": "divider"}).amplifier.bias == "divider"
    single = {k: v for k, v in AMP.items() if k != "r_bias_bottom"}
    assert _spec({**single, "bias": "base-resistor"}).amplifier.r_bias_bottom is None


@pytest.mark.parametrize(
    ("amp", "key", "words"),
    [
        ({**AMP, "r_feedback": "220k"}, "amplifier", "not both"),
        ({**FEEDBACK, "r_feedback": "-1k"}, "amplifier.r_feedback", "positive"),
        ({**FEEDBACK, "r_feedback": "1 nF"}, "amplifier.r_feedback", "resistance"),
        ({**AMP, "bias": "self"}, "amplifier.bias", "divider"),
        ({**AMP, "bias": "base-resistor"}, "amplifier", "r_bias_top without r_bias_bottom"),
        ({**AMP, "bias": "collector-feedback"}, "amplifier", "expects r_feedback"),
        ({**FEEDBACK, "r_feedback": "220k", "bias": "divider"}, "amplifier", "r_bias_bottom"),
        (
            {k: v for k, v in FEEDBACK.items() if k != "r_load"}
            | {"r_feedback": "220k", "stage": "common-collector"},
            "amplifier",
            "modelled for the stages common-emitter",
        ),
        (
            {k: v for k, v in AMP.items() if k != "c_emitter"} | {"r_emitter_unbypassed": "47"},
            "amplifier",
            "needs r_emitter and c_emitter",
        ),
        ({**AMP, "r_emitter_unbypassed": "0 ohm"}, "amplifier.r_emitter_unbypassed", "positive"),
    ],
)
def test_bad_bias_keys_name_the_file_and_key(amp, key, words):
    with pytest.raises(SpecError) as info:
        _spec(amp)
    msg = str(info.value)
    assert msg.startswith(f"demo.toml: {key}") and words in msg and "\n" not in msg
