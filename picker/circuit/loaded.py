"""The loaded (circuit-aware) model in the Monte Carlo: nominal figures, a fast surrogate
and the board model.

Two models of a board built from *board* values (the marked part values with the
spec's parasitics applied by :func:`picker.tank.base.board_values`):

- the linear model, :func:`picker.circuit.oscillation.loaded_response` (frequency
  where the loop-gain phase crosses zero, start-up margin |T| there), wrapped by
  :func:`loaded_nominal`;
- the large-signal model, :func:`picker.circuit.steady.steady_state` (start-up,
  steady frequency, amplitude, steady or bursting), wrapped by :func:`board_state`.

A board counts towards yield when it starts, runs steady (not bursting), its
start-up margin is at most ``amplifier.max_margin`` (when given) and its *steady*
frequency lies in the window. The loaded-feasible search is in
:mod:`picker.circuit.loaded_search`, the per-design figures (amplitude, stress,
cautions, worst margin, the ``large_signal`` object) in :mod:`picker.circuit.figures`.

The large-signal model per design, the linear model per board
-------------------------------------------------------------
The large-signal model costs about half a millisecond to a few milliseconds per board
(1,600 to 3,700 s of CPU for 200 designs × 20,000 boards, measured by
:mod:`picker.bench.loaded`), so by
default (``amplifier.monte_carlo = "surrogate"``) it runs only at a few points of the
box the boards of each design span, and a polynomial carries it to every board
(:mod:`picker.circuit.board_fit`, (F1) in t = ln(v/a)/h):

    ln f_steady(board) ≈ ln f_linear(board) + off_f(t)                        (A1)
    ln m(board)        ≈ ln m_linear(board) + off_m(t)                        (A2)
    bursts(board)      ⇔ min_j steady_j(t) ≤ 0                                (A3)

off_f, off_m and the Routh-Hurwitz conditions steady_j of the envelope equations
fitted per design: a quadratic from 1 + 2k + 2^k points, raised to degree 4 by least
squares where the burst edge may cross the box; the boards within the degree-4 fit's
residual band of the edge go through the large-signal model itself.
The linear model itself carries the rest of the spread, through the expansions below.
This is the issue's "large-signal model for the nominal offset, linear model for the
spread", with the offset and the bursting verdict followed across the box instead of
frozen at nominal (frozen, a design whose boards straddle the burst edge was counted
1586 of 3000 boards against 823 by the full model).

It is an approximation, tested against the large-signal model on every board in
tests/test_loaded_fit.py: on the demo ``colpitts_bjt.toml`` and on spaces with
designs at the burst and start-up edges, the yields agree within their combined
standard errors; on the drift test of tests/test_loaded.py (7 designs, 3,000 boards,
an X7R C2 at three temperatures) every count within 0.5 % of the boards of the per-board
model's. The box is the one the boards of each call span (per temperature with drift),
so no board lies outside it. Designs the fit cannot describe (the centre of the box does not
start, saturation differs between points, the verdicts disagree with the
continuous quantities, too few finite points) run the large-signal model on every
board. ``amplifier.monte_carlo = "full"`` runs it on every board of every design.

Monte Carlo surrogate
---------------------
The full linear model costs about 5 µs per board, too slow for a few thousand
candidates × 20,000 boards. Per design, at its nominal point, the ratio
r = f_loaded/f_ideal and the margin m are expanded in x_i = ln(1 + d_i), the
log deviation of each part (tolerance and drift), by finite differences of the
full model (step :data:`SURROGATE_STEP`; 2k + 1 + k(k−1)/2 evaluations per
design, vectorised over designs):

    ln f_loaded = ln f_ideal(board) + ln r0 + Σ K_i·x_i                       (S1)
    ln m        = ln m0 + Σ M_i·x_i                                           (S2)
    ln f_loaded = (S1) + Σ_{i<=j} Q_ij·x_i·x_j                                (S3)

with K_i = ∂ln r/∂ln x_i, M_i = ∂ln m/∂ln x_i and Q_ij the second-order terms
of ln r (first- and second-order Taylor expansions). The ideal tank's exact
nonlinearity stays in f_ideal(board); only the loading correction r is
expanded.

Each call of the board model measures the expansions' error with the full linear
model at the 2^k corners of the box its boards span (where a Taylor expansion is
worst) and decides every board in three tiers, with (A1)/(A2) added to each: (S1)/(S2)
where the board lies more than twice that error from an edge (f_min, f_max, margin 1,
``max_margin``); (S3) for the rest where it lies more than twice its own corner error
from the edge; the linear model itself for what is left.

A board's own stray and coupling
--------------------------------
With ``[parasitics] stray_tolerance`` each board draws its own stray (key
:data:`picker.core.montecarlo.STRAY`), with ``[tank] coupling_tolerance`` its own coupling
k of the coils (key :data:`picker.tank.base.COUPLING`). The full large-signal model takes
them as they are (one call per distinct k, :func:`picker.circuit.board_spread.by_coupling`);
the approximation adds each through a quadratic in d = x − x0 fitted to the large-signal
model at the design's marked values and x0 − t, x0, x0 + t (t its tolerance):

    ln f += a_f·d + b_f·d²,   ln m += a_m·d + b_m·d²                               (X1)

with the ideal tank's part of ln f taken at each board's own stray and k exactly
(Thomson's formula in (S1)) and (X1) fitted to what is left, ln f_steady − ln f_ideal; the
board fit's bursting conditions (A3) take their own quadratic in d likewise
(:mod:`picker.circuit.board_spread`).

Quadratic, not linear: the stray moves the steady frequency through the drive as well
(its slope changes twofold from 1 to 7 pF on colpitts_bjt.toml); k moves (L2 + M)/(L1 + M) and
so the drive. tests/test_loaded_stray.py and tests/test_loaded_coupling.py check the
yields against the large-signal model on every board.

Axis convention: samples on axis 0, designs on axis 1.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.board_fit import BoardFit, fit_boards
from picker.circuit.board_spread import (
    SPREADS,
    by_coupling,
    spread_centre,
    spread_shift,
    spread_terms,
)
from picker.circuit.nominal_orbit import NominalOrbit, nominal_orbits
from picker.circuit.steady import SteadyState, steady_state
from picker.circuit.surrogate import (
    SURROGATE_STEP,
    Surrogate,
    fit_surrogate,
    loaded_nominal,
    surrogate_logs,
    surrogate_response,
)
from picker.core.montecarlo import STRAY
from picker.core.search import Designs, Problem
from picker.tank.base import COUPLING, Topology
from picker.tank.board import Parasitics, board_frequency, board_sensitivities, board_values

#: Smallest error band (in ln f and ln margin) of the surrogate's edge test.
BAND_FLOOR = 1e-12
METHODS = ("surrogate", "full")
#: Designs per call that get the nominal orbit (:meth:`LoadedModel.refine_orbits`).
ORBIT_DESIGNS = 20

__all__ = [
    "METHODS",
    "LoadedModel",
    "NominalState",
    "Surrogate",
    "board_state",
    "fit_surrogate",
    "loaded_nominal",
    "nominal_offsets",
    "surrogate_logs",
    "surrogate_response",
]


@dataclass(frozen=True)
class NominalState:
    """Large-signal facts of designs at their nominal point, every array (c,).

    ``approx`` marks designs the nominal-offset approximation (module docstring)
    applies to: they start and run steady at nominal and both models give a finite
    frequency and margin there. ``off_f`` = ln f_steady − ln f_linear and ``off_m`` =
    ln m_steady − ln m_linear at nominal (0 where not ``approx``).
    """

    approx: np.ndarray
    off_f: np.ndarray
    off_m: np.ndarray

    def take(self, sel: Any) -> NominalState:
        return NominalState(self.approx[sel], self.off_f[sel], self.off_m[sel])


def _steady(
    topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams
) -> SteadyState:
    """:func:`picker.circuit.steady.steady_state`, looked up when called (so a test that
    replaces this module's ``steady_state`` replaces it in the board fit too)."""
    return steady_state(topology, values, stray, params)


def board_state(
    topology: Topology,
    values: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
) -> SteadyState:
    """The large-signal model (:func:`picker.circuit.steady.steady_state`) of boards with
    *marked* values ``values``: the parasitics applied first, as :func:`loaded_nominal`;
    a board's own stray (key :data:`picker.core.montecarlo.STRAY`, ``[parasitics]
    stray_tolerance``) and coupling k (key :data:`picker.tank.base.COUPLING`) in place of
    the spec's where ``values`` holds them."""
    if COUPLING in values:
        return by_coupling(
            topology, values, lambda tank, v: board_state(tank, v, parasitics, params)
        )
    bv = board_values(
        topology, {p: np.asarray(values[p], dtype=float) for p in topology.positions}, parasitics
    )
    stray = np.asarray(values[STRAY], dtype=float) if STRAY in values else parasitics.stray
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return steady_state(topology, bv, stray, params)


def nominal_offsets(
    topology: Topology,
    nominal: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
) -> NominalState:
    """:class:`NominalState` of designs with marked values ``nominal`` (n,): one call of the
    linear model (:func:`loaded_nominal`) and one of the large-signal model (:func:`board_state`)."""
    f_lin, m_lin = loaded_nominal(topology, nominal, parasitics, params)
    st = board_state(topology, nominal, parasitics, params)
    with np.errstate(divide="ignore", invalid="ignore"):
        off_f = np.log(st.f_hz) - np.log(f_lin)
        off_m = np.log(st.margin) - np.log(m_lin)
    approx = np.asarray(st.runs, dtype=bool) & np.isfinite(off_f) & np.isfinite(off_m)
    return NominalState(
        approx, np.where(approx, off_f, 0.0).reshape(-1), np.where(approx, off_m, 0.0).reshape(-1)
    )


@dataclass(frozen=True)
class Fix:
    """The nominal orbits of designs (c,): ``has`` one, its ``shift`` (O1) and ``burst`` (O2)
    (:mod:`picker.circuit.nominal_orbit`)."""

    has: np.ndarray
    shift: np.ndarray
    burst: np.ndarray

    def take(self, sel: Any) -> Fix:
        return Fix(self.has[sel], self.shift[sel], self.burst[sel])


class LoadedModel:
    """The Monte Carlo board model with the loaded oscillator (a :data:`BoardModel`).

    ``model(vals, designs)`` returns the pass mask (samples, c): the board starts,
    runs steady (:attr:`picker.circuit.steady.SteadyState.runs`), its start-up margin
    is at most ``max_margin`` (when given) and its steady frequency lies in
    [f_min, f_max]. ``method`` "surrogate" uses the approximation (A1)-(A3) of the
    module docstring with (S1)-(S3) for the linear spread, the surrogate cached by the
    design's index tuple, the board fit by the design and its boards' box; "full" runs
    the large-signal model on every board. ``workers`` threads share the designs of a
    board fit (the result is the same bit for bit with any number).
    :meth:`frequencies` gives the same boards' steady frequencies (the histogram and
    the spread drivers), :meth:`sensitivities` their first-order sensitivities.
    """

    def __init__(
        self,
        problem: Problem,
        params: AmplifierParams,
        method: str = "surrogate",
        max_margin: float | None = None,
        workers: int = 1,
        stray_tol: float = 0.0,
        coupling_tol: float = 0.0,
    ) -> None:
        if method not in METHODS:
            raise ValueError(f"method must be one of {METHODS}, got {method!r}")
        self.problem = problem
        self.params = params
        self.method = method
        self.max_margin = max_margin
        self.workers = max(1, workers)
        self.stray_tol = stray_tol
        self.coupling_tol = coupling_tol
        self._cache: dict[tuple[int, ...], np.ndarray] = {}
        self._nominal: dict[tuple[int, ...], tuple[bool, float, float]] = {}
        self._fits: dict[tuple[tuple[int, ...], bytes], BoardFit] = {}
        self._orbits: dict[tuple[int, ...], NominalOrbit | None] = {}
        self._slopes: dict[tuple[str, tuple[int, ...]], tuple[float, ...]] = {}

    @property
    def ln_max_margin(self) -> float:
        """ln of the margin's upper bound (inf without one)."""
        return math.inf if self.max_margin is None else math.log(self.max_margin)

    def _keys(self, designs: Designs) -> list[tuple[int, ...]]:
        pos = self.problem.topology.positions
        rows = np.stack([np.asarray(designs.idx[p], dtype=np.int64) for p in pos], axis=1)
        return [tuple(r) for r in rows.tolist()]

    def surrogate(self, designs: Designs) -> Surrogate:
        """Coefficients for ``designs`` (computed once per design, then cached)."""
        pb = self.problem
        pos = pb.topology.positions
        keys = self._keys(designs)
        missing = [i for i, key in enumerate(keys) if key not in self._cache]
        if missing:
            sub = designs.take(np.asarray(missing))
            s = fit_surrogate(pb.topology, sub.values(pb), pb.parasitics, self.params)
            for j, i in enumerate(missing):
                self._cache[keys[i]] = s.row(j)
        rows = np.stack([self._cache[key] for key in keys]) if keys else np.zeros((0, 1))
        return Surrogate.from_rows(pos, designs.values(pb), rows)

    def nominal(self, designs: Designs) -> NominalState:
        """:func:`nominal_offsets` of ``designs`` (computed once per design, then cached);
        nothing is approximated with ``method = "full"``."""
        n = len(designs)
        if self.method == "full":
            return NominalState(np.zeros(n, dtype=bool), np.zeros(n), np.zeros(n))
        pb = self.problem
        keys = self._keys(designs)
        missing = [i for i, key in enumerate(keys) if key not in self._nominal]
        if missing:
            sub = designs.take(np.asarray(missing))
            s = nominal_offsets(pb.topology, sub.values(pb), pb.parasitics, self.params)
            for j, i in enumerate(missing):
                self._nominal[keys[i]] = (bool(s.approx[j]), float(s.off_f[j]), float(s.off_m[j]))
        rows = [self._nominal[key] for key in keys]
        return NominalState(
            np.array([r[0] for r in rows], dtype=bool),
            np.array([r[1] for r in rows], dtype=float),
            np.array([r[2] for r in rows], dtype=float),
        )

    def refine_orbits(self, designs: Designs, limit: int = ORBIT_DESIGNS) -> bool:
        """The nominal orbits (:func:`picker.circuit.nominal_orbit.nominal_orbits`, (O1)-(O2))
        of the first ``limit`` of ``designs``, cached; from then on every board of those
        designs is shifted and judged by them. Whether any of them has one."""
        keys = self._keys(designs)[:limit]
        missing = [i for i, key in enumerate(keys) if key not in self._orbits]
        if missing:
            pb = self.problem
            sub = designs.take(np.asarray(missing))
            got = nominal_orbits(pb.topology, sub.values(pb), pb.parasitics, self.params)
            for i, o in zip(missing, got, strict=True):
                self._orbits[keys[i]] = o
        return any(self._orbits[key] is not None for key in keys)

    def orbits(self, designs: Designs) -> list[NominalOrbit | None]:
        """The nominal orbit of each design (None where it has none or was not refined)."""
        return [self._orbits.get(key) for key in self._keys(designs)]

    def _fix(self, designs: Designs) -> Fix | None:
        """(has an orbit, its shift (O1), its verdict (O2)) per design, or None."""
        if not any(o is not None for o in self._orbits.values()):
            return None
        got = self.orbits(designs)
        return Fix(
            np.array([o is not None for o in got], dtype=bool),
            np.array([o.shift if o is not None else 0.0 for o in got]),
            np.array([o is not None and o.bursting for o in got], dtype=bool),
        )

    # ------------------------------------------------------------------ a board's own stray and k

    def spread_tol(self, key: str) -> float:
        """The tolerance of the spread ``key`` (:data:`picker.circuit.board_spread.SPREADS`)."""
        return self.stray_tol if key == STRAY else self.coupling_tol

    def spread_terms(self, designs: Designs, key: str) -> np.ndarray:
        """Per design (2·(2 + HURWITZ), c): the coefficients (a, b) of (X1) for the spread
        ``key`` (:func:`picker.circuit.board_spread.spread_terms`, through
        :func:`board_state`). Cached per design."""
        pb = self.problem
        keys = [(key, k) for k in self._keys(designs)]
        missing = [i for i, k in enumerate(keys) if k not in self._slopes]
        if missing:
            sub = designs.take(np.asarray(missing)).values(pb)
            coef = spread_terms(
                pb.topology,
                pb.parasitics,
                self.params,
                sub,
                key,
                self.spread_tol(key),
                lambda tank, v, par: board_state(tank, v, par, self.params),
            )
            for j, i in enumerate(missing):
                self._slopes[keys[i]] = tuple(float(v) for v in coef[:, j])
        rows = [self._slopes[k] for k in keys]
        return np.array(rows, dtype=float).reshape(len(keys), -1).T

    def _spreads(self, vals: Mapping[str, np.ndarray]) -> list[str]:
        """The spreads the boards ``vals`` draw of their own."""
        return [key for key in SPREADS if key in vals and self.spread_tol(key) > 0]

    def _spread_shift(
        self, vals: Mapping[str, np.ndarray], designs: Designs
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
        """(Δln f, Δln m, Δ bursting conditions) of every board from its own stray and k
        (:func:`picker.circuit.board_spread.spread_shift`); None where the boards share the
        spec's."""
        pb = self.problem
        own = self._spreads(vals)
        return spread_shift(
            {key: self.spread_terms(designs, key) for key in own},
            {key: vals[key] - spread_centre(pb.topology, pb.parasitics, key) for key in own},
        )

    def _boards(self, vals: Mapping[str, np.ndarray]) -> Mapping[str, np.ndarray]:
        """``vals`` with a board's own stray and k broadcast to the positions' (samples, c)."""
        own = [key for key in SPREADS if key in vals]
        if not own:
            return vals
        shape = np.shape(vals[self.problem.topology.inductor])
        out = dict(vals)
        for key in own:
            out[key] = np.broadcast_to(np.asarray(vals[key], dtype=float), shape)
        return out

    # ------------------------------------------------------------------ the full model

    def _full(
        self, vals: Mapping[str, np.ndarray], fix: Fix | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Steady frequency (NaN where it does not count), margin and pass mask, full model
        (with the nominal orbits' (O1)-(O2) on the designs in ``fix``)."""
        pb = self.problem
        st = board_state(pb.topology, vals, pb.parasitics, self.params)
        burst, f_hz = np.asarray(st.bursting, dtype=bool), st.f_hz
        if fix is not None:
            burst = np.where(fix.has, fix.burst, burst)
            f_hz = f_hz * np.exp(fix.shift)
        counts = np.asarray(st.starts, dtype=bool) & ~burst & ~(st.margin > self._max())
        f = np.where(counts, f_hz, np.nan)
        return f, st.margin, counts & (f >= pb.f_min) & (f <= pb.f_max)

    def _max(self) -> float:
        return math.inf if self.max_margin is None else self.max_margin

    def _split(
        self,
        vals: Mapping[str, np.ndarray],
        designs: Designs,
        want_f: bool,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(f, margin, pass) of every board: :meth:`_approx` on the designs the board fit
        describes (:attr:`picker.circuit.board_fit.BoardFit.ok`), :meth:`_full` on the others."""
        fit = self.fit(vals, designs)
        fix = self._fix(designs)
        use = fit.ok
        if use.all():
            return self._approx(vals, designs, fit, want_f, fix)
        shape = np.shape(vals[self.problem.topology.inductor])
        f, m = np.full(shape, np.nan), np.full(shape, np.nan)
        ok = np.zeros(shape, dtype=bool)
        a, b = np.flatnonzero(use), np.flatnonzero(~use)
        if a.size:
            sub = {p: v[:, a] for p, v in vals.items()}
            fa = fix.take(a) if fix is not None else None
            f[:, a], m[:, a], ok[:, a] = self._approx(sub, designs.take(a), fit.take(a), want_f, fa)
        if b.size:
            fb = fix.take(b) if fix is not None else None
            f[:, b], m[:, b], ok[:, b] = self._full({p: v[:, b] for p, v in vals.items()}, fb)
        return f, m, ok

    def fit(self, vals: Mapping[str, np.ndarray], designs: Designs) -> BoardFit:
        """:func:`picker.circuit.board_fit.fit_boards` over the box the boards ``vals`` of
        each design span (per position the least and greatest value drawn); cached by the
        design and its box, so repeated runs over the same boards fit once."""
        pb = self.problem
        pos = pb.topology.positions
        if vals[pos[0]].shape[0] == 0:
            return BoardFit.empty(designs.values(pb))
        lo = {p: vals[p].min(axis=0) for p in pos}
        hi = {p: vals[p].max(axis=0) for p in pos}
        box = np.stack([lo[p] for p in pos] + [hi[p] for p in pos], axis=1)
        keys = [(d, b.tobytes()) for d, b in zip(self._keys(designs), box, strict=True)]
        missing = [i for i, key in enumerate(keys) if key not in self._fits]
        if missing:

            def run(sel: np.ndarray) -> BoardFit:
                return fit_boards(
                    pb.topology,
                    {p: lo[p][sel] for p in pos},
                    {p: hi[p][sel] for p in pos},
                    pb.parasitics,
                    self.params,
                    state=_steady,
                )

            # each design is fitted on its own (every solver converges per element), so
            # the designs may be shared between threads without changing a bit
            shares = np.array_split(np.asarray(missing), min(self.workers, len(missing)))
            if len(shares) > 1:
                with ThreadPoolExecutor(max_workers=len(shares)) as pool:
                    got = BoardFit.concat(list(pool.map(run, shares)))
            else:
                got = run(shares[0])
            for j, i in enumerate(missing):
                self._fits[keys[i]] = got.take(slice(j, j + 1))
        return BoardFit.concat([self._fits[key] for key in keys])

    def fit_summary(self) -> dict[str, int]:
        """How the cached board fits went: ``fitted`` (design and box pairs), ``edge``
        (of them fitted to :data:`picker.circuit.board_fit.EDGE_DEGREE` near the burst edge),
        ``full`` (not described by the fit: the large-signal model on every board)."""
        fits = list(self._fits.values())
        return {
            "fitted": len(fits),
            "edge": int(sum(int(f.edge.sum()) for f in fits)),
            "full": int(sum(int((~f.ok).sum()) for f in fits)),
        }

    # ------------------------------------------------------------------ public views

    def response(
        self, vals: Mapping[str, np.ndarray], designs: Designs
    ) -> tuple[np.ndarray, np.ndarray]:
        """Steady frequency (Hz, NaN where the board does not count for a reason other than
        its frequency) and start-up margin of every board, (samples, c)."""
        vals = self._boards(vals)
        if self.method == "full":
            f, m, _ = self._full(vals, self._fix(designs))
            return f, m
        f, m, _ = self._split(vals, designs, True)
        return f, m

    def frequencies(self, vals: Mapping[str, np.ndarray], designs: Designs) -> np.ndarray:
        """Steady frequency of every board, Hz, (samples, c); NaN where the board does not
        start, bursts or exceeds ``max_margin`` (counted outside the window: the share of
        boards whose frequency lies in the window is the yield of :meth:`__call__`)."""
        return self.response(vals, designs)[0]

    def sensitivities(self, designs: Designs) -> dict[str, np.ndarray]:
        """d ln f_steady / d ln x_i of each design at its marked values, position -> (n,).

        Where the approximation applies: the ideal tank's board sensitivities plus the
        surrogate's K_i (S1); elsewhere central differences (step :data:`SURROGATE_STEP`)
        of the large-signal model's steady frequency (NaN where it does not run).
        """
        pb = self.problem
        topo = pb.topology
        nom = self.nominal(designs)
        vals = designs.values(pb)
        out = {p: np.full(len(designs), np.nan) for p in topo.positions}
        a = np.flatnonzero(nom.approx)
        if a.size:
            d = designs.take(a)
            sur = self.surrogate(d)
            ideal = board_sensitivities(topo, d.values(pb), pb.parasitics)
            for p in topo.positions:
                out[p][a] = np.where(sur.valid, ideal[p] + sur.k[p], np.nan)
        b = np.flatnonzero(~nom.approx)
        if b.size:
            h = SURROGATE_STEP
            for p in topo.positions:
                up = {q: vals[q][b] * (math.exp(h) if q == p else 1.0) for q in topo.positions}
                dn = {q: vals[q][b] * (math.exp(-h) if q == p else 1.0) for q in topo.positions}
                fu = board_state(topo, up, pb.parasitics, self.params)
                fd = board_state(topo, dn, pb.parasitics, self.params)
                with np.errstate(divide="ignore", invalid="ignore"):
                    out[p][b] = (np.log(fu.f_hz) - np.log(fd.f_hz)) / (2 * h)
        return out

    # ------------------------------------------------------------------ the approximation

    def _calibrate(
        self, vals: Mapping[str, np.ndarray], sur: Surrogate
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Per design (c,): the surrogate's error bands and its margin range over the boards' box.

        The box spans, per position, the smallest and largest value drawn. The error of
        (S1)/(S2) is measured at its 2^k corners with the full linear model, where the
        expansions are worst; the bands are twice that (``band_f`` for (S1) and
        ``band_f2`` for (S3) in ln f, ``band_m`` in ln margin), infinite where a corner
        does not oscillate or the design has no surrogate. ``m_lo``, ``m_hi``: the
        least and greatest ln margin by (S2) over the box (a linear function is extreme
        at a corner); −inf and inf where unknown.
        """
        pb = self.problem
        topo = pb.topology
        pos = topo.positions
        c = len(sur.valid)
        band_f = np.full(c, np.inf)
        band_f2 = np.full(c, np.inf)
        band_m = np.full(c, np.inf)
        m_lo = np.full(c, -np.inf)
        m_hi = np.full(c, np.inf)
        ok = np.flatnonzero(sur.valid)
        if ok.size == 0 or vals[pos[0]].shape[0] == 0:
            return band_f, band_f2, band_m, m_lo, m_hi
        sub = sur.take(ok)
        box = {p: (vals[p].min(axis=0)[ok], vals[p].max(axis=0)[ok]) for p in pos}
        k = len(pos)
        corners = {
            p: np.stack([box[p][(j >> i) & 1] for j in range(2**k)]) for i, p in enumerate(pos)
        }
        f_c, m_c = loaded_nominal(topo, corners, pb.parasitics, self.params)  # (2^k, n_ok)
        s_f, s_m = surrogate_logs(topo, sub, corners, pb.parasitics)
        s_f2, _ = surrogate_logs(topo, sub, corners, pb.parasitics, second_order=True)
        with np.errstate(divide="ignore", invalid="ignore"):
            lf_c = np.log(f_c)
            e_f = np.nan_to_num(np.abs(s_f - lf_c), nan=np.inf).max(axis=0)
            e_f2 = np.nan_to_num(np.abs(s_f2 - lf_c), nan=np.inf).max(axis=0)
            e_m = np.nan_to_num(np.abs(s_m - np.log(m_c)), nan=np.inf).max(axis=0)
        band_f[ok] = 2 * e_f + BAND_FLOOR
        band_f2[ok] = 2 * e_f2 + BAND_FLOOR
        band_m[ok] = 2 * e_m + BAND_FLOOR
        m_lo[ok] = s_m.min(axis=0)
        m_hi[ok] = s_m.max(axis=0)
        return band_f, band_f2, band_m, m_lo, m_hi

    def _ln_margin(
        self, vals: Mapping[str, np.ndarray], sur: Surrogate, cols: np.ndarray
    ) -> np.ndarray:
        """ln margin by (S2) for the designs ``cols`` only, (samples, len(cols))."""
        out = np.broadcast_to(
            sur.ln_m0[cols], (vals[self.problem.topology.inductor].shape[0], cols.size)
        ).copy()
        for p in self.problem.topology.positions:
            lnd = np.log(vals[p][:, cols] / sur.nominal[p][None, cols])
            lnd *= sur.m[p][None, cols]
            out += lnd
        return out

    def _approx(
        self,
        vals: Mapping[str, np.ndarray],
        designs: Designs,
        fit: BoardFit,
        want_f: bool,
        fix: Fix | None = None,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Steady f (NaN where not counted; all NaN unless ``want_f``), margin (NaN unless
        ``want_f``) and pass mask by the approximation (module docstring): (S1)/(S2) of the
        linear model, then (S3) and the linear model itself on the boards within the
        surrogate's error band of an edge, plus the board fit's offsets (F1) and its
        bursting conditions (:meth:`picker.circuit.board_fit.BoardFit.verdicts`); on the
        designs in ``fix``, the nominal orbit's shift (O1) and verdict (O2) in their place."""
        pb = self.problem
        topo = pb.topology
        sur = self.surrogate(designs)
        band_f, band_f2, band_m, _, _ = self._calibrate(vals, sur)
        off_f = fit.quantity("off_f", vals)
        if fix is not None:
            off_f = off_f + fix.shift[None, :]
        off_m = fit.quantity("off_m", vals)
        ln_f, ln_m = surrogate_logs(topo, sur, vals, pb.parasitics)
        ln_f += off_f
        ln_m += off_m
        extra = self._spread_shift(vals, designs)
        ex_f, ex_m = (extra[0], extra[1]) if extra is not None else (0.0 * ln_f, 0.0 * ln_m)

        def own_ideal(sel: np.ndarray) -> Any:
            """The ideal tank's ln f at the boards' own stray and k less at the spec's (0
            without them): the linear model below runs at the spec's."""
            if extra is None:
                return 0.0
            v = {p: vals[p][sel] for p in topo.positions}
            mine = {key: vals[key][sel] for key in self._spreads(vals)}
            own = board_frequency(topo, {**v, **mine}, pb.parasitics)
            return np.log(own) - np.log(board_frequency(topo, v, pb.parasitics))

        ln_f += ex_f
        ln_m += ex_m
        lo, hi, top = math.log(pb.f_min), math.log(pb.f_max), self.ln_max_margin
        # tier 2: (S3) for the boards (S1) cannot decide
        with np.errstate(invalid="ignore"):
            near = np.abs(ln_f - lo) < band_f
            near |= np.abs(ln_f - hi) < band_f
        rows, cols = np.nonzero(near)
        if rows.size:
            v = {p: vals[p][rows, cols] for p in topo.positions}
            lf2, _ = surrogate_logs(topo, sur.take(cols), v, pb.parasitics, second_order=True)
            ln_f[rows, cols] = lf2 + off_f[rows, cols] + ex_f[rows, cols]
        with np.errstate(invalid="ignore"):
            near = np.abs(ln_f - lo) < band_f2
            near |= np.abs(ln_f - hi) < band_f2
            near |= np.abs(ln_m) < band_m
            near |= np.abs(ln_m - top) < band_m
        near |= ~np.isfinite(band_f2 + band_m)[None, :]
        if near.any():  # tier 3: the linear model itself on the board, plus the offsets
            f_l, m_l = loaded_nominal(
                topo, {p: vals[p][near] for p in topo.positions}, pb.parasitics, self.params
            )
            with np.errstate(divide="ignore", invalid="ignore"):
                ln_f[near] = np.log(f_l) + off_f[near] + ex_f[near] + own_ideal(near)
                ln_m[near] = np.log(m_l) + off_m[near] + ex_m[near]
        burst, unsure = fit.verdicts(vals, None if extra is None else extra[2])
        if fix is not None:
            burst = np.where(fix.has[None, :], fix.burst[None, :], burst)
            unsure = unsure & ~fix.has[None, :]
        with np.errstate(invalid="ignore", over="ignore"):
            counts = (ln_m > 0.0) & (ln_m <= top) & ~burst
            ok = counts & (ln_f >= lo) & (ln_f <= hi)
        if unsure.any():  # (A3) undecided: the large-signal model itself
            f_u, m_u, ok[unsure] = self._full({p: v[unsure] for p, v in vals.items()})
            counts[unsure] = np.isfinite(f_u)
            with np.errstate(divide="ignore", invalid="ignore"):
                ln_f[unsure], ln_m[unsure] = np.log(f_u), np.log(m_u)
        if not want_f:
            nan = np.full(ok.shape, np.nan)
            return nan, nan, ok
        with np.errstate(over="ignore"):
            return np.where(counts, np.exp(ln_f), np.nan), np.exp(ln_m), ok

    def __call__(self, vals: dict[str, np.ndarray], designs: Designs) -> np.ndarray:
        boards = self._boards(vals)
        if self.method == "full":
            return self._full(boards, self._fix(designs))[2]
        return self._split(boards, designs, False)[2]
