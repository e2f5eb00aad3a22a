"""The accuracy table of the large-signal model with and without the shooting solution.

For every design of a committed validation set (``tests/validation/``, ngspice's answers)
the model's answer (:func:`picker.circuit.steady.steady_state`) is taken as it is, and,
where the describing function finds the transistor saturated, the periodic orbit of the
design's own netlist by shooting (:func:`picker.circuit.periodic.periodic_state`) puts its
frequency, its amplitude and its Floquet stability in place of the model's (where Newton
converged). Both tables are printed (:func:`picker.circuit.validation.accuracy_table`).
One design per call (about a second or more per saturated design); the pipeline's
batched answer is :func:`picker.circuit.validation.model_answers`
(``python scripts/make_validation.py --stats``).

Usage::

    python scripts/shooting_stats.py                                    # the main set
    python scripts/shooting_stats.py tests/validation/large_signal_holdout.json
"""

from __future__ import annotations

import argparse
import math
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from picker.circuit.network import Network
from picker.circuit.periodic import periodic_state
from picker.circuit.steady import steady_state
from picker.circuit.validation import (
    ModelAnswer,
    accuracy,
    accuracy_table,
    load_reference,
)
from picker.tank.base import TWO_PI

ROOT = Path(__file__).resolve().parent.parent


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("path", nargs="?", default=ROOT / "tests" / "validation" / "large_signal.json")
    args = ap.parse_args()
    designs, answers = load_reference(Path(args.path))
    old, new = [], []
    shot = converged = 0
    t0 = time.monotonic()
    for d in designs:
        st = steady_state(d.topo, d.values, d.stray, d.params)
        starts = bool(st.starts)
        m = ModelAnswer(
            starts=starts,
            bursting=bool(st.bursting) and starts,
            f_hz=float(st.f_hz),
            f_ideal_hz=float(d.topo.frequency(d.values, d.stray)),
            amplitude_v=float(st.amplitude_v),
            margin=float(st.margin),
        )
        old.append(m)
        if starts and bool(st.overdriven) and math.isfinite(m.amplitude_v):
            shot += 1
            net = Network.build(d.topo, d.values, d.stray, d.params)
            ps = periodic_state(
                net,
                np.array([0]),
                np.array([TWO_PI * m.f_hz]),
                np.array([m.amplitude_v]),
                np.array([math.nan]),
            )
            if bool(ps.ok[0]):
                converged += 1
                m = replace(
                    m,
                    f_hz=float(ps.w[0]) / TWO_PI,
                    amplitude_v=float(ps.top[0]),
                    bursting=bool(ps.unstable[0]),
                )
        new.append(m)
    topo = [d.topology for d in designs]
    print(f"{len(designs)} designs; {shot} saturated, shot; {converged} converged")
    print(f"({time.monotonic() - t0:.0f} s)\n")
    print("the model as it is\n" + accuracy_table(accuracy(topo, old, answers)) + "\n")
    print("with the shooting solution\n" + accuracy_table(accuracy(topo, new, answers)))


if __name__ == "__main__":
    main()
