"""Run a netlist through ngspice in batch mode and measure its waveform.

ngspice (the Debian/Ubuntu package ``ngspice``) is run as a subprocess with
``-b`` on a copy of the netlist that gains a ``.control`` block writing the
probed node's voltage to a binary raw file (:func:`read_raw`). The waveform is measured by
:func:`picker.circuit.waveform.measure` (carrier from the phase slope of the
band-passed analytic signal, envelope state, amplitude, start-up time, harmonics),
which knows nothing of picker's circuit model. This module runs a program and reads
files, so it belongs to the edge layer; it raises :class:`picker.errors.SolverError`
with a one-line message when ngspice is missing, fails or times out.
"""

from __future__ import annotations

import math
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from picker.circuit.waveform import WaveformMeasurement, measure
from picker.errors import SolverError

__all__ = [
    "CONFIRMED_STATES",
    "REFINE_CARRIER",
    "SETTLING_DRIFT",
    "STEP_REFINE",
    "WARNING_PATTERNS",
    "SimulationResult",
    "Transient",
    "carrier_drift",
    "ngspice_path",
    "read_raw",
    "read_window",
    "refine_step",
    "simulate",
    "step_disagrees",
    "step_note",
    "transient",
    "trapezoid_frequency",
]

#: How much finer :func:`simulate` (``confirm=True``) steps to confirm a burst or an
#: unsettled envelope, and again where the finer run disagrees and still bursts or wanders
#: (the project's choice, no source; see :func:`refine_step`).
STEP_REFINE = (5, 25)
#: States of the envelope that :func:`simulate` (``confirm=True``) confirms at a finer step.
CONFIRMED_STATES = ("bursting", "unsettled")
#: A confirming run that moves the carrier by more than this (relative) replaces the first.
REFINE_CARRIER = 1e-3
#: A steady run whose carrier moves by more than this (relative) from the first half of
#: its measured tail to the second has not settled (the same tenth of a per cent as
#: :data:`REFINE_CARRIER`; the project's choice, no source).
SETTLING_DRIFT = 1e-3

WARNING_PATTERNS = ("floating", "no dc path", "singular matrix", "timestep too small")


@dataclass(frozen=True)
class Transient:
    """A transient run: sample times (s), the probed node's voltage (V), ngspice's own
    ``.meas`` results and the warning lines of its output."""

    time: np.ndarray
    v: np.ndarray
    meas: dict[str, float]
    warnings: tuple[str, ...]
    node: str


@dataclass(frozen=True)
class SimulationResult:
    """What the transient simulation showed.

    ``frequency_hz`` is the carrier from the phase slope, corrected for the trapezoidal
    integration's frequency warping (:func:`trapezoid_frequency`; NaN when it does not
    oscillate); ``amplitude_v`` the peak AC voltage at the probed node over the last
    10 % of the run, ``early_amplitude_v`` the same over 40-50 % of the run;
    ``oscillating`` whether the waveform measurement found an oscillation (steady,
    bursting or unsettled); ``waveform`` the whole measurement
    (:class:`picker.circuit.waveform.WaveformMeasurement`). ``meas`` holds ngspice's
    own ``.meas`` results; ``warnings`` the lines of its output that mention a floating
    node, a missing DC path, a singular matrix or a too-small time step.

    ``step_refined`` is 1 when the run is the netlist's own, or the factor (:data:`STEP_REFINE`)
    its step was refined by when a confirming run (:func:`simulate` with ``confirm``)
    disagreed with it; ``coarse`` is then the measurement at the netlist's own step.

    ``carrier_drift`` is, for a steady run, the carrier over the second half of the
    measured tail relative to the first, minus one (:func:`carrier_drift`); NaN
    otherwise. Beyond :data:`SETTLING_DRIFT` the board's bias was still settling when
    the run ended, and the carrier read is not its final one.
    """

    frequency_hz: float
    amplitude_v: float
    early_amplitude_v: float
    oscillating: bool
    meas: dict[str, float]
    warnings: tuple[str, ...]
    node: str
    waveform: WaveformMeasurement
    step_refined: int = 1
    coarse: WaveformMeasurement | None = None
    carrier_drift: float = math.nan

    @property
    def drifting(self) -> bool:
        """Whether the steady carrier still moved across the measured tail by more than
        :data:`SETTLING_DRIFT` (the bias had not settled)."""
        d = self.carrier_drift
        return math.isfinite(d) and abs(d) > SETTLING_DRIFT


