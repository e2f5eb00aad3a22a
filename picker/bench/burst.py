"""Benchmark of a burster's run from rest, one run against the median of several
(prints figures; ``python -m picker.bench.burst``).

A design the model calls bursting takes its carrier from its own circuit run from rest
(:mod:`picker.circuit.burst_carrier`); a burst's course is chaotic, so the carrier of one
run moves with rounding, and the model takes the median of :data:`KICKS
<picker.circuit.burst_carrier.KICKS>` runs whose kicks differ by parts per million.
Measured in one run, one core, on bursting designs of the committed development set
(``tests/validation/large_signal.json``; by default its four bursters d078, d087, d093
and d098, whose carriers moved most between machines), each scaled by its periodic
orbit's frequency as :func:`picker.circuit.validation.model_answers` scales it:

* the reference: one run a design (``KICKS`` = 1), its CPU seconds and each design's
  carrier against ngspice's record;
* the median of ``KICKS`` runs, the same figures, the ratio of the two costs and the
  span of each design's runs;
* both again with every kick larger by one part in 10⁹ (a stand-in for another
  machine's rounding): how far one run's carrier and the median move.

The module constants are changed for the benchmark's duration only.
"""

from __future__ import annotations

import argparse
import math
import time
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np

from picker.circuit import burst_carrier
from picker.circuit.network import Network
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.steady import steady_state
from picker.circuit.validation import load_reference

ROOT = Path(__file__).resolve().parents[2]  # the checkout: picker/bench/ is two down
SET = ROOT / "tests" / "validation" / "large_signal.json"
IDS = ("d078", "d087", "d093", "d098")
#: How much larger every kick is in the second pass (relative).
NUDGE = 1e-9


@contextmanager
def _runs(kicks: int, nudge: float) -> Iterator[None]:
    """``KICKS`` set to ``kicks`` and every kick times 1 + ``nudge``, for the block."""
    keep_k, keep_single = burst_carrier.KICKS, burst_carrier._single_runs

    def nudged(circ: Any, w: Any, tau: Any, steps: int, scale: np.ndarray, look: Any) -> Any:
        return keep_single(circ, w, tau, steps, scale * (1.0 + nudge), look)

    burst_carrier.KICKS = kicks
    burst_carrier._single_runs = nudged  # type: ignore[assignment]
    try:
        yield
    finally:
        burst_carrier.KICKS = keep_k
        burst_carrier._single_runs = keep_single  # type: ignore[assignment]


def _measure(
    nets: Sequence[Network], f_hint: Sequence[float], kicks: int, nudge: float
) -> tuple[list[burst_carrier.BurstCarrier | None], float]:
    """The runs of ``nets`` and their CPU seconds."""
    with _runs(kicks, nudge):
        t0 = time.process_time()
        got = burst_carrier.network_carriers(nets, [True] * len(nets), list(f_hint))
        return got, time.process_time() - t0


def main(argv: Sequence[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--ids", default=",".join(IDS), help="design ids of the development set")
    args = ap.parse_args(argv)
    ids = args.ids.split(",")
    designs, answers = load_reference(SET)
    pick = [(d, a) for d, a in zip(designs, answers, strict=True) if d.id in ids]
    nets = [Network.build(d.topo, d.values, d.stray, d.params) for d, _ in pick]
    orbits = board_orbits(nets)
    # the orbit's frequency, or the steady state's where there is no orbit (run_hint)
    hints = [
        float(o[0].f_hz)
        if o[0] is not None
        else float(np.asarray(steady_state(d.topo, d.values, d.stray, d.params).f_hz))
        for o, (d, _) in zip(orbits, pick, strict=True)
    ]
    ref = np.array([float(a.get("f_hz") or math.nan) for _, a in pick])
    k = burst_carrier.KICKS
    table: dict[tuple[int, float], tuple[np.ndarray, np.ndarray, float]] = {}
    for kicks in (1, k):
        for nudge in (0.0, NUDGE):
            got, cpu = _measure(nets, hints, kicks, nudge)
            f = np.array([g.f_hz if g is not None else math.nan for g in got])
            span = np.array([g.kick_spread if g is not None else math.nan for g in got])
            table[(kicks, nudge)] = (f, span, cpu)
    print(f"{len(pick)} bursting designs of {SET.name}, each scaled by its orbit's frequency")
    print(
        f"{'design':8} {'ngspice':>12} {'1 run':>8} {'nudged':>8} {f'median {k}':>9} "
        f"{'nudged':>8} {'span':>7}"
    )
    for i, (d, _) in enumerate(pick):
        one, one_n = table[(1, 0.0)][0][i], table[(1, NUDGE)][0][i]
        med, med_n = table[(k, 0.0)][0][i], table[(k, NUDGE)][0][i]
        span = table[(k, 0.0)][1][i]
        print(
            f"{d.id:8} {ref[i] / 1e3:9.2f} kHz {100 * (one / ref[i] - 1):+7.2f}% "
            f"{100 * (one_n / ref[i] - 1):+7.2f}% {100 * (med / ref[i] - 1):+8.2f}% "
            f"{100 * (med_n / ref[i] - 1):+7.2f}% {100 * span:6.2f}%"
        )
    moved_one = np.abs(table[(1, NUDGE)][0] / table[(1, 0.0)][0] - 1.0)
    moved_med = np.abs(table[(k, NUDGE)][0] / table[(k, 0.0)][0] - 1.0)
    print(
        f"kicks larger by {NUDGE:g}: one run moved by up to {100 * np.nanmax(moved_one):.2f} %, "
        f"the median of {k} by up to {100 * np.nanmax(moved_med):.2f} %"
    )
    c1, ck = table[(1, 0.0)][2], table[(k, 0.0)][2]
    print(
        f"CPU: one run {c1:.1f} s, {k} runs {ck:.1f} s (ratio {ck / c1:.2f}; nudged "
        f"{table[(1, NUDGE)][2]:.1f} s and {table[(k, NUDGE)][2]:.1f} s)"
    )


if __name__ == "__main__":
    main()
