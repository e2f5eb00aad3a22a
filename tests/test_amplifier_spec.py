"""The [amplifier] spec section: parsing, validation messages, conversion to model params."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest
from numpy.testing import assert_allclose

from picker.errors import SpecError
from picker.spec.amplifier import AmplifierSpec
from picker.spec.load import spec_from_dict

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


def _spec(amp, **parts):
    d = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    d["amplifier"] = amp
    for pos, extra in parts.items():
        d["parts"][pos].update(extra)
    return spec_from_dict(d, file="demo.toml")


def test_engineering_strings_become_si_and_defaults():
    a = AmplifierSpec.model_validate(AMP)
    assert (a.supply, a.r_load, a.r_bias_top, a.r_bias_bottom) == (12.0, 2200.0, 47e3, 10e3)
    assert_allclose([a.c_emitter, a.c_coupling], [10e-9, 1e-9], rtol=1e-12)
    assert a.min_margin == 2.0 and a.kind == "bjt" and a.max_margin is None
    assert AmplifierSpec.model_validate({**AMP, "max_margin": 30}).max_margin == 30.0


def test_to_params_takes_inductor_and_capacitor_loss_from_parts():
    s = _spec(AMP, L={"q": 60, "q_frequency": "5 MHz"}, C1={"esr": "0.1 ohm"})
    p = s.amplifier.to_params(s.parts)
    assert p.inductor_q == 60 and p.q_frequency == 5e6 and p.inductor_esr == 0.0
    assert p.capacitor_esr == {"C1": 0.1}
    assert p.r_c == 2200.0 and p.c_block == 1e-9 and p.vcc == 12.0
    s2 = _spec(AMP, L={"esr": "1.5 ohm"})
    assert s2.amplifier.to_params(s2.parts).inductor_esr == 1.5


@pytest.mark.parametrize(
    ("change", "key", "words"),
    [
        ({"r_load": "10 nF"}, "amplifier.r_load", "resistance"),
        ({"next_stage_c": "10 pF"}, "amplifier", "next_stage_c needs next_stage_r"),
        ({"min_margin": 0.5}, "amplifier.min_margin", "between 1 and 100"),
        ({"max_margin": 2.0}, "amplifier.max_margin", "above min_margin (2)"),
        ({"max_margin": True}, "amplifier.max_margin", "such as 20"),
        ({"supply": "-9 V"}, "amplifier.supply", "positive"),
        ({"colector": "1k"}, "amplifier.colector", "unknown key"),
        ({"kind": "tube"}, "amplifier.kind", "bjt"),
        ({"stage": "common-plate"}, "amplifier.stage", "one of common-emitter, common-source"),
        ({"stage": ["common-emitter"]}, "amplifier.stage", "one of common-emitter"),
        ({"kind": "bjt", "stage": "common-source"}, "amplifier.stage", "kind = 'bjt'"),
    ],
)
def test_bad_input_names_key_and_expectation(change, key, words):
    with pytest.raises(SpecError) as info:
        _spec({**AMP, **change})
    msg = str(info.value)
    assert msg.startswith(f"demo.toml: {key}") and words in msg and "\n" not in msg


def test_divider_too_low_is_a_spec_error():
    a = AmplifierSpec.model_validate({**AMP, "r_bias_top": "1 Mohm", "r_bias_bottom": "10k"})
    with pytest.raises(SpecError, match="too low to turn the transistor on"):
        a.to_params()


FET = {**AMP, "gm": "10 mS", "c_mu": "1 pF", "c_pi": "5 pF"}


def test_stage_defaults_from_kind_and_kind_from_stage():
    # kind = "bjt" is the common-emitter stage, kind = "fet" the common-source one, so
    # specs written before the stage key keep their meaning
    assert AmplifierSpec.model_validate(AMP).stage == "common-emitter"
    s = _spec(AMP)
    assert s.amplifier.to_params(s.parts).stage == "common-emitter"
    fet = AmplifierSpec.model_validate({**FET, "kind": "fet"})
    assert fet.stage == "common-source" and fet.to_params().stage == "common-source"
    by_stage = AmplifierSpec.model_validate({**FET, "stage": "common-source"})
    assert by_stage.kind == "fet" and by_stage.to_params().kind == "fet"
    both = AmplifierSpec.model_validate({**AMP, "kind": "bjt", "stage": "common-emitter"})
    assert both.to_params() == AmplifierSpec.model_validate(AMP).to_params()
