"""The waveform measurement on synthetic signals whose answers are known analytically.

Each signal is built here from its formula; the expected carrier, amplitude, envelope
state, start-up time and harmonic levels follow from the same formula by hand (Fourier
series, the van der Pol envelope), not from the code under test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from picker.circuit.waveform import envelope_state, measure

F = 1.0e6  # carrier, Hz
FS = 64 * F  # samples per second (64 per period, about what a SPICE run gives)


def _time(periods: float, *, jitter: bool = False) -> np.ndarray:
    t = np.arange(int(periods * FS / F)) / FS
    if jitter:  # a variable time step, as SPICE writes it
        rng = np.random.default_rng(1)
        t = t + rng.uniform(-0.3, 0.3, t.size) / FS
        t.sort()
    return t


def clipped_sine_harmonic(n: int, a: float, c: float) -> float:
    """Fourier sine coefficient b_n of a sine of peak ``a`` clipped symmetrically at ±c.

    x(θ) = a·sin θ for |a·sin θ| ≤ c, ±c beyond; with c = a·sin α, for odd n
    b_n = (4/π)·[a·∫₀^α sin θ sin nθ dθ + c·∫_α^{π/2} sin nθ dθ]
        = (4/π)·[a/2·(S(n−1) − S(n+1)) + c·cos(nα)/n],  S(k) = sin(kα)/k, S(0) = α
    (Fourier series of a clipped sine worked by hand; quarter-wave symmetry).
    """
    alpha = math.asin(c / a)

    def s(k: int) -> float:
        return alpha if k == 0 else math.sin(k * alpha) / k

    return 4 / math.pi * (a / 2 * (s(n - 1) - s(n + 1)) + c * math.cos(n * alpha) / n)


def test_clipped_sine_half_coefficient_check():
    # the formula itself, against numerical integration (self-check of the reference)
    theta = np.linspace(0, 2 * np.pi, 200_001)
    x = np.clip(2.0 * np.sin(theta), -1.2, 1.2)
    for n in (1, 3, 5):
        b = 2 * np.trapezoid(x * np.sin(n * theta), theta) / (2 * np.pi)
        assert b == pytest.approx(clipped_sine_harmonic(n, 2.0, 1.2), abs=1e-6)


def test_clipped_sine_carrier_amplitude_and_third_harmonic():
    t = _time(400, jitter=True)
    f = 1.0123e6  # off the bin grid
    a, c = 2.0, 1.2
    v = 3.0 + np.clip(a * np.sin(2 * np.pi * f * t), -c, c)  # on a DC level
    m = measure(t, v, f_hint=1e6)
    assert m.state == "steady"
    # phase slope over 200 periods: far better than 1e-5 (the jitter is interpolated away)
    assert m.f_hz == pytest.approx(f, rel=1e-5)
    assert m.amplitude_v == pytest.approx(c, rel=2e-3)  # the clip level is the peak
    b1 = clipped_sine_harmonic(1, a, c)
    b3 = clipped_sine_harmonic(3, a, c)
    assert m.fundamental_v == pytest.approx(b1, rel=5e-3)
    # Hann main-lobe sums: 0.1 dB (interpolation of the jittered samples adds a little)
    assert m.harmonics_dbc[1] == pytest.approx(20 * math.log10(abs(b3) / b1), abs=0.2)
    assert m.harmonics_dbc[0] < -60  # symmetric clipping: no even harmonic


def test_second_harmonic_of_a_known_mix():
    t = _time(300)
    v = np.sin(2 * np.pi * F * t) + 0.05 * np.cos(2 * np.pi * 2 * F * t + 0.3)
    m = measure(t, v)
    assert m.harmonics_dbc[0] == pytest.approx(20 * math.log10(0.05), abs=0.05)  # −26.02 dBc


def test_am_burst_carrier_is_the_carrier_not_the_crossing_rate():
    # carrier on for 40 periods, off for 60, repeated: an oscillator that squegs
    t = _time(2000)
    gate = ((t * F) % 100.0) < 40.0
    env = np.where(gate, 1.0, 1e-4)
    v = env * np.sin(2 * np.pi * F * t)
    m = measure(t, v, f_hint=F)
    assert m.state == "bursting"
    assert m.f_hz == pytest.approx(F, rel=1e-4)
    # a crossing counter (rising through +0.1 V, above the gaps' level) over the record
    # averages the gaps in: 40 % of the carrier
    crossings = np.count_nonzero((v[:-1] < 0.1) & (v[1:] >= 0.1)) / (t[-1] - t[0])
    assert crossings < 0.5 * F
    assert m.envelope_low < 0.2 * m.envelope_high


def test_small_am_is_steady_and_larger_am_is_unsettled():
    t = _time(2000)
    for depth, state in ((0.05, "steady"), (0.25, "unsettled")):
        env = 1.0 + depth * np.sin(2 * np.pi * F / 150 * t)
        m = measure(t, env * np.sin(2 * np.pi * F * t), f_hint=F)
        assert m.state == state
        # modulation index of m(t) = 1 + d·sin: (max − min)/(max + min) = d
        assert m.modulation == pytest.approx(depth, rel=0.05)


def test_decaying_tone_and_noise_do_not_oscillate():
    t = _time(1000)
    decaying = 0.5 * np.exp(-t * F / 200) * np.sin(2 * np.pi * F * t)  # tau = 200 periods
    assert measure(t, decaying, f_hint=F).state == "none"
    noise = 1e-5 * np.random.default_rng(3).standard_normal(t.size)
    m = measure(t, noise, f_hint=F)
    assert m.state == "none" and not m.oscillating and math.isnan(m.f_hz)


def test_startup_time_of_a_van_der_pol_envelope():
    # van der Pol envelope: da/dt = (a/τ)·(1 − a²/A²) has the solution
    # a(t) = A / sqrt(1 + (A²/a0² − 1)·exp(−2t/τ)) (Strogatz, Nonlinear Dynamics and Chaos,
    # averaging of the van der Pol oscillator); it reaches 0.9·A at
    # t90 = (τ/2)·ln((A²/a0² − 1)·0.81/0.19).
    big_a, a0, tau = 1.5, 1e-3, 50 / F
    t = _time(3000)
    t_kick = 5 / F
    s = np.clip(t - t_kick, 0, None)
    a = big_a / np.sqrt(1 + (big_a**2 / a0**2 - 1) * np.exp(-2 * s / tau))
    v = np.where(t >= t_kick, a, 0.0) * np.sin(2 * np.pi * F * t)
    m = measure(t, v, f_hint=F, t_kick=t_kick)
    t90 = tau / 2 * math.log((big_a**2 / a0**2 - 1) * 0.81 / 0.19)
    assert m.state == "steady"
    # the band-pass smooths the envelope over a few periods: 3 periods of 435
    assert m.startup_time_s == pytest.approx(t90, abs=3 / F)
    assert m.fundamental_v == pytest.approx(big_a, rel=1e-3)


def test_envelope_state_thresholds():
    # the definitions, on hand-made envelopes
    assert envelope_state(np.full(100, 1.0), 1e-3)[0] == "steady"
    assert envelope_state(np.linspace(0.95, 1.05, 100), 1e-3)[0] == "steady"  # mod 0.05
    assert envelope_state(np.linspace(0.8, 1.2, 100), 1e-3)[0] == "unsettled"  # mod 0.2
    burst = np.where(np.arange(100) % 10 < 5, 1.0, 0.1)
    assert envelope_state(burst, 1e-3)[0] == "bursting"  # p2 = 0.1 < 0.2·p98
    assert envelope_state(np.full(100, 1e-4), 1e-3)[0] == "none"
    assert envelope_state(np.geomspace(1.0, 0.1, 100), 1e-3)[0] == "none"  # dies away


# ------------------------------------------------- a stronger, lower oscillation (harmonics)


def test_clipped_low_oscillation_is_read_at_its_fundamental_not_at_a_harmonic_near_the_hint():
    # a board running in a low mode at f1 (clipped) whose tank, twelve times higher,
    # only rings at the low mode's 12th harmonic (a locked line at -26 dB): the hint is
    # the tank frequency, so every line in [hint/2, 2·hint] is a harmonic of f1 (the 7th
    # to the 23rd); the board runs at f1
    f1 = 1.0123e6 / 12
    t = _time(80 * 12)
    a, c = 2.0, 1.2
    v = np.clip(a * np.sin(2 * np.pi * f1 * t), -c, c) + 0.05 * np.sin(
        2 * np.pi * 12 * f1 * t + 0.4
    )
    m = measure(t, v, f_hint=12 * f1)
    assert m.state == "steady"
    assert m.f_hz == pytest.approx(f1, rel=1e-5)
    # the fundamental's peak and the 3rd harmonic of the clipped sine (Fourier series above)
    b1, b3 = clipped_sine_harmonic(1, a, c), clipped_sine_harmonic(3, a, c)
    assert m.fundamental_v == pytest.approx(b1, rel=5e-3)
    assert m.harmonics_dbc[1] == pytest.approx(20 * math.log10(abs(b3) / b1), abs=0.1)


def test_mode_entrained_at_a_multiple_of_a_stronger_one_is_a_harmonic_of_it():
    # two modes locked 5:1, the lower one 10 dB stronger: a waveform of period 1/f1
    f1 = F / 5
    t = _time(400)
    v = np.sin(2 * np.pi * f1 * t) + 0.3 * np.sin(2 * np.pi * 5 * f1 * t + 0.7)
    m = measure(t, v, f_hint=F)
    assert m.state == "steady"
    assert m.f_hz == pytest.approx(f1, rel=1e-5)
    assert m.fundamental_v == pytest.approx(1.0, rel=2e-3)  # the band holds f1 alone
    assert m.harmonics_dbc[0] < -60 and m.harmonics_dbc[1] < -60  # no 2nd, no 3rd


def test_two_independent_tones_the_carrier_near_the_hint_stays_the_carrier():
    # a stronger tone at F/7.1 (7.1 is not a whole number: no harmonic relation, the
    # carrier's phase drifts by 0.1 of the low tone's period a low period) and the
    # carrier at F: the carrier is read, with its own amplitude
    t = _time(300)
    v = np.sin(2 * np.pi * F / 7.1 * t) + 0.3 * np.sin(2 * np.pi * F * t)
    m = measure(t, v, f_hint=F)
    assert m.state == "steady"
    assert m.f_hz == pytest.approx(F, rel=1e-5)
    assert m.fundamental_v == pytest.approx(0.3, rel=5e-3)


def test_a_bursting_start_up_is_timed_to_the_first_burst():
    # silent until 300 periods after the kick, then bursts of 40 periods in 100 whose
    # envelope rises linearly over their first 20 periods: 90 % of the bursts' height is
    # reached 18 periods into the first burst (the gaps hold the envelope's median, so
    # timing against it reads the kick's instant instead)
    t = _time(3000)
    n = t * F - 300.0
    ramp = np.clip(n % 100.0 / 20.0, 0.0, 1.0)
    env = np.where((n >= 0) & (n % 100.0 < 40.0), np.maximum(ramp, 1e-4), 1e-4)
    v = env * np.sin(2 * np.pi * F * t)
    m = measure(t, v, f_hint=F)
    assert m.state == "bursting"
    # the band-pass's envelope follows the ramp within a few periods
    assert m.startup_time_s * F == pytest.approx(318.0, abs=4.0)


def test_burst_carrier_stays_the_carrier_beside_a_stronger_bias_swing_at_the_burst_rate():
    # a squegging oscillator: the carrier on for 40 periods in 100, and the tank top's
    # bias swinging with the bursts (1.5 V at the burst rate F/100, a line stronger than
    # the carrier's); the whole record repeats every 100 carrier periods, so the carrier
    # is a multiple of the burst rate, locked to it, but it is the carrier inside the
    # bursts that is the oscillation (picker issue 11)
    t = _time(3000)
    gate = ((t * F) % 100.0) < 40.0
    bias = 1.5 * np.sin(2 * np.pi * F / 100 * t)
    v = bias + np.where(gate, 1.0, 1e-4) * np.sin(2 * np.pi * F * t)
    spec = np.abs(np.fft.rfft((v - v.mean()) * np.hanning(v.size)))
    f = np.fft.rfftfreq(v.size, 1 / FS)
    assert f[np.argmax(spec)] < 0.02 * F  # the strongest line is the bias swing's
    m = measure(t, v, f_hint=F)
    assert m.state == "bursting"
    assert m.f_hz == pytest.approx(F, rel=1e-4)


# ------------------------------------- a pulse train: a comb of harmonics, a weak fundamental


def _comb(t: np.ndarray, f1: float) -> np.ndarray:
    """A relaxation's pulse train: harmonics 2-8 of f1 within 8 dB of each other, the
    fundamental 17 dB below the strongest (the 3rd)."""
    amps = {1: 0.14, 2: 0.64, 3: 1.0, 4: 0.95, 5: 0.74, 6: 0.6, 7: 0.5, 8: 0.4}
    return sum(a * np.sin(2 * np.pi * m * f1 * t + 0.3 * m) for m, a in amps.items())


def test_a_comb_of_comparable_harmonics_is_read_at_its_spacing_though_its_fundamental_is_weak():
    # a relaxation's pulse train: harmonics 2-8 of f1 within 8 dB of each other, the
    # fundamental itself 17 dB below the strongest (the 3rd); the hint is the 4th, so the
    # line found in [hint/2, 2·hint] is the 3rd, and the waveform repeats at f1 (its lines
    # are whole multiples of f1, built so here)
    f1 = F / 4.1
    t = _time(4.1 * 200)
    v = _comb(t, f1)
    m = measure(t, v, f_hint=4 * f1)
    assert m.state == "steady"
    # the 2nd harmonic, 13 dB above the fundamental, leaks through the band-pass's upper
    # edge and ripples the phase (a few 1e-5 over 200 periods)
    assert m.f_hz == pytest.approx(f1, rel=2e-4)
    assert m.fundamental_v == pytest.approx(0.14, rel=0.05)
    # the harmonics are read against the weak fundamental: +13.2 and +17.1 dBc
    assert m.harmonics_dbc[0] == pytest.approx(20 * math.log10(0.64 / 0.14), abs=0.1)
    assert m.harmonics_dbc[1] == pytest.approx(20 * math.log10(1.0 / 0.14), abs=0.1)


def test_a_pulse_train_running_before_the_kick_has_no_start_up_time():
    # a relaxation pulses from the first instant (the kick comes one tank period in, a
    # quarter of the train's period here): the envelope is at its settled value before
    # the kick, so there is no start-up to time; reading the first sample after the kick
    # would give the grid's step (the series Hartley set's hs004 read 5.6 ps so)
    f1 = F / 4.1
    t = _time(4.1 * 200)
    v = _comb(t, f1)
    m = measure(t, v, f_hint=4 * f1, t_kick=1 / F + 0.3 / FS)
    assert m.state == "steady"
    assert math.isnan(m.startup_time_s)
    # the same train growing linearly from the kick over 30 of its periods is timed: it
    # reaches 90 % 27 periods in (within the envelope's three-period average)
    t_on = 20 / f1
    ramp = np.clip((t - t_on) * f1 / 30, 0.0, 1.0)
    m = measure(t, ramp * v, f_hint=4 * f1, t_kick=t_on)
    assert m.startup_time_s == pytest.approx(27 / f1, abs=3 / f1)


def test_a_weak_subharmonic_beside_the_carrier_is_a_spur_not_the_fundamental():
    # an orbit just past a period doubling: lines at F/2 and 3F/2 26 dB below the carrier,
    # locked to it; the carrier still dominates its neighbours, so the board runs at F
    t = _time(400)
    v = (
        np.sin(2 * np.pi * F * t)
        + 0.05 * np.sin(2 * np.pi * 0.5 * F * t + 0.3)
        + 0.05 * np.sin(2 * np.pi * 1.5 * F * t + 0.1)
        + 0.2 * np.sin(2 * np.pi * 2 * F * t)
    )
    m = measure(t, v, f_hint=F)
    assert m.state == "steady"
    assert m.f_hz == pytest.approx(F, rel=1e-5)
    assert m.fundamental_v == pytest.approx(1.0, rel=0.06)  # F/2 and 3F/2 lie in the band


def test_bursts_a_few_carrier_periods_long_stay_bursts_read_inside_not_at_their_rate():
    # every period 1/f1 a pulse sets the tank ringing at 7.2·f1 and the ringing dies away
    # (by e^-6) before the next pulse: the waveform repeats every 1/f1 (built so here), a
    # comb of lines spaced f1, but band-passed at the ringing it comes in bursts, and a
    # bursting board's carrier is the one inside its bursts (picker issue 11's
    # definition), not their repetition rate (the ringing decays so fast that its reading
    # is loose: only the order of magnitude is asserted)
    f1 = F / 7.2
    t = _time(7.2 * 300)
    phase = (t * f1) % 1.0  # fraction of the pulse period
    v = np.exp(-6.0 * phase) * np.sin(2 * np.pi * 7.2 * phase) + 0.3 * (phase < 0.1)
    m = measure(t, v, f_hint=7.2 * f1)
    assert m.state == "bursting"
    assert 5.0 * f1 < m.f_hz < 9.0 * f1
