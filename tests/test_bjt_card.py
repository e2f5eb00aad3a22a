"""A bjt's own SPICE card in the spec (``device`` = a bipolar class, and the card keys
``is``, ``bf``, ``br``, ``vaf``, ``tf``, ``cje``, ``cjc``), used by the model and the netlist.

References:

- ngspice's operating point (``op``) of the stage's own netlist: Q1's collector current,
  its small-signal gm and C_pi (ngspice's BJT operating-point parameters ``gm``, ``cpi``),
  an independent solution of the same Gummel-Poon card; issue 12 asks for the bias point
  to 1 %.
- The hybrid-π input capacitance C_pi = TF·gm + CJE with constant junction capacitance
  (MJE = 0): Massobrio & Antognetti, *Semiconductor Device Modeling with SPICE*, 2nd ed.,
  ch. 2 (the diffusion capacitance TF·gm).
"""

from __future__ import annotations

import copy
import re
from dataclasses import replace

import pytest
from ngspice_op import ngspice_op

from picker.api import spec_from_dict
from picker.circuit.device import BJT_CLASSES, bjt_card
from picker.circuit.polarity import mirror_netlist
from picker.circuit.stages import STAGES
from picker.errors import SpecError
from picker.tank.colpitts import COLPITTS

CARD = {
    "is": "5e-15 A",
    "bf": 80,
    "br": 2,
    "vaf": "60 V",
    "tf": "0.8 ns",
    "cje": "3 pF",
    "cjc": "2 pF",
}
#: the same card as SI numbers, typed here from CARD (not read back from picker)
CARD_SI = {
    "is_": 5e-15,
    "bf": 80.0,
    "br": 2.0,
    "vaf": 60.0,
    "tf": 0.8e-9,
    "cje": 3e-12,
    "cjc": 2e-12,
}

SPEC = {
    "topology": "colpitts",
    "frequency": {"target": "1 MHz", "window": "±2 %"},
    "feedback": {"min": 0.1, "max": 1.0},
    "parts": {
        "C1": {"series": "E24", "tolerance": "5 %", "min": "470 pF", "max": "4.7 nF"},
        "C2": {"series": "E24", "tolerance": "5 %", "min": "470 pF", "max": "4.7 nF"},
        "L": {"series": "E12", "tolerance": "5 %", "min": "4.7 uH", "max": "47 uH", "q": 60},
    },
    "amplifier": {
        "supply": "9 V",
        "r_load": "1.5 kohm",
        "r_bias_top": "47 kohm",
        "r_bias_bottom": "10 kohm",
        "r_emitter": "1 kohm",
        "c_emitter": "100 nF",
        "c_coupling": "10 nF",
    },
}
VALUES = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}


def _spec(**amp):
    d = copy.deepcopy(SPEC)
    d["amplifier"].update(amp)
    return spec_from_dict(d)


def _op(lines: list[str], models: list[str]) -> dict[str, float]:
    """Q1's collector current, gm and C_pi from ngspice's operating point."""
    probes = {"icq": "@q1[ic]", "gmq": "@q1[gm]", "cpiq": "@q1[cpi]"}
    return ngspice_op(lines, models, lets=probes, title="card op")


def test_card_keys_reach_the_netlist_card():
    params = _spec(**CARD).amplifier.to_params()
    stage = STAGES["common-emitter"]
    card = " ".join(stage.netlist(COLPITTS, VALUES, 0.0, 1.0, params).models)
    for name, value in (("IS", 5e-15), ("BF", 80), ("BR", 2), ("VAF", 60)):
        got = float(re.search(rf"\b{name}=(\S+)", card).group(1))
        assert got == pytest.approx(value, rel=1e-5)


