"""The Monte Carlo streams its boards in batches: same bits for any batch size, bounded memory.

References, computed here without picker's sampling code: the rows of the run are those
numpy's own ``default_rng(seed).random((n, k))`` draws and those of scipy's scrambled
Sobol engine (``scipy.stats.qmc.Sobol(k, scramble=True, rng=default_rng(seed))``); a
pass count is Thomson's formula f = 1/(2π√(L·C1C2/(C1+C2))) (REFERENCES.md, Colpitts)
written out below on those rows. Memory is checked as a scaling shape (the traced peak
must not grow with the rows), never as a fixed figure.
"""

from __future__ import annotations

import math
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import qmc

from picker import api
from picker.core import conditional, montecarlo, sampling
from picker.core.conditional import conditional_counts
from picker.core.montecarlo import PartVariation, Simulation, count_passing
from picker.core.sampling import RandomRows, head, random_rows, row_chunks
from picker.core.search import Designs, Problem
from picker.parts.table import uniform_table
from picker.report.designs import to_json
from picker.tank.board import Parasitics
from picker.tank.colpitts import COLPITTS

ROOT = Path(__file__).resolve().parents[1]
TWO_PI = 2 * math.pi
EPS = 2.0**-53  # the open-interval nudge of the module (probability 2^-53 per value)


def _numpy_rows(seed: int, n: int, k: int) -> np.ndarray:
    return np.clip(np.random.default_rng(seed).random((n, k)), EPS, 1 - EPS)


def _sobol_rows(seed: int, m: int, k: int) -> np.ndarray:
    engine = qmc.Sobol(k, scramble=True, rng=np.random.default_rng(seed))
    return np.clip(engine.random_base2(m), EPS, 1 - EPS)


@pytest.mark.parametrize("size", [1, 7, 1000, 4096, 1 << 20])
def test_stream_rows_are_numpys_rows_for_any_batch(size, monkeypatch):
    monkeypatch.setattr(sampling, "CACHE_VALUES", 0)  # draw every batch, keep none
    n, k = 5000, 4
    ref = _numpy_rows(3, n, k)
    rows = random_rows(n, k, seed=3)
    assert rows.shape == (n, k)
    assert np.array_equal(np.vstack(list(rows.chunks(size))), ref)
    # a view starting mid-stream (PCG64 jumped ahead) gives the same rows
    view = rows[1234:4321]
    assert np.array_equal(view.array(), ref[1234:4321])
    assert np.array_equal(np.vstack(list(view.chunks(size))), ref[1234:4321])
    # a longer run continues the same stream
    assert np.array_equal(rows.resized(n + 10).array()[:n], ref)


@pytest.mark.parametrize("size", [1, 100, 1 << 10, 1 << 14])
def test_stream_rows_are_scipys_sobol_points_for_any_batch(size, monkeypatch):
    monkeypatch.setattr(sampling, "CACHE_VALUES", 0)
    ref = _sobol_rows(5, 14, 3)
    rows = random_rows(10_000, 3, method="sobol", seed=5)  # rounded up to 2^14
    assert rows.shape == (1 << 14, 3)
    assert np.array_equal(np.vstack(list(rows.chunks(size))), ref)
    assert np.array_equal(rows[999:5000].array(), ref[999:5000])


def test_cached_and_streamed_rows_agree():
    small = random_rows(3000, 3, seed=9)  # small enough to be drawn once and kept
    assert np.array_equal(small.array(), _numpy_rows(9, 3000, 3))
    assert np.array_equal(head(small, 100), _numpy_rows(9, 100, 3))
    assert np.array_equal(np.vstack(list(row_chunks(small, 999))), _numpy_rows(9, 3000, 3))
    with pytest.raises(TypeError):
        small[3]  # rows are sliced, never indexed one by one
    with pytest.raises(ValueError):
        RandomRows(3, 10, seed=1, method="latin")


def _colpitts(n_designs: int = 5):
    """Colpitts designs around 100 kHz, uniform ±5 % parts, a ±2 % window."""
    c1 = np.array([1.0e-9, 1.2e-9, 1.5e-9, 1.8e-9, 2.2e-9])[:n_designs]
    c2 = np.full(n_designs, 4.7e-9)
    ce = c1 * c2 / (c1 + c2)
    l0 = 1 / ((TWO_PI * 100e3) ** 2 * ce)
    tabs = {
        "C1": uniform_table(c1, 0.05, "list"),
        "C2": uniform_table(np.array([4.7e-9]), 0.05, "list"),
        "L": uniform_table(l0[::-1].copy(), 0.05, "list"),  # a table is sorted ascending
    }
    problem = Problem(COLPITTS, tabs, 98e3, 102e3, 0.0, 10.0, Parasitics())
    idx = {
        "C1": np.arange(n_designs, dtype=np.int32),
        "C2": np.zeros(n_designs, dtype=np.int32),
        "L": np.arange(n_designs, dtype=np.int32)[::-1].copy(),
    }
    designs = Designs(idx, np.full(n_designs, 100e3), c1 / c2)
    sim = Simulation(problem, {p: PartVariation("uniform") for p in ("C1", "C2", "L")})
    return sim, designs, c1, c2, l0


