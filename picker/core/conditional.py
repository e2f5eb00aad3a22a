"""Conditional Monte Carlo yield: one part's tolerance integrated out in closed form.

With the ideal tank, a board passes when its frequency lies in the window at
every grid temperature. Fix every random input but one part ``p`` (the
inductor, or a Clapp's C3: a position the topology solves analytically,
:meth:`picker.tank.base.Topology.solvable`). The frequency falls as ``p``
grows, so the board passes exactly when ``p``'s relative deviation lies in an
interval [d_lo, d_hi] (:func:`picker.core.search.solve_interval` at each
temperature, intersected), and the conditional pass probability is

    Y = P(d_lo <= D_p <= d_hi) = F_p(d_hi) − F_p(d_lo)

with F_p the part's distribution function in closed form
(:func:`picker.parts.distributions.probability`: uniform, normal, truncated,
graded, a sum over a measured lot). The yield is E[Y]; its estimate is the
sample mean of Y over the boards, an unbiased estimator whose variance is
never larger than the plain pass/fail indicator's (conditioning, Rao-Blackwell;
Owen, *Monte Carlo theory, methods and examples*, 2013, ch. 8 "Variance
reduction", the section on conditioning; section number from memory). Its
interval is the normal (central limit) interval on that sample mean,
mean ± z·s/√n with s the sample standard deviation of Y (Owen 2013, ch. 2,
the CLT interval of simple Monte Carlo), **not** a binomial interval: Y is not
0 or 1. With scrambled Sobol rows the same interval is a conservative reading,
as for the binomial one (see :mod:`picker.core.sampling`).

Each design integrates out the solvable position with the largest first-order
share of the variance of ln f ((S_i·σ_i)², :mod:`picker.core.screen`). The
rows of ``u`` are the run's common random numbers, the same for every design.
Sums run over fixed chunks of :data:`ROWS` rows and, within a chunk, over one
design's contiguous row of values, so every design's figures are independent
of which other designs share its block or its worker (byte-identical JSON for
any worker count). Axis convention: samples on axis 0, designs on axis 1.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

from picker.core.montecarlo import (
    BLOCK,
    Simulation,
    YieldEstimate,
    drift_factors,
    estimate_yield,
    sampled_values,
    values_at,
)
from picker.core.sampling import Rows, normal_quantile, row_chunks
from picker.core.screen import part_sigmas
from picker.core.search import Designs, solve_interval
from picker.parts import distributions
from picker.tank.board import board_sensitivities

#: Rows of ``u`` per chunk: fixed, so sums never depend on the block layout.
ROWS = 1 << 14


@dataclass(frozen=True)
class Tally:
    """Sums of the conditional pass probabilities of each design over the boards.

    Attributes
    ----------
    total : (n,) float, Σ Y over the boards (the plain count where nothing is integrated).
    square : (n,) float, Σ Y².
    passed : (n,) int64, boards whose sampled part passes (the plain pass/fail count).
    samples : int, boards per design.
    integrated : (n,) str, the position integrated out per design ("" for none).
    """

    total: np.ndarray
    square: np.ndarray
    passed: np.ndarray
    samples: int
    integrated: np.ndarray

    def mean(self) -> np.ndarray:
        """Yield estimates, shape (n,)."""
        return self.total / self.samples

    def std_error(self) -> np.ndarray:
        """Standard error of each estimate: s/√n, s² the sample variance of Y (n − 1)."""
        n = self.samples
        m = self.total / n
        var = np.maximum(self.square - n * m * m, 0.0) / max(n - 1, 1)
        return np.sqrt(var / n)

    def interval(self, confidence: float) -> tuple[np.ndarray, np.ndarray]:
        """Normal interval mean ± z·s/√n, clipped to [0, 1] (module docstring)."""
        z = normal_quantile(confidence)
        m, se = self.mean(), self.std_error()
        return np.clip(m - z * se, 0.0, 1.0), np.clip(m + z * se, 0.0, 1.0)

    def take(self, sel: np.ndarray) -> Tally:
        return Tally(
            self.total[sel], self.square[sel], self.passed[sel], self.samples, self.integrated[sel]
        )

    def plus(self, other: Tally) -> Tally:
        """The tally of both runs of boards (same designs)."""
        return Tally(
            self.total + other.total,
            self.square + other.square,
            self.passed + other.passed,
            self.samples + other.samples,
            self.integrated,
        )


def estimates(tally: Tally, *, confidence: float, method: str, seed: int) -> list[YieldEstimate]:
    """One :class:`~picker.core.montecarlo.YieldEstimate` per design of ``tally``.

    A design with a position integrated out gets the conditional estimate and
    its normal interval (``method`` "normal"); one sampled plainly gets k/n
    and the binomial interval ``method`` ("wilson" or "exact").
    """
    lo, hi = tally.interval(confidence)
    mean, se = tally.mean(), tally.std_error()
    out = []
    for r in range(len(mean)):
        k = int(tally.passed[r])
        pos = str(tally.integrated[r])
        if not pos:
            out.append(
                estimate_yield(k, tally.samples, confidence=confidence, method=method, seed=seed)
            )
            continue
        out.append(
            YieldEstimate(
                float(mean[r]),
                float(lo[r]),
                float(hi[r]),
                tally.samples,
                k,
                confidence,
                "normal",
                seed,
                estimator="conditional",
                std_error=float(se[r]),
                integrated=pos,
            )
        )
    return out


def applies(sim: Simulation) -> bool:
    """Conditional Monte Carlo needs the ideal tank (a circuit model is sampled plainly)."""
    return sim.model is None


def integrated_positions(sim: Simulation, designs: Designs) -> np.ndarray:
    """Per design, the solvable position with the largest share (S_i·σ_i)², shape (n,) str.

    "" for every design when :func:`applies` is false.
    """
    names, codes = integrated_codes(sim, designs)
    return names[codes]


def integrated_codes(sim: Simulation, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """:func:`integrated_positions` as (names, int8 codes): ``names[codes]`` is it.

    One byte per design (five million designs: 5 MB, not 40).
    """
    n = len(designs)
    if not applies(sim) or n == 0:
        return np.full(1, "", dtype="<U1"), np.zeros(n, dtype=np.int8)
    problem = sim.problem
    topo = problem.topology
    cands = [p for p in topo.solvable() if p in designs.idx]
    pick = np.empty(n, dtype=np.int8)  # a topology has few solvable positions
    for s in range(0, n, BOUND_CHUNK):  # in chunks: bounded temporaries
        sub = designs.take(np.arange(s, min(s + BOUND_CHUNK, n)))
        sens = board_sensitivities(topo, sub.values(problem), problem.parasitics)
        sig = part_sigmas(sim, sub)
        k = len(sub)
        share = np.stack([np.broadcast_to((sens[p] * sig[p]) ** 2, (k,)) for p in cands])
        pick[s : s + k] = np.argmax(share, axis=0)
    return np.asarray(cands), pick


def _others(sim: Simulation, sub: Designs, p: str, u: np.ndarray) -> dict[str, np.ndarray]:
    """Sampled marked values of every position but ``p``, position -> (rows, c)."""
    keep = [q for q in sim.problem.topology.positions if q != p]
    return sampled_values(sim, sub, u, positions=keep)


def _block(
    sim: Simulation, sub: Designs, p: str, u: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Σ Y, Σ Y² and the plain pass count of designs ``sub`` (all integrating ``p``) on rows ``u``."""
    y, lo_d, hi_d = _probabilities(sim, sub, p, u)
    t, i, var = sim.problem.tables[p], sub.idx[p], sim.parts[p]
    d = distributions.deviation(
        u[:, sim.columns()[p]], t.tol[i], var.distribution, grade=var.grade, lot=var.lot
    )
    ok = (d >= lo_d) & (d <= hi_d)
    yt = np.ascontiguousarray(y.T)  # one design per contiguous row: its sum is its own
    return yt.sum(axis=1), np.einsum("ij,ij->i", yt, yt), ok.sum(axis=0, dtype=np.int64)


