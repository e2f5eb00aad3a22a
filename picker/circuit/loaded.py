"""The loaded (circuit-aware) model in the Monte Carlo: nominal figures, a fast surrogate
and the board model.

Everything here wraps :func:`picker.circuit.oscillation.loaded_response` (the linearised
oscillator: frequency where the loop-gain phase crosses zero, start-up margin
|T| there) on *board* values, i.e. the marked part values with the spec's
parasitics applied by :func:`picker.tank.base.board_values`. The loaded-feasible
search is in :mod:`picker.circuit.loaded_search`, the per-design figures (amplitude,
stress, cautions, worst margin) in :mod:`picker.circuit.figures`.

Monte Carlo surrogate
---------------------
The full model costs about 5 µs per board, too slow for a few thousand
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

Each call of the board model measures the expansions' error with the full model
at the 2^k corners of the box its boards span (where a Taylor expansion is
worst) and decides every board in three tiers: (S1)/(S2) where the board lies
more than twice that error from an edge (f_min, f_max, margin 1); (S3) for the
rest where it lies more than twice its own corner error from the edge; the full
model for what is left and for designs the surrogate cannot describe (a
difference step or a corner that does not oscillate). Pass/fail then agrees
with the full model on every board of the tests in tests/test_loaded.py;
``amplifier.monte_carlo = "full"`` runs the full model on every board.

Axis convention: samples on axis 0, designs on axis 1.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import LoadedResponse
from picker.circuit.oscillation import loaded_response
from picker.core.search import Designs, Problem
from picker.tank.base import Topology
from picker.tank.board import Parasitics, board_frequency, board_values

#: Central-difference step in ln x for the surrogate's sensitivities.
SURROGATE_STEP = 0.01
#: Smallest error band (in ln f and ln margin) of the surrogate's edge test.
BAND_FLOOR = 1e-12
METHODS = ("surrogate", "full")

__all__ = [
    "METHODS",
    "LoadedModel",
    "Surrogate",
    "fit_surrogate",
    "loaded_nominal",
    "surrogate_logs",
    "surrogate_response",
]


def loaded_nominal(
    topology: Topology,
    values: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
) -> LoadedResponse:
    """Loaded frequency (Hz) and start-up margin of boards with *marked* values ``values``.

    The parasitics are applied first (:func:`picker.tank.board.board_values`:
    shunts across C1 and C2, inductance scale), the stray goes across L.
    Unpacks as ``f_loaded, margin``; shapes follow ``values``.
    """
    bv = board_values(
        topology, {p: np.asarray(values[p], dtype=float) for p in topology.positions}, parasitics
    )
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return loaded_response(topology, bv, parasitics.stray, params)


# ----------------------------------------------------------------------------- surrogate


@dataclass(frozen=True)
class Surrogate:
    """Per-design coefficients of (S1), (S2) and (S3); every array has shape (n,).

    ``nominal`` holds the marked values the expansion is taken at, ``k`` and
    ``m`` the log-sensitivities of the ratio and the margin per position, ``q``
    the second-order coefficients of ln r per monomial (p, q) with p <= q in
    position order (½·∂²ln r/∂ln x_p² on the diagonal, ∂²ln r/∂ln x_p∂ln x_q off
    it), ``valid`` marks designs the surrogate may be used for.
    """

    nominal: dict[str, np.ndarray]
    ln_r0: np.ndarray
    k: dict[str, np.ndarray]
    ln_m0: np.ndarray
    m: dict[str, np.ndarray]
    q: dict[tuple[str, str], np.ndarray]
    valid: np.ndarray

    def take(self, sel: Any) -> Surrogate:
        return Surrogate(
            {p: a[sel] for p, a in self.nominal.items()},
            self.ln_r0[sel],
            {p: a[sel] for p, a in self.k.items()},
            self.ln_m0[sel],
            {p: a[sel] for p, a in self.m.items()},
            {pq: a[sel] for pq, a in self.q.items()},
            self.valid[sel],
        )

    def row(self, j: int) -> np.ndarray:
        """All coefficients of design ``j`` as one vector (see :meth:`from_rows`)."""
        head = [self.ln_r0[j], self.ln_m0[j], float(self.valid[j])]
        k = [self.k[p][j] for p in self.k]
        m = [self.m[p][j] for p in self.m]
        return np.array(head + k + m + [v[j] for v in self.q.values()])

    @classmethod
    def from_rows(
        cls, positions: Sequence[str], nominal: dict[str, np.ndarray], rows: np.ndarray
    ) -> Surrogate:
        k = len(positions)
        pairs = _pairs(positions)
        return cls(
            nominal,
            rows[:, 0],
            {p: rows[:, 3 + i] for i, p in enumerate(positions)},
            rows[:, 1],
            {p: rows[:, 3 + k + i] for i, p in enumerate(positions)},
            {pq: rows[:, 3 + 2 * k + i] for i, pq in enumerate(pairs)},
            rows[:, 2] > 0.5,
        )


def _pairs(positions: Sequence[str]) -> list[tuple[str, str]]:
    return [(p, q) for i, p in enumerate(positions) for q in positions[i:]]


def fit_surrogate(
    topology: Topology,
    nominal: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
    *,
    step: float = SURROGATE_STEP,
) -> Surrogate:
    """Coefficients of (S1)-(S3) by finite differences of the full model.

    One call of :func:`loaded_nominal` on n·(2k + 1 + k(k−1)/2) boards (k
    positions): the nominal point, x_i·exp(±h) for each position (central
    differences for K_i, M_i and the diagonal second derivatives) and
    (x_i·exp(h), x_j·exp(h)) for each pair (the mixed derivative
    [g(+i,+j) − g(+i) − g(+j) + g(0)]/h², first order in h).
    """
    pos = topology.positions
    nom = {p: np.asarray(nominal[p], dtype=float).reshape(-1) for p in pos}
    k = len(pos)
    cross = [(i, j) for i in range(k) for j in range(i + 1, k)]
    scale = np.ones((2 * k + 1 + len(cross), 1, k))
    for i in range(k):
        scale[1 + 2 * i, 0, i] = math.exp(step)
        scale[2 + 2 * i, 0, i] = math.exp(-step)
    for c, (i, j) in enumerate(cross):
        scale[2 * k + 1 + c, 0, i] = scale[2 * k + 1 + c, 0, j] = math.exp(step)
    probe = {p: (nom[p][None, :] * scale[:, :, i]) for i, p in enumerate(pos)}
    f_l, marg = loaded_nominal(topology, probe, parasitics, params)
    f_i = board_frequency(topology, probe, parasitics)
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_r = np.log(f_l / f_i)
        ln_m = np.log(marg)
    ok = np.all(np.isfinite(ln_r) & np.isfinite(ln_m), axis=0)
    ln_r = np.where(ok, ln_r, 0.0)
    ln_m = np.where(ok, ln_m, 0.0)
    kk = {p: (ln_r[1 + 2 * i] - ln_r[2 + 2 * i]) / (2 * step) for i, p in enumerate(pos)}
    mm = {p: (ln_m[1 + 2 * i] - ln_m[2 + 2 * i]) / (2 * step) for i, p in enumerate(pos)}
    qq = {}
    for i, p in enumerate(pos):
        qq[(p, p)] = 0.5 * (ln_r[1 + 2 * i] + ln_r[2 + 2 * i] - 2 * ln_r[0]) / step**2
    for c, (i, j) in enumerate(cross):
        g = ln_r[2 * k + 1 + c] - ln_r[1 + 2 * i] - ln_r[1 + 2 * j] + ln_r[0]
        qq[(pos[i], pos[j])] = g / step**2
    return Surrogate(nom, ln_r[0], kk, ln_m[0], mm, {pq: qq[pq] for pq in _pairs(pos)}, ok)


def _ln_ideal(topology: Topology, vals: Mapping[str, np.ndarray], par: Parasitics) -> Any:
    """ln f of the ideal tank on board values: −ln 2π − ½·ln(L·C_eff) (Thomson's formula)."""
    bv = board_values(topology, vals, par)
    lc = bv[topology.inductor] * topology.c_eff(bv, par.stray)
    return -math.log(2 * math.pi) - 0.5 * np.log(lc)


def surrogate_logs(
    topology: Topology,
    sur: Surrogate,
    vals: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    *,
    second_order: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """ln f_loaded by (S1) (or (S3) with ``second_order``) and ln margin by (S2).

    ``vals``: position -> marked values (with tolerance and drift) whose last axis
    runs over the designs of ``sur`` (e.g. (samples, c)). Only meaningful where
    ``sur.valid``.
    """
    pos = topology.positions
    ln_f = _ln_ideal(topology, vals, parasitics)
    ln_f += sur.ln_r0
    ln_m = np.broadcast_to(sur.ln_m0, ln_f.shape).copy()
    x = {}
    for p in pos:
        lnd = np.log(vals[p] / sur.nominal[p])
        ln_f += sur.k[p] * lnd
        ln_m += sur.m[p] * lnd
        x[p] = lnd
    if second_order:
        for (p, q), c in sur.q.items():
            ln_f += c * x[p] * x[q]
    return ln_f, ln_m


def surrogate_response(
    topology: Topology,
    sur: Surrogate,
    vals: Mapping[str, np.ndarray],
    parasitics: Parasitics,
) -> tuple[np.ndarray, np.ndarray]:
    """Loaded frequency (Hz) and margin of sampled boards by (S1)/(S2), each (samples, c)."""
    ln_f, ln_m = surrogate_logs(topology, sur, vals, parasitics)
    return np.exp(ln_f), np.exp(ln_m)


class LoadedModel:
    """The Monte Carlo board model with the loaded oscillator (a :data:`BoardModel`).

    ``model(vals, designs)`` returns the pass mask (samples, c): the board
    starts (margin > 1) and its loaded frequency lies in [f_min, f_max].
    ``method`` "surrogate" uses (S1)/(S2) with per-design coefficients, cached
    by the design's index tuple; "full" runs the full model on every board.
    """

    def __init__(
        self, problem: Problem, params: AmplifierParams, method: str = "surrogate"
    ) -> None:
        if method not in METHODS:
            raise ValueError(f"method must be one of {METHODS}, got {method!r}")
        self.problem = problem
        self.params = params
        self.method = method
        self._cache: dict[tuple[int, ...], np.ndarray] = {}

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

    def response(
        self, vals: Mapping[str, np.ndarray], designs: Designs
    ) -> tuple[np.ndarray, np.ndarray]:
        """Loaded frequency (Hz, NaN where none) and margin of every board, (samples, c)."""
        if self.method == "full":
            pb = self.problem
            f, m = loaded_nominal(pb.topology, vals, pb.parasitics, self.params)
            return f, m
        ln_f, ln_m = self._logs(vals, designs)
        with np.errstate(invalid="ignore"):
            return np.exp(ln_f), np.exp(ln_m)

    def _calibrate(
        self, vals: Mapping[str, np.ndarray], sur: Surrogate
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Per design (c,): the surrogate's error bands and a margin bound over the boards' box.

        The box spans, per position, the smallest and largest value drawn. The error of
        (S1)/(S2) is measured at its 2^k corners with the full model, where the
        expansions are worst; the bands are twice that (``band_f`` for (S1) and
        ``band_f2`` for (S3) in ln f, ``band_m`` in ln margin), infinite where a corner
        does not oscillate or the design has no surrogate. ``starts`` marks designs whose linear margin over the
        whole box stays more than ``band_m`` above 1, so no board can fail to start.
        """
        pb = self.problem
        topo = pb.topology
        pos = topo.positions
        c = len(sur.valid)
        band_f = np.full(c, np.inf)
        band_f2 = np.full(c, np.inf)
        band_m = np.full(c, np.inf)
        starts = np.zeros(c, dtype=bool)
        ok = np.flatnonzero(sur.valid)
        if ok.size == 0 or vals[pos[0]].shape[0] == 0:
            return band_f, band_f2, band_m, starts
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
        starts[ok] = s_m.min(axis=0) > band_m[ok]  # a linear function is least at a corner
        return band_f, band_f2, band_m, starts

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

    def _logs(
        self, vals: Mapping[str, np.ndarray], designs: Designs
    ) -> tuple[np.ndarray, np.ndarray]:
        """ln f and ln margin, (samples, c): the surrogate, and the full model for the boards
        it cannot decide (within a band of f_min, f_max or margin 1; :meth:`_calibrate`)."""
        pb = self.problem
        topo = pb.topology
        sur = self.surrogate(designs)
        _, band_f, band_m, _ = self._calibrate(vals, sur)
        ln_f, ln_m = surrogate_logs(topo, sur, vals, pb.parasitics, second_order=True)
        with np.errstate(invalid="ignore"):
            full = np.abs(ln_f - math.log(pb.f_min)) < band_f
            full |= np.abs(ln_f - math.log(pb.f_max)) < band_f
            full |= np.abs(ln_m) < band_m
        full |= ~np.isfinite(band_f + band_m)[None, :]
        if full.any():
            sel = {p: vals[p][full] for p in topo.positions}
            fn, mn = loaded_nominal(topo, sel, pb.parasitics, self.params)
            with np.errstate(divide="ignore", invalid="ignore"):
                ln_f[full], ln_m[full] = np.log(fn), np.log(mn)
        return ln_f, ln_m

    def __call__(self, vals: dict[str, np.ndarray], designs: Designs) -> np.ndarray:
        pb = self.problem
        topo = pb.topology
        if self.method == "full":
            f, m = loaded_nominal(topo, vals, pb.parasitics, self.params)
            return (m > 1.0) & (f >= pb.f_min) & (f <= pb.f_max)
        sur = self.surrogate(designs)
        band_f, band_f2, band_m, starts = self._calibrate(vals, sur)
        # ln f by (S1), then t = |ln f − centre| against the half-width, in place
        t = _ln_ideal(topo, vals, pb.parasitics)
        t += sur.ln_r0
        for p in topo.positions:
            lnd = np.log(vals[p] / sur.nominal[p])
            lnd *= sur.k[p]
            t += lnd
        lo, hi = math.log(pb.f_min), math.log(pb.f_max)
        centre, half = 0.5 * (lo + hi), 0.5 * (hi - lo)
        t -= centre
        np.abs(t, out=t)
        ok = t <= half
        t -= half
        np.abs(t, out=t)
        near = t < band_f
        # second tier: (S3) on the boards (S1) cannot decide
        rows, cols = np.nonzero(near)
        if rows.size:
            sub = sur.take(cols)
            v = {p: vals[p][rows, cols] for p in topo.positions}
            lf2, _ = surrogate_logs(topo, sub, v, pb.parasitics, second_order=True)
            d2 = np.abs(lf2 - centre)
            ok[rows, cols] = d2 <= half
            near[rows, cols] = np.abs(d2 - half) < band_f2[cols]
        cols = np.flatnonzero(~starts & np.isfinite(band_m))
        if cols.size:
            lm = self._ln_margin(vals, sur, cols)
            ok[:, cols] &= lm > 0.0
            near[:, cols] |= np.abs(lm) < band_m[cols]
        near[:, ~np.isfinite(band_f + band_m)] = True
        if near.any():
            sel = {p: vals[p][near] for p in topo.positions}
            f, m = loaded_nominal(topo, sel, pb.parasitics, self.params)
            ok[near] = (m > 1.0) & (f >= pb.f_min) & (f <= pb.f_max)
        return ok
