"""The transient plan's slowest bias time constant counts a lone gate resistor.

A self-biased JFET's gate sits at 0 V through one resistor R_G to ground; its DC node
holds the tank's capacitance, so it settles (and, after a squegging burst, recovers)
over R_G·(C1 + C2) of a Colpitts tank (an RC time constant read off the schematic:
common practice, no source). The reference is that product, computed here from the
part values.
"""

from __future__ import annotations

import dataclasses

import pytest

from picker.circuit.fet import GENERIC_NJFET
from picker.circuit.netlist import bias_time_constant
from picker.circuit.stages import get_stage
from picker.tank import get_topology

VALUES = {"C1": 1e-9, "C2": 2.2e-9, "L": 10e-6}


def _jfet_params(**changes: float | None):
    base = get_stage("common-source").typical_params()
    return dataclasses.replace(
        base, fet=GENERIC_NJFET, i_bias=None, overdrive_voltage=None, **changes
    )


def test_lone_gate_resistor_with_the_tank_capacitance():
    topo = get_topology("colpitts")
    params = _jfet_params(r_b1=None, r_b2=1e6, c_e=None)
    assert bias_time_constant(topo, VALUES, params) == pytest.approx(1e6 * (1e-9 + 2.2e-9))


def test_divider_uses_its_thevenin_resistance():
    topo = get_topology("colpitts")
    params = _jfet_params(r_b1=300e3, r_b2=600e3, c_e=None)
    r_th = 300e3 * 600e3 / 900e3
    assert bias_time_constant(topo, VALUES, params) == pytest.approx(r_th * 3.2e-9)
