"""Each stage's slow bias network (picker.circuit.stages.slow, Stage.slow_network) against
hand analysis of its DC circuit.

References, computed here from the part values (not from the model's bias loop):

* DC: a rise ΔI of the collector current moves the control voltage by
  ΔV_BE = −(R_th/β + R_E·(1 + 1/β))·ΔI (R_th = R_B1 ∥ R_B2 carrying the base current,
  R_E the emitter current; Sedra & Smith, *Microelectronic Circuits*, bias stability of the
  four-resistor bias network). Every stage with a divider and R_E has this loop, whatever
  its layout at signal frequency.
* Time constant: a capacitor far larger than every other one, charged through one
  resistance R, gives the network's slowest natural frequency −1/(R·C) (a single-pole RC
  network; any circuits text, e.g. Hayt & Kemmerly, *Engineering Circuit Analysis*,
  source-free RC circuit). The common-base base bypass charges through R_th; the emitter
  follower's blocking capacitor (which holds the base through a Colpitts's inductor)
  through R_th; a common-gate stage's gate bypass through its gate divider (a fet draws
  no gate current, but the divider is still the bypass's only DC path).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker.circuit.envelope import slow_network
from picker.circuit.network import Network
from picker.circuit.stages import get_stage
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

TANKS = {
    "colpitts": (COLPITTS, {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}),
    "clapp": (CLAPP, {"C1": 1e-9, "C2": 2.2e-9, "C3": 220e-12, "L": 68e-6}),
}


def _network(stage_name, tank, **changes):
    stage = get_stage(stage_name)
    topology, values = TANKS[tank]
    params = replace(stage.typical_params(), **changes)
    net = Network.build(topology, values, 0.0, params)
    loop = stage.bias_loop(params, net.ss)
    w = np.array([2 * math.pi * float(topology.frequency(values, 0.0))])
    return params, slow_network(net, np.arange(net.size), loop, w)


def _reduced(slow):
    p = slow.proj
    cap = np.einsum("ia,nij,jb->nab", p, slow.cap, p)[0]
    cond = np.einsum("ia,nij,jb->nab", p, slow.cond, p)[0]
    return cap, cond, p.T @ slow.inj, p.T @ slow.sense


@pytest.mark.parametrize("tank", sorted(TANKS))
@pytest.mark.parametrize(
    "stage_name",
    ["common-emitter", "common-base", "common-collector", "common-source", "common-gate"],
)
def test_dc_shift_of_the_control_voltage_is_the_bias_stability_loop(stage_name, tank):
    params, slow = _network(stage_name, tank)
    _, cond, inj, sense = _reduced(slow)
    dv = sense @ np.linalg.solve(cond, inj)  # per ampere of collector current
    beta = math.inf if params.kind == "fet" else params.effective_device().bf  # no gate current
    r_th = params.r_b1 * params.r_b2 / (params.r_b1 + params.r_b2)
    expected = -(r_th / beta + params.r_e * (1 + 1 / beta))  # Sedra & Smith, bias stability
    assert_allclose(dv, expected, rtol=1e-6)


@pytest.mark.parametrize(
    ("stage_name", "part", "tank"),
    [
        ("common-base", "c_base", "colpitts"),
        ("common-base", "c_base", "clapp"),
        # a Clapp's C3 blocks the inductor's DC path: there C_B drains through the bleed
        ("common-collector", "c_block", "colpitts"),
        # no gate current, but the gate's node still returns to ground through its divider
        ("common-gate", "c_base", "colpitts"),
    ],
)
def test_a_large_bias_capacitor_sets_the_slowest_time_constant_through_r_th(stage_name, part, tank):
    c_big = 100e-6
    params, slow = _network(stage_name, tank, **{part: c_big})
    cap, cond, _, _ = _reduced(slow)
    rates = np.linalg.eigvals(-np.linalg.solve(cap, cond)).real
    r_th = params.r_b1 * params.r_b2 / (params.r_b1 + params.r_b2)
    assert_allclose(rates.max(), -1.0 / (r_th * c_big), rtol=0.02)  # single-pole RC