@pytest.mark.ngspice
@pytest.mark.parametrize("name", [s.name for s in STAGES.values() if s.device == "bjt"])
def test_bias_gm_and_c_pi_follow_the_card_as_ngspice_does(name):
    # every bjt stage's typical design, its card replaced by CARD: the model's bias current,
    # gm and C_pi against ngspice's operating point of the stage's own netlist
    stage = STAGES[name]
    params = replace(stage.typical_params(), device=bjt_card("generic-npn", **CARD_SI))
    bias = stage.bias(params)
    ss = stage.small_signal(params)
    part = stage.netlist(COLPITTS, VALUES, 0.0, 1.0, params)
    op = _op(part.elements, part.models)
    assert abs(op["icq"] / bias.ic - 1) < 0.01
    assert abs(op["gmq"] / ss.gm - 1) < 0.01
    # C_pi = TF·gm + CJE (Massobrio & Antognetti ch. 2), ngspice's and the model's
    assert abs(op["cpiq"] / ss.c_pi - 1) < 0.01
    assert ss.c_pi == pytest.approx(0.8e-9 * op["gmq"] + 3e-12, rel=0.01)
    # and the card moved them: the generic NPN's bias differs by more than the tolerance
    generic = stage.bias(stage.typical_params())
    assert (
        abs(generic.ic / bias.ic - 1) > 0.01
        or abs(stage.small_signal(stage.typical_params()).c_pi / ss.c_pi - 1) > 0.05
    )


@pytest.mark.ngspice
def test_rf_class_and_pnp_class_through_the_spec():
    for device in ("generic-rf-npn", "generic-pnp"):
        spec = _spec(device=device)
        params = spec.amplifier.to_params()
        assert params.p_type == (BJT_CLASSES[device][1] == "pnp")
        stage = STAGES["common-emitter"]
        bias = stage.bias(params)
        part = stage.netlist(COLPITTS, VALUES, 0.0, 1.0, params)
        sign = 1.0
        if params.p_type:  # the mirror image: the currents negated (picker.circuit.polarity)
            part, sign = mirror_netlist(part), -1.0
            assert "PNP" in " ".join(part.models)
        op = _op(part.elements, part.models)
        assert abs(op["icq"] / (sign * bias.ic) - 1) < 0.01


@pytest.mark.parametrize(
    ("amp", "key", "words"),
    [
        ({"bf": 0.5}, "amplifier.bf", "BF from 1"),
        ({"tf": "3 pF"}, "amplifier.tf", "capacitance"),
        ({"bf": 80, "current_gain": 90}, "amplifier", "not both"),
        ({"cjc": "2 pF", "c_mu": "2 pF"}, "amplifier", "not both"),
        ({"device": "generic-pnp", "polarity": "npn"}, "amplifier", "pnp class"),
        ({"device": "generic-npn", "kind": "fet"}, "amplifier", "bjt class"),
        ({"device": "generic-xyz"}, "amplifier.device", "generic-rf-npn"),
    ],
)
def test_bad_card_keys_are_one_line_naming_the_key(amp, key, words):
    with pytest.raises(SpecError) as err:
        _spec(**amp)
    assert err.value.key == key and words in err.value.message
    assert "\n" not in str(err.value)


FET_SPEC = {
    "kind": "fet",
    "stage": "common-drain",
    "device": "generic-njfet",
    "r_bias_bottom": "1 Mohm",
    "r_emitter": "470 ohm",
}


def _fet_spec(**amp):
    d = copy.deepcopy(SPEC)
    d["amplifier"] = {"supply": "9 V", **FET_SPEC, **amp}
    return spec_from_dict(d)


def test_fet_card_gate_capacitances_reach_the_model_and_the_netlist():
    # the fet counterparts of the card's capacitances: cgs and cgd in place of the class's
    params = _fet_spec(cgs="6.8 pF", cgd="0.5 pF").amplifier.to_params()
    stage = STAGES["common-drain"]
    ss = stage.small_signal(params)
    assert (ss.c_pi, ss.c_mu) == (pytest.approx(6.8e-12), pytest.approx(0.5e-12))
    lines = stage.netlist(COLPITTS, VALUES, 0.0, 1.0, params).elements
    caps = {ln.split()[0]: float(ln.split()[3]) for ln in lines if ln.startswith(("CGS", "CGD"))}
    assert caps == {"CGS": pytest.approx(6.8e-12), "CGD": pytest.approx(0.5e-12)}
    generic = stage.small_signal(_fet_spec().amplifier.to_params())
    assert generic.c_pi != pytest.approx(6.8e-12)


@pytest.mark.parametrize("typed", [{"c_pi": "5 pF"}, {"c_mu": "1 pF"}, {"gm": "10 mS"}])
def test_fet_card_refuses_typed_values_it_would_ignore(typed):
    with pytest.raises(SpecError) as err:
        _fet_spec(**typed)
    assert "not both" in err.value.message and "\n" not in str(err.value)
