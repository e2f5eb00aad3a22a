"""The common-drain stage (source follower): its start-up condition, its network against a
ground-referenced nodal analysis written here, its bias, large-signal law, spec keys and
cautions.

The follower's characteristic equation is derived in
:mod:`picker.circuit.stages.common_collector` (marked there as derived) for r_pi → ∞,
which a fet's gate makes exact: s³·L·C1·C2·R_S + s²·L·C2 + s·(C1 + C2)·R_S + (1 + gm·R_S)
= 0, the form of Sedra & Smith's common-emitter Colpitts (*Microelectronic Circuits*,
Colpitts section) with R_S as the load. The checks below compute it independently:
numpy's polynomial roots, and a nodal matrix over ground (drain at AC ground) built
element by element here.
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
from picker.spec.amplifier import AmplifierSpec
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

CD = get_stage("common-drain")
TWO_PI = 2 * math.pi


def test_characteristic_cubic_has_its_imaginary_pair_at_gm_rs_equal_c2_over_c1():
    c1, c2, l_, r = 2.2e-9, 1e-9, 10e-6, 1000.0
    w0 = 1 / math.sqrt(l_ * c1 * c2 / (c1 + c2))
    for gm_r, side in ((c2 / c1, 0), (0.8 * c2 / c1, -1), (1.25 * c2 / c1, 1)):
        roots = np.roots([l_ * c1 * c2 * r, l_ * c2, (c1 + c2) * r, 1 + gm_r])
        pair = roots[np.abs(roots.imag) > 0]
        assert np.sign(np.round(pair.real.max() / w0, 12)) == side
        if side == 0:
            assert_allclose(np.abs(pair.imag), w0, rtol=1e-9)
        res = loaded_response(
            COLPITTS, {"C1": c1, "C2": c2, "L": l_}, 0.0, CD.ideal_params(gm_r / r, r)
        )
        assert_allclose(res.margin, gm_r * c1 / c2, rtol=1e-9)
        assert_allclose(res.f_hz, w0 / TWO_PI, rtol=1e-9)


def _ground_referenced_loop_gain(values, params, f, clapp):
    """Return ratio of the follower over ground (drain and supply at AC ground), each
    element stamped here; a unit test source from the source node into the drain in
    place of the controlled source gm·v_gs."""
    ss = small_signal(params)
    s = 1j * TWO_PI * f
    names = ["b", "e", "g", "m"]  # gate, source, the tank's grounded end, C3–L joint
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
    g_gate = sum(1 / x for x in (params.r_b1, params.r_b2) if x is not None)
    put("b", None, g_gate + s * ss.c_mu)
    put("b", "e", s * ss.c_pi)
    put("e", None, 1 / params.r_e + 1 / ss.r_o)
    put("b", "e", s * values["C2"])
    put("e", "g", s * values["C1"])
    put("g", None, s * params.c_block + 1 / params.r_bleed * clapp)
    if clapp:
        put("g", "m", s * values["C3"])
        put("m", "b", 1 / (r_l + s * values["L"]))
    else:
        put("m", None, 1.0)  # unused node
        put("g", "b", 1 / (r_l + s * values["L"]))
    u = np.zeros(4, dtype=complex)
    u[k["e"]] = -1.0
    x = np.linalg.solve(y, u)
    return -ss.gm * (x[k["b"]] - x[k["e"]])


@pytest.mark.parametrize("topology", [COLPITTS, CLAPP], ids=["colpitts", "clapp"])
@pytest.mark.parametrize("card", [GENERIC_NJFET, GENERIC_NMOS], ids=["njf", "nmos"])
def test_source_referenced_network_equals_a_ground_referenced_one(topology, card):
    params = replace(CD.typical_params(), fet=card, inductor_q=80.0, r_e=1500.0)
    if card is GENERIC_NJFET:
        params = replace(params, r_b1=None, r_b2=1e6)
    values = {"C1": 1.8e-9, "C2": 680e-12, "C3": 150e-12, "L": 15e-6}
    values = {p: values[p] for p in topology.positions}
    for f in (1.1e6, 2.9e6, 4.7e6):
        pf = replace(params, q_frequency=f)
        ours = loop_gain(topology, values, 0.0, pf, f)
        ref = _ground_referenced_loop_gain(values, pf, f, topology is CLAPP)
        assert_allclose(ours, ref, rtol=1e-9)


def test_self_biased_follower_and_its_square_law_under_drive():
    # V_G = 0, V_S = I_D·R_S = −V_GS; under drive the drain current is Shockley's
    # IDSS·(1 − v_GS/V_P)² (zero beyond pinch-off), written here from the book's form
    # (Sedra & Smith, JFET section) at v_GS = V_GS,rest + v (λ's factor held at rest)
    p = replace(CD.typical_params(), fet=GENERIC_NJFET, r_b1=None, r_b2=1e6, r_e=680.0)
    b = CD.bias(p)
    assert b is not None and b.vb == 0.0 and b.vc == p.vcc
    assert_allclose(b.ve, b.ic * p.r_e, rtol=1e-12)
    ss = small_signal(p)
    v = np.linspace(-3.0, 1.0, 41)
    idss, vp = GENERIC_NJFET.idss, GENERIC_NJFET.vto
    vgs = b.vbe + v
    lam_f = 1 + GENERIC_NJFET.lam * (b.vc - b.ve)
    ref = np.where(vgs > vp, idss * (1 - vgs / vp) ** 2 * lam_f, 0.0)
    assert_allclose(CD.output_current(p, ss, v), ref, rtol=1e-9, atol=1e-15)


AMP = {
    "stage": "common-drain",
    "supply": "9 V",
    "device": "generic-njfet",
    "idss": "12 mA",
    "vto": "-2 V",
    "lambda": 0.01,
    "r_bias_bottom": "1 Mohm",
    "r_emitter": "470",
}


def test_spec_takes_a_gate_resistor_alone_and_refuses_a_drain_load():
    p = AmplifierSpec.model_validate(AMP).to_params()
    assert p.kind == "fet" and p.r_b1 is None and p.r_b2 == 1e6
    assert p.fet is not None and p.fet.lam == 0.01
    with pytest.raises(ValueError, match="expected no collector load"):
        AmplifierSpec.model_validate({**AMP, "r_load": "1k"})
    with pytest.raises(ValueError, match="r_bias_bottom needs r_bias_top"):
        AmplifierSpec.model_validate(
            {k: v for k, v in AMP.items() if k not in ("device", "idss", "vto", "lambda")}
            | {"gm": "5 mS", "c_pi": "4p", "c_mu": "1p"}
        )
    with pytest.raises(ValueError, match="between 0 and 1"):
        AmplifierSpec.model_validate({**AMP, "lambda": 2})


def test_divider_gate_without_blocking_capacitor_is_flagged_self_bias_is_not():
    p = CD.typical_params()  # divider-biased MOSFET with C_B
    assert CD.cautions(COLPITTS, p) == []
    assert any("gate to ground" in c for c in CD.cautions(COLPITTS, replace(p, c_block=None)))
    jfet = replace(p, fet=GENERIC_NJFET, r_b1=None, r_b2=1e6, c_block=None)
    assert CD.cautions(COLPITTS, jfet) == []
