"""The fet's own bias: the square-law self-bias against a worked textbook example, and the
bias point of every fet stage with a device card against ngspice's operating point (.op).

Outside references: Boylestad & Nashelsky, *Electronic Devices and Circuit Theory*
(JFET self-bias configuration, the worked example with IDSS = 8 mA, V_P = −6 V,
R_S = 1 kΩ, R_D = 3.3 kΩ, V_DD = 20 V; numbers from memory: I_DQ ≈ 2.6 mA,
V_GSQ ≈ −2.6 V, V_DS ≈ 8.82 V, the book reading them off its graph to two figures);
Shockley's square law solved by hand here (the quadratic formula, independent of the
code); ngspice's DC solution of the stage's own netlist lines (issue 12's 1 % target).
"""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from ngspice_op import need_ngspice, ngspice_op
from numpy.testing import assert_allclose

from picker.circuit.fet import GENERIC_NJFET, GENERIC_NMOS, FetCard, square_law_bias
from picker.circuit.netlist import write_netlist
from picker.circuit.ngspice import simulate
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import STAGES, Stage
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS


def test_jfet_self_bias_matches_boylestad_nashelsky_worked_example():
    # Boylestad & Nashelsky, JFET self-bias example (from memory): IDSS = 8 mA, V_P = −6 V,
    # R_S = 1 kΩ, R_D = 3.3 kΩ, V_DD = 20 V → I_DQ ≈ 2.6 mA, V_GSQ ≈ −2.6 V, V_DS ≈ 8.8 V
    card = FetCard(kind="njf", vto=-6.0, k=8e-3 / 36.0)
    b = square_law_bias(card, v_g=0.0, r_s=1000.0, v_dd=20.0, r_d=3300.0)
    assert abs(b.i_d - 2.6e-3) < 0.05e-3
    assert abs(b.vgs - -2.6) < 0.05
    assert abs(b.vds - 8.82) < 0.1
    # the same by hand: I_D = IDSS(1 + I_D·R_S/V_P)² in mA and kΩ is
    # (8/36)·x² − (8/3 + 1)·x + 8 = 0; the root with |V_GS| < |V_P| is the smaller one
    a_, b_, c_ = 8 / 36, -(8 / 3 + 1), 8.0
    roots = sorted(((-b_ - s * math.sqrt(b_ * b_ - 4 * a_ * c_)) / (2 * a_)) for s in (1, -1))
    assert roots[1] * 1.0 > 6.0  # the other root: V_GS beyond pinch-off
    assert_allclose(b.i_d, roots[0] * 1e-3, rtol=1e-12)


def test_mosfet_divider_bias_solves_the_square_law_by_hand():
    # V_GS = V_G − I_D·R_S, I_D = (KP/2)(V_GS − V_T)² (Sedra & Smith, MOSFET DC analysis):
    # V_G = 4 V, R_S = 1 kΩ, KP/2 = 1 mA/V², V_T = 1 V: u² + u − 3 = 0 with u = V_GS − V_T
    # in volts (k·R_S = 1), u = (−1 + √13)/2
    card = FetCard(kind="nmos", vto=1.0, k=1e-3)
    b = square_law_bias(card, v_g=4.0, r_s=1000.0, v_dd=12.0, r_d=2000.0)
    u = (-1 + math.sqrt(13)) / 2
    assert_allclose(b.u, u, rtol=1e-12)
    assert_allclose(b.i_d, 1e-3 * u * u, rtol=1e-12)
    assert_allclose(b.vd, 12.0 - 2000.0 * b.i_d, rtol=1e-12)
    assert not b.triode


def test_cut_off_gate_is_refused():
    with pytest.raises(ValueError, match="cut off"):
        square_law_bias(GENERIC_NMOS, v_g=1.5, r_s=100.0, v_dd=9.0, r_d=1000.0)


# ------------------------------------------------------------------ against ngspice .op

CARD_DESIGNS = []
for _name in ("common-source", "common-drain", "common-gate"):
    _stage = STAGES[_name]
    _typ = _stage.typical_params()
    if _typ.fet is None:  # the common-source's typical is the typed-small-signal form
        _typ = replace(_typ, fet=GENERIC_NMOS, overdrive_voltage=None, i_bias=None)
    jfet = replace(_typ, fet=replace(GENERIC_NJFET, lam=0.02), r_b1=None, r_b2=1e6)
    if _name == "common-gate":
        jfet = replace(jfet, r_b2=None, c_base=None)  # gate tied to ground
    if _name == "common-source":
        jfet = replace(jfet, r_e=330.0)
    CARD_DESIGNS += [
        pytest.param(_stage, _typ, id=f"{_name}-{_typ.fet.kind}"),
        pytest.param(_stage, jfet, id=f"{_name}-njf-self-bias"),
    ]
TANKS = [
    pytest.param(COLPITTS, {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}, id="colpitts"),
    pytest.param(CLAPP, {"C1": 1e-9, "C2": 2.2e-9, "C3": 220e-12, "L": 22e-6}, id="clapp"),
]


def _op(lines: list[str], models: list[str], device: str, nodes: list[str]) -> dict[str, float]:
    """The fet's drain current and the node voltages from ngspice's operating point."""
    prints = [f"v({n})" for n in nodes]
    return ngspice_op(lines, models, lets={"idq": f"@{device}[id]"}, prints=prints)


@pytest.mark.ngspice
@pytest.mark.parametrize(("stage", "params"), CARD_DESIGNS)
@pytest.mark.parametrize(("topology", "values"), TANKS)
def test_fet_bias_point_matches_ngspice_operating_point(stage: Stage, params, topology, values):
    need_ngspice()
    bias = stage.bias(params)
    assert bias is not None
    part = stage.netlist(topology, values, 0.0, 1.0, params)
    element = next(w.split()[0] for w in part.elements if w[:2] in ("J1", "M1"))
    words = next(w.split() for w in part.elements if w.startswith(element))
    gate, source = words[2], words[3]
    nodes = [n for n in (gate, source) if n != "0"]
    op = _op(part.elements, part.models, element.lower(), nodes)
    assert abs(op["idq"] / bias.ic - 1) < 0.01
    v_s = op.get(f"v({source})", 0.0)
    v_g = op.get(f"v({gate})", 0.0)
    assert abs((v_g - v_s) / bias.vbe - 1) < 0.01  # V_GS
    assert abs(v_s / bias.ve - 1) < 0.01


@pytest.mark.ngspice
@pytest.mark.parametrize(("stage", "params"), CARD_DESIGNS)
@pytest.mark.parametrize(("topology", "values"), TANKS)
def test_fet_card_netlist_starts_as_the_model_says_at_its_frequency(
    stage: Stage, params, topology, values
):
    # ngspice transient of the stage's own netlist with the device card: a design the
    # model starts (margin above 1.2) oscillates within 2 % of the model's frequency (as
    # tests/test_stage_conformance.py); one it does not start (margin below 0.8) stays quiet (ngspice's
    # residue of the start-up kick, not a frequency: simulate's flag reads a slow drift as one)
    need_ngspice()
    model = loaded_response(topology, values, 3e-12, params)
    margin = float(model.margin)
    assert margin > 1.2 or margin < 0.8  # the designs are chosen away from the edge
    sim = simulate(write_netlist(topology, values, 3e-12, params, title=stage.name))
    assert sim.warnings == ()
    if margin > 1:
        assert sim.oscillating
        assert abs(sim.frequency_hz / float(model.f_hz) - 1) < 0.02
    else:  # the kick (0.2·I_D for half a period) dies away: microvolts left of it
        assert sim.amplitude_v < 1e-3
