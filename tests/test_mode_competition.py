"""Which mode an oscillator with two growing modes runs in (picker.circuit.stability, (M1)-(M2)).

References, each computed here without picker's model:

- The cross-saturation factor of a cubic device: the component at ω1 of
  g1·(v − c·v³) for v = A1·cos ω1 t + A2·cos ω2 t is g1·A1·(1 − c·(3/4·A1² + 3/2·A2²))
  (van der Pol, Proc. IRE 22, 1934, two degrees of freedom [memory]; the expansion of
  cos³ and of the cross term is elementary), taken here from a discrete Fourier
  transform (numpy) of the sampled current.
- A two-mode oscillator integrated in time by scipy (``solve_ivp``, DOP853): two parallel
  RLC tanks in series driven by one cubic negative conductance, the textbook two-mode
  system. Its linearisation's eigenvalues (numpy) give each mode's growth rate and, by
  bisection on the device's gain, each mode's margin; the mode that survives in the
  integration is the one (M2) picks, and neither "the largest margin" (the rule before)
  nor "the fastest growth" alone picks it in every case.
- ngspice on two designs of the validation sets (tests/validation/): the common-base
  Clapp cb003 with a collector choke (committed record: 23.4 kHz, the choke's mode, with
  the tank's mode phase-locked at its 5th harmonic) and the common-gate Clapp cg004,
  whose transient, rerun here, runs in its low mode.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.integrate

from picker.circuit.netlist import transient_plan, write_netlist
from picker.circuit.ngspice import transient
from picker.circuit.stability import CROSS_SATURATION, running_mode
from picker.circuit.steady import steady_state
from picker.circuit.validation import load_reference
from picker.circuit.waveform import measure

DATA = Path(__file__).parent / "validation"
TWO_PI = 2.0 * math.pi


def test_cross_saturation_of_a_cubic_device_is_twice_its_self_saturation():
    n, k1, k2 = 4096, 10, 37  # no intermodulation product of the two lands on k1
    g1, c, a1, a2 = 1.0, 0.05, 1.3, 2.1
    t = np.arange(n) / n
    v = a1 * np.cos(TWO_PI * k1 * t) + a2 * np.cos(TWO_PI * k2 * t)
    i = g1 * (v - c * v**3)
    gain = 2.0 * np.abs(np.fft.rfft(i)[k1]) / n / a1  # the fundamental's gain at ω1
    self_term = 0.75 * c * a1**2
    cross_term = g1 - gain - self_term  # what A2 takes off the gain at ω1
    assert cross_term / (0.75 * c * a2**2) == pytest.approx(CROSS_SATURATION, rel=1e-9)


# ---------------------------------------------------------------- the two-mode oscillator


def _matrix(g: float, tanks: tuple[tuple[float, float, float], ...]) -> np.ndarray:
    """States (v1, i_L1, v2, i_L2): C_k·v_k' = g·(v1 + v2) − v_k/R_k − i_Lk, L_k·i_Lk' = v_k."""
    (r1, l1, c1), (r2, l2, c2) = tanks
    return np.array(
        [
            [(g - 1 / r1) / c1, -1 / c1, g / c1, 0.0],
            [1 / l1, 0.0, 0.0, 0.0],
            [g / c2, 0.0, (g - 1 / r2) / c2, -1 / c2],
            [0.0, 0.0, 1 / l2, 0.0],
        ]
    )


def _modes(g: float, tanks: tuple[tuple[float, float, float], ...]) -> np.ndarray:
    lam = np.linalg.eigvals(_matrix(g, tanks))
    lam = lam[lam.imag > 0]
    return lam[np.argsort(lam.imag)]


def _margin(g: float, tanks: tuple[tuple[float, float, float], ...], k: int) -> float:
    """g over the gain at which mode k crosses into the right half-plane (bisection)."""
    lo, hi = 0.0, g
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        lo, hi = (lo, mid) if _modes(mid, tanks)[k].real > 0 else (mid, hi)
    return g / hi


def _survivor(g: float, c: float, tanks: tuple[tuple[float, float, float], ...]) -> int:
    """The mode whose spectral line dominates the settled tail of the integration."""
    (r1, l1, c1), (r2, l2, c2) = tanks

    def rhs(_t: float, x: np.ndarray) -> list[float]:
        v1, i1, v2, i2 = x
        v = v1 + v2
        i = g * (v - c * v**3)
        return [(i - v1 / r1 - i1) / c1, v1 / l1, (i - v2 / r2 - i2) / c2, v2 / l2]

    tend = 250.0
    sol = scipy.integrate.solve_ivp(
        rhs,
        (0.0, tend),
        [1e-3, 0.0, 1e-3, 0.0],
        method="DOP853",
        rtol=1e-8,
        atol=1e-10,
        max_step=0.1,
    )
    t = np.linspace(0.6 * tend, tend, 1 << 14)
    v = np.interp(t, sol.t, sol.y[0] + sol.y[2])
    spec = np.abs(np.fft.rfft(v * np.hanning(v.size)))
    w = TWO_PI * np.fft.rfftfreq(v.size, t[1] - t[0])
    lines = [spec[(w > 0.7 * m.imag) & (w < 1.3 * m.imag)].max() for m in _modes(g, tanks)]
    big = int(np.argmax(lines))
    assert lines[big] > 20.0 * lines[1 - big]  # one mode runs, the other has died
    return big


# (R, L, C) of the two tanks, normalised units; g = 1, c = 0.1
TWO_MODES = [
    # both single-mode states stable (e = 0.67, 0.44): the faster-growing high mode wins,
    # though the low mode has the larger margin (the rule before picked it)
    pytest.param(((3.0, 1.0, 1.0), (1.8, 1 / 9.61, 0.1)), 1, id="bistable-fast-high"),
    # the high mode grows faster, but the low mode (e = 0.80 > 2 × 0.16) invades it
    pytest.param(((5.0, 1.0, 1.0), (1.2, 1 / 9.61, 0.1)), 0, id="invaded-fast-high"),
    # both stable, the low mode grows faster and wins
    pytest.param(((3.0, 1.0, 1.0), (1.8, 1 / 96.1, 1.0)), 0, id="bistable-fast-low"),
]


@pytest.mark.parametrize(("tanks", "wins"), TWO_MODES)
def test_the_two_mode_oscillator_runs_in_the_mode_the_rule_picks(tanks, wins):
    g = 1.0
    lam = _modes(g, tanks)
    assert np.all(lam.real > 0)  # two growing modes
    margins = np.array([_margin(g, tanks, k) for k in range(2)])
    pick = running_mode(np.zeros(2, dtype=int), lam.real, 1.0 - 1.0 / margins, 1)
    assert _survivor(g, 0.1, tanks) == wins
    assert int(pick[0]) == wins


def test_running_mode_leaves_out_modes_not_found_and_boards_without_modes():
    col = np.array([0, 0, 2])
    growth = np.array([np.nan, 3.0, 1.0])
    excess = np.array([0.9, 0.1, 0.5])
    # board 0: the mode of e = 0.9 was not found, so it invades nothing; board 1 has none
    assert running_mode(col, growth, excess, 3).tolist() == [1, -1, 2]


# ---------------------------------------------------------------- ngspice


def _design(name: str, design_id: str):
    designs, answers = load_reference(DATA / name)
    i = next(k for k, d in enumerate(designs) if d.id == design_id)
    return designs[i], answers[i]


@pytest.mark.xfail(
    strict=True,
    reason="cb003: ngspice runs in the choke's mode (23.4 kHz at the tank top) with the "
    "tank's mode phase-locked at its 5th harmonic (116.8 kHz, 10 dB weaker): the waveform's "
    "period is the choke mode's, and the record reads that fundamental; the model runs in "
    "the tank's mode (115.4 kHz, +394 %; -1.3 % from the tank's locked line). This is the "
    "fast model's mode choice (M2), which the Monte Carlo takes on every board; the "
    "validation answer (picker.circuit.validation.model_answers) reads cb003 from its run "
    "from rest, +0.36 % and not bursting, but that run is not made by solve",
)
def test_common_base_clapp_with_a_choke_runs_at_ngspice_s_frequency():
    """cb003: the choke's mode (22 kHz, margin 23) and the tank's (115 kHz, margin 16)
    both grow; the tank's grows seven times faster and (M2) picks it, but in ngspice the
    two lock 5:1 and the waveform repeats at the choke mode's period."""
    d, ngspice = _design("stage_common_base.json", "cb003")
    st = steady_state(d.topo, d.values, d.stray, d.params)
    assert float(st.f_hz) == pytest.approx(float(ngspice["f_hz"]), rel=0.02)