def conditional_rows(sim: Simulation, sub: Designs, p: str, u: np.ndarray) -> np.ndarray:
    """The conditional pass probability Y of every board (row of ``u``) and design of
    ``sub`` (all integrating ``p``), shape (rows, designs): what :func:`conditional_counts`
    sums (the ranking's pilot regresses it on the rows' inputs)."""
    return _probabilities(sim, sub, p, u)[0]


def _probabilities(
    sim: Simulation, sub: Designs, p: str, u: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Y (rows, designs) and the window [d_lo, d_hi] of ``p``'s deviation on each board."""
    problem = sim.problem
    cols = sim.columns()
    t = problem.tables[p]
    i = sub.idx[p]
    var = sim.parts[p]
    vals = _others(sim, sub, p, u)
    drift = drift_factors(sim, u)
    if t.second is None:
        inv_a = 1.0 / t.values[i]
        rest: np.ndarray | float = 0.0
    else:
        b = t.second[i]
        inv_a = 1.0 / (t.values[i] - b)
        db = distributions.deviation(
            u[:, cols[f"{p}#2"]], t.second_tol[i], var.distribution, grade=var.grade, lot=var.lot
        )
        rest = b[None, :] * (1.0 + db)
    lo_d: np.ndarray | None = None
    hi_d: np.ndarray | None = None
    for k in range(len(sim.temperatures) if drift else 1):
        lo, hi = solve_interval(problem, p, values_at(vals, drift, k))
        if p in drift:
            g = (1.0 + drift[p][k])[:, None]
            lo, hi = lo / g, hi / g
        # value of p at this temperature: (a·(1 + d) + rest)·g, in [lo, hi]
        with np.errstate(invalid="ignore", over="ignore"):
            lk = (lo - rest) * inv_a - 1.0
            hk = (hi - rest) * inv_a - 1.0
        lo_d = lk if lo_d is None else np.maximum(lo_d, lk)
        hi_d = hk if hi_d is None else np.minimum(hi_d, hk)
    assert lo_d is not None and hi_d is not None
    y = distributions.probability(
        lo_d, hi_d, t.tol[i], var.distribution, grade=var.grade, lot=var.lot
    )
    return y, lo_d, hi_d


def _plain_block(
    sim: Simulation, sub: Designs, u: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    from picker.core.montecarlo import count_passing

    k = count_passing(sim, sub, u).astype(np.int64)
    return k.astype(float), k.astype(float), k


def conditional_counts(
    sim: Simulation,
    designs: Designs,
    u: Rows,
    *,
    integrated: np.ndarray | None = None,
    workers: int = 1,
) -> Tally:
    """The :class:`Tally` of every design on the rows of ``u`` (common random numbers).

    ``integrated`` (from :func:`integrated_positions` by default) names the
    position each design integrates out; "" samples that design plainly
    (pass/fail). ``workers`` threads share the blocks of designs (numpy
    releases the GIL in its array loops); the result does not depend on it.

    ``u`` is a matrix or a :class:`~picker.core.sampling.RandomRows` stream. The
    rows come :data:`BATCH_CHUNKS` × :data:`ROWS` at a time (a stream is drawn
    batch by batch, so memory does not grow with the samples) and every design
    adds its sums chunk by chunk in row order over the fixed grid of
    :data:`ROWS` rows: the figures are the same bits whatever the batch size.
    """
    n = len(designs)
    rows = u.shape[0]
    if integrated is None:
        integrated = integrated_positions(sim, designs)
    total = np.zeros(n)
    square = np.zeros(n)
    passed = np.zeros(n, dtype=np.int64)
    n_t = len(sim.temperatures) if sim.drifting() else 1
    chunk = min(rows, ROWS)
    per = max(1, (BLOCK // 4) // (chunk * n_t))  # 4 MB arrays: each worker holds about ten
    jobs = []
    for p in np.unique(integrated).tolist():
        members = np.flatnonzero(integrated == p)
        for s in range(0, len(members), per):
            jobs.append((p, members[s : s + per]))

    def run(job: tuple[str, np.ndarray], batch: np.ndarray) -> None:
        """Add the job's sums over the chunks of ``batch``, in row order."""
        p, sel = job
        sub = designs.take(sel)
        for r in range(0, batch.shape[0], ROWS):
            ur = batch[r : r + ROWS]
            got = _block(sim, sub, p, ur) if p else _plain_block(sim, sub, ur)
            for acc, g in zip((total, square, passed), got, strict=True):
                acc[sel] += g  # each design in one job only: no two threads write it

    pool = None
    if workers > 1 and len(jobs) > 1:
        shared_arena()
        pool = ThreadPoolExecutor(max_workers=workers)
    try:
        for batch in row_chunks(u, BATCH_CHUNKS * ROWS):
            if pool is None:
                for job in jobs:
                    run(job, batch)
            else:
                list(pool.map(run, jobs, [batch] * len(jobs)))
    finally:
        if pool is not None:
            pool.shutdown()
    return Tally(total, square, passed, rows, integrated)


#: Chunks of :data:`ROWS` rows drawn at once from a stream (2^18 rows: 2 MB per column).
BATCH_CHUNKS = 16


_ARENA = [False]


def shared_arena() -> None:
    """Once per process, on glibc: worker threads allocate from the main malloc arena.

    By default each thread gets its own arena, which keeps the blocks it freed (the
    workers' 4 MB arrays) instead of returning them: at the largest accepted space that
    held about 60 MB of resident memory beyond what was in use (``mallopt(M_ARENA_MAX,
    1)``, glibc manual, "Memory Allocation Tunables"). Elsewhere it does nothing.
    """
    if _ARENA[0]:
        return
    _ARENA[0] = True
    import ctypes
    import ctypes.util

    name = ctypes.util.find_library("c")
    try:
        libc = ctypes.CDLL(name) if name else None
        if libc is not None and hasattr(libc, "gnu_get_libc_version"):
            libc.mallopt(-8, 1)  # M_ARENA_MAX = -8 in glibc's malloc.h
    except OSError:  # pragma: no cover - no C library to load
        pass


def yield_upper_bound(sim: Simulation, designs: Designs, integrated: np.ndarray) -> np.ndarray:
    """:func:`bound_chunk` over chunks of designs (its temporaries are BOUND_STEPS x chunk)."""
    n = len(designs)
    out = np.ones(n)
    for s in range(0, n, BOUND_CHUNK):
        sel = np.arange(s, min(s + BOUND_CHUNK, n))
        out[sel] = bound_chunk(sim, designs.take(sel), integrated[sel])
    return out


#: Designs per chunk of :func:`yield_upper_bound`.
BOUND_CHUNK = 1 << 15


def bound_chunk(sim: Simulation, designs: Designs, integrated: np.ndarray) -> np.ndarray:
    """A proven upper bound of each design's yield, shape (n,) (1 where none is known).

    For a design integrating out the inductor (no drift, single parts): the
    window of the inductor's marked value is [lo, hi] = [A, B]/K with K the
    product of the other parts' board capacitance and scale
    (:meth:`picker.tank.base.Topology.solve_interval`), and K grows with every
    other part (the frequency falls as any part grows). Over the box of the
    other parts' deviations (their supports; ±6 sigma for a normal part, whose
    outside mass is added) lo sweeps [lo(box top), lo(box bottom)]; split that
    range into :data:`BOUND_STEPS` equal pieces [l_j, l_j+1]: on piece j the window
    lies inside [l_j, l_j+1·B/A], so Y <= P(D in that interval), and the yield
    E[Y] <= max_j of those (the interval the design's frequency spread can
    reach, in pieces).
    """
    n = len(designs)
    out = np.ones(n)
    problem = sim.problem
    topo = problem.topology
    p = topo.inductor
    sel = np.flatnonzero(integrated == p)
    if not len(sel) or sim.drifting() or problem.tables[p].second is not None:
        return out
    sub = designs.take(sel)
    vals = sub.values(problem)
    low: dict[str, np.ndarray] = {}
    high: dict[str, np.ndarray] = {}
    outside = 0.0
    for q in topo.positions:
        if q == p:
            continue
        t, i, var = problem.tables[q], sub.idx[q], sim.parts[q]
        dl, dh, m = distributions.support(var.distribution, t.tol[i], grade=var.grade, lot=var.lot)
        outside += m
        if t.second is None:
            low[q], high[q] = vals[q] * (1 + dl), vals[q] * (1 + dh)
        else:
            b = t.second[i]
            bl, bh, m2 = distributions.support(
                var.distribution, t.second_tol[i], grade=var.grade, lot=var.lot
            )
            outside += m2
            low[q] = (vals[q] - b) * (1 + dl) + b * (1 + bl)
            high[q] = (vals[q] - b) * (1 + dh) + b * (1 + bh)
    lo_top, hi_top = solve_interval(problem, p, high)  # others largest: window lowest
    lo_bot, _ = solve_interval(problem, p, low)
    ratio = hi_top / lo_top  # B/A, the same for every K
    t, i, var = problem.tables[p], sub.idx[p], sim.parts[p]
    a = t.values[i]
    steps = np.linspace(0.0, 1.0, BOUND_STEPS + 1)[:, None]
    edges = lo_top[None, :] + (lo_bot - lo_top)[None, :] * steps  # equal pieces
    pr = distributions.probability(
        edges[:-1] / a - 1.0,
        edges[1:] * ratio / a - 1.0,
        t.tol[i],
        var.distribution,
        grade=var.grade,
        lot=var.lot,
    )
    out[sel] = np.minimum(1.0, pr.max(axis=0) + outside)
    return out


#: Pieces the bound splits the window's reach into (tighter with more, at a linear cost).
BOUND_STEPS = 16


def half_widths(tally: Tally, confidence: float) -> np.ndarray:
    """Interval half-width of each design: z·s/√n, or the Wilson one for a plain design."""
    from picker.core.sampling import wilson_half_width

    z = normal_quantile(confidence)
    cond = z * tally.std_error()
    plain = np.atleast_1d(wilson_half_width(tally.passed, tally.samples, confidence))
    return np.where(tally.integrated != "", cond, plain)


def default_workers() -> int:
    """Threads for the Monte Carlo: both cores of a 2-core machine, at most 2."""
    import os

    return max(1, min(2, os.cpu_count() or 1))
