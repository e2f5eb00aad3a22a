"""Measure an oscillator's waveform: carrier, amplitude, envelope state, start-up, harmonics.

Written independently of picker's circuit model (nothing here knows a tank or a
transistor): it reads a sampled voltage ``v(time)`` — a transient from ngspice, or a
synthetic test signal — and returns what a bench engineer would read off an
oscilloscope and a spectrum analyser.

Method
------
1. The samples are put on a uniform grid (linear interpolation; a SPICE transient has a
   variable time step).
2. The carrier's spectral peak is found in a Hann-windowed spectrum of the settled tail
   (optionally searched only within a factor of two of a hint). Where that line is a
   harmonic of a stronger, lower one — phase-locked to it at a whole multiple, as the
   harmonics of a clipped oscillation running below the hint's window are, or a second
   mode entrained at a multiple of the first — the waveform is periodic at the lower
   one, and that fundamental is the carrier (a bench engineer reads the period of the
   waveform); a burst's carrier stays the carrier (:func:`_fundamental`).
3. The waveform is band-passed around that peak (Butterworth, run forwards and backwards
   so it adds no phase: ``scipy.signal.sosfiltfilt``), and the analytic signal
   z = x + j·H{x} is formed (``scipy.signal.hilbert``; Gabor, "Theory of communication",
   J. IEE 93 (1946)). Its magnitude, averaged over three carrier periods, is the
   envelope; its phase is the carrier phase.
4. **Carrier frequency**: the slope of the unwrapped phase, f = (1/2π)·dφ/dt: the phase
   advanced over the samples inside the bursts (envelope above half its 98th percentile,
   five periods or more from a burst's edge, where the band-pass rings) divided by the
   time they span. Unlike counting zero crossings, this is right on a clipped
   waveform and on a waveform that comes and goes in bursts (a zero-crossing count
   over a bursting record averages the gaps in).
5. **Envelope state** over the tail: "none" when the envelope stays at the noise level
   (or dies away), "bursting" when its 2nd percentile is below 0.2 of its 98th,
   "steady" when the modulation (max − min)/(max + min) is below 0.1, otherwise
   "unsettled" (still growing or wandering). The thresholds are the project's
   definitions (picker issue 11), not a standard.
6. **Amplitude**: half the peak-to-peak voltage over the tail (the peak AC voltage at
   the probed node), and the fundamental's peak (the envelope's median over the tail).
7. **Start-up time**: from the disturbance (``t_kick``) to the first time the envelope
   reaches 90 % of its settled value (the median over the tail); not measured (NaN)
   where the envelope is there already before the kick (the filter spreads a pulse
   train's first pulses back over it).
8. **Harmonics**: power of the 2nd and 3rd harmonic relative to the fundamental, dBc,
   each summed over the Hann window's main lobe (±4 bins, so the result does not depend
   on where the tone falls between bins; Harris, "On the use of windows for harmonic
   analysis with the discrete Fourier transform", Proc. IEEE 66 (1978)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import fft as sp_fft
from scipy import ndimage, signal

from picker.units import json_number

__all__ = [
    "BURST_RATIO",
    "COMB",
    "LOCKED",
    "STEADY_MODULATION",
    "WaveformMeasurement",
    "envelope_state",
    "measure",
]

#: "bursting" when the envelope's 2nd percentile is below this fraction of its 98th.
BURST_RATIO = 0.2
#: "steady" when the envelope's modulation (max − min)/(max + min) is below this.
STEADY_MODULATION = 0.1
#: Phase-locking value at or above which a line is a harmonic of a stronger, lower one
#: (picker's threshold, not a standard: 0.99-1.00 on the locked ngspice records, below
#: 0.1 for two independent tones that drift a cycle apart over the record).
LOCKED = 0.9
#: A line at the carrier's 1/n is the waveform's fundamental only where the lines next to
#: the carrier's, one such spacing away, hold at least this fraction of its magnitude
#: (−10 dB; picker's threshold, not a standard: :func:`_fundamental`) ...
COMB = 10.0 ** (-10.0 / 20.0)
#: ... for n up to this ...
_COMB_ORDER = 8
#: ... each line found within this fraction of where it is expected.
_COMB_SLACK = 0.015
#: Main-lobe half-width, in bins, over which each harmonic's power is summed.
_LOBE = 4


@dataclass(frozen=True)
class WaveformMeasurement:
    """What the waveform shows (floats in SI units; NaN where not defined).

    Attributes
    ----------
    state: "none" (no oscillation), "steady", "bursting" or "unsettled".
    f_hz: carrier frequency from the phase slope inside the bursts, Hz.
    amplitude_v: half the peak-to-peak voltage over the tail, V.
    fundamental_v: the fundamental's peak (median envelope over the tail), V.
    modulation: (max − min)/(max + min) of the envelope over the tail.
    envelope_low, envelope_high: 2nd and 98th percentiles of the envelope over the tail, V.
    startup_time_s: from ``t_kick`` to the envelope's first reaching 90 % of its settled
        value (where it bursts, of the bursts' height: the first burst's crest), s; NaN
        where the envelope is there already before the kick.
    harmonics_dbc: (2nd, 3rd) harmonic relative to the fundamental, dBc.
    tail_start_s: where the analysed tail begins, s.
    """

    state: str
    f_hz: float
    amplitude_v: float
    fundamental_v: float
    modulation: float
    envelope_low: float
    envelope_high: float
    startup_time_s: float
    harmonics_dbc: tuple[float, float]
    tail_start_s: float

    @property
    def oscillating(self) -> bool:
        """Whether it oscillates at all (steady, bursting or unsettled)."""
        return self.state != "none"

    def to_dict(self) -> dict[str, object]:
        """Plain JSON-ready numbers (NaN as None)."""
        return {
            "state": self.state,
            "f_hz": json_number(self.f_hz),
            "amplitude_v": json_number(self.amplitude_v),
            "fundamental_v": json_number(self.fundamental_v),
            "modulation": json_number(self.modulation),
            "envelope_low_v": json_number(self.envelope_low),
            "envelope_high_v": json_number(self.envelope_high),
            "startup_time_s": json_number(self.startup_time_s),
            "harmonics_dbc": [json_number(h) for h in self.harmonics_dbc],
        }


def envelope_state(envelope: np.ndarray, noise_v: float) -> tuple[str, float, float, float]:
    """Classify an envelope record: (state, modulation, 2nd percentile, 98th percentile).

    "none" when the 98th percentile is below ``noise_v`` or the envelope dies away (the
    largest value of each fifth of the record falls, the last one below half the first),
    "bursting" when the 2nd percentile is below :data:`BURST_RATIO` of the 98th,
    "steady" when (max − min)/(max + min) < :data:`STEADY_MODULATION`, else "unsettled".
    """
    env = np.asarray(envelope, dtype=float)
    lo, hi = (float(x) for x in np.percentile(env, [2.0, 98.0]))
    top, bottom = float(env.max()), float(env.min())
    mod = (top - bottom) / (top + bottom) if top + bottom > 0 else float("nan")
    # dies away: the largest value of each fifth of the record falls, to below half
    fifths = np.array([part.max() for part in np.array_split(env, 5) if part.size])
    dies = bool(np.all(np.diff(fifths) < 0) and fifths[-1] < 0.5 * fifths[0])
    if hi < noise_v or dies:
        return "none", mod, lo, hi
    if lo < BURST_RATIO * hi:
        return "bursting", mod, lo, hi
    if mod < STEADY_MODULATION:
        return "steady", mod, lo, hi
    return "unsettled", mod, lo, hi


def _uniform(time: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """Resample onto a uniform grid at the median time step: (t, v, dt)."""
    t = np.asarray(time, dtype=float)
    x = np.asarray(v, dtype=float)
    keep = np.concatenate(([True], np.diff(t) > 0))  # SPICE may repeat a time point
    t, x = t[keep], x[keep]
    dt = float(np.median(np.diff(t)))
    n = int(np.floor((t[-1] - t[0]) / dt)) + 1
    tu = t[0] + dt * np.arange(n)
    return tu, np.interp(tu, t, x), dt


def _spectrum(x: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Magnitude of the Hann-windowed spectrum of ``x`` (mean removed) and its
    frequencies, Hz."""
    spec = np.abs(np.fft.rfft((x - x.mean()) * np.hanning(x.size)))
    return spec, np.fft.rfftfreq(x.size, dt)


