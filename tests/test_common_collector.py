"""The common-collector stage (emitter follower): its start-up condition, its network
against a ground-referenced nodal analysis written here, its spec keys and cautions.

The emitter-follower Colpitts's characteristic equation is derived in
:mod:`picker.circuit.stages.common_collector` (marked there as derived, not quoted):
s³·L·C1·C2·R_E + s²·L·C2 + s·(C1 + C2)·R_E + (1 + gm·R_E) = 0, the form of Sedra & Smith's
common-emitter Colpitts (*Microelectronic Circuits*, Colpitts section). The checks below
compute it independently: numpy's polynomial roots, and a nodal matrix over ground with
the collector grounded, built element by element in this file (the stage's own network
takes the emitter as reference).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import loop_gain
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import get_stage, small_signal
from picker.errors import SpecError
from picker.spec.amplifier import AmplifierSpec
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

CC = get_stage("common-collector")
TWO_PI = 2 * math.pi


def test_characteristic_cubic_has_its_imaginary_pair_at_the_textbook_edge():
    # ground-referenced node equations of the ideal follower (derived in the module):
    # the cubic's roots, by numpy, sit on the imaginary axis at ω0 exactly when
    # gm·R_E = C2/C1, inside the left half plane below it and to the right above it
    c1, c2, l_, r = 1.5e-9, 3.3e-9, 10e-6, 1000.0
    w0 = 1 / math.sqrt(l_ * c1 * c2 / (c1 + c2))
    for gm_r, side in ((c2 / c1, 0), (0.8 * c2 / c1, -1), (1.25 * c2 / c1, 1)):
        roots = np.roots([l_ * c1 * c2 * r, l_ * c2, (c1 + c2) * r, 1 + gm_r])
        pair = roots[np.abs(roots.imag) > 0]
        assert np.sign(np.round(pair.real.max() / w0, 12)) == side
        if side == 0:
            assert_allclose(np.abs(pair.imag), w0, rtol=1e-9)
        # the model's ideal follower: margin gm·R_E·C1/C2 at ω0
        res = loaded_response(
            COLPITTS, {"C1": c1, "C2": c2, "L": l_}, 0.0, CC.ideal_params(gm_r / r, r)
        )
        assert_allclose(res.margin, gm_r * c1 / c2, rtol=1e-9)
        assert_allclose(res.f_hz, w0 / TWO_PI, rtol=1e-9)


def _ground_referenced_loop_gain(values, params, f, clapp):
    """Return ratio of the follower from nodes over ground (collector and supply at AC
    ground), each element stamped here; the controlled source gm·v_be flows from the
    collector (ground) into the emitter; a unit test source in its place."""
    ss = small_signal(params)
    s = 1j * TWO_PI * f
    names = ["b", "e", "g", "m"]  # base, emitter, the tank's grounded end, C3–L joint
    k = {n: i for i, n in enumerate(names)}
    y = np.zeros((4, 4), dtype=complex)

    def put(a, b, adm):
        for n in (a, b):
            if n is not None:
                y[k[n], k[n]] += adm
        if a is not None and b is not None:
            y[k[a], k[b]] -= adm
            y[k[b], k[a]] -= adm

    r_l = TWO_PI * f * values["L"] / params.inductor_q  # Q at the probe frequency
    put("b", None, 1 / params.r_b1 + 1 / params.r_b2 + s * ss.c_mu)
    put("b", "e", 1 / ss.r_pi + s * ss.c_pi)
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
    u[k["e"]] = -1.0  # the test source draws 1 A out of the emitter (into the collector)
    x = np.linalg.solve(y, u)
    return -ss.gm * (x[k["b"]] - x[k["e"]])


@pytest.mark.parametrize("topology", [COLPITTS, CLAPP], ids=["colpitts", "clapp"])
def test_emitter_referenced_network_equals_a_ground_referenced_one(topology):
    # the stage takes the emitter as the reference node; nodal analysis over ground must
    # give the same return ratio (the reference is free)
    params = AmplifierParams(
        stage="common-collector",
        vcc=12.0,
        r_b1=33e3,
        r_b2=39e3,
        r_e=1500.0,
        c_block=47e-9,
        inductor_q=80.0,
        q_frequency=None,
    )
    values = {"C1": 680e-12, "C2": 1.8e-9, "C3": 150e-12, "L": 15e-6}
    values = {p: values[p] for p in topology.positions}
    for f in (1.1e6, 2.9e6, 4.7e6):
        params_f = AmplifierParams(**{**params.__dict__, "q_frequency": f})
        ours = loop_gain(topology, values, 0.0, params_f, f)
        ref = _ground_referenced_loop_gain(values, params_f, f, topology is CLAPP)
        assert_allclose(ours, ref, rtol=1e-9)


def test_follower_bias_has_no_collector_drop_and_the_divider_sets_it():
    # emitter follower: V_E = V_B − V_BE, I_E = V_E/R_E (Sedra & Smith, bjt DC analysis)
    p = CC.typical_params()
    b = CC.bias(p)
    assert b is not None and b.vc == p.vcc
    assert_allclose(b.ve, b.vb - b.vbe, rtol=1e-12)
    assert_allclose(b.ic + b.ib, b.ve / p.r_e, rtol=1e-9)
    v_th = p.vcc * p.r_b2 / (p.r_b1 + p.r_b2)
    r_th = p.r_b1 * p.r_b2 / (p.r_b1 + p.r_b2)
    assert_allclose(b.vb, v_th - b.ib * r_th, rtol=1e-9)


AMP = {
    "stage": "common-collector",
    "supply": "9 V",
    "r_bias_top": "47k",
    "r_bias_bottom": "47k",
    "r_emitter": "2k2",
}


def test_spec_takes_the_stage_and_refuses_a_collector_load_or_emitter_bypass():
    a = AmplifierSpec.model_validate(AMP)
    assert a.kind == "bjt" and a.to_params().stage == "common-collector"
    with pytest.raises(ValueError, match="expected no collector load"):
        AmplifierSpec.model_validate({**AMP, "r_load": "1k"})
    with pytest.raises(SpecError, match="no emitter bypass"):
        AmplifierSpec.model_validate({**AMP, "c_emitter": "10n"}).to_params()


def test_colpitts_without_blocking_capacitor_is_flagged_and_dc_voltages_follow_the_bias():
    p = CC.typical_params()
    assert CC.cautions(COLPITTS, p) == []
    bare = AmplifierParams(**{**p.__dict__, "c_block": None})
    assert any("shorts the base" in c for c in CC.cautions(COLPITTS, bare))
    assert CC.cautions(CLAPP, bare) == []  # C3 blocks DC
    b = CC.bias(p)
    dc = CC.dc_voltages(COLPITTS, p)
    # C_B holds the tank's grounded end at V_B through L; C1 from there to the emitter
    assert_allclose(dc["CB"], b.vb)
    assert_allclose(dc["C1"], b.vb - b.ve)
    assert_allclose(dc["C2"], b.vb - b.ve)
    dc = CC.dc_voltages(CLAPP, bare)
    assert_allclose([dc["C1"], dc["C2"], dc["C3"]], [b.ve, b.vb - b.ve, b.vb])
