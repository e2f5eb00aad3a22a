"""Benchmark of the loaded oscillator model (prints figures; run ``python -m picker.bench_circuit``).

1. Loaded-model Monte Carlo of one design: 100,000 samples (target < 2 s).
2. Throughput over 200 candidates × 20,000 samples (4 M boards), chunked.
3. Closed-form (Schur/cofactor) loop gain against stacked ``numpy.linalg.solve``.

The design is an invented 1.3 MHz Colpitts board with the generic NPN.
"""

from __future__ import annotations

import time

import numpy as np

from picker.circuit import AmplifierParams, loaded_response, loop_gain, loop_gain_matrix
from picker.topology import COLPITTS

PARAMS = AmplifierParams(
    vcc=9.0, r_c=1500.0, r_b1=68e3, r_b2=10e3, r_e=2200.0, c_e=47e-9, c_block=10e-9,
    inductor_q=50.0,
)  # fmt: skip
NOMINAL = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}
STRAY = 3e-12


def _draw(rng, shape, nominal, tol=0.05):
    """Uniform ±tol around the nominal values (samples on axis 0)."""
    return {p: np.asarray(x) * (1 + rng.uniform(-tol, tol, shape)) for p, x in nominal.items()}


def main(quick: bool = False) -> dict[str, float]:
    rng = np.random.default_rng(1)
    out = {}
    n = 20_000 if quick else 100_000
    vals = _draw(rng, (n,), NOMINAL)
    t = time.perf_counter()
    res = loaded_response(COLPITTS, vals, STRAY, PARAMS)
    dt = time.perf_counter() - t
    out["mc_seconds"] = dt
    print(f"loaded-model Monte Carlo, {n:,} samples of one design: {dt:.3f} s "
          f"({n / dt:,.0f} boards/s); margin min {res.margin.min():.3g}")  # fmt: skip

    cands, samples = (20, 20_000) if quick else (200, 20_000)
    c1 = np.geomspace(470e-12, 2.2e-9, cands)[None, :]
    nominal = {"C1": c1, "C2": np.full((1, cands), 2.2e-9), "L": np.full((1, cands), 22e-6)}
    vals = _draw(rng, (samples, cands), nominal)
    t = time.perf_counter()
    res = loaded_response(COLPITTS, vals, STRAY, PARAMS)
    dt = time.perf_counter() - t
    boards = samples * cands
    out["throughput_boards_per_s"] = boards / dt
    print(f"{cands} candidates x {samples:,} samples = {boards:,} boards: {dt:.2f} s "
          f"({boards / dt:,.0f} boards/s); shape {res.f_hz.shape}")  # fmt: skip

    m = 20_000
    v = _draw(rng, (m,), NOMINAL)
    f = np.full(m, 1.29e6)
    t = time.perf_counter()
    a = loop_gain(COLPITTS, v, STRAY, PARAMS, f)
    t_closed = time.perf_counter() - t
    t = time.perf_counter()
    b = loop_gain_matrix(COLPITTS, v, STRAY, PARAMS, f)
    t_matrix = time.perf_counter() - t
    out["closed_form_s"], out["linalg_solve_s"] = t_closed, t_matrix
    print(f"loop gain at {m:,} points: closed form {t_closed * 1e3:.1f} ms, stacked "
          f"np.linalg.solve {t_matrix * 1e3:.1f} ms (max rel. difference "
          f"{np.max(np.abs(a / b - 1)):.1e})")  # fmt: skip
    return out


if __name__ == "__main__":
    main()