def _peak_in(spec: np.ndarray, f: np.ndarray, band: np.ndarray) -> tuple[float, float]:
    """(frequency, magnitude) of the largest peak of ``spec`` within ``band``, the
    frequency refined by a parabola through the log-magnitude of the peak bin and its
    neighbours (NaN, 0 where the band is empty)."""
    if not np.any(band):
        return float("nan"), 0.0
    idx = np.nonzero(band)[0]
    k = int(idx[np.argmax(spec[idx])])
    if 0 < k < spec.size - 1:  # parabolic interpolation of the log-magnitude peak
        a, b, c = np.log(spec[k - 1 : k + 2] + 1e-300)
        den = a - 2 * b + c
        shift = 0.5 * (a - c) / den if den != 0 else 0.0
        return float((k + shift) * (f[1] - f[0])), float(spec[k])
    return float(f[k]), float(spec[k])


def _peak_frequency(x: np.ndarray, dt: float, f_hint: float | None) -> float:
    """Frequency of the largest peak of the Hann-windowed spectrum of ``x``, Hz
    (within [f_hint/2, 2·f_hint] when a hint is given; above five cycles of the record
    otherwise), refined by a parabola through the peak bin and its neighbours."""
    spec, f = _spectrum(x, dt)
    if f_hint is not None:
        band = (f >= 0.5 * f_hint) & (f <= 2.0 * f_hint)
    else:
        band = f >= 5.0 / (x.size * dt)
    return _peak_in(spec, f, band)[0]


