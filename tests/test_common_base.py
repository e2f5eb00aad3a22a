"""The common-base stage: its start-up condition, its network against a ground-referenced
nodal analysis written here, its spec keys and cautions.

The start-up condition is derived in :mod:`picker.circuit.stages.common_base` (marked
there as derived): in the high-Q limit gm·R ≥ (C1 + C2)²/(C1·C2), 4 at C1 = C2 (the
common-base Colpitts's known minimum, Razavi, *RF Microelectronics*, Colpitts
oscillator, from memory). The checks below compute it independently: the characteristic
polynomial of the ideal circuit over ground (derived in this file) by numpy's roots,
and a nodal matrix over ground built element by element here (the stage's own network
takes the emitter as reference).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import loop_gain
from picker.circuit.stages import get_stage, small_signal
from picker.errors import SpecError
from picker.spec.amplifier import AmplifierSpec
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

CB = get_stage("common-base")
TWO_PI = 2 * math.pi


def test_gain_needed_is_the_textbook_minimum_four_at_equal_capacitors():
    assert_allclose(CB.required_gain(COLPITTS, {"C1": 1e-9, "C2": 1e-9, "L": 1e-6}), 4.0)
    c1, c2 = 1e-9, 3.3e-9
    assert_allclose(
        CB.required_gain(COLPITTS, {"C1": c1, "C2": c2, "L": 1e-6}), (c1 + c2) ** 2 / (c1 * c2)
    )


def test_characteristic_cubic_reaches_the_stated_gain_in_the_high_q_limit():
    # ideal common-base Colpitts over ground, base grounded, R from collector to ground
    # beside L, C1 collector–emitter, C2 emitter–ground, the collector current
    # gm·v_be = −gm·v_e: node equations at collector and emitter give (derived here)
    # s³·L·C1·C2 + s²·L·G·(C1 + C2) + s·(C1 + C2 + L·G·gm) + gm = 0. At the gm that puts
    # a root pair on the imaginary axis, gm·R tends to (C1 + C2)²/(C1·C2) as R grows.
    c1, c2, l_ = 1e-9, 2.2e-9, 1e-6
    stated = (c1 + c2) ** 2 / (c1 * c2)
    for r, tol in ((1e3, 0.05), (1e4, 5e-4), (1e5, 5e-6)):
        g = 1 / r

        def crossing(gm, g=g):
            roots = np.roots([l_ * c1 * c2, l_ * g * (c1 + c2), c1 + c2 + l_ * g * gm, gm])
            return roots[np.abs(roots.imag) > 0].real.max()

        lo, hi = 1e-9, 10.0  # bisection on the gm where the complex pair crosses
        for _ in range(200):
            mid = math.sqrt(lo * hi)
            lo, hi = (mid, hi) if crossing(mid) < 0 else (lo, mid)
        assert abs(lo * r / stated - 1) < tol


def _ground_referenced_loop_gain(values, params, f, clapp):
    """Return ratio of the common-base stage from nodes over ground (base and supply at
    AC ground), each element stamped here; the collector current gm·v_be flows from the
    collector into the emitter; a unit test source in its place."""
    ss = small_signal(params)
    s = 1j * TWO_PI * f
    names = ["c", "e", "t", "m"]  # collector, emitter, tank top, C3–L joint
    k = {n: i for i, n in enumerate(names)}
    y = np.zeros((4, 4), dtype=complex)

    def put(a, b, adm):
        for n in (a, b):
            if n is not None:
                y[k[n], k[n]] += adm
        if a is not None and b is not None:
            y[k[a], k[b]] -= adm
            y[k[b], k[a]] -= adm

    r_l = TWO_PI * f * values["L"] / params.inductor_q
    put("c", None, 1 / params.r_c + s * ss.c_mu)  # load to the supply, C_mu to the base
    put("e", None, 1 / params.r_e + 1 / ss.r_pi + s * ss.c_pi)  # R_E; r_pi, C_pi to the base
    put("c", "e", 1 / ss.r_o)
    put("c", "t", s * params.c_block)
    put("t", "e", s * values["C1"])
    put("e", None, s * values["C2"])
    if clapp:
        put("t", None, 1 / params.r_bleed)
        put("t", "m", s * values["C3"])
        put("m", None, 1 / (r_l + s * values["L"]))
    else:
        put("m", None, 1.0)  # unused node
        put("t", None, 1 / (r_l + s * values["L"]))
    u = np.zeros(4, dtype=complex)
    u[k["c"]] = 1.0  # the test source: 1 A out of the collector, into the emitter
    u[k["e"]] = -1.0
    x = np.linalg.solve(y, u)
    return -ss.gm * (0.0 - x[k["e"]])


@pytest.mark.parametrize("topology", [COLPITTS, CLAPP], ids=["colpitts", "clapp"])
def test_emitter_referenced_network_equals_a_ground_referenced_one(topology):
    values = {"C1": 100e-12, "C2": 220e-12, "C3": 33e-12, "L": 0.47e-6}
    values = {p: values[p] for p in topology.positions}
    for f in (12e6, 27e6, 41e6):
        params = AmplifierParams(
            stage="common-base",
            vcc=12.0,
            r_c=1500.0,
            r_b1=33e3,
            r_b2=10e3,
            r_e=1000.0,
            c_block=1e-9,
            c_base=10e-9,
            inductor_q=90.0,
            q_frequency=f,
        )
        ours = loop_gain(topology, values, 0.0, params, f)
        ref = _ground_referenced_loop_gain(values, params, f, topology is CLAPP)
        assert_allclose(ours, ref, rtol=1e-9)


AMP = {
    "stage": "common-base",
    "supply": "9 V",
    "r_load": "2k2",
    "r_bias_top": "47k",
    "r_bias_bottom": "10k",
    "r_emitter": "2k2",
    "c_coupling": "10n",
    "c_base": "100n",
}


def test_spec_takes_the_stage_and_its_base_bypass_and_refuses_an_emitter_bypass():
    p = AmplifierSpec.model_validate(AMP).to_params()
    assert p.stage == "common-base" and p.kind == "bjt" and p.c_base == pytest.approx(1e-7)
    with pytest.raises(SpecError, match="no emitter bypass"):
        AmplifierSpec.model_validate({**AMP, "c_emitter": "10n"}).to_params()
    with pytest.raises(ValueError, match="expected a collector load"):
        AmplifierSpec.model_validate({k: v for k, v in AMP.items() if k != "r_load"})


def test_cautions_name_a_missing_base_bypass_and_a_collector_fed_past_its_load():
    p = CB.typical_params()
    assert CB.cautions(COLPITTS, p) == []
    bare = AmplifierParams(**{**p.__dict__, "c_block": None, "c_base": None})
    text = " ".join(CB.cautions(COLPITTS, bare))
    assert "base bypass" in text and "past the collector load" in text
    with pytest.raises(ValueError, match="c_base"):
        CB.netlist(COLPITTS, {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}, 0.0, 0.0, bare)
