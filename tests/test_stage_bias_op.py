"""The bias point of every registered bjt stage against ngspice's operating point (.op).

For each stage's typical design (:meth:`Stage.typical_params`), the stage's own netlist
lines (tank, bias network, device card) are run through ngspice's ``op`` analysis; the
collector and base currents of Q1 and the base voltage must match the stage's bias
solution (:meth:`Stage.bias`) to 1 % (issue 12's target). The outside reference is
ngspice's DC solution of the same circuit.
"""

from __future__ import annotations

import pytest
from ngspice_op import need_ngspice, ngspice_op

from picker.circuit.polarity import mirror_netlist
from picker.circuit.stages import STAGES, Stage
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

BJT_STAGES = [pytest.param(s, id=s.name) for s in STAGES.values() if s.device == "bjt"]
TANKS = [
    pytest.param(COLPITTS, {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}, id="colpitts"),
    pytest.param(CLAPP, {"C1": 1e-9, "C2": 2.2e-9, "C3": 220e-12, "L": 22e-6}, id="clapp"),
]


def _op(lines: list[str], models: list[str], node: str) -> dict[str, float]:
    """Q1's collector and base currents and v(node) from ngspice's operating point."""
    probes = {"icq": "@q1[ic]", "ibq": "@q1[ib]"}
    return ngspice_op(lines, models, lets=probes, prints=[f"v({node})"], title="bias point")


@pytest.mark.ngspice
@pytest.mark.parametrize("stage", BJT_STAGES)
@pytest.mark.parametrize(("topology", "values"), TANKS)
def test_bias_point_matches_ngspice_operating_point(stage: Stage, topology, values):
    need_ngspice()
    params = stage.typical_params()
    bias = stage.bias(params)
    assert bias is not None
    part = stage.netlist(topology, values, 0.0, 1.0, params)
    op = _op(part.elements, part.models, stage.input)
    assert abs(op["icq"] / bias.ic - 1) < 0.01
    assert abs(op["ibq"] / bias.ib - 1) < 0.01
    assert abs(op[f"v({stage.input})"] / bias.vb - 1) < 0.01


VARIANTS = [
    pytest.param(s, name, id=f"{s.name}-{name}")
    for s in STAGES.values()
    if s.device == "bjt"
    for name in s.typical_variants()
]


@pytest.mark.ngspice
@pytest.mark.parametrize(("stage", "variant"), VARIANTS)
def test_bias_network_variants_match_ngspice_operating_point(stage: Stage, variant: str):
    # the bias networks of picker.circuit.bias (a base resistor, collector feedback, the
    # split emitter resistor) against ngspice's DC solution of the stage's own netlist
    need_ngspice()
    params = stage.typical_variants()[variant]
    bias = stage.bias(params)
    assert bias is not None
    part = stage.netlist(COLPITTS, {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}, 0.0, 1.0, params)
    sign = 1.0
    if params.p_type:  # the PNP's netlist is the mirror image: every DC value negated
        part, sign = mirror_netlist(part), -1.0
    op = _op(part.elements, part.models, stage.input)
    assert abs(op["icq"] / (sign * bias.ic) - 1) < 0.01
    assert abs(op["ibq"] / (sign * bias.ib) - 1) < 0.01
    assert abs(op[f"v({stage.input})"] / (sign * bias.vb) - 1) < 0.01