def ngspice_path() -> str:
    """Path of the ngspice executable, or a SolverError saying how to get it."""
    exe = shutil.which("ngspice")
    if exe is None:
        raise SolverError(
            "ngspice is not installed or not on PATH; install it (Debian/Ubuntu: "
            "apt-get install ngspice) to use simulate"
        )
    return exe


def _peak(time: np.ndarray, v: np.ndarray, lo: float, hi: float) -> float:
    """Half the peak-to-peak of ``v`` over lo <= time <= hi (0.0 where no sample)."""
    sel = (time >= lo) & (time <= hi)
    if not np.any(sel):
        return 0.0
    return float(0.5 * (v[sel].max() - v[sel].min()))


def refine_step(netlist: str, factor: float) -> str:
    """``netlist`` with its ``.tran`` print step and largest step (TSTEP and TMAX) divided
    by ``factor``; the stop time stays.

    The trapezoidal rule, ngspice's default, does not damp: at a step near a sixtieth of the
    carrier period it can ring on a transistor's fast switching and turn a steady
    oscillator into one that bursts or wanders, where a step five times smaller (or the
    damped Gear method at the same step) runs steady (Hairer & Wanner, *Solving Ordinary
    Differential Equations II*, IV.3: the trapezoidal rule is A-stable but not L-stable,
    so stiff components are not damped). :func:`simulate` uses this to confirm a burst.

    Raises
    ------
    SolverError
        The netlist has no ``.tran TSTEP TSTOP ...`` line.
    """
    lines = netlist.splitlines(keepends=True)
    for i, line in enumerate(lines):
        words = line.split()
        if len(words) >= 3 and words[0].lower() == ".tran":
            try:
                step = float(words[1])
                tmax = float(words[4]) if len(words) >= 5 else step
            except ValueError:
                break
            rest = words[5:]
            new = [".tran", f"{step / factor:.6g}", words[2], words[3] if len(words) > 3 else "0"]
            new.append(f"{tmax / factor:.6g}")
            lines[i] = " ".join(new + rest) + "\n"
            return "".join(lines)
    raise SolverError("the netlist has no .tran TSTEP TSTOP line to refine")


def trapezoid_frequency(f_measured: float, step: float) -> float:
    """The frequency an oscillation has once ngspice's trapezoidal integration is undone, Hz.

    The trapezoidal rule at a fixed step h turns a resonance at ω into one at ω_d with
    tan(ω_d·h/2) = ω·h/2 — the frequency warping of the bilinear transform (Oppenheim &
    Schafer, *Discrete-Time Signal Processing*, bilinear transformation) — so a simulated
    oscillator runs slow by about (ω·h)²/12: 0.09 % at 60 steps per period, as large as
    the accuracy being checked. Inverted: f = tan(π·f_d·h)/(π·h).
    """
    x = math.pi * f_measured * step
    if not math.isfinite(x) or x <= 0 or x >= 0.5 * math.pi:
        return f_measured
    return math.tan(x) / (math.pi * step)


def read_raw(raw: bytes) -> np.ndarray:
    """The table of a binary ngspice raw file of real vectors (points × variables).

    The raw format (ngspice manual, "write" command and appendix on the raw file
    format): text header lines ``Key: value`` ending with ``Binary:``, then each point's
    variables as 8-byte floats in the machine's byte order, the first being time.
    Reading it is about a hundred times faster than parsing ``wrdata`` text.

    Raises
    ------
    SolverError
        Not a raw file of real vectors, or shorter than its header says.
    """
    mark = raw.find(b"Binary:\n")
    if mark < 0:
        raise SolverError("ngspice wrote unreadable data: no binary section in its raw file")
    head = raw[:mark].decode("ascii", errors="replace")
    fields = dict(
        (k.strip().lower(), v.strip())
        for k, _, v in (line.partition(":") for line in head.splitlines())
        if v
    )
    try:
        nvar, npts = int(fields["no. variables"]), int(fields["no. points"])
    except (KeyError, ValueError):
        raise SolverError("ngspice wrote unreadable data: no variable or point count") from None
    if "complex" in fields.get("flags", "").lower():
        raise SolverError("ngspice wrote complex data; expected a transient")
    body = raw[mark + len(b"Binary:\n") :]
    if nvar < 1 or len(body) < 8 * nvar * npts:
        raise SolverError(f"ngspice wrote {len(body) // 8} values; expected {nvar}×{npts}")
    return np.frombuffer(body, dtype=np.float64, count=nvar * npts).reshape(npts, nvar)


