"""The run from rest that gives a bursting design's carrier (picker/circuit/burst_carrier.py).

Its accuracy against ngspice on the bursting and unsettled Clapps is asserted by the
validation sets' Clapp target (tests/test_validation.py, tests/test_stage_validation.py),
which read the model's answers through it. Here: the integrator and the warping
correction against the lossless LC tank's closed form, and that a design's run does not
depend on the designs batched beside it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from pinned import pinned

from picker.circuit import burst_carrier as bc
from picker.circuit.network import Network
from picker.circuit.transient import build_circuit


def _lc(l_h: float, c_f: float):
    # a tank alone: no transistor in the netlist (its terminals sit on ground, no current)
    card = [".model QX NPN (IS=1e-14 BF=100)"]
    return build_circuit([[f"L1 t 0 {l_h:g}", f"C1 t 0 {c_f:g}"]], card, "t", 0.025)


@pytest.mark.parametrize("steps", [16, 64])
def test_lossless_tank_carrier_against_closed_form(steps):
    # f = 1/(2π√(LC)) (Hayt & Kemmerly, Engineering Circuit Analysis, the parallel LC
    # circuit); the trapezoidal rule keeps a lossless tank's amplitude and runs it at
    # tan(ω_d·h/2) = ω·h/2 (Oppenheim & Schafer, Discrete-Time Signal Processing, the
    # bilinear transformation), which the correction undoes
    l_h, c_f = 10e-6, 1e-9
    f0 = 1.0 / (2.0 * math.pi * math.sqrt(l_h * c_f))
    circ = _lc(l_h, c_f)
    h = np.array([1.0 / (f0 * steps)])
    x0 = np.array([[1.0, 0.0]])
    v, _, _ = bc._run(circ, x0, x0, h, 100 * steps)
    assert np.max(np.abs(v)) == pytest.approx(1.0, rel=1e-3)  # no numerical damping
    state, f, amp = bc._chunk_carrier(v[:, 0], float(h[0]), f0)
    assert state != "none"
    assert f == pytest.approx(f0, rel=2e-4)
    assert amp == pytest.approx(1.0, rel=1e-3)
    # the warping the correction removes: (ω·h)²/12, 1.3 % at 16 steps a period
    raw = math.atan(math.pi * f0 * h[0]) / (math.pi * h[0])
    assert abs(raw / f0 - 1.0) > (0.01 if steps == 16 else 5e-4)


def test_a_run_does_not_depend_on_its_batch(monkeypatch):
    # a short run (two chunks of five periods) of h017 alone and beside h003, both
    # bursting Colpitts of the held-out set with the same netlist shape
    monkeypatch.setattr(bc, "CHUNK", 5)
    monkeypatch.setattr(bc, "MIN_CHUNKS", 1)
    monkeypatch.setattr(bc, "MAX_CHUNKS", 1)
    pick = [pinned(i)[0] for i in ("h003", "h017")]
    nets = [Network.build(d.topo, d.values, d.stray, d.params) for d in pick]
    f = [float(d.topo.frequency(d.values, d.stray)) for d in pick]
    both = bc.network_carriers(nets, [True, True], f)
    alone = bc.network_carriers(nets[1:], [True], f[1:])
    assert both[1] is not None and alone[0] is not None
    assert both[1] == alone[0]
    assert math.isfinite(alone[0].amplitude_v) and alone[0].amplitude_v > 0


def test_a_relaxing_board_runs_at_the_finer_step(monkeypatch):
    # a board flagged relaxing (no steady solution) runs at RELAX_STEPS, in a batch of
    # its own; the others at STEPS; each board's period sets its step either way
    pick = [pinned(i)[0] for i in ("h003", "h017")]
    nets = [Network.build(d.topo, d.values, d.stray, d.params) for d in pick]
    f = [float(d.topo.frequency(d.values, d.stray)) for d in pick]
    seen = []

    def fake(circ, w, tau, *, steps, look_hz):
        seen.append((steps, [round(x / (2 * math.pi)) for x in w]))
        return [bc.BurstCarrier("steady", x / (2 * math.pi), 1.0, 100, 0.0) for x in w]

    monkeypatch.setattr(bc, "burst_carriers", fake)
    got = bc.network_carriers(nets, [True, True], f, [False, True])
    assert sorted(seen) == sorted([(bc.STEPS, [round(f[0])]), (bc.RELAX_STEPS, [round(f[1])])])
    assert bc.RELAX_STEPS > bc.STEPS
    assert [g.f_hz for g in got if g is not None] == pytest.approx(f)


def test_the_run_is_read_where_ngspice_s_transient_is_read(monkeypatch):
    # hs008 (series-capacitor Hartley, a pulse train): its orbit runs at about half its
    # tank's ideal frequency, so a reading looked for around the orbit's frequency and one
    # looked for around the ideal frequency search different bands (a factor of two each
    # way) and can pick different lines of the pulse train's comb. The run steps by the
    # frequency it is handed, but is read around the frequency ngspice's record is read
    # around, the transient plan's f0 (the ideal tank frequency with its stray)
    from picker.circuit.netlist import transient_plan

    d = pinned("hs008")[0]
    net = Network.build(d.topo, d.values, d.stray, d.params)
    f0 = transient_plan(d.topo, d.values, d.stray, d.params).f0
    seen = {}

    def fake(circ, w, tau, *, steps, look_hz):
        seen.update(w=w.copy(), look=np.asarray(look_hz).copy())
        return [bc.BurstCarrier("bursting", 1.0, 1.0, 100, 0.0) for _ in w]

    monkeypatch.setattr(bc, "burst_carriers", fake)
    bc.network_carriers([net], [True], [0.5 * f0])
    assert seen["w"].tolist() == pytest.approx([math.pi * f0])  # the step: the hint
    assert seen["look"].tolist() == pytest.approx([f0], rel=1e-12)  # the reading: f0
    # f0 itself: the series-capacitor Hartley's ideal frequency, 1/(2π·sqrt(L_eq·C_eq))
    # with L_eq = L1 + L2 + 2k·sqrt(L1·L2) (coils in series aiding: Hayt & Kemmerly,
    # Engineering Circuit Analysis, magnetically coupled circuits) and C in series with
    # C_S, plus the stray across the chain (Clapp, Proc. IRE 36 (1948))
    v = d.values
    l_eq = v["L1"] + v["L2"] + 2.0 * d.coupling * math.sqrt(v["L1"] * v["L2"])
    c_eq = v["C"] * v["CS"] / (v["C"] + v["CS"]) + d.stray
    assert f0 == pytest.approx(1.0 / (2.0 * math.pi * math.sqrt(l_eq * c_eq)), rel=1e-9)


def test_the_start_up_time_is_read_over_the_whole_run_from_the_kick():
    # a van der Pol envelope, a(t) = A / sqrt(1 + (A²/a0² − 1)·exp(−2t/τ)) from the kick's
    # start (Strogatz, Nonlinear Dynamics and Chaos, averaging of the van der Pol
    # oscillator), reaching 0.9·A at t90 = (τ/2)·ln((A²/a0² − 1)·0.81/0.19); sampled as a
    # run from rest is, from half a period after the kick's start (the state at the end
    # of the netlist's half-period kick) a step apart, with a warm-up of 200 periods
    # before a measured tail of 300. Read over the tail alone the envelope is there
    # already (no start-up); read over the whole run, t90.
    f, steps, big_a, a0, tau = 1e6, 64, 1.5, 1e-3, 10e-6
    h, period = 1.0 / (f * steps), 1.0 / f
    t = 0.5 * period + h * np.arange(1, 500 * steps + 1)
    a = big_a / np.sqrt(1 + (big_a**2 / a0**2 - 1) * np.exp(-2 * t / tau))
    v = a * np.sin(2 * np.pi * f * t)
    got = bc._startup_time(v, h, period, f, 300 * steps)
    t90 = tau / 2 * math.log((big_a**2 / a0**2 - 1) * 0.81 / 0.19)  # 45.5 periods
    # the band-pass smooths the envelope by a few periods at most (tests/test_waveform.py);
    # on this envelope it reads 0.07 period late (0.01-0.12 with τ from 5 to 30 µs). A
    # quarter of a period resolves the half-period kick: a time axis from the run's first
    # sample instead of the kick's start would read half a period early
    assert got == pytest.approx(t90, abs=0.25 * period)


def _r(state: str, f: float, amp: float = 1.0) -> bc.BurstCarrier:
    return bc.BurstCarrier(state, f, amp, 300, 1e-3)


def test_the_runs_vote_and_the_median_run_on_the_majority_side_gives_the_figures():
    # worked by hand: five of the six runs that show a carrier burst, so the design bursts;
    # its figures are the middle one of those five by carrier (1.00, amplitude 3), and the
    # five span (1.02 - 0.97) / 1.00 = 5 %; the run without a carrier (state "none") and
    # the steady one at 1.5 take no part in the figure
    runs = [
        _r("bursting", 1.02, 1.0),
        _r("bursting", 0.98, 2.0),
        _r("none", math.nan, math.nan),
        _r("bursting", 1.00, 3.0),
        _r("steady", 1.50, 4.0),
        _r("bursting", 0.97, 5.0),
        _r("bursting", 1.01, 6.0),
    ]
    got = bc._vote(runs)
    assert (got.state, got.f_hz, got.amplitude_v, got.runs) == ("bursting", 1.00, 3.0, 6)
    assert got.kick_spread == pytest.approx(0.05)
    # the range is the bursting side's (0.97 to 1.02), not the steady run's 1.50; a span
    # of 5 % is above SPLIT (2 %), so the runs count as split
    assert (got.f_low_hz, got.f_high_hz) == (0.97, 1.02) and got.split
    # four of seven clear the burst (steady or unsettled): the verdict is theirs, and the
    # figure the lower of their two middle carriers (1.1 of 1.0, 1.1, 1.2, 1.3)
    runs = [_r("unsettled", f) for f in (1.3, 1.1, 1.0)] + [_r("steady", 1.2)]
    runs += [_r("bursting", f) for f in (0.5, 0.6, 0.7)]
    got = bc._vote(runs)
    assert (got.state, got.f_hz, got.runs) == ("unsettled", 1.1, 7)
    assert got.clears_burst and got.kick_spread == pytest.approx(0.3 / 1.1)
    assert (got.f_low_hz, got.f_high_hz) == (1.0, 1.3)
    # runs within 2 % of each other have not split (1.0 to 1.019: 1.9 %)
    got = bc._vote([_r("bursting", f) for f in (1.0, 1.01, 1.019)])
    assert got.kick_spread == pytest.approx(0.019 / 1.01) and not got.split
    # a tie keeps the burst (it must not clear the model's verdict on half the runs)
    got = bc._vote([_r("bursting", 2.0), _r("steady", 1.0), _r("bursting", 3.0), _r("steady", 4.0)])
    assert (got.state, got.f_hz) == ("bursting", 2.0)
    # no run shows a carrier: the figures stay NaN
    assert not math.isfinite(bc._vote([_r("none", math.nan)] * 3).f_hz)


def test_each_design_runs_kicks_times_with_kicks_parts_per_million_apart(monkeypatch):
    # the batch handed to the single runs: each design's circuit KICKS times in a row,
    # the first with the netlist's own kick (scale 1), the next ones KICK_STEP apart
    seen = {}

    def single(circ, w, tau, steps, scale, look_hz):
        seen.update(w=w.copy(), tau=tau.copy(), scale=scale.copy(), steps=steps, look=look_hz)
        return [_r("bursting", float(x) * (1.0 + s)) for x, s in zip(w, scale - 1.0, strict=True)]

    monkeypatch.setattr(bc, "_single_runs", single)
    circ = _lc(10e-6, 1e-9).take(np.array([0, 0]))
    got = bc.burst_carriers(circ, np.array([1.0, 2.0]), np.array([0.0, 5.0]))
    k = bc.KICKS
    assert k >= 5 and k % 2 == 1 and 0 < bc.KICK_STEP <= 1e-5
    assert seen["w"].tolist() == [1.0] * k + [2.0] * k
    assert seen["tau"].tolist() == [0.0] * k + [5.0] * k
    assert seen["scale"][:k] == pytest.approx(1.0 + bc.KICK_STEP * np.arange(k), abs=0)
    assert seen["scale"][0] == 1.0 and seen["steps"] == bc.STEPS
    # with no frequency to look at given, the carrier is looked for at w's
    assert seen["look"].tolist() == pytest.approx([1.0 / (2 * math.pi)] * k + [1.0 / math.pi] * k)
    # each design's figure is the median of its own runs
    mid = bc.KICK_STEP * (k - 1) / 2
    assert [g.f_hz for g in got] == pytest.approx([1.0 + mid, 2.0 * (1.0 + mid)], rel=1e-12)


def _pulse_gaps(t: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Times between falling crossings of halfway from the median down to the minimum, s
    (written here, apart from scripts/same_window.py)."""
    below = v < 0.5 * (np.median(v) + v.min())
    edges = t[1:][below[1:] & ~below[:-1]]
    return np.diff(edges)


