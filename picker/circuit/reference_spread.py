"""How firmly ngspice pins a reference record's carrier: the same netlist run again.

A validation record (:mod:`picker.circuit.validation`) is one ngspice run of picker's
netlist, measured by :func:`picker.circuit.waveform.measure`. For a steady oscillator
that reading is a property of the circuit: a finer step or another integration method
moves it by a few tenths of a per cent at most. For a board that bursts it need not be:
the carrier inside short bursts chirps, which part of the chirp the bursts weight
depends on rounding, and some boards switch between two regimes during the run (the
tapped Hartley set's ht009 reads 106.8 kHz over the first half of its tail and
99.3 kHz over the second). A model cannot be held to 2 % of a figure that the reference
itself does not hold to 2 %.

So each record that bursts, wanders, or was confirmed at a finer step (its netlist's own
step told another story, :func:`picker.circuit.ngspice.simulate`) is run again
(:data:`RERUNS`): by the trapezoidal rule, ngspice's default and the records' own
method, at the netlist's step and at a five times finer one, and by Gear's method at the
finer step; each run is read over the record's tail and over each half of it
(:func:`rerun`). Gear's method at the netlist's own step is left out: it damps the fast
conduction pulses and changes how bursts grow (the model's BDF2 did so at 64 steps a
period, :mod:`picker.circuit.burst_carrier`), so it reads a different circuit.

A record is **settled** where every such reading oscillates and lies within
:data:`SETTLED` of the record's carrier (:func:`drift`): half the 2 % the model is held
to, so that a model exactly right about the circuit is within 2 % of the record whatever
reading the record happens to be. That fraction is picker's choice, not a standard (the
practice of checking a tolerance with a reference several times finer than it, common
practice, no source).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from picker.circuit.ngspice import read_window, refine_step, transient
from picker.errors import SolverError

__all__ = ["RERUNS", "SETTLED", "WINDOWS", "drift", "rerun", "span", "span_error", "wants_rerun"]

#: The runs (name, integration method, step divisor) each record is read from again.
RERUNS: tuple[tuple[str, str, int], ...] = (
    ("trap_x1", "trap", 1),
    ("trap_x5", "trap", 5),
    ("gear_x5", "gear", 5),
)
#: The parts of the tail each run is read over.
WINDOWS = ("tail", "first_half", "second_half")
#: A record is settled where every reading lies within this fraction of its carrier.
SETTLED = 0.01


def wants_rerun(record: Mapping[str, Any]) -> bool:
    """Whether a record is one whose reading may not be a property of the circuit: it
    bursts or wanders, or its netlist's own step told another story (``step_refined``)."""
    return record.get("state") in ("bursting", "unsettled") or "step_refined" in record


def _with_method(netlist: str, method: str, factor: int) -> str:
    """``netlist`` with its step divided by ``factor`` and, for "gear", Gear's method."""
    text = refine_step(netlist, factor) if factor > 1 else netlist
    if method == "gear":
        head, sep, rest = text.partition("\n.tran")
        if not sep:
            raise SolverError("the netlist has no .tran line to run again")
        text = head + "\n.options method=gear" + sep + rest
    return text


def _read(
    time: np.ndarray, v: np.ndarray, f_hint: float, t_kick: float, start: float, stop: float
) -> dict[str, Any]:
    """State and carrier of ``v`` read from ``start`` to ``stop``, s
    (:func:`picker.circuit.ngspice.read_window`; the carrier None where it does not
    oscillate)."""
    state, f = read_window(time, v, f_hint, t_kick, start, stop)
    return {"state": state, "f_hz": f if math.isfinite(f) else None}


def rerun(
    netlist: str, *, f_hint: float, tail_start: float, t_kick: float, timeout: float = 120.0
) -> dict[str, dict[str, dict[str, Any]]]:
    """The readings of each run of :data:`RERUNS` of ``netlist`` over each window of
    :data:`WINDOWS` (the tail from ``tail_start`` to the run's end, and its two halves):
    ``{run: {window: {"state", "f_hz"}}}`` (``f_hz`` None where it does not oscillate).

    Raises
    ------
    SolverError
        ngspice missing, failing or timing out (``timeout`` s at the netlist's step,
        scaled with the step divisor).
    """
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for name, method, factor in RERUNS:
        run = transient(_with_method(netlist, method, factor), timeout=timeout * factor)
        stop = float(run.time[-1])
        mid = 0.5 * (tail_start + stop)
        spans = {
            "tail": (tail_start, stop),
            "first_half": (tail_start, mid),
            "second_half": (mid, stop),
        }
        out[name] = {w: _read(run.time, run.v, f_hint, t_kick, *spans[w]) for w in WINDOWS}
    return out


def drift(record: Mapping[str, Any]) -> float:
    """The largest relative distance of a rerun's reading from the record's carrier
    (``record["reruns"]``, :func:`rerun`); inf where a reading shows no oscillation, NaN
    where the record was not run again (a steady record whose two steps agreed)."""
    runs = record.get("reruns")
    if not runs:
        return math.nan
    f_rec = record.get("f_hz")
    worst = 0.0
    for run in runs.values():
        for reading in run.values():
            f = reading.get("f_hz")
            if f is None or f_rec is None or not f_rec > 0:
                return math.inf
            worst = max(worst, abs(float(f) / float(f_rec) - 1.0))
    return worst


def span(record: Mapping[str, Any]) -> tuple[float, float]:
    """The lowest and highest carrier ngspice reads for ``record``: its own reading and
    every rerun's reading that oscillates (``record["reruns"]``, :func:`rerun`), Hz.

    A record not run again (a steady record whose two steps agreed) spans its own
    reading. NaN, NaN where the record does not oscillate.
    """
    f_rec = record.get("f_hz")
    if f_rec is None or not float(f_rec) > 0:
        return math.nan, math.nan
    reads = [float(f_rec)]
    for run in (record.get("reruns") or {}).values():
        for reading in run.values():
            f = reading.get("f_hz")
            if f is not None and float(f) > 0:
                reads.append(float(f))
    return min(reads), max(reads)


def span_error(f_hz: float, record: Mapping[str, Any]) -> float:
    """The relative distance of ``f_hz`` from the span of ngspice's readings of
    ``record`` (:func:`span`): 0 inside it, else ``|f_hz / end - 1|`` to the nearer end;
    inf where ``f_hz`` is not a frequency or the record does not oscillate.

    A reference ngspice itself reads over a span (a burster whose carrier moves with the
    step, the method and the part of the tail) is an uncertain reference; a model figure
    anywhere in that span agrees with it as well as ngspice agrees with itself, and the
    2 % the model is held to is counted from the span's nearer end. Comparing a result
    with a reference that carries its own uncertainty by letting the two allowances add
    is proficiency-testing practice (ISO 13528's E_n score, which adds expanded
    uncertainties in quadrature; the standard's clause is from memory). Adding the span
    outright is more lenient than quadrature; picker does so because the span is a range
    of readings, not a standard uncertainty, so there is no deviation to combine.
    """
    lo, hi = span(record)
    if not (math.isfinite(f_hz) and f_hz > 0 and math.isfinite(lo)):
        return math.inf
    if f_hz > hi:
        return f_hz / hi - 1.0
    if f_hz < lo:
        return 1.0 - f_hz / lo
    return 0.0
