"""Benchmark of the large-signal model (prints figures; run ``python -m picker.bench.steady``).

The large-signal steady state (:func:`picker.circuit.steady.steady_state`: start-up by
the Nyquist count, steady frequency, amplitude, harmonics, bursting and start-up time)
of 200 candidates of the common-emitter stage's typical design (target ≤ 1 s), printed
beside the linear model (:func:`picker.circuit.oscillation.loaded_response`) of the same
boards, timed in the same run as a reference for this machine's speed.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import get_stage
from picker.circuit.steady import steady_state
from picker.tank.colpitts import COLPITTS

PARAMS = get_stage("common-emitter").typical_params()
STRAY = 3e-12


def main(candidates: int = 200) -> dict[str, float]:
    """Time both models on ``candidates`` boards spread around the typical tank (about
    1.3 MHz, C1 and C2 over a factor e either way); returns the figures."""
    rng = np.random.default_rng(1)
    vals = {
        "C1": 1e-9 * np.exp(rng.uniform(-1, 1, candidates)),
        "C2": 2.2e-9 * np.exp(rng.uniform(-1, 1, candidates)),
        "L": 22e-6 * np.exp(rng.uniform(-0.5, 0.5, candidates)),
    }
    steady_state(COLPITTS, {p: v[:2] for p, v in vals.items()}, STRAY, PARAMS)  # warm up
    t = time.perf_counter()
    lin = loaded_response(COLPITTS, vals, STRAY, PARAMS)
    t_lin = time.perf_counter() - t
    t = time.perf_counter()
    st = steady_state(COLPITTS, vals, STRAY, PARAMS)
    t_ls = time.perf_counter() - t
    print(
        f"large-signal steady state, {candidates} candidates: {t_ls:.3f} s (target <= 1 s); "
        f"linear model of the same boards: {t_lin:.3f} s (reference); "
        f"{int(st.starts.sum())} start, {int(st.runs.sum())} run steady, "
        f"{int((lin.margin > 1).sum())} start by the linear model"
    )
    return {"steady_seconds": t_ls, "linear_seconds": t_lin}


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--candidates", type=int, default=200)
    main(ap.parse_args().candidates)
