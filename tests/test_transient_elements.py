"""The orbit reader's coupled inductors and supply terminals (picker.circuit.transient).

:func:`picker.circuit.transient.build_circuit` reads a ``K`` line (two inductors with
mutual inductance M = k·√(L1·L2), as SPICE's K element) and a transistor terminal on the
supply's node (the emitter follower's collector). Outside references: the series-aiding
and series-opposing inductance L1 + L2 ± 2M (Hayt & Kemmerly, *Engineering Circuit
Analysis*, magnetically coupled circuits), scipy's generalised eigenvalues, ngspice's
transient and operating point of the same small netlists, and the committed ngspice
answers of saturated validation designs of the follower and the Hartley tank (``tests/validation/``).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
from ngspice_op import need_ngspice, ngspice_op
from pinned import pinned

from picker.circuit.device import thermal_voltage
from picker.circuit.network import Network
from picker.circuit.ngspice import transient
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.steady import steady_state
from picker.circuit.transient import build_circuit, dc_point, device, integrate, solve_each
from picker.circuit.validation import load_reference

CARD = ".model QN NPN (IS=1e-14 BF=150 VAF=100 TF=3e-10 CJE=5e-12 CJC=3e-12 BR=1)"
VT = thermal_voltage(27.0)  # ngspice's default temperature
DATA = Path(__file__).parent / "validation"


@pytest.mark.parametrize(("k", "sign"), [(0.0, 1), (0.5, 1), (0.95, 1), (0.5, -1), (0.95, -1)])
def test_coupled_coils_in_series_resonate_with_l1_plus_l2_plus_or_minus_2m(k, sign):
    # Hayt & Kemmerly, magnetically coupled circuits: two coils in series aiding (both
    # dotted ends toward the same current) sum to L1 + L2 + 2M, opposing to L1 + L2 − 2M;
    # SPICE dots each inductor's first node
    l1, l2, c = 10e-6, 3e-6, 1e-9
    second = "L2 m 0" if sign > 0 else "L2 0 m"
    lines = ["VCC vcc 0 DC 0", f"C1 t 0 {c}", f"L1 t m {l1}", f"{second} {l2}"]
    if k:
        lines.append(f"K12 L1 L2 {k}")
    circ = build_circuit([lines], [CARD], "t", VT)
    # lossless: the pencil (G + sC) has a pair s = ±jω on the imaginary axis
    s = scipy.linalg.eigvals(-circ.g[0], circ.c[0])
    w = np.abs(s[np.isfinite(s)].imag).max()
    l_eff = l1 + l2 + sign * 2 * k * math.sqrt(l1 * l2)
    assert w == pytest.approx(1 / math.sqrt(l_eff * c), rel=1e-9)


def test_coupling_to_a_missing_inductor_is_refused():
    lines = ["VCC vcc 0 DC 0", "C1 t 0 1e-9", "L1 t 0 1e-6", "K12 L1 L9 0.5"]
    with pytest.raises(ValueError, match="K12"):
        build_circuit([lines], [CARD], "t", VT)


@pytest.mark.ngspice
def test_coupled_coil_ring_down_matches_ngspice():
    # a charged tank L1-C1 coupled (k = 0.7) to a loaded secondary L2-C2-R2: the energy
    # beats between the two and decays; 1 V on C1 at t = 0, every current zero
    need_ngspice()
    elems = [
        "VCC vcc 0 DC 0",
        "C1 t 0 1e-9",
        "L1 t 0 10e-6",
        "L2 s 0 4e-6",
        "C2 s 0 2.2e-9",
        "R2 s 0 300",
        "K12 L1 L2 0.7",
    ]
    t_end = 5e-6  # about 8 periods of the primary
    text = "\n".join(
        ["coupled ring-down", *elems, ".ic v(t)=1 v(s)=0", f".tran 0.5n {t_end} 0 0.5n uic", ".end"]
    )
    sim = transient(text, node="t")
    circ = build_circuit([elems], [CARD], "t", VT)
    x0 = np.zeros((1, circ.size))
    x0[0, circ.top[0]] = 1.0
    steps = 4000
    run = integrate(circ, x0, np.array([t_end]), steps)
    assert run.ok.all()
    ours = np.interp(sim.time, np.linspace(0, t_end, steps + 1), run.x[:, 0, circ.top[0]])
    # BDF2's phase error at 1.25 ns steps is about 1.5 mV here (a quarter of it at half
    # the step); the same circuit uncoupled rings 1 V apart from it by the end
    assert np.max(np.abs(ours - sim.v)) < 3e-3


def _op(lines: list[str], models: list[str]) -> dict[str, float]:
    """Q1's collector current and v(b), v(e) from ngspice's operating point."""
    probes = {"icq": "@q1[ic]"}
    return ngspice_op(lines, models, lets=probes, prints=["v(b)", "v(e)"])


@pytest.mark.ngspice
def test_emitter_follower_dc_point_matches_ngspice_operating_point():
    # the collector on the supply (a known node): V_BC = V_B − V_CC enters as a constant
    lines = [
        "VCC vcc 0 DC 12",
        "RB1 vcc b 47000",
        "RB2 b 0 33000",
        "Q1 vcc b e QN",
        "RE e 0 1000",
        "CE e 0 1e-9",
        "L1 e lx 1e-3",
        "R1 lx 0 1e6",
    ]
    op = _op(lines, [CARD])
    circ = build_circuit([lines], [CARD], "e", VT)
    x, ok = dc_point(circ)
    assert ok.all()
    # the netlist's own node order: b, e, lx (first seen on R, C, L and Q lines)
    got = {"v(b)": x[0, 0], "v(e)": x[0, 1], "icq": float(device(circ, x)["ic"][0])}
    for key in ("v(b)", "v(e)", "icq"):
        assert got[key] == pytest.approx(op[key], rel=1e-4), key


@pytest.mark.slow
@pytest.mark.parametrize(
    "design",
    [
        "cc003",  # the follower's collector on the supply: the describing function 0.60 % off
        "hy007",  # a common-emitter Hartley (k = K12's coupling): the describing function 0.57 % off
    ],
)
def test_saturated_orbit_matches_ngspice_frequency(design):
    d, ref = pinned(design)
    assert ref["state"] == "steady"
    st = steady_state(d.topo, d.values, d.stray, d.params)
    assert bool(np.asarray(st.overdriven))  # saturated: the orbit applies
    (orbit,) = board_orbits([Network.build(d.topo, d.values, d.stray, d.params)])[0]
    assert orbit is not None  # the netlist is read and shot
    assert orbit.f_hz == pytest.approx(ref["f_hz"], rel=2e-3)
    assert orbit.amplitude_v == pytest.approx(ref["amplitude_v"], rel=0.06)
    assert not orbit.bursting


@pytest.mark.slow
def test_follower_orbit_unstable_by_a_flip_is_not_called_bursting():
    # cc010: its orbit has a real multiplier near -1.3 (the period doubles beside it);
    # ngspice runs it steady, its envelope alternating by under 1 %, at the orbit's
    # frequency and amplitude
    designs, answers = load_reference(DATA / "stage_common_collector.json")
    k = [d.id for d in designs].index("cc010")
    d, ref = designs[k], answers[k]
    assert ref["state"] == "steady"
    (orbit,) = board_orbits([Network.build(d.topo, d.values, d.stray, d.params)])[0]
    assert orbit is not None
    assert orbit.multiplier > 1.2  # outside the unit circle: unstable as a period-1 orbit
    assert not orbit.bursting
    assert orbit.f_hz == pytest.approx(ref["f_hz"], rel=2e-3)
    assert orbit.amplitude_v == pytest.approx(ref["amplitude_v"], rel=0.06)


def test_a_singular_board_fails_alone_in_a_batch_solve():
    # A batch of Newton matrices where one is singular (a board whose step degenerates):
    # numpy.linalg.solve raises for the whole batch; solve_each gives the others their
    # exact solutions (checked element by element with numpy.linalg.solve) and NaN for
    # the singular one, which the integrator then reports as a failed step.
    rng = np.random.default_rng(5)
    a = rng.normal(size=(4, 3, 3)) + 3 * np.eye(3)
    a[2] = [[1.0, 2.0, 3.0], [2.0, 4.0, 6.0], [0.0, 1.0, 1.0]]  # rank 2
    b = rng.normal(size=(4, 3, 1))
    with pytest.raises(np.linalg.LinAlgError):
        np.linalg.solve(a, b)
    got = solve_each(a, b)
    assert np.isnan(got[2]).all()
    for i in (0, 1, 3):
        assert np.allclose(got[i], np.linalg.solve(a[i], b[i]), rtol=1e-12, atol=0)
    # a regular batch is numpy's own answer
    ok = np.delete(a, 2, axis=0), np.delete(b, 2, axis=0)
    assert np.array_equal(solve_each(*ok), np.linalg.solve(*ok))