@pytest.mark.ngspice
def test_common_gate_clapp_runs_in_its_low_mode_in_ngspice():
    """cg004: a low mode (0.84 MHz, margin 2.1) and the tank's (10.8 MHz, margin 1.07)
    both grow; the low mode grows five times faster and holds twice the tank's excess
    gain. In ngspice the low mode runs (0.829 MHz, the set's record, read at the
    waveform's fundamental) and the tank's dies (what remains near the tank frequency is
    the low mode's 13th harmonic); the model starts in the low mode."""
    d, _ = _design("stage_common_gate.json", "cg004")
    plan = transient_plan(d.topo, d.values, d.stray, d.params)
    text = write_netlist(d.topo, d.values, d.stray, d.params, title=d.id, cycles=plan.cycles)
    run = transient(text, timeout=120.0)
    t = np.linspace(plan.tail_start, float(run.time[-1]), 1 << 18)
    v = np.interp(t, run.time, run.v)
    spec = np.abs(np.fft.rfft((v - v.mean()) * np.hanning(v.size)))
    f = np.fft.rfftfreq(v.size, t[1] - t[0])
    f_run = f[np.argmax(spec)]
    tank = (f > 0.8 * plan.f0) & (f < 1.2 * plan.f0)
    assert spec[tank].max() < 0.05 * spec.max()  # the tank's mode has died
    # the waveform measurement, hinted at the tank frequency, reads the running mode (the
    # spectrum's strongest line here, within one bin), not its harmonic near the hint
    wave = measure(run.time, run.v, f_hint=plan.f0, tail_start=plan.tail_start)
    assert wave.state == "steady"
    assert wave.f_hz == pytest.approx(f_run, abs=f[1])
    st = steady_state(d.topo, d.values, d.stray, d.params)
    assert float(st.f_start_hz) == pytest.approx(f_run, rel=0.1)


def test_a_design_with_two_growing_modes_carries_the_modes_caution():
    """cb003 (two pole pairs in the right half-plane: its choke's mode and its tank's; in
    ngspice the choke's runs, which the model's rule does not pick) is reported with the
    caution that its mode is not reliably predicted; cb000 and cb001 (one mode or none;
    the mode study's scan of the committed sets found cb003 the set's only design with
    two) are not."""
    from picker.circuit.figures import MODES_CAUTION, nominal_figures
    from picker.tank.board import Parasitics

    for design_id, two in (("cb003", True), ("cb000", False), ("cb001", False)):
        d, _ = _design("stage_common_base.json", design_id)
        figs = nominal_figures(d.topo, d.values, Parasitics(stray=d.stray), d.params)
        assert (MODES_CAUTION in figs["cautions"]) == two, design_id