def transient(netlist: str, *, node: str = "t", timeout: float = 60.0) -> Transient:
    """Run ``netlist`` (text ending in ``.end``) in ngspice and return ``v(node)``.

    Raises
    ------
    SolverError
        ngspice missing, exiting with an error, timing out, or writing no data.
    """
    exe = ngspice_path()
    with tempfile.TemporaryDirectory(prefix="picker-ngspice-") as tmp:
        out = Path(tmp) / "wave.raw"
        body = netlist.rstrip()
        if not body.lower().endswith(".end"):
            raise SolverError("the netlist does not end with .end")
        deck = body[: -len(".end")] + (
            f".control\nset filetype=binary\nrun\nwrite {out} v({node})\nquit\n.endc\n.end\n"
        )
        cir = Path(tmp) / "deck.cir"
        cir.write_text(deck, encoding="utf-8")
        try:
            proc = subprocess.run(
                [exe, "-b", str(cir)],
                capture_output=True,
                text=True,
                timeout=timeout,
                cwd=tmp,
                check=False,
            )
        except subprocess.TimeoutExpired:
            raise SolverError(f"ngspice did not finish within {timeout:g} s") from None
        text = proc.stdout + "\n" + proc.stderr
        if proc.returncode != 0 or not out.exists():
            last = " | ".join(line.strip() for line in text.strip().splitlines()[-3:])
            raise SolverError(f"ngspice failed (exit {proc.returncode}): {last}")
        data = read_raw(out.read_bytes())
    if data.shape[0] < 16 or data.shape[1] < 2:
        raise SolverError(f"ngspice wrote {data.shape[0]} samples; expected a transient")
    meas = {}
    for m in re.finditer(r"^\s*(\w+)\s*=\s*([-+0-9.eE]+)", proc.stdout, flags=re.MULTILINE):
        try:
            meas[m.group(1).lower()] = float(m.group(2))
        except ValueError:
            continue
    warnings = tuple(
        line.strip()
        for line in text.splitlines()
        if any(p in line.lower() for p in WARNING_PATTERNS)
    )
    return Transient(data[:, 0], data[:, 1], meas, warnings, node)


def simulate(
    netlist: str,
    *,
    node: str = "t",
    timeout: float = 60.0,
    f_hint: float | None = None,
    tail_start: float | None = None,
    t_kick: float = 0.0,
    confirm: bool = False,
) -> SimulationResult:
    """Run ``netlist`` in ngspice and measure ``v(node)`` (:func:`transient`, then
    :func:`picker.circuit.waveform.measure` with ``f_hint``, ``tail_start`` and
    ``t_kick``; the tail defaults to the second half of the run).

    With ``confirm``, a run whose envelope bursts or stays unsettled
    (:data:`CONFIRMED_STATES`) is run again with a five times finer step
    (:data:`STEP_REFINE`, :func:`refine_step`; ``timeout`` scaled alike): where the two
    disagree (another state, or the carrier moved by more than :data:`REFINE_CARRIER`)
    the burst was the trapezoidal rule's, not the circuit's, and the finer run is
    returned (``step_refined``, with the first run's measurement as ``coarse``); where
    the finer run disagrees and its envelope still bursts or is unsettled, it is checked the
    same way at a 25 times finer step (a burst seen at two steps is the circuit's). Steady boards and boards that do not start pay nothing.

    Raises
    ------
    SolverError
        ngspice missing, exiting with an error, timing out, or writing no data.
    """
    first = _simulate_once(netlist, node, timeout, f_hint, tail_start, t_kick)
    best, factor = first, 1
    for finer in STEP_REFINE if confirm else ():
        # a burst is confirmed by a finer run that bursts too; a finer run that moved
        # the reading and still bursts or wanders is looked at once more (hy001 of the
        # Hartley set: 999.6 kHz at the netlist's step, 1028.5 kHz at 5x, 995.1 kHz at
        # 25x and at 125x, trapezoidal or Gear)
        if best.waveform.state not in CONFIRMED_STATES:
            break
        fine = _simulate_once(
            refine_step(netlist, finer), node, timeout * finer, f_hint, tail_start, t_kick
        )
        if not step_disagrees(best.waveform, fine.waveform):
            break  # two steps agree: the coarser of them stands
        best, factor = fine, finer
    if factor == 1:
        return first
    return replace(best, step_refined=factor, coarse=first.waveform)


