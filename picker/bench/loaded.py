"""Benchmark of the loaded-model yield (prints figures; run ``python -m picker.bench.loaded``).

The loaded Monte Carlo (:class:`picker.circuit.loaded.LoadedModel`, the default
approximation: the large-signal model fitted per design over its boards' box) of 200
designs × 20,000 boards (target ≤ 3 s), beside the large-signal model run on every
board (``method = "full"``) of the same designs, timed in the same run on a slice of
the boards (its cost is linear in the boards: the figure is scaled to 20,000) and
compared board by board with the fast path on that slice (boards decided otherwise, and
the largest difference of a design's yield there). ``--workers`` threads share the board
fit (default :func:`picker.core.conditional.default_workers`; the counts are the same
with any number). Wall time depends on the machine's load; the CPU time printed beside
it much less.

The designs: the loaded-feasible set of the demo ``colpitts_bjt.toml`` (4.9 MHz,
common-emitter BJT) with its parts widened to E24 and its window to ±3 % so that it
holds at least 200 designs, the 200 nearest the window's centre by steady frequency.
"""

from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

import numpy as np

from picker import api
from picker.circuit.loaded import LoadedModel
from picker.circuit.loaded_search import loaded_search
from picker.core.conditional import default_workers
from picker.core.montecarlo import Simulation, count_passing, sampled_values
from picker.core.sampling import head
from picker.core.search import Designs

DEMO = Path(__file__).resolve().parents[2] / "demo_specs" / "colpitts_bjt.toml"
OVERRIDES = {
    "frequency": {"window": "±3 %"},
    "parts": {p: {"series": "E24"} for p in ("C1", "C2", "L")},
}


def designs_and_simulation(designs: int = 200) -> tuple[Simulation, Designs, api.Spec]:
    """The benchmark's designs (module docstring) and the spec's simulation."""
    spec = api.load_spec(DEMO, overrides=OVERRIDES)
    pb = api.build_problem(spec)
    sim = api.simulation_of(spec, pb)
    amp = spec.amplifier
    assert amp is not None and isinstance(sim.model, LoadedModel)
    ls = loaded_search(pb, sim.model.params, min_margin=amp.min_margin, max_margin=amp.max_margin)
    centre = np.sqrt(pb.f_min * pb.f_max)
    order = np.argsort(np.abs(np.log(ls.f_loaded / centre)), kind="stable")[:designs]
    return sim, ls.designs.take(np.sort(order)), spec


def main(
    designs: int = 200, samples: int = 20_000, full_samples: int = 40, workers: int | None = None
) -> dict[str, float]:
    """Time the fast path (``workers`` threads, default
    :func:`picker.core.conditional.default_workers`) and the per-board large-signal model;
    returns the figures."""
    workers = default_workers() if workers is None else workers
    load = os.getloadavg()[0]
    sim, d, spec = designs_and_simulation(designs)
    pb = sim.problem
    model = sim.model
    assert isinstance(model, LoadedModel)
    u = api.random_inputs(spec, sim, samples, 1)
    fresh = Simulation(
        pb,
        sim.parts,
        sim.temperatures,
        LoadedModel(pb, model.params, "surrogate", model.max_margin, workers=workers),
    )
    t, c = time.perf_counter(), time.process_time()
    passed = count_passing(fresh, d, u)
    t_fast, c_fast = time.perf_counter() - t, time.process_time() - c
    fast = fresh.model
    assert isinstance(fast, LoadedModel)
    summary = fast.fit_summary()
    # the per-board large-signal model on a slice of the same boards
    sub = head(u, full_samples)
    full = LoadedModel(pb, model.params, "full", model.max_margin)
    vals = sampled_values(sim, d, sub)
    t, c = time.perf_counter(), time.process_time()
    ref = full(vals, d)
    t_full = (time.perf_counter() - t) * samples / full_samples
    c_full = (time.process_time() - c) * samples / full_samples
    got = LoadedModel(pb, model.params, "surrogate", model.max_margin)(vals, d)
    differ = int((got != ref).sum())
    gap = float(np.abs(got.mean(axis=0) - ref.mean(axis=0)).max())
    print(
        f"loaded yield, {len(d)} designs x {samples:,} boards: {t_fast:.2f} s wall, "
        f"{c_fast:.2f} s CPU, {workers} worker(s) (target <= 3 s); large-signal model on every "
        f"board of the same designs: {t_full:.0f} s wall, {c_full:.0f} s CPU (timed on "
        f"{full_samples} boards per design, scaled), {t_full / t_fast:,.0f}x the fast path's "
        f"wall time; {summary['edge']} designs fitted to degree 4 near the burst edge, "
        f"{summary['full']} on the full model; load average {load:.1f}"
    )
    print(
        f"on the slice ({full_samples} x {len(d)} boards): {differ} boards decided otherwise "
        f"than the per-board model, largest yield difference of a design {gap:.4f}; "
        f"mean yield {passed.mean() / samples:.4f}"
    )
    return {
        "fast_seconds": t_fast,
        "fast_cpu": c_fast,
        "full_seconds": t_full,
        "full_cpu": c_full,
        "differ": differ,
        "gap": gap,
        "workers": workers,
        "load": load,
    }


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--designs", type=int, default=200)
    ap.add_argument("--samples", type=int, default=20_000)
    ap.add_argument("--full-samples", type=int, default=40)
    ap.add_argument("--workers", type=int, default=None)
    a = ap.parse_args()
    main(a.designs, a.samples, a.full_samples, a.workers)
