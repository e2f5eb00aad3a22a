"""Benchmark of the loaded oscillator model (prints figures; run ``python -m picker.bench.circuit``).

1. Loaded-model Monte Carlo of one design: 100,000 samples (target < 2 s).
2. Throughput over 200 candidates × 20,000 samples (4 M boards), chunked.
3. Closed-form (Schur/cofactor) loop gain against stacked ``numpy.linalg.solve``.
4. The loaded model inside the pipeline (:func:`solve_figures`): the board model's Monte
   Carlo of 100,000 samples of one design (surrogate and full, target < 2 s), and the full
   solve of the core benchmark space (:func:`picker.bench.search.colpitts_problem`) with the loaded
   model: loaded-feasible search, screen, Monte Carlo ranking of 200+ designs × 20,000
   boards, and the circuit figures of the top 10 (target < 10 s).

The design is an invented 1.3 MHz Colpitts board with the generic NPN.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Mapping

import numpy as np

from picker.bench.search import colpitts_problem
from picker.circuit.figures import nominal_figures, worst_margins
from picker.circuit.loaded import LoadedModel
from picker.circuit.loaded_search import loaded_search
from picker.circuit.network import loop_gain, loop_gain_matrix
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import get_stage
from picker.core.montecarlo import PartVariation, Simulation, count_passing
from picker.core.ranking import monte_carlo_rank
from picker.core.sampling import uniform_matrix
from picker.core.search import Designs, Problem
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics
from picker.tank.colpitts import COLPITTS

# the common-emitter stage's typical design (invented values), sized for NOMINAL
PARAMS = get_stage("common-emitter").typical_params()
NOMINAL = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}
STRAY = 3e-12


def _draw(
    rng: np.random.Generator,
    shape: tuple[int, ...],
    nominal: Mapping[str, float | np.ndarray],
    tol: float = 0.05,
) -> dict[str, np.ndarray]:
    """Uniform ±tol around the nominal values (samples on axis 0)."""
    return {p: np.asarray(x) * (1 + rng.uniform(-tol, tol, shape)) for p, x in nominal.items()}


def main(quick: bool = False) -> dict[str, float]:
    """Print items 1-4 of the module docstring; returns the figures."""
    rng = np.random.default_rng(1)
    out: dict[str, float] = {}
    n = 20_000 if quick else 100_000
    vals = _draw(rng, (n,), NOMINAL)
    t = time.perf_counter()
    res = loaded_response(COLPITTS, vals, STRAY, PARAMS)
    dt = time.perf_counter() - t
    out["mc_seconds"] = dt
    print(
        f"loaded-model Monte Carlo, {n:,} samples of one design: {dt:.3f} s "
        f"({n / dt:,.0f} boards/s); margin min {res.margin.min():.3g}"
    )

    cands, samples = (20, 20_000) if quick else (200, 20_000)
    c1 = np.geomspace(470e-12, 2.2e-9, cands)[None, :]
    nominal = {"C1": c1, "C2": np.full((1, cands), 2.2e-9), "L": np.full((1, cands), 22e-6)}
    vals = _draw(rng, (samples, cands), nominal)
    t = time.perf_counter()
    res = loaded_response(COLPITTS, vals, STRAY, PARAMS)
    dt = time.perf_counter() - t
    boards = samples * cands
    out["throughput_boards_per_s"] = boards / dt
    print(
        f"{cands} candidates x {samples:,} samples = {boards:,} boards: {dt:.2f} s "
        f"({boards / dt:,.0f} boards/s); shape {res.f_hz.shape}"
    )

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
    print(
        f"loop gain at {m:,} points: closed form {t_closed * 1e3:.1f} ms, stacked "
        f"np.linalg.solve {t_matrix * 1e3:.1f} ms (max rel. difference "
        f"{np.max(np.abs(a / b - 1)):.1e})"
    )
    out.update(solve_figures(quick))
    return out


def solve_figures(quick: bool = False) -> dict[str, float]:
    """Item 4 of the module docstring; prints and returns the figures."""
    out: dict[str, float] = {}
    one = {p: uniform_table(np.array([v]), 0.05, "list") for p, v in NOMINAL.items()}
    f0 = 1.29e6
    pb1 = Problem(COLPITTS, one, 0.98 * f0, 1.02 * f0, 0.0, 10.0, Parasitics(stray=STRAY))
    d1 = Designs({p: np.zeros(1, dtype=np.int32) for p in one}, np.zeros(1), np.zeros(1))
    n = 20_000 if quick else 100_000
    for method in ("surrogate", "full"):
        sim = Simulation(
            pb1, {p: PartVariation("uniform") for p in one}, model=LoadedModel(pb1, PARAMS, method)
        )
        u = uniform_matrix(n, sim.n_columns, rng=np.random.default_rng(2))
        t = time.perf_counter()
        k = int(count_passing(sim, d1, u)[0])
        dt = time.perf_counter() - t
        out[f"board_model_{method}_s"] = dt
        print(
            f"board model ({method}), {n:,} samples of one design: {dt:.3f} s "
            f"(yield {k / n:.4f}; target < 2 s)"
        )

    p = colpitts_problem(quick)
    t0 = time.perf_counter()
    ls = loaded_search(p, PARAMS, min_margin=2.0)
    t_search = time.perf_counter() - t0
    designs = Designs(ls.designs.idx, ls.f_loaded, ls.designs.beta)
    sim = Simulation.simple(p)
    sim = Simulation(p, sim.parts, model=LoadedModel(p, PARAMS))
    u = uniform_matrix(20_000, sim.n_columns, rng=np.random.default_rng(1))
    t1 = time.perf_counter()
    ranked, passed, _ = monte_carlo_rank(sim, designs, u, m=200, top=10, target=1e6)
    t_mc = time.perf_counter() - t1
    t2 = time.perf_counter()
    best = designs.take(ranked[:10])
    vals = best.values(p)
    for r in range(len(best)):
        nominal_figures(p.topology, {q: float(v[r]) for q, v in vals.items()}, p.parasitics, PARAMS)
    worst_margins(sim, best, u)
    t_fig = time.perf_counter() - t2
    total = t_search + t_mc + t_fig
    out.update(solve_search_s=t_search, solve_mc_s=t_mc, solve_figures_s=t_fig, solve_s=total)
    print(f"loaded solve of the core benchmark space ({p.space_size():,} combinations):")
    print(
        f"  loaded-feasible search   {t_search:7.2f} s  ({len(ls.designs):,} designs; "
        f"{ls.in_window:,} in the window before the margin test)"
    )
    print(f"  screen + Monte Carlo     {t_mc:7.2f} s  ({len(ranked)} designs x 20,000 boards)")
    print(f"  figures of the top 10    {t_fig:7.2f} s  (amplitude, stress, worst margin)")
    print(f"  total                    {total:7.2f} s  (target < 10 s)")
    return out


if __name__ == "__main__":
    ap = argparse.ArgumentParser(
        prog="python -m picker.bench.circuit", description="Speed of the loaded oscillator model."
    )
    ap.add_argument("--quick", action="store_true", help="fewer samples and candidates")
    main(ap.parse_args().quick)
