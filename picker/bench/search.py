"""Benchmark: search time, Monte Carlo throughput, peak memory, and the ratio
against a naive full-cube numpy enumeration measured in the same run.

Run with ``python -m picker.bench.search`` (or ``picker bench``; ``--quick`` for a
smaller space). Figures are printed, never asserted: timing does not belong in
unit tests.
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc

import numpy as np

from picker.core.conditional import conditional_counts, default_workers
from picker.core.montecarlo import Simulation, count_passing
from picker.core.ranking import conditional_rank
from picker.core.sampling import uniform_matrix
from picker.core.search import Problem, search
from picker.parts.series import expand
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics, board_beta, board_frequency
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS


def colpitts_problem(quick: bool = False) -> Problem:
    """C1, C2 in E192 over 1 pF-10 µF, L in E24 over 10 nH-100 mH, ±1 %, beta 0.05-1."""
    c_hi = 10e-9 if quick else 10e-6
    tabs = {
        "C1": uniform_table(expand("E192", 1e-12, c_hi), 0.01, "E192"),
        "C2": uniform_table(expand("E192", 1e-12, c_hi), 0.01, "E192"),
        "L": uniform_table(expand("E24", 10e-9, 100e-3), 0.05, "E24"),
    }
    f0 = 1e6
    return Problem(COLPITTS, tabs, f0 * 0.99, f0 * 1.01, 0.05, 1.0, Parasitics(stray=5e-12))


def clapp_problem(quick: bool = False) -> Problem:
    """C1, C2, C3 in E96 over 6 decades (1 pF-1 µF), L in E24 over 1 µH-10 µH, ±1 %."""
    c_hi = 1e-9 if quick else 1e-6
    tabs = {p: uniform_table(expand("E96", 1e-12, c_hi), 0.01, "E96") for p in ("C1", "C2", "C3")}
    tabs["L"] = uniform_table(expand("E24", 1e-6, 10e-6), 0.05, "E24")
    f0 = 10e6
    return Problem(CLAPP, tabs, f0 * 0.99, f0 * 1.01, 0.05, 1.0, Parasitics(stray=3e-12))


def naive_full_cube(problem: Problem, budget_s: float | None = None) -> tuple[int, float, bool]:
    """Enumerate the whole cube in numpy chunks (the reference a search must beat).

    Returns (feasible count, seconds, complete). With ``budget_s`` the
    enumeration stops after that many seconds and the time is extrapolated
    from the share of the cube visited (``complete`` is then False).
    """
    topo = problem.topology
    pos = topo.positions
    tabs = [problem.tables[p].values for p in pos]
    inner = np.stack(np.meshgrid(*tabs[1:], indexing="ij"), axis=0).reshape(len(pos) - 1, -1)
    inner_vals = {p: inner[i] for i, p in enumerate(pos[1:])}
    t0 = time.perf_counter()
    count = 0
    for k, v0 in enumerate(tabs[0]):
        vals = {pos[0]: np.full(inner.shape[1], v0), **inner_vals}
        f = board_frequency(topo, vals, problem.parasitics)
        beta = board_beta(topo, vals, problem.parasitics)
        ok = (f >= problem.f_min) & (f <= problem.f_max)
        ok &= (beta >= problem.beta_min) & (beta <= problem.beta_max)
        count += int(ok.sum())
        el = time.perf_counter() - t0
        if budget_s is not None and el > budget_s:
            return count, el * len(tabs[0]) / (k + 1), False
    return count, time.perf_counter() - t0, True


def _peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def run(quick: bool = False, naive_budget_s: float = 60.0) -> dict:
    out: dict = {}
    tracemalloc.start()
    # --- Colpitts: search + Monte Carlo end to end
    p = colpitts_problem(quick)
    t0 = time.perf_counter()
    d = search(p)
    t_search = time.perf_counter() - t0
    samples, m = 20_000, 200
    t1 = time.perf_counter()
    sim = Simulation.simple(p, "uniform")
    u = uniform_matrix(samples, sim.n_columns, rng=np.random.default_rng(1))
    ranked, _, _ = conditional_rank(sim, d, u, m=m, top=10, target=1e6, workers=default_workers())
    t_mc = time.perf_counter() - t1
    out["colpitts"] = dict(
        space=p.space_size(),
        feasible=len(d),
        search_s=t_search,
        mc_s=t_mc,
        checked=len(ranked),
        end_to_end_s=t_search + t_mc,
    )
    # --- Monte Carlo throughput on exactly 200 candidates x 20,000 boards
    sub = d.take(np.arange(min(200, len(d))))
    count_passing(sim, sub, u)  # warm-up
    t2 = time.perf_counter()
    reps = 3
    for _ in range(reps):
        count_passing(sim, sub, u)
    t_thr = (time.perf_counter() - t2) / reps
    out["throughput_boards_per_s"] = len(sub) * samples / t_thr
    t2 = time.perf_counter()
    for _ in range(reps):
        conditional_counts(sim, sub, u)
    out["conditional_boards_per_s"] = len(sub) * samples / ((time.perf_counter() - t2) / reps)
    # --- Clapp search
    pc = clapp_problem(quick)
    t3 = time.perf_counter()
    dc = search(pc, max_designs=20_000_000)
    out["clapp"] = dict(space=pc.space_size(), feasible=len(dc), search_s=time.perf_counter() - t3)
    _, traced_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    out["peak_traced_mb"] = traced_peak / 2**20
    out["peak_rss_mb"] = _peak_rss_mb()
    # --- naive references (after the memory figures, so they do not count)
    n_naive, t_naive, complete = naive_full_cube(p, naive_budget_s)
    out["colpitts"].update(naive_s=t_naive, naive_complete=complete, naive_feasible=n_naive)
    _, t_naive_c, complete_c = naive_full_cube(pc, min(naive_budget_s, 20.0))
    out["clapp"].update(naive_s=t_naive_c, naive_complete=complete_c)
    return out


def report(r: dict) -> str:
    c, k = r["colpitts"], r["clapp"]
    lines = [
        "picker benchmark (2-core machine figures go into README.md)",
        f"Colpitts space {c['space']:,} combinations, {c['feasible']:,} feasible",
        f"  exact search            {c['search_s'] * 1e3:9.1f} ms",
        f"  screen + Monte Carlo    {c['mc_s'] * 1e3:9.1f} ms  "
        f"({c['checked']} designs x 20,000 boards, conditional, top-up by bound and pilots)",
        f"  end to end              {c['end_to_end_s']:9.2f} s   (target < 3 s)",
        f"  naive full cube         {c['naive_s']:9.2f} s   "
        f"({'measured' if c['naive_complete'] else 'extrapolated'}; "
        f"found {c['naive_feasible']:,}{'' if c['naive_complete'] else ' so far'})",
        f"  search speed-up         {c['naive_s'] / c['search_s']:9.0f} x  (target >= 20 x)",
        f"Clapp space {k['space']:,} combinations, {k['feasible']:,} feasible",
        f"  exact search            {k['search_s'] * 1e3:9.1f} ms",
        f"  naive full cube         {k['naive_s']:9.1f} s   "
        f"({'measured' if k['naive_complete'] else 'extrapolated from a timed share'})",
        f"  search speed-up         {k['naive_s'] / k['search_s']:9.0f} x",
        f"Monte Carlo throughput    {r['throughput_boards_per_s'] / 1e6:9.1f} M board-evaluations/s "
        "(plain pass/fail; target >= 20 M)",
        f"                          {r['conditional_boards_per_s'] / 1e6:9.1f} M board-evaluations/s "
        "(conditional, one worker)",
        f"Peak memory               {r['peak_traced_mb']:9.1f} MB traced by numpy/python, "
        f"{r['peak_rss_mb']:.0f} MB process RSS (target < 500 MB)",
    ]
    return "\n".join(lines)


def main(quick: bool = False) -> None:
    """The search figures, then :mod:`picker.bench.yields` (commands, precision, memory).

    The second runs as its own process (``python -m picker.bench.yields``): it imports
    this module, and its memory figures are its own.
    """
    import subprocess
    import sys

    print(report(run(quick=quick)), flush=True)
    cmd = [sys.executable, "-m", "picker.bench.yields", *(["--quick"] if quick else [])]
    subprocess.run(cmd, check=False)


def cli(argv: list[str] | None = None, prog: str = "python -m picker.bench.search") -> None:
    """The command line of ``python -m picker.bench[.search] [--quick]``."""
    ap = argparse.ArgumentParser(
        prog=prog, description="Search time, Monte Carlo throughput and peak memory."
    )
    ap.add_argument("--quick", action="store_true", help="a smaller space, for a fast look")
    main(ap.parse_args(argv).quick)


if __name__ == "__main__":  # pragma: no cover
    cli()