def _analytic(x: np.ndarray, fs: float, lo: float, hi: float, pad: int) -> np.ndarray:
    """The analytic signal of ``x`` band-passed to [lo, hi] Hz (4th-order Butterworth,
    run forwards and backwards: no phase added)."""
    sos = signal.butter(4, [lo, hi], btype="bandpass", fs=fs, output="sos")
    y = signal.sosfiltfilt(sos, x, padlen=min(pad, x.size - 1))
    # (transform length rounded up to a fast FFT size; the zeros added lie past the end)
    return signal.hilbert(y, N=sp_fft.next_fast_len(y.size))[: y.size]


def _fundamental(
    x: np.ndarray,
    dt: float,
    f_pk: float,
    spectrum: tuple[np.ndarray, np.ndarray] | None = None,
) -> float:
    """The fundamental of a periodic waveform whose line at ``f_pk`` is one of its
    harmonics, Hz; ``f_pk`` itself where it is not (``spectrum``: x's, :func:`_spectrum`,
    where the caller has it: the recursion below passes it down).

    Two kinds of line are candidate fundamentals f₁ (above five cycles of the record),
    each where ``f_pk`` lies within a quarter of f₁ of a multiple n·f₁, n ≥ 2:

    * the strongest line of the whole spectrum below ``f_pk``/1.5, where it is stronger
      than the line at ``f_pk`` (a clipped oscillation running below the hint's window);
    * a line at ``f_pk``/n, however weak, where the waveform's lines next to ``f_pk``,
      at ``f_pk`` ± f₁, hold at least :data:`COMB` of its magnitude: a comb of
      comparable harmonics spaced f₁, as a relaxation's pulse train makes (the
      series-capacitor Hartley hs004 of the validation sets: lines at 2-4 × 32.5 kHz
      within 4 dB of each other, the fundamental itself 17 dB below them). A spur at
      half the carrier (an orbit beside a period doubling, whose lines at ½ and 3/2 of
      the carrier are weak) is not such a comb.

    The lowest candidate whose n-th harmonic is phase-locked to it is the fundamental
    (or, where it is itself a harmonic of a lower one by the same rules, that one):
    the phase-locking value |⟨exp(j·(φₙ − n·φ₁))⟩| of the two narrow-band analytic
    signals (f₁ ± 30 %, f_pk ± 0.3·f₁) is at least :data:`LOCKED` (Lachaux et al.,
    "Measuring phase synchrony in brain signals", Hum. Brain Mapp. 8 (1999)). Two tones
    that run independently (incommensurate, or a burst rate and the carrier inside the
    bursts) drift apart in phase and are not locked; a clipped oscillation whose n-th
    harmonic falls near the hint, or a second mode entrained at a multiple of the first,
    is.
    """
    spec, f = _spectrum(x, dt) if spectrum is None else spectrum  # (x's, passed down)
    df = f[1] - f[0]
    lowest = 5.0 / (x.size * dt)
    k_pk = int(round(f_pk / df))
    mag_pk = float(spec[k_pk])
    candidates: list[float] = []
    f_1, mag_1 = _peak_in(spec, f, (f >= lowest) & (f <= f_pk / 1.5))
    if np.isfinite(f_1) and f_1 > 0 and mag_1 > mag_pk:
        candidates.append(f_1)
    for n in range(2, _COMB_ORDER + 1):
        f_n = f_pk / n
        if f_n < lowest:
            break
        near = np.abs(f - f_n) <= max(_COMB_SLACK * f_n, 2.0 * df)
        line, _ = _peak_in(spec, f, near)
        if not np.isfinite(line):
            continue
        side = max(
            _peak_in(spec, f, np.abs(f - (f_pk + s * line)) <= max(_COMB_SLACK * line, 2.0 * df))[1]
            for s in (-1.0, 1.0)
        )
        if side >= COMB * mag_pk:
            candidates.append(line)
    for f_1 in sorted(candidates):
        if _locked(x, dt, f_1, f_pk, spec, f):
            # f₁ may in turn be a harmonic of a lower line (a comb found from its 2nd)
            return _fundamental(x, dt, f_1, (spec, f))
    return f_pk


