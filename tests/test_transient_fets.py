"""The fets in the orbit's netlist reader (picker.circuit.transient_devices) against ngspice.

Outside reference: Debian's ngspice, run on the same netlists: its operating point
(``op``) and its transient (``.tran ... uic`` from the same initial node voltages, a
1 ns step ceiling) of small JFET and MOSFET circuits of our own, n- and p-channel,
with the gate junction (JFET) or the bulk-drain junction (MOSFET, the drain pulled
below the source) forward-biased for part of the run; and the committed ngspice answers
of overdriven designs of the fet validation sets (``tests/validation/stage_common_*.json``,
measured by picker.circuit.waveform), where the describing function is off by up to 18 %.
"""

from __future__ import annotations

import numpy as np
import pytest
from ngspice_op import need_ngspice, ngspice_op
from pinned import pinned

from picker.circuit.network import Network
from picker.circuit.ngspice import transient
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.transient import build_circuit, dc_point, integrate
from picker.circuit.transient_devices import fet_law, spice_value

VT = 0.025852  # kT/q at 27 °C, ngspice's default temperature

JFET = [
    "VDD vdd 0 DC {vdd}",
    "RD vdd d 1000",
    "J1 d g s JX",
    "RS s 0 200",
    "CS s 0 10n",
    "CD d 0 1n",
    "CG g 0 1n",
    "RG g 0 100k",
    "RGD g vdd 2meg",
]
MOS = [
    "VDD vdd 0 DC {vdd}",
    "RD vdd d 2000",
    "M1 d g s s MX W=20u L=10u",
    "RS s 0 100",
    "CD d 0 100p",
    "CG g 0 1n",
    "RG g 0 10k",
    "RGD g vdd 30k",
]
# (lines, card, supply, initial node voltages for the transient): the JFET's gate starts
# forward-biased, the MOSFET's drain below its source (reverse mode, bulk diode on)
CASES = {
    "njf": (JFET, ".model JX NJF (VTO=-2 BETA=1e-3 LAMBDA=0.02 IS=1e-14)", 10.0,
            {"g": 0.6, "s": 0.0, "d": 10.0}),
    "pjf": (JFET, ".model JX PJF (VTO=-2 BETA=1e-3 LAMBDA=0.02 IS=1e-14)", -10.0,
            {"g": -0.6, "s": 0.0, "d": -10.0}),
    "nmos": (MOS, ".model MX NMOS (LEVEL=1 VTO=1.5 KP=1e-3 LAMBDA=0.02 GAMMA=0)", 10.0,
             {"g": 5.0, "s": 0.0, "d": -0.4}),
    "pmos": (MOS, ".model MX PMOS (LEVEL=1 VTO=-1.5 KP=1e-3 LAMBDA=0.02 GAMMA=0)", -10.0,
             {"g": -5.0, "s": 0.0, "d": 0.4}),
}  # fmt: skip
NODES = ("d", "g", "s")


def _lines(name: str) -> tuple[list[str], str, float, dict[str, float]]:
    lines, card, vdd, ic = CASES[name]
    return [ln.format(vdd=vdd) for ln in lines], card, vdd, ic


def _numeric(lines: list[str]) -> list[str]:
    """The lines with SPICE suffixes written out (the reader takes plain numbers)."""
    out = []
    for ln in lines:
        w = ln.split()
        if w[0][0] in "RC":
            w[3] = repr(spice_value(w[3]))
        out.append(" ".join(w))
    return out


def _index(lines: list[str], card: str, node: str) -> int:
    """The state index of ``node`` (the reader's tank-top index names it)."""
    return int(build_circuit([_numeric(lines)], [card], node, VT).top[0])


def _ngspice_op(lines: list[str], card: str) -> dict[str, float]:
    op = ngspice_op(lines, [card], prints=[f"v({n})" for n in NODES])
    return {n: op[f"v({n})"] for n in NODES}


@pytest.mark.ngspice
@pytest.mark.parametrize("name", sorted(CASES))
def test_operating_point_matches_ngspice(name):
    need_ngspice()
    lines, card, _, _ = _lines(name)
    circ = build_circuit([_numeric(lines)], [card], "d", VT)
    x, ok = dc_point(circ)
    assert ok.all()
    ref = _ngspice_op(lines, card)
    for node in NODES:
        # ngspice's op converges to its reltol 1e-3 of the step and vntol 1 µV
        assert x[0, _index(lines, card, node)] == pytest.approx(ref[node], rel=1e-4, abs=1e-5)


