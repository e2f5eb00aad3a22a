"""Monte Carlo yield with common random numbers.

One matrix of uniform variates U, shape (samples, k), serves a run (from
a seeded ``numpy.random.Generator`` or a scrambled Sobol sequence, see
:mod:`picker.core.sampling`; a long run's U is a
:class:`~picker.core.sampling.RandomRows` stream, drawn in batches and never
held whole) and is reused for every candidate, so differences between
candidates are not sampling noise (common random numbers; JCGM 101:2008 §7
for Monte Carlo propagation of distributions).

Columns of U (:meth:`Simulation.columns`): one per part position for its
tolerance, one more per position whose table holds parallel pairs (the second
part is drawn on its own), and one per position with a temperature drift
class (each part's own curve within its class).

Axis convention (everywhere in this module): samples on axis 0, candidates on
axis 1.

A board passes when its frequency lies in ``[f_min, f_max]`` at every
temperature of the simulation's grid (and, with a circuit-aware model, when
it starts). Yield is the share of passing boards, reported with a binomial
confidence interval from ``scipy.stats.binomtest(...).proportion_ci``
(Wilson 1927 or Clopper-Pearson 1934).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import betaincinv

from picker.core.sampling import RandomRows, Rows, row_chunks, wilson_interval
from picker.core.search import Designs, Problem
from picker.parts import distributions
from picker.parts.drift import Material, drift_factor
from picker.tank.base import COUPLING, TWO_PI
from picker.tank.board import board_frequency, board_values

#: Boards evaluated per block (samples x candidates); bounds memory.
BLOCK = 1 << 21
#: Rows of u per chunk in :func:`count_passing` (a run of millions of boards per
#: design is counted in pieces; the counts are integers, so they add up exactly).
ROWS = 1 << 18

#: A board model maps sampled part values at one temperature, position ->
#: (samples, c), and the block's designs (length c) to a pass mask (samples, c).
BoardModel = Callable[[dict[str, np.ndarray], Designs], np.ndarray]

REFERENCE_TEMPERATURE = 25.0
#: Column name (in :meth:`Simulation.columns`) and value key of a board's sampled stray.
STRAY = "stray"

#: Lower clip of u before Φ⁻¹ for normal parts. The run's variates already lie in
#: [2^-53, 1 - 2^-53] (:mod:`picker.core.sampling`), so the clip does not act on them.
U_MIN = 1e-300


@dataclass(frozen=True)
class PartVariation:
    """How one position's parts vary: tolerance distribution and drift class.

    ``distribution`` is one of :data:`picker.parts.distributions.KINDS`; ``grade``
    is the inner tolerance removed from the centre for graded parts; ``lot``
    the relative deviations of a measured lot (empirical); ``material`` a
    :class:`picker.parts.drift.Material` (``None``: no temperature drift).
    """

    distribution: str = "uniform"
    grade: float | None = None
    lot: np.ndarray | None = None
    material: Material | None = None

    def std(self, tol: ArrayLike) -> np.ndarray:
        """Relative standard deviation of a part with tolerance ``tol``."""
        return distributions.std_of(self.distribution, tol, grade=self.grade, lot=self.lot)


@dataclass(frozen=True)
class Simulation:
    """Everything the Monte Carlo pass needs besides the random numbers."""

    problem: Problem
    parts: dict[str, PartVariation]
    temperatures: np.ndarray = field(default_factory=lambda: np.array([REFERENCE_TEMPERATURE]))
    model: BoardModel | None = None
    #: Half-width (F) of the board-to-board spread of the stray capacitance: each
    #: board's stray is uniform in stray ± stray_tol (0: one stray for every board).
    stray_tol: float = 0.0
    #: Half-width of the board-to-board spread of a coupled tank's k: each board's k is
    #: uniform in k ± coupling_tol (0: the tank's one k for every board).
    coupling_tol: float = 0.0
    #: Positions that are one part with another (position -> the one whose tolerance
    #: variate it takes): the two sections of a tapped coil move together.
    shared: Mapping[str, str] = field(default_factory=dict)

    @classmethod
    def simple(cls, problem: Problem, distribution: str = "uniform") -> Simulation:
        """Every position with the same distribution, no drift, ideal tank."""
        return cls(problem, {p: PartVariation(distribution) for p in problem.topology.positions})

    def columns(self) -> dict[str, int]:
        """Column of U for each random input: "C1" (tolerance), "C1#2" (second
        part of a pair), "C1@T" (drift). Order is fixed, so seeds reproduce."""
        cols: dict[str, int] = {}
        for p in self.problem.topology.positions:
            cols[p] = len(cols)
        for p in self.problem.topology.positions:
            if self.problem.tables[p].second is not None:
                cols[f"{p}#2"] = len(cols)
        for p in self.problem.topology.positions:
            if self.parts[p].material is not None:
                cols[f"{p}@T"] = len(cols)
        if self.stray_tol > 0:  # last, so specs without it draw the same numbers as before
            cols[STRAY] = len(cols)
        if self.coupling_tol > 0:  # after the stray's, for the same reason
            cols[COUPLING] = len(cols)
        return cols

    @property
    def n_columns(self) -> int:
        return len(self.columns())

    def drifting(self) -> bool:
        return any(v.material is not None for v in self.parts.values())


@dataclass(frozen=True)
class YieldEstimate:
    """A yield estimate with its interval, sample count and seed.

    ``estimator`` is "plain" (share of passing boards, ``estimate == passed /
    samples``, binomial interval: ``method`` "wilson" or "exact") or
    "conditional" (:mod:`picker.core.conditional`: the mean of each board's
    pass probability with ``integrated`` integrated out in closed form,
    ``method`` "normal", the interval mean ± z·``std_error``; ``passed`` is then
    the plain count of passing boards among the same boards, for reference).
    """

    estimate: float
    ci_low: float
    ci_high: float
    samples: int
    passed: int
    confidence: float
    method: str
    seed: int
    estimator: str = "plain"
    std_error: float | None = None
    integrated: str | None = None

    def as_dict(self) -> dict:
        out = {
            "estimate": self.estimate,
            "ci_low": self.ci_low,
            "ci_high": self.ci_high,
            "samples": self.samples,
            "passed": self.passed,
            "confidence": self.confidence,
            "method": self.method,
            "seed": self.seed,
            "estimator": self.estimator,
        }
        if self.estimator != "plain":
            out["std_error"] = self.std_error
            out["integrated"] = self.integrated
        return out


def binomial_interval(
    k: int, n: int, confidence: float = 0.95, method: str = "wilson"
) -> tuple[float, float]:
    """Two-sided interval for a proportion k/n: Wilson (1927) or Clopper-Pearson (1934).

    ``"wilson"``: :func:`picker.core.sampling.wilson_interval`. ``"exact"``
    (Clopper & Pearson 1934, Biometrika 26): low = B⁻¹(α/2; k, n − k + 1),
    high = B⁻¹(1 − α/2; k + 1, n − k), B⁻¹ the inverse regularised incomplete
    beta function (``scipy.special.betaincinv``), α = 1 − confidence; low = 0
    at k = 0, high = 1 at k = n. Both agree with
    ``scipy.stats.binomtest(k, n).proportion_ci`` (tested), without importing
    scipy.stats.
    """
    k, n = int(k), int(n)
    if not 0 <= k <= n or n < 1:
        raise ValueError(f"expected 0 <= k <= n and n >= 1; got k={k}, n={n}")
    if method == "wilson":
        lo, hi = wilson_interval(k, n, confidence)
        return float(lo), float(hi)
    if method != "exact":
        raise ValueError(f"expected a binomial interval method, wilson or exact; got {method!r}")
    alpha = 1.0 - confidence
    low = 0.0 if k == 0 else float(betaincinv(k, n - k + 1, alpha / 2))
    high = 1.0 if k == n else float(betaincinv(k + 1, n - k, 1 - alpha / 2))
    return low, high


def estimate_yield(k: int, n: int, *, confidence: float, method: str, seed: int) -> YieldEstimate:
    """The yield k/n with its two-sided interval (:func:`binomial_interval`), run facts attached."""
    lo, hi = binomial_interval(k, n, confidence, method)
    return YieldEstimate(k / n, lo, hi, n, int(k), confidence, method, seed)


def ideal_model(problem: Problem) -> BoardModel:
    """Pass test with the ideal tank: f_min <= f <= f_max, tested on L·C_eff."""
    par = problem.parasitics
    lc_lo = 1.0 / (TWO_PI * problem.f_max) ** 2
    lc_hi = 1.0 / (TWO_PI * problem.f_min) ** 2
    topo = problem.topology

    def passes(vals: dict[str, np.ndarray], designs: Designs) -> np.ndarray:
        bv = board_values(topo, vals, par)
        lc = topo.l_eff(bv) * topo.c_eff(bv, bv.get(STRAY, par.stray))
        return (lc >= lc_lo) & (lc <= lc_hi)

    return passes


def _deviation(var: PartVariation, u_col: np.ndarray, tol: np.ndarray) -> np.ndarray:
    """Relative deviations (samples, n) of one position's parts (:func:`distributions.deviation`)."""
    return distributions.deviation(
        u_col, tol, var.distribution, grade=var.grade, lot=var.lot, u_min=U_MIN
    )