@pytest.mark.ngspice
def test_a_pulse_train_run_from_rest_follows_ngspice_pulse_by_pulse():
    # hs008 of the series-capacitor Hartley set as redrawn (tests/validation/pinned.json)
    # runs in ngspice as a pulse train, one ring at about 600 kHz per pulse, the pulses
    # 7 us apart after the kick and drawing out to 17.07 us as the bias settles; its
    # carrier reading picks one line of that comb and is the model's largest miss on the
    # set. The model's circuit run from rest (the whole waveform, waveform_from_rest)
    # against ngspice's transient of picker's netlist of the same design and length: the
    # same gaps, pulse by pulse (measured within 0.8 % each but the first, which the two
    # kicks shape: ngspice's is a current pulse, the model's one backward-Euler step). A
    # circuit that differs from the netlist (a coupling or a capacitor left out, a bias
    # network that charges at another rate) draws the gaps out differently.
    from picker.circuit.netlist import write_netlist
    from picker.circuit.ngspice import transient

    d, record = pinned("hs008")
    assert record["state"] == "bursting"
    f0 = float(d.topo.frequency(d.values, d.stray))
    net = Network.build(d.topo, d.values, d.stray, d.params)
    periods = 250
    with np.errstate(all="ignore"):
        t, v = bc.waveform_from_rest(net, f0, periods)
    assert t.shape == v.shape == (periods * bc.RELAX_STEPS,)
    assert t[0] == pytest.approx(1.0 / (f0 * bc.RELAX_STEPS), rel=1e-12)
    deck = write_netlist(d.topo, d.values, d.stray, d.params, title="hs008", cycles=periods)
    run = transient(deck)
    ref = _pulse_gaps(run.time, run.v)
    got = _pulse_gaps(t, v)
    # ngspice's deck runs on past the model's 250 periods (its kick comes later, and its
    # stop time has room for the measurement): the gaps both runs hold, from the kicks
    n = min(ref.size, got.size)
    assert n >= 20  # the pulse train the record shows
    np.testing.assert_allclose(got[1:n], ref[1:n], rtol=0.01)


def test_a_waveform_from_rest_needs_a_frequency_and_a_length():
    d, _ = pinned("d015")
    net = Network.build(d.topo, d.values, d.stray, d.params)
    for f_hz, periods in ((0.0, 10), (math.nan, 10), (1.0e6, 0)):
        with pytest.raises(ValueError, match="positive"):
            bc.waveform_from_rest(net, f_hz, periods)