def step_note(sim: SimulationResult) -> dict[str, Any]:
    """``{"step_refined": ...}`` where the run that counts is a finer-step one (the
    netlist's own step burst or wandered, the finer one did not: the trapezoidal rule's
    artefact, :func:`simulate` with ``confirm``): the factor and
    what the netlist's own step showed; empty otherwise."""
    if sim.coarse is None:
        return {}
    c = sim.coarse.to_dict()
    return {
        "step_refined": {
            "factor": sim.step_refined,
            "state_at_netlist_step": c["state"],
            "f_hz_at_netlist_step": c["f_hz"],
            "amplitude_v_at_netlist_step": c["amplitude_v"],
        }
    }


def step_disagrees(coarse: WaveformMeasurement, fine: WaveformMeasurement) -> bool:
    """Whether a run at a finer step tells another story than the netlist's own: another
    envelope state, or a carrier moved by more than :data:`REFINE_CARRIER`."""
    if coarse.state != fine.state:
        return True
    if not (coarse.oscillating and math.isfinite(coarse.f_hz) and math.isfinite(fine.f_hz)):
        return False
    return abs(fine.f_hz / coarse.f_hz - 1.0) > REFINE_CARRIER


def read_window(
    time: np.ndarray,
    v: np.ndarray,
    f_hint: float | None,
    t_kick: float,
    start: float,
    stop: float,
) -> tuple[str, float]:
    """The envelope state and the carrier of ``v`` read from ``start`` to ``stop``, s
    (:func:`picker.circuit.waveform.measure`, the carrier corrected for the trapezoidal
    rule's warping at the window's typical step; NaN where it does not oscillate)."""
    keep = time <= stop
    t = time[keep]
    w = measure(t, v[keep], f_hint=f_hint, tail_start=start, t_kick=t_kick)
    if not (w.oscillating and math.isfinite(w.f_hz)):
        return w.state, math.nan
    step = float(np.median(np.diff(t[t >= start])))
    return w.state, trapezoid_frequency(w.f_hz, step)


def carrier_drift(
    time: np.ndarray,
    v: np.ndarray,
    wave: WaveformMeasurement,
    f_hint: float | None,
    t_kick: float = 0.0,
) -> float:
    """How far the carrier moved across the measured tail of a run: its reading over the
    tail's second half relative to its first, minus one (each read as ``wave`` was,
    :func:`read_window`); NaN where a half shows no oscillation.

    A steady board whose bias is still settling keeps moving: the series-capacitor
    Hartley set's hs021, as first drawn, moved −0.44 % across its record's tail and settled 1.4 % below
    the record in a run four times as long (tests/validation/README.md)."""
    t0 = float(wave.tail_start_s)
    stop = float(time[-1])
    mid = 0.5 * (t0 + stop)
    first = read_window(time, v, f_hint, t_kick, t0, mid)[1]
    second = read_window(time, v, f_hint, t_kick, mid, stop)[1]
    return second / first - 1.0


def _simulate_once(
    netlist: str,
    node: str,
    timeout: float,
    f_hint: float | None,
    tail_start: float | None,
    t_kick: float,
) -> SimulationResult:
    """One run of :func:`simulate` (no confirmation)."""
    run = transient(netlist, node=node, timeout=timeout)
    time, v = run.time, run.v
    tstop = float(time[-1])
    wave = measure(time, v, f_hint=f_hint, tail_start=tail_start, t_kick=t_kick)
    if wave.oscillating:  # undo the integration's frequency warping at the typical step
        t0 = float(wave.tail_start_s)
        step = float(np.median(np.diff(time[time >= t0])))
        wave = replace(wave, f_hz=trapezoid_frequency(wave.f_hz, step))
    drift = carrier_drift(time, v, wave, f_hint, t_kick) if wave.state == "steady" else math.nan
    return SimulationResult(
        carrier_drift=drift,
        frequency_hz=wave.f_hz,
        amplitude_v=_peak(time, v, 0.9 * tstop, tstop),
        early_amplitude_v=_peak(time, v, 0.4 * tstop, 0.5 * tstop),
        oscillating=wave.oscillating,
        meas=run.meas,
        warnings=run.warnings,
        node=node,
        waveform=wave,
    )