def _locked(
    x: np.ndarray, dt: float, f_1: float, f_pk: float, spec: np.ndarray, f: np.ndarray
) -> bool:
    """Whether ``f_pk`` is a harmonic of a line at ``f_1`` phase-locked to it
    (:func:`_fundamental`)."""
    k = int(round(f_1 / (f[1] - f[0])))
    if not spec[k - 1] < spec[k] > spec[k + 1]:  # the band's edge, not a line
        return False
    n = int(round(f_pk / f_1))
    if n < 2 or abs(f_pk / f_1 - n) > 0.25:
        return False
    fs = 1.0 / dt
    pad = int(5 * fs / f_1)
    x0 = x - x.mean()
    z1 = _analytic(x0, fs, 0.7 * f_1, 1.3 * f_1, pad)
    zn = _analytic(x0, fs, f_pk - 0.3 * f_1, f_pk + 0.3 * f_1, pad)
    # leave out five fundamental periods at each end, where the narrow filters ring (a
    # phase error of the fundamental counts n times)
    edge = min(int(5 * fs / f_1), x.size // 4)
    phi = np.angle(zn) - n * np.unwrap(np.angle(z1))
    plv = float(np.abs(np.mean(np.exp(1j * phi[edge : x.size - edge]))))
    return plv >= LOCKED


def _erode(mask: np.ndarray, k: int) -> np.ndarray:
    """``mask`` where every sample within ``k`` on either side is also set (the
    erosion by a window of 2k + 1 samples; outside the record counts as unset)."""
    bad = np.concatenate(([0], np.cumsum(~mask)))
    i = np.arange(mask.size)
    lo, hi = i - k, i + k + 1
    inside_record = (lo >= 0) & (hi <= mask.size)
    count = bad[np.clip(hi, 0, mask.size)] - bad[np.clip(lo, 0, mask.size)]
    return mask & inside_record & (count == 0)


def _harmonics(x: np.ndarray, dt: float, f_c: float) -> tuple[float, float]:
    """2nd and 3rd harmonic power relative to the fundamental, dBc (main lobe sums)."""
    spec = np.abs(np.fft.rfft((x - x.mean()) * np.hanning(x.size))) ** 2
    df = 1.0 / (x.size * dt)
    power = []
    for k in (1, 2, 3):
        centre = int(round(k * f_c / df))
        if centre + _LOBE >= spec.size or centre - _LOBE < 1:
            power.append(float("nan"))
            continue
        power.append(float(spec[centre - _LOBE : centre + _LOBE + 1].sum()))
    p1 = power[0]
    out = [10.0 * np.log10(p / p1) if p1 > 0 and p > 0 else float("nan") for p in power[1:]]
    return float(out[0]), float(out[1])


@dataclass(frozen=True)
class _Band:
    """The waveform band-passed around a line at ``f`` (0.6–1.4·f): its analytic signal
    ``z``, envelope ``env``, the tail samples ``sel`` the state is read over, the samples
    per period, and the envelope's state, modulation and 2nd/98th percentiles."""

    z: np.ndarray
    env: np.ndarray
    sel: np.ndarray
    period: float
    state: str
    modulation: float
    low: float
    high: float

    @classmethod
    def of(cls, x: np.ndarray, tail: np.ndarray, fs: float, f: float, noise_v: float) -> _Band:
        # band-pass around the line (4th-order Butterworth band, zero phase), then the
        # analytic signal: envelope |z| and phase arg z
        # (padded by 20 periods, so the filter's start and end transients stay short)
        period = fs / f  # samples per period
        z = _analytic(x, fs, 0.6 * f, 1.4 * f, int(20 * period))
        # the envelope: |z| averaged over three periods (cycle-to-cycle ripple of a
        # distorted waveform is not a change of amplitude)
        env = ndimage.uniform_filter1d(np.abs(z), size=max(int(3 * period), 1), mode="nearest")
        # leave out the last ten periods: the filter's and the transform's end effects
        edge = int(np.ceil(10.0 * period))
        sel = tail.copy()
        if np.count_nonzero(sel) > 2 * edge + 16:
            sel[-edge:] = False
        state, mod, lo, hi = envelope_state(env[sel], noise_v)
        return cls(z, env, sel, period, state, mod, lo, hi)


def measure(
    time: np.ndarray,
    v: np.ndarray,
    *,
    f_hint: float | None = None,
    tail_start: float | None = None,
    t_kick: float = 0.0,
    noise_v: float = 1e-3,
) -> WaveformMeasurement:
    """Measure a sampled oscillator waveform (see the module docstring for the method).

    Parameters
    ----------
    time, v:
        Sample times (s, increasing) and voltages (V), 1-D.
    f_hint:
        Where to look for the carrier (the spectral peak is searched within a factor of
        two of it), Hz; ``None``: anywhere above five cycles of the tail.
    tail_start:
        Start of the settled tail the state, frequency, amplitude and harmonics are taken
        over, s; ``None``: the second half of the record.
    t_kick:
        When the disturbance that starts the oscillation was applied, s.
    noise_v:
        Envelope level below which there is no oscillation, V.

    Returns
    -------
    WaveformMeasurement
    """
    t, x, dt = _uniform(time, v)
    t0 = 0.5 * (t[0] + t[-1]) if tail_start is None else float(tail_start)
    tail = t >= t0
    nan = float("nan")
    if np.count_nonzero(tail) < 16:
        raise ValueError("the record's tail holds fewer than 16 samples")
    xt = x[tail]
    swing = 0.5 * float(xt.max() - xt.min())
    f_pk = _peak_frequency(xt, dt, f_hint)
    fs = 1.0 / dt
    if not np.isfinite(f_pk) or f_pk <= 0 or 1.4 * f_pk >= 0.5 * fs:
        return WaveformMeasurement(
            "none", nan, swing, nan, nan, nan, nan, nan, (nan, nan), float(t0)
        )
    band = _Band.of(x - x[tail].mean(), tail, fs, f_pk, noise_v)
    if band.state != "bursting":
        # the line found may be a harmonic of a lower one, the waveform's fundamental:
        # the board runs at that one (a burst's carrier stays the carrier: the bias
        # swinging at the burst rate is not the oscillation, nor is the repetition of
        # bursts a few carrier periods long, picker issue 11's definition)
        f_1 = _fundamental(xt, dt, f_pk)
        if f_1 != f_pk:
            low = _Band.of(x - x[tail].mean(), tail, fs, f_1, noise_v)
            if low.state != "none":
                band = low
    z, env, sel, period = band.z, band.env, band.sel, band.period
    state, mod, lo, hi = band.state, band.modulation, band.low, band.high
    fundamental = float(np.median(env[sel]))
    if state == "none":
        return WaveformMeasurement(
            state, nan, swing, fundamental, mod, lo, hi, nan, (nan, nan), float(t0)
        )
    # carrier: phase slope inside the bursts — the phase advanced over the samples inside
    # them divided by the time they span (runs of samples, so the gaps do not count)
    dphi = np.angle(z[1:] * np.conj(z[:-1]))  # phase step per sample, in (−π, π]
    inside = sel[1:] & (env[1:] > 0.5 * hi) & (env[:-1] > 0.5 * hi)
    # away from the burst edges by five periods, where the band-pass rings
    kept = _erode(inside, int(5 * period))
    if np.count_nonzero(kept) >= 16:
        inside = kept
    f_c = float(np.sum(dphi[inside]) / (np.count_nonzero(inside) * dt) / (2.0 * np.pi))
    # start-up: first time the envelope reaches 90 % of its settled value; a bursting
    # envelope's median lies in the gaps, so there the bursts' height (its 98th
    # percentile) is the settled value: the time to the first burst's crest
    after = t >= t_kick
    settled = hi if state == "bursting" else fundamental
    reach = np.nonzero(after & (env >= 0.9 * settled))[0]
    startup = float(t[reach[0]] - t_kick) if reach.size else nan
    # an envelope already at 90 % before the kick has no start-up the envelope resolves:
    # the band-pass, run forwards and backwards, and the three-period average spread
    # the first pulses back over the kick (a relaxation's pulse train starts with its
    # first pulse), and the time read would be the grid's step (picoseconds on the
    # series Hartley set's hs004): not measured
    if reach.size and (reach[0] == 0 or env[reach[0] - 1] >= 0.9 * settled):
        startup = nan
    return WaveformMeasurement(
        state=state,
        f_hz=f_c,
        amplitude_v=swing,
        fundamental_v=fundamental,
        modulation=mod,
        envelope_low=lo,
        envelope_high=hi,
        startup_time_s=startup,
        harmonics_dbc=_harmonics(xt, dt, f_c),
        tail_start_s=float(t0),
    )