def sampled_values(
    sim: Simulation, designs: Designs, u: np.ndarray, positions: list[str] | None = None
) -> dict[str, np.ndarray]:
    """Part values of every simulated board at 25 °C, position -> (samples, n).

    A parallel pair's two parts each get their own deviation (column "P#2").
    With ``sim.stray_tol`` the dict also holds each board's stray capacitance
    under the key :data:`STRAY`, shape (samples, 1); with ``sim.coupling_tol`` each
    board's coupling k under :data:`picker.tank.base.COUPLING` (the topology's
    formulas take it from there), shape (samples, 1).
    ``positions`` limits the result to those positions (default: all).
    """
    cols = sim.columns()
    out = {}
    for p in sim.problem.topology.positions if positions is None else positions:
        t = sim.problem.tables[p]
        i = designs.idx[p]
        var = sim.parts[p]
        if t.second is None:
            col = u[:, cols[sim.shared.get(p, p)]]  # a section of a tapped coil: its coil's
            out[p] = t.values[i][None, :] * (1.0 + _deviation(var, col, t.tol[i]))
        else:
            b = t.second[i]
            a = t.values[i] - b
            da = _deviation(var, u[:, cols[p]], t.tol[i])
            db = _deviation(var, u[:, cols[f"{p}#2"]], t.second_tol[i])
            out[p] = a[None, :] * (1.0 + da) + b[None, :] * (1.0 + db)
    if sim.stray_tol > 0:  # uniform in stray ± stray_tol (GUM JCGM 100:2008, 4.3.7)
        st = sim.problem.parasitics.stray + sim.stray_tol * (2.0 * u[:, cols[STRAY]] - 1.0)
        out[STRAY] = st[:, None]
    if sim.coupling_tol > 0:  # uniform in k ± coupling_tol, as the stray
        k = sim.problem.topology.coupling + sim.coupling_tol * (2.0 * u[:, cols[COUPLING]] - 1.0)
        out[COUPLING] = k[:, None]
    return out


