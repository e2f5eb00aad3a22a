"""The transient plan's slowest bias time constant: a lone gate resistor, and C_B.

A self-biased JFET's gate sits at 0 V through one resistor R_G to ground; its DC node
holds the tank's capacitance, so it settles (and, after a squegging burst, recovers)
over R_G·(C1 + C2) of a Colpitts tank (an RC time constant read off the schematic:
common practice, no source). The reference is that product, computed here from the
part values (the drain joined straight to the tank top, no C_B). Where C_B sits between
the collector (drain) and a tank whose coil passes DC to the base (gate), it belongs to
that node too; the reference there is the slowest eigenmode of the node's RC network.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.linalg

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
    params = _jfet_params(r_b1=None, r_b2=1e6, c_e=None, c_block=None)
    assert bias_time_constant(topo, VALUES, params) == pytest.approx(1e6 * (1e-9 + 2.2e-9))


def test_divider_uses_its_thevenin_resistance():
    topo = get_topology("colpitts")
    params = _jfet_params(r_b1=300e3, r_b2=600e3, c_e=None, c_block=None)
    r_th = 300e3 * 600e3 / 900e3
    assert bias_time_constant(topo, VALUES, params) == pytest.approx(r_th * 3.2e-9)


def test_hartley_gate_node_holds_the_coupling_capacitor():
    # A common-source series-Hartley board: the coils join the tank top, the tap and the
    # gate into one DC node, held by the tap bypass (CTAP, 100 nF in the netlist) and by
    # C_B, whose other end is the drain, AC-grounded through R_C (a few hundred ohms
    # against the divider's tens of kilohms). The drain's DC step at start-up reaches the
    # gate through C_B and decays with R_th·(C_tap + C_B) (an RC product read off the
    # schematic: common practice, no source). Measured in ngspice on the series Hartley
    # set's hs021 (these part values): its carrier still fell by 0.44 % between the two
    # halves of the record's tail, and settled 1.4 % below the record when run four times
    # as long (tests/validation/README.md).
    topo = get_topology("hartley-series")
    values = {"L1": 585e-6, "L2": 102e-6, "C": 4.52e-9, "CS": 2.88e-9}
    base = get_stage("common-source").typical_params()
    params = dataclasses.replace(
        base, r_b1=26.4e3, r_b2=25.5e3, r_c=199.0, c_block=861e-9, r_e=374.0, c_e=110e-9
    )
    r_th = 26.4e3 * 25.5e3 / (26.4e3 + 25.5e3)
    got = bias_time_constant(topo, values, params)
    assert got >= 0.9 * r_th * (100e-9 + 861e-9)
    # and it is the slowest natural time constant of that RC network: the gate node (the
    # tap bypass and R_th to ground) joined by C_B to the drain (R_C to the supply, an AC
    # ground), from the eigenvalues of its nodal equations C·dv/dt = −G·v (scipy.linalg;
    # the source's R_E·C_E is a separate node and far faster). The open-circuit
    # time-constant sum is the sum of the network's time constants, so it exceeds the
    # slowest by the fast one, R_C·(C_B in series with C_tap), here 0.1 %.
    assert got == pytest.approx(_slowest_tau(r_th, 100e-9, 861e-9, 199.0), rel=2e-3)


def _slowest_tau(r_th: float, c_end: float, c_b: float, r_dc: float) -> float:
    """1 / the smallest eigenvalue of C⁻¹G for nodes (input, output): C_end and R_th from
    the input to ground, C_B between the two, R_dc from the output to ground."""
    cap = np.array([[c_end + c_b, -c_b], [-c_b, c_b]])
    cond = np.diag([1.0 / r_th, 1.0 / r_dc])
    rates = scipy.linalg.eigvals(cond, cap).real
    return float(1.0 / rates.min())


def _choke_loaded():
    """The common-emitter stage with a divider of 47k/10k, a 100 µH choke of 2 Ω, C_B of
    10 nF and R_E·C_E = 1 µs (an invented board)."""
    return dataclasses.replace(
        get_stage("common-emitter").typical_params(),
        r_b1=47e3,
        r_b2=10e3,
        r_c=None,
        l_choke=100e-6,
        r_choke=2.0,
        c_block=10e-9,
        r_e=1e3,
        c_e=1e-9,
    )


def test_colpitts_collector_choke_counts_the_coupling_capacitor():
    # A common-emitter Colpitts with a choke load: C_B joins the collector (the choke's
    # winding resistance to the supply) to the tank top, the inductor joins the top to
    # the base, so the base node's slow time constant takes C_B with R_th + R_choke.
    topo = get_topology("colpitts")
    params = _choke_loaded()
    r_th = 47e3 * 10e3 / 57e3
    want = _slowest_tau(r_th, 1e-9 + 2.2e-9, 10e-9, 2.0)
    assert bias_time_constant(topo, VALUES, params) == pytest.approx(want, rel=2e-3)


def test_clapp_bridge_keeps_the_coupling_capacitor_off_the_base():
    # A Clapp's C3 blocks DC between the tank top and the base: C_B does not reach the
    # base node, whose time constant stays R_th·(C1 + C2).
    topo = get_topology("clapp")
    values = {**VALUES, "C3": 100e-12}
    params = _choke_loaded()
    r_th = 47e3 * 10e3 / 57e3
    assert bias_time_constant(topo, values, params) == pytest.approx(r_th * 3.2e-9)