def _thomson_count(u: np.ndarray, c1, c2, l0) -> np.ndarray:
    # columns in order C1, C2, L; uniform ±5 %: value·(1 + 0.05·(2u − 1))
    a = c1[None, :] * (1 + 0.05 * (2 * u[:, [0]] - 1))
    b = c2[None, :] * (1 + 0.05 * (2 * u[:, [1]] - 1))
    ll = l0[None, :] * (1 + 0.05 * (2 * u[:, [2]] - 1))
    f = 1 / (TWO_PI * np.sqrt(ll * a * b / (a + b)))  # Thomson's formula, Colpitts
    return ((f >= 98e3) & (f <= 102e3)).sum(axis=0)


@pytest.mark.parametrize("rows_per_batch", [1 << 10, 1 << 13, 1 << 18])
def test_count_passing_on_a_stream_matches_thomsons_formula(rows_per_batch, monkeypatch):
    monkeypatch.setattr(sampling, "CACHE_VALUES", 0)
    monkeypatch.setattr(montecarlo, "ROWS", rows_per_batch)
    sim, designs, c1, c2, l0 = _colpitts()
    n = 50_000
    got = count_passing(sim, designs, random_rows(n, 3, seed=4))
    ref = _thomson_count(_numpy_rows(4, n, 3), c1, c2, l0)
    # boards exactly on a window edge could round either way; none are at these seeds
    assert np.array_equal(got, ref)


def test_conditional_sums_do_not_depend_on_the_batch_or_the_workers(monkeypatch):
    sim, designs, *_ = _colpitts()
    n = 70_000  # several chunks of conditional.ROWS, the last one partial
    matrix = _numpy_rows(6, n, 3)
    want = conditional_counts(sim, designs, matrix, workers=1)
    monkeypatch.setattr(sampling, "CACHE_VALUES", 0)
    for chunks in (1, 3, 16):
        monkeypatch.setattr(conditional, "BATCH_CHUNKS", chunks)
        for workers in (1, 2):
            got = conditional_counts(sim, designs, random_rows(n, 3, seed=6), workers=workers)
            assert got.total.tobytes() == want.total.tobytes()
            assert got.square.tobytes() == want.square.tobytes()
            assert np.array_equal(got.passed, want.passed)
    assert got.samples == n


def _traced_peak(fn) -> int:
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_memory_does_not_grow_with_the_samples(monkeypatch):
    # scaling shape: 8x the boards must not raise the traced peak (a matrix would: 8x)
    monkeypatch.setattr(conditional, "BATCH_CHUNKS", 2)
    monkeypatch.setattr(montecarlo, "ROWS", 1 << 15)
    sim, designs, *_ = _colpitts(2)
    peaks = {}
    for n in (1 << 17, 1 << 20):
        rows = random_rows(n, 3, seed=1)

        def both(rows: RandomRows = rows) -> None:
            count_passing(sim, designs, rows)
            conditional_counts(sim, designs, rows)

        peaks[n] = _traced_peak(both)
    matrix_small = (1 << 17) * 3 * 8  # bytes of the smaller run's whole matrix
    assert peaks[1 << 20] < peaks[1 << 17] + matrix_small  # far below 8x growth


DEMOS = ["probe_exciter.toml", "production_exciter.toml", "clapp_vfo.toml"]


@pytest.mark.parametrize("demo", DEMOS)
def test_solve_json_is_byte_identical_for_two_batch_sizes_and_worker_counts(demo, monkeypatch):
    spec = api.load_spec(ROOT / "demo_specs" / demo)
    kw = {"samples": 40_000, "top": 3}
    # reference: the rows drawn once and kept (the cache), default batch sizes
    monkeypatch.setattr(sampling, "CACHE_VALUES", 1 << 24)
    ref = to_json(api.solve(spec, workers=1, **kw))
    monkeypatch.setattr(sampling, "CACHE_VALUES", 0)  # stream: every batch drawn afresh
    for chunks, rows, workers in ((1, 1 << 12, 1), (2, 1 << 14, 2)):
        monkeypatch.setattr(conditional, "BATCH_CHUNKS", chunks)
        monkeypatch.setattr(montecarlo, "ROWS", rows)
        assert to_json(api.solve(spec, workers=workers, **kw)) == ref


def test_precision_runs_stream_the_same_bits(monkeypatch):
    spec = api.load_spec(ROOT / "demo_specs" / "probe_exciter.toml")
    kw = {"precision": 0.004, "top": 2, "samples": 5000}
    ref = to_json(api.solve(spec, workers=1, **kw))
    monkeypatch.setattr(sampling, "CACHE_VALUES", 0)
    monkeypatch.setattr(conditional, "BATCH_CHUNKS", 1)
    got = to_json(api.solve(spec, workers=2, **kw))
    assert got == ref
    assert '"converged": true' in got
