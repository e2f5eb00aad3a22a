"""The time-domain periodic steady state (picker.circuit.transient, .shooting, .periodic).

Outside references: the natural response of a series RLC circuit (Nilsson & Riedel,
*Electric Circuits*, 9th ed., sec. 8.3, the underdamped series RLC: v_C(t) =
V0·e^{−αt}·(cos ω_d t + (α/ω_d)·sin ω_d t) for i(0) = 0, α = R/(2L), ω_d² = 1/(LC) − α²),
whose monodromy matrix over a time T has the eigenvalues e^{(−α ± jω_d)·T} (Floquet
theory of a constant-coefficient system: Coddington & Levinson, *Theory of Ordinary
Differential Equations*, 1955, ch. 3); central differences for the variational
equations; and ngspice's transients of picker's netlists of validation designs
(``tests/validation/large_signal.json``, measured by picker.circuit.waveform), where the
describing function is off by 2-9 % because the transistor saturates.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from pinned import pinned

from picker.circuit.network import Network
from picker.circuit.periodic import periodic_state
from picker.circuit.steady import steady_state
from picker.circuit.transient import build_circuit, integrate
from picker.circuit.validation import load_reference, run_design
from picker.errors import SolverError
from picker.tank.base import TWO_PI

CARD = ".model QN NPN (IS=1e-14 BF=150 VAF=100 TF=3e-10 CJE=5e-12 CJC=3e-12 BR=1)"
FOLLOWER = Path(__file__).parent / "validation" / "stage_common_collector.json"
R, L, C = 50.0, 1e-3, 1e-9


def _rlc():
    lines = ["VCC vcc 0 DC 0", f"C1 t 0 {C}", f"L1 t n {L}", f"R1 n 0 {R}"]
    return build_circuit([lines], [CARD], "t", 0.025852)


def _series_rlc(t):
    # Nilsson & Riedel sec. 8.3, V0 = 1 V, i(0) = 0
    alpha = R / (2 * L)
    wd = math.sqrt(1 / (L * C) - alpha**2)
    return math.exp(-alpha * t) * (math.cos(wd * t) + alpha / wd * math.sin(wd * t)), alpha, wd


def test_natural_response_of_a_series_rlc_to_second_order():
    circ = _rlc()
    x0 = np.zeros((1, circ.size))
    x0[0, circ.top[0]] = 1.0  # 1 V on C, no current
    t_end = 2.3e-5  # about 3.7 periods
    want, _, _ = _series_rlc(t_end)
    err = []
    for steps in (1000, 2000):
        run = integrate(circ, x0, np.array([t_end]), steps)
        assert run.ok.all()
        err.append(abs(run.x[-1, 0, circ.top[0]] - want))
    assert err[1] < 1e-3
    assert 3.5 < err[0] / err[1] < 4.5  # BDF2 is second order


def test_monodromy_of_a_series_rlc_has_the_natural_frequencies():
    circ = _rlc()
    x0 = np.zeros((1, circ.size))
    x0[0, circ.top[0]] = 1.0
    t_end = 1.0e-5
    run = integrate(circ, x0, np.array([t_end]), 4000, sens=True)
    mu = np.linalg.eigvals(run.s[0, :, :-1])
    _, alpha, wd = _series_rlc(t_end)
    big = mu[np.argsort(-np.abs(mu))[:2]]
    assert np.abs(big) == pytest.approx([math.exp(-alpha * t_end)] * 2, rel=1e-4)
    # the angle of the pair is ω_d·T (mod 2π)
    ang = abs(np.angle(big[0]))
    want = math.remainder(wd * t_end, TWO_PI)
    assert ang == pytest.approx(abs(want), abs=2e-3)


def test_sensitivities_match_central_differences():
    d, _ = pinned("d015")
    net = Network.build(d.topo, d.values, d.stray, d.params)
    vals = {p: float(net.el[p][0]) for p in d.topo.positions}
    part = net.stage.netlist(
        d.topo, vals, float(net.el["stray"][0]), float(net.el["r_l"][0]), d.params
    )
    circ = build_circuit([part.elements], part.models, net.stage.top, 0.025852)
    rng = np.random.default_rng(5)
    x0 = np.array([[8.0, 0.5, 3.9, 3.9, 3.3, 2e-3]]) + 0.01 * rng.standard_normal((1, 6))
    period = np.array([1.3e-5])
    run = integrate(circ, x0, period, 100, sens=True)
    for j in range(circ.size + 1):
        e = 1e-6
        if j < circ.size:
            dx = np.zeros_like(x0)
            dx[0, j] = e
            fp = integrate(circ, x0 + dx, period, 100).x[-1]
            fm = integrate(circ, x0 - dx, period, 100).x[-1]
            h = e
        else:
            fp = integrate(circ, x0, period * (1 + e), 100).x[-1]
            fm = integrate(circ, x0, period * (1 - e), 100).x[-1]
            h = e * period[0]
        fd = (fp - fm)[0] / (2 * h)
        # states' columns are dimensionless (rounding of the differences ~1e-8), the
        # period's is in V/s
        floor = 1e-6 if j < circ.size else 1e-6 * np.abs(fd).max()
        assert np.allclose(run.s[0, :, j], fd, rtol=1e-4, atol=floor)


def _shoot(d):
    st = steady_state(d.topo, d.values, d.stray, d.params)
    net = Network.build(d.topo, d.values, d.stray, d.params)
    return st, periodic_state(
        net,
        np.array([0]),
        np.array([TWO_PI * float(st.f_hz)]),
        np.array([float(st.amplitude_v)]),
        np.array([float(st.peak_current_a) * 0 + np.nan]),
    )


@pytest.mark.slow
@pytest.mark.parametrize("ident", ["d015", "d019"])
def test_saturated_designs_against_ngspice(ident):
    # d015, d019: the collector is pulled onto the base for part of each cycle; the
    # describing function's frequency is 8.8 % and 3.5 % off ngspice's
    d, ref = pinned(ident)
    assert ref["state"] == "steady"
    st, ps = _shoot(d)
    assert bool(ps.ok[0])
    f = ps.w[0] / TWO_PI
    assert f == pytest.approx(ref["f_hz"], rel=2e-3)  # the model was 3.5-8.8 % off
    # ngspice reads the peak-to-peak over the run's last tenth; 128 samples a period
    assert ps.top[0] == pytest.approx(ref["amplitude_v"], rel=0.06)
    assert not ps.unstable[0]  # steady in ngspice: every non-trivial multiplier inside


@pytest.mark.slow
def test_bursting_design_has_a_multiplier_outside_the_unit_circle():
    # d021 (Clapp, collector choke) bursts in ngspice; its orbit is unstable
    d, ref = pinned("d021")
    assert ref["state"] == "bursting"
    _, ps = _shoot(d)
    assert bool(ps.ok[0])
    assert ps.unstable[0] and ps.multiplier[0] > 1.05


@pytest.mark.slow
def test_saturated_follower_against_ngspice():
    # cc001: an emitter-follower Clapp (collector on the supply) whose emitter swing
    # reaches the supply; the describing function alone was 1.6 % below ngspice's carrier
    designs, answers = load_reference(FOLLOWER)
    k = [d.id for d in designs].index("cc001")
    d, ref = designs[k], answers[k]
    assert ref["state"] == "steady"
    _, ps = _shoot(d)
    assert bool(ps.ok[0])
    assert ps.w[0] / TWO_PI == pytest.approx(ref["f_hz"], rel=1e-3)
    assert ps.top[0] == pytest.approx(ref["amplitude_v"], rel=0.06)
    assert not ps.unstable[0]


@pytest.mark.ngspice
def test_shooting_against_a_fresh_ngspice_transient():
    d, _ = pinned("d015")
    try:
        sim = run_design(d)
    except SolverError as exc:
        pytest.fail(f"{exc} (this test does not skip; CI installs ngspice)")
    _, ps = _shoot(d)
    assert ps.w[0] / TWO_PI == pytest.approx(sim["f_hz"], rel=2e-3)


@pytest.mark.slow
def test_a_board_alone_and_in_a_batch_give_the_same_bits():
    # every Newton (per step, per orbit) stops per element and every product is an
    # einsum: a board's orbit does not depend on the boards beside it
    d, _ = pinned("d015")
    vals = {p: np.array([v, v * 1.01, v * 0.99]) for p, v in d.values.items()}
    net = Network.build(d.topo, vals, d.stray, d.params)
    w, top, im = np.full(3, TWO_PI * 7.15e4), np.full(3, 3.3), np.full(3, np.nan)
    both = periodic_state(net, np.array([0, 1, 2]), w, top, im)
    alone = periodic_state(net, np.array([2]), w[:1], top[:1], im[:1])
    assert both.ok.all()
    assert both.w[2] == alone.w[0]
    assert both.top[2] == alone.top[0]
    assert both.multiplier[2] == alone.multiplier[0]