@pytest.mark.ngspice
@pytest.mark.parametrize("name", sorted(CASES))
def test_transient_from_a_forward_biased_junction_matches_ngspice(name):
    need_ngspice()
    lines, card, _, ic = _lines(name)
    t_end = 2e-6
    circ = build_circuit([_numeric(lines)], [card], "d", VT)
    x0 = np.zeros((1, circ.size))
    for node, v in ic.items():
        x0[0, _index(lines, card, node)] = v
    run = integrate(circ, x0, np.array([t_end]), 4000)
    assert run.ok.all()
    t_ours = np.linspace(0.0, t_end, 4001)
    for node in NODES:
        text = "\n".join(
            ["tran", *lines, card]
            + [".ic " + " ".join(f"v({k})={v}" for k, v in ic.items())]
            + [f".tran 1n {t_end} 0 1n uic", ".end"]
        )
        ref = transient(text, node=node)
        ours = np.interp(ref.time, t_ours, run.x[:, 0, _index(lines, card, node)])
        # after the first 20 ns (a node without capacitance, the source, jumps at t = 0
        # to where the circuit holds it; the integrators start it differently), second-
        # order integrators at 0.5 ns (ours) and 1 ns (ngspice's ceiling) steps on time
        # constants of 0.1-10 µs: a few mV on swings of volts
        late = ref.time > 20e-9
        assert np.max(np.abs(ours - ref.v)[late]) < 5e-3 * max(1.0, float(np.max(np.abs(ref.v))))


def test_card_parameters_reach_the_law():
    # the MOSFET's k is KP·(W/L)/2 (ngspice's level-1 Beta = KP·W/L, I_D = Beta/2·u²)
    law = fet_law(
        ".model MX NMOS (LEVEL=1 VTO=1.5 KP=1e-3 GAMMA=0)", "M1 d g s s MX W=20u L=10u".split()
    )
    assert law.k[0] == pytest.approx(1e-3)
    assert law.vto[0] == 1.5
    p = fet_law(".model MX PMOS (LEVEL=1 VTO=-1.5 KP=1e-3)", "M1 d g s s MX W=10u L=10u".split())
    assert p.vto[0] == 1.5 and p.sign[0] == -1.0  # the n-channel threshold of the mirror
    with pytest.raises(ValueError, match="bulk"):
        fet_law(".model MX NMOS (LEVEL=1 VTO=1)", "M1 d g s 0 MX".split())
    with pytest.raises(ValueError, match="GAMMA"):
        fet_law(".model MX NMOS (LEVEL=1 VTO=1 GAMMA=0.4)", "M1 d g s s MX".split())


OVERDRIVEN = {
    # the fast model's frequency error before the orbit, from the table of the set (the
    # designs pinned in tests/validation/pinned.json)
    "common_source": ["cs005", "cs013", "cs019"],  # -16 %, +6.8 %, +17 %
    "common_drain": ["cd001", "cd009"],  # -2.5 %, +2.6 %; amplitude +39 %, -31 %
    "common_gate": ["cg015", "cg021", "cg022"],  # -17 %, -18 %, -22 %
}


@pytest.mark.slow
@pytest.mark.parametrize("stage", sorted(OVERDRIVEN))
def test_orbits_of_overdriven_fet_designs_match_ngspice(stage):
    pick = [pinned(i) for i in OVERDRIVEN[stage]]
    orbits = board_orbits([Network.build(d.topo, d.values, d.stray, d.params) for d, _ in pick])
    for (d, ref), orb in zip(pick, orbits, strict=True):
        o = orb[0]
        assert ref["state"] == "steady" and o is not None, d.id
        # ngspice's frequency from 20 periods of a 60-steps-a-period trapezoidal run
        # (corrected for its warping as for a sine); on these distorted waveforms the
        # record is itself off by up to 0.8 % (cg021: 38875 Hz recorded, 38558 Hz from
        # the same netlist at a 4× finer step; the orbit gives 38558 Hz), so 1 %, against
        # the describing function's 16-22 % misses
        assert o.f_hz == pytest.approx(ref["f_hz"], rel=1e-2), d.id
        # ngspice reads the peak-to-peak over the run's last tenth
        assert o.amplitude_v == pytest.approx(ref["amplitude_v"], rel=0.08), d.id
        assert not o.bursting, d.id
