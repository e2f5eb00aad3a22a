"""Random stage designs with a base (gate) stopper in ngspice beside the model (a benchmark).

For each named stage, draws Colpitts tanks (C1 33-330 pF, C2/C1 1-10, L 0.33-3.3 µH,
log-uniform: about 5-45 MHz) and a stopper (22-470 Ω, log-uniform) on the stage's typical
design (:meth:`picker.circuit.stages.base.Stage.typical_params`), keeps those the model
starts, runs each netlist's transient in ngspice and prints one JSON line per design:
the model's and ngspice's steady frequency and amplitude, the margin, the states. With
``--bare`` the same draws run without the stopper (the model's own error there); with
``--overdriven`` only the designs whose device the model finds saturated are kept.

    python scripts/stopper_survey.py --seed 11 --stages common-emitter,common-source --count 5

The README's stopper figures come from the runs it names.
"""

from __future__ import annotations

import argparse
import json
import time
from dataclasses import replace

import numpy as np

from picker.circuit.netlist import write_netlist
from picker.circuit.ngspice import simulate
from picker.circuit.stages import STAGES
from picker.circuit.steady import steady_state
from picker.tank.colpitts import COLPITTS


def _log_uniform(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(10 ** rng.uniform(np.log10(lo), np.log10(hi)))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--stages", default=",".join(STAGES))
    ap.add_argument("--count", type=int, default=4)
    ap.add_argument("--bare", action="store_true", help="the same draws without the stopper")
    ap.add_argument(
        "--overdriven", action="store_true", help="keep only the designs the model saturates"
    )
    args = ap.parse_args()
    rng = np.random.default_rng(args.seed)
    for name in args.stages.split(","):
        stage = STAGES[name]
        kept = tries = 0
        while kept < args.count and tries < 40:
            tries += 1
            c1 = _log_uniform(rng, 33e-12, 330e-12)
            tank = {"C1": c1, "C2": c1 * _log_uniform(rng, 1.0, 10.0)}
            tank["L"] = _log_uniform(rng, 0.33e-6, 3.3e-6)
            r_s = _log_uniform(rng, 22.0, 470.0)
            params = replace(stage.typical_params(), r_stopper=None if args.bare else r_s)
            st = steady_state(COLPITTS, {k: np.array([v]) for k, v in tank.items()}, 3e-12, params)
            if not st.starts[0] or (args.overdriven and not st.overdriven[0]):
                continue
            kept += 1
            t0 = time.time()
            sim = simulate(write_netlist(COLPITTS, tank, 3e-12, params, title=name), timeout=300)
            f_model, a_model = float(st.f_hz[0]), float(st.amplitude_v[0])
            rec = {
                "stage": name,
                "tank": tank,
                "r_stopper": r_s,
                "margin": float(st.margin[0]),
                "f_model": f_model,
                "a_model": a_model,
                "overdriven": bool(st.overdriven[0]),
                "bursting": bool(st.bursting[0]),
                "f_ngspice": sim.frequency_hz,
                "a_ngspice": sim.amplitude_v,
                "state": sim.waveform.state,
                "f_error_pct": (f_model / sim.frequency_hz - 1) * 100,
                "a_error_pct": (a_model / sim.amplitude_v - 1) * 100,
                "seconds": time.time() - t0,
            }
            print(json.dumps(rec), flush=True)


if __name__ == "__main__":
    main()
