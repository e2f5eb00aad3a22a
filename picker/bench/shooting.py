"""Benchmark of the periodic orbit by shooting (prints figures; ``python -m picker.bench.shooting``).

The designs of the committed validation sets (``tests/validation/large_signal.json`` and
``large_signal_holdout.json``) whose describing function finds the transistor saturated
are the designs the pipeline shoots (:mod:`picker.circuit.nominal_orbit`). Timed, one
core, CPU seconds per design:

* the pipeline's path: every saturated design in one call, batched by netlist shape
  (:func:`picker.circuit.nominal_orbit.board_orbits`: five warm-up periods from the
  describing function's start, a 40-period retry only where Newton fails);
* the reference path: one design per call after a 40-period warm-up
  (:func:`picker.circuit.periodic.periodic_state` with ``warm=40``, no retry), the way
  ``scripts/shooting_stats.py`` ran before, on the first ``--reference`` designs (it is
  slow); the ratio of the two is printed.

Also printed: how many orbits converged, and the worst difference of the two paths'
frequencies where both converged (they solve the same equations).
"""

from __future__ import annotations

import argparse
import math
import time
from pathlib import Path

import numpy as np

from picker.circuit.network import Network
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.periodic import periodic_state
from picker.circuit.steady import steady_state
from picker.circuit.validation import load_reference
from picker.tank.base import TWO_PI

ROOT = Path(__file__).resolve().parents[2]  # the checkout: picker/bench/ is two down
SETS = (
    ROOT / "tests" / "validation" / "large_signal.json",
    ROOT / "tests" / "validation" / "large_signal_holdout.json",
)


def _saturated(path: Path) -> list[tuple[Network, float, float]]:
    """(network, describing function's f, amplitude) of the saturated designs of a set."""
    designs, _ = load_reference(path)
    out = []
    for d in designs:
        st = steady_state(d.topo, d.values, d.stray, d.params)
        amp = float(st.amplitude_v)
        if bool(st.starts) and bool(st.overdriven) and math.isfinite(amp) and amp > 0:
            net = Network.build(d.topo, d.values, d.stray, d.params)
            out.append((net, float(st.f_hz), amp))
    return out


def main(reference: int = 3) -> dict[str, float]:
    """Time both paths; returns the figures."""
    nets = [s for path in SETS for s in _saturated(path)]
    t = time.process_time()
    got = board_orbits([n for n, _, _ in nets])
    t_fast = time.process_time() - t
    fast = [o[0] for o in got]
    conv = sum(o is not None for o in fast)
    per = t_fast / max(len(nets), 1)
    t = time.process_time()
    diff = 0.0
    ref_conv = 0
    for (net, f, amp), o in zip(nets[:reference], fast[:reference], strict=True):
        ps = periodic_state(
            net,
            np.array([0]),
            np.array([TWO_PI * f]),
            np.array([amp]),
            np.array([math.nan]),
            warm=40,
            retry=0,
        )
        if bool(ps.ok[0]):
            ref_conv += 1
            if o is not None:
                diff = max(diff, abs(float(ps.w[0]) / TWO_PI / o.f_hz - 1.0))
    t_ref = (time.process_time() - t) / max(min(reference, len(nets)), 1)
    print(
        f"periodic orbit of {len(nets)} saturated validation designs: {per:.2f} s per design "
        f"in batches of one netlist shape (target <= 1.5 s), {conv} converged; reference "
        f"(one design per call, 40-period warm-up) on {min(reference, len(nets))}: "
        f"{t_ref:.2f} s per design, "
        f"{ref_conv} converged; ratio {t_ref / per:.1f}x; largest frequency difference where "
        f"both converged {diff:.1e}"
    )
    return {"seconds_per_design": per, "reference_seconds_per_design": t_ref}


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reference", type=int, default=3, help="designs the reference path runs")
    main(ap.parse_args().reference)