def drift_factors(sim: Simulation, u: np.ndarray) -> dict[str, np.ndarray]:
    """Relative drift of each drifting position, position -> (n_temps, samples)."""
    cols = sim.columns()
    return {
        p: drift_factor(v.material, sim.temperatures, u[:, cols[f"{p}@T"]])
        for p, v in sim.parts.items()
        if v.material is not None
    }


def values_at(
    vals: dict[str, np.ndarray], drift: dict[str, np.ndarray], i: int
) -> dict[str, np.ndarray]:
    """Sampled values at temperature index ``i`` of the grid."""
    if not drift:
        return vals
    return {p: (v * (1.0 + drift[p][i][:, None]) if p in drift else v) for p, v in vals.items()}


def count_passing(sim: Simulation, designs: Designs, u: Rows) -> np.ndarray:
    """Passing boards per design, shape (n,) int64, evaluated in memory-bounded blocks.

    ``u`` is a matrix of variates or a :class:`~picker.core.sampling.RandomRows`
    stream; either way the rows are taken :data:`ROWS` at a time (a stream is
    drawn batch by batch, never whole), so memory does not grow with the samples.
    """
    if isinstance(u, RandomRows) or u.shape[0] > ROWS:
        out = np.zeros(len(designs), dtype=np.int64)
        for ur in row_chunks(u, ROWS):  # integer counts: they add up exactly
            out += _count_block(sim, designs, ur)
        return out
    return _count_block(sim, designs, u)


def _count_block(sim: Simulation, designs: Designs, u: np.ndarray) -> np.ndarray:
    """:func:`count_passing` of at most :data:`ROWS` rows held as a matrix."""
    model = sim.model or ideal_model(sim.problem)
    drift = drift_factors(sim, u)
    n = len(designs)
    n_t = len(sim.temperatures) if drift else 1
    per = max(1, BLOCK // (max(1, u.shape[0]) * max(1, n_t)))
    out = np.zeros(n, dtype=np.int64)
    for s in range(0, n, per):
        sel = np.arange(s, min(s + per, n))
        sub = designs.take(sel)
        vals = sampled_values(sim, sub, u)
        ok = model(values_at(vals, drift, 0), sub)
        for i in range(1, n_t):  # a board passes at every grid temperature
            ok = ok & model(values_at(vals, drift, i), sub)
        out[sel] = ok.sum(axis=0)
    return out


def frequency_samples(sim: Simulation, designs: Designs, u: np.ndarray) -> np.ndarray:
    """Ideal-tank frequency of every simulated board at every grid temperature.

    Returns
    -------
    (n_temps, samples, n) float, Hz (n_temps is 1 without drift).
    """
    vals = sampled_values(sim, designs, u)
    drift = drift_factors(sim, u)
    p = sim.problem
    return np.stack(
        [
            board_frequency(p.topology, values_at(vals, drift, i), p.parasitics)
            for i in range(len(sim.temperatures) if drift else 1)
        ]
    )
