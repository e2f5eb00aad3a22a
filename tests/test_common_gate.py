"""The common-gate stage: its start-up edge, its network against a ground-referenced nodal
analysis written here, its bias, spec keys and cautions.

The start-up condition is the common-base one with r_pi = ∞ exactly (derived in
:mod:`picker.circuit.stages.common_base` and :mod:`picker.circuit.stages.common_gate`,
marked there as derived): the ideal circuit over ground (gate grounded, R from drain to
ground beside L, C1 drain–source, C2 source–ground, drain current gm·v_gs = −gm·v_s)
has the characteristic cubic s³·L·C1·C2 + s²·L·G·(C1 + C2) + s·(C1 + C2 + L·G·gm) + gm = 0.
Its exact edge (a root pair on the imaginary axis) solved by hand here is
gm = G·n/(1 − L·G²·(C1 + C2)/(C1·C2)), n = (C1 + C2)²/(C1·C2); n alone in the high-Q
limit (4 at C1 = C2: the common-base Colpitts's known minimum, Razavi, *RF
Microelectronics*, Colpitts oscillator, from memory).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker.circuit.fet import GENERIC_NJFET, GENERIC_NMOS
from picker.circuit.network import loop_gain
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import get_stage, small_signal
from picker.errors import SpecError
from picker.spec.amplifier import AmplifierSpec
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

CG = get_stage("common-gate")
TWO_PI = 2 * math.pi


@pytest.mark.parametrize("r", [2e3, 2e4])
def test_exact_edge_puts_the_cubic_roots_on_the_axis_and_the_model_at_margin_one(r):
    c1, c2, l_ = 1e-9, 2.2e-9, 4.7e-6
    g = 1 / r
    n = (c1 + c2) ** 2 / (c1 * c2)
    gm = g * n / (1 - l_ * g * g * (c1 + c2) / (c1 * c2))
    roots = np.roots([l_ * c1 * c2, l_ * g * (c1 + c2), c1 + c2 + l_ * g * gm, gm])
    pair = roots[np.abs(roots.imag) > 0]
    w = math.sqrt((c1 + c2 + l_ * g * gm) / (l_ * c1 * c2))  # the cubic's imaginary part
    assert_allclose(pair.real, 0.0, atol=1e-9 * w)
    assert_allclose(np.abs(pair.imag), w, rtol=1e-9)
    res = loaded_response(COLPITTS, {"C1": c1, "C2": c2, "L": l_}, 0.0, CG.ideal_params(gm, r))
    assert_allclose(res.margin, 1.0, rtol=1e-6)
    assert_allclose(res.f_hz, w / TWO_PI, rtol=1e-6)
    # 10 % more gm starts it
    res = loaded_response(
        COLPITTS, {"C1": c1, "C2": c2, "L": l_}, 0.0, CG.ideal_params(1.1 * gm, r)
    )
    assert res.margin > 1.05


def _ground_referenced_loop_gain(values, params, f, clapp):
    """Return ratio of the common-gate stage over ground (gate, supply at AC ground),
    each element stamped here; a unit test source from the source into the drain in
    place of the controlled source gm·v_gs (drain to source)."""
    ss = small_signal(params)
    s = 1j * TWO_PI * f
    names = ["d", "t", "s", "m"]  # drain, tank top, source, C3–L joint
    k = {x: i for i, x in enumerate(names)}
    y = np.zeros((4, 4), dtype=complex)

    def put(a, b, adm):
        for x in (a, b):
            if x is not None:
                y[k[x], k[x]] += adm
        if a is not None and b is not None:
            y[k[a], k[b]] -= adm
            y[k[b], k[a]] -= adm

    r_l = TWO_PI * f * values["L"] / params.inductor_q
    put("d", None, 1 / params.r_c + s * ss.c_mu)
    put("d", "t", s * params.c_block)
    put("d", "s", 1 / ss.r_o)
    put("s", None, 1 / params.r_e + s * ss.c_pi)
    put("t", "s", s * values["C1"])
    put("s", None, s * values["C2"])
    if clapp:
        put("t", None, 1 / params.r_bleed)
        put("t", "m", s * values["C3"])
        put("m", None, 1 / (r_l + s * values["L"]))
    else:
        put("m", None, 1.0)  # unused node
        put("t", None, 1 / (r_l + s * values["L"]))
    u = np.zeros(4, dtype=complex)
    u[k["s"]], u[k["d"]] = -1.0, 1.0
    x = np.linalg.solve(y, u)
    return -ss.gm * (0.0 - x[k["s"]])


@pytest.mark.parametrize("topology", [COLPITTS, CLAPP], ids=["colpitts", "clapp"])
@pytest.mark.parametrize("card", [GENERIC_NJFET, GENERIC_NMOS], ids=["njf", "nmos"])
def test_source_referenced_network_equals_a_ground_referenced_one(topology, card):
    params = replace(CG.typical_params(), fet=card, inductor_q=70.0, r_c=1500.0)
    if card is GENERIC_NJFET:
        params = replace(params, r_b1=None, r_b2=None, c_base=None)
    values = {"C1": 680e-12, "C2": 1.8e-9, "C3": 150e-12, "L": 15e-6}
    values = {p: values[p] for p in topology.positions}
    for f in (1.1e6, 2.9e6, 4.7e6):
        pf = replace(params, q_frequency=f)
        ours = loop_gain(topology, values, 0.0, pf, f)
        ref = _ground_referenced_loop_gain(values, pf, f, topology is CLAPP)
        assert_allclose(ours, ref, rtol=1e-9)


def test_grounded_gate_jfet_self_biases_and_gm_follows_shockley():
    # gate at 0 V: V_GS = −I_D·R_S; gm = (2·IDSS/|V_P|)·√(I_D/IDSS) (Boylestad &
    # Nashelsky, JFET small-signal gm, from memory), computed here from the bias found
    p = replace(CG.typical_params(), fet=GENERIC_NJFET, r_b1=None, r_b2=None, c_base=None)
    b = CG.bias(p)
    assert b is not None and b.vb == 0.0
    assert_allclose(b.vbe, -b.ic * p.r_e, rtol=1e-12)
    idss, vp = GENERIC_NJFET.idss, GENERIC_NJFET.vto
    lam_f = 1 + GENERIC_NJFET.lam * (b.vc - b.ve)
    assert_allclose(b.ic, idss * (1 - b.vbe / vp) ** 2 * lam_f, rtol=1e-9)
    gm0 = 2 * idss / abs(vp)
    assert_allclose(small_signal(p).gm, gm0 * math.sqrt(b.ic / (idss * lam_f)) * lam_f, rtol=1e-9)
    assert CG.cautions(COLPITTS, p) == []


AMP = {
    "stage": "common-gate",
    "supply": "12 V",
    "device": "generic-njfet",
    "idss": "15 mA",
    "vto": "-3 V",
    "r_load": "1k",
    "r_emitter": "470",
    "c_coupling": "10n",
}


def test_spec_takes_the_stage_with_its_device_keys():
    p = AmplifierSpec.model_validate(AMP).to_params()
    assert p.stage == "common-gate" and p.fet is not None
    assert_allclose([p.fet.idss, p.fet.vto], [15e-3, -3.0])
    with pytest.raises(SpecError, match="takes idss, not kp"):
        AmplifierSpec.model_validate({**AMP, "kp": 0.1}).to_params()
    with pytest.raises(ValueError, match="needs device"):
        AmplifierSpec.model_validate({k: v for k, v in AMP.items() if k != "device"})
    with pytest.raises(SpecError, match="no emitter bypass"):
        AmplifierSpec.model_validate({**AMP, "c_emitter": "10n"}).to_params()


def test_cautions_name_a_gate_network_without_bypass_and_a_drain_fed_past_its_load():
    p = CG.typical_params()
    assert CG.cautions(COLPITTS, p) == []
    assert any("gate bypass" in c for c in CG.cautions(COLPITTS, replace(p, c_base=None)))
    bare = replace(p, c_block=None)
    assert any("past the drain load" in c for c in CG.cautions(COLPITTS, bare))
    assert CG.cautions(CLAPP, bare) == []
