"""p-type devices as the mirror image of the n-type circuit (picker.circuit.polarity).

The symmetry (SPICE's device models write the p-type device as the n-type one with a
type sign; Massobrio & Antognetti, *Semiconductor Device Modeling with SPICE*, ch. 2-4):
negating every voltage and current maps the NPN circuit with +V_CC onto the PNP circuit
with −V_CC and the same card. Checked here in ngspice, the outside reference: the PNP
netlist's operating point is the NPN's negated, its transient runs at the NPN's
frequency and amplitude, and both at the model's; the spec's key.
"""

from __future__ import annotations

import tomllib
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from ngspice_op import need_ngspice, ngspice_op
from numpy.testing import assert_allclose

from picker.circuit.device import GENERIC_PNP
from picker.circuit.netlist import write_netlist
from picker.circuit.ngspice import simulate
from picker.circuit.polarity import mirror_netlist
from picker.circuit.stages import STAGES
from picker.circuit.steady import steady_state
from picker.errors import SpecError
from picker.spec.load import spec_from_dict
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

CE = STAGES["common-emitter"]
PNP = replace(CE.typical_params(), device=GENERIC_PNP, p_type=True)
NPN = replace(PNP, p_type=False)  # the mirrored circuit: the same card as an NPN


def _op(lines: list[str], models: list[str]) -> dict[str, float]:
    probes = {"icq": "@q1[ic]"}
    return ngspice_op(lines, models, lets=probes, prints=["v(b)", "v(c)", "v(e)"])


def test_mirror_netlist_writes_the_p_type_cards_and_a_negative_supply():
    part = mirror_netlist(CE.netlist(COLPITTS, COLPITTS.typical, 0.0, 1.0, NPN))
    assert "VCC vcc 0 DC -9" in part.elements
    assert " PNP (" in part.models[0] and " NPN" not in part.models[0]
    n = CE.netlist(COLPITTS, COLPITTS.typical, 0.0, 1.0, NPN)
    assert part.kick == -n.kick and part.top_dc == -n.top_dc
    assert write_netlist(COLPITTS, COLPITTS.typical, 0.0, PNP).count("PNP (") == 1


@pytest.mark.ngspice
def test_pnp_operating_point_is_the_mirrored_npn_and_the_model():
    need_ngspice()
    npn = CE.netlist(COLPITTS, COLPITTS.typical, 0.0, 1.0, NPN)
    pnp = mirror_netlist(npn)
    a, b = _op(npn.elements, npn.models), _op(pnp.elements, pnp.models)
    for key in ("icq", "v(b)", "v(c)", "v(e)"):
        assert_allclose(b[key], -a[key], rtol=1e-5)  # ngspice prints 7 digits
    bias = CE.bias(PNP)
    assert abs(-b["icq"] / bias.ic - 1) < 0.01 and abs(-b["v(b)"] / bias.vb - 1) < 0.01


@pytest.mark.ngspice
@pytest.mark.parametrize("topology", [COLPITTS, CLAPP], ids=["colpitts", "clapp"])
def test_pnp_transient_equals_the_mirrored_npn_and_the_model(topology):
    need_ngspice()
    values = dict(topology.typical)
    s_npn = simulate(write_netlist(topology, values, 3e-12, NPN))
    s_pnp = simulate(write_netlist(topology, values, 3e-12, PNP))
    assert s_npn.waveform.state == s_pnp.waveform.state == "steady"
    assert_allclose(s_pnp.frequency_hz, s_npn.frequency_hz, rtol=1e-4)
    assert_allclose(s_pnp.amplitude_v, s_npn.amplitude_v, rtol=1e-3)
    vals = {k: np.array([x]) for k, x in values.items()}
    st_p, st_n = steady_state(topology, vals, 3e-12, PNP), steady_state(topology, vals, 3e-12, NPN)
    for field in ("margin", "f_hz", "amplitude_v", "startup_time_s"):
        assert_allclose(getattr(st_p, field), getattr(st_n, field), rtol=0)
    assert abs(s_pnp.frequency_hz / float(st_p.f_hz[0]) - 1) < 0.02  # ngspice vs model


@pytest.mark.ngspice
def test_pmos_card_mirrors_with_its_threshold_negated():
    # a source follower: NMOS at +9 V against the mirrored PMOS at −9 V (ngspice's PMOS
    # takes a negative VTO for an enhancement device)
    need_ngspice()
    model = ".model PICKER_NMOS NMOS (LEVEL=1 VTO=1 KP=0.02 LAMBDA=0.01)"
    lines = ["VCC vcc 0 DC 9", "RG vcc b 1e6", "RB b 0 1e6", "M1 vcc b e e PICKER_NMOS"]
    lines += ["RE e 0 470"]
    from picker.circuit.stages.base import StageNetlist

    part = StageNetlist(elements=lines, models=[model], kick=0.0, top_dc=0.0)
    mirrored = mirror_netlist(part)
    assert "PMOS" in mirrored.models[0] and "VTO=-1" in mirrored.models[0]
    a = ngspice_op(part.elements, part.models, prints=["v(e)"], title="n")
    b = ngspice_op(mirrored.elements, mirrored.models, prints=["v(e)"], title="p")
    assert a["v(e)"] > 0.5
    assert_allclose(b["v(e)"], -a["v(e)"], rtol=1e-5)


DEMO = Path(__file__).resolve().parents[1] / "demo_specs" / "clapp_vfo.toml"
AMP = {
    "supply": "9 V",
    "r_load": "1k5",
    "r_bias_top": "68 kohm",
    "r_bias_bottom": "10k",
    "r_emitter": "2.2 kΩ",
    "c_emitter": "47n",
    "c_coupling": "10 nF",
}


def _spec(amp):
    d = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    d["amplifier"] = amp
    return spec_from_dict(d, file="demo.toml")


def test_spec_polarity_key():
    s = _spec({**AMP, "polarity": "pnp"})
    p = s.amplifier.to_params(s.parts)
    assert p.p_type and p.device == GENERIC_PNP
    assert not _spec({**AMP, "polarity": "npn"}).amplifier.to_params().p_type
    for amp, key, words in [
        ({**AMP, "polarity": "PNP-ish"}, "amplifier.polarity", "pnp"),
        ({**AMP, "polarity": "p-channel"}, "amplifier", "expected polarity 'npn' or 'pnp'"),
        (
            {**AMP, "kind": "fet", "gm": "1 mS", "c_mu": "1p", "c_pi": "5p", "polarity": "pnp"},
            "amplifier",
            "'n-channel' or 'p-channel' for kind = 'fet'",
        ),
    ]:
        with pytest.raises(SpecError) as info:
            _spec(amp)
        msg = str(info.value)
        assert msg.startswith(f"demo.toml: {key}") and words in msg and "\n" not in msg
