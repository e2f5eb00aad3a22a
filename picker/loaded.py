"""The loaded (circuit-aware) model where the ideal tank is used: nominal figures, a fast
Monte Carlo surrogate, the board model and the loaded-feasible search.

Everything here wraps :func:`picker.circuit.loaded_response` (the linearised
oscillator: frequency where the loop-gain phase crosses zero, start-up margin
|T| there) on *board* values, i.e. the marked part values with the spec's
parasitics applied by :func:`picker.topology.board_values`.

Monte Carlo surrogate
---------------------
The full model costs about 5 µs per board, too slow for 200 candidates × 20,000
boards. Per design, at its nominal point, the ratio r = f_loaded/f_ideal and the
margin m are taken with their log-sensitivities by central differences of the
full model (step :data:`SURROGATE_STEP` in ln x, 2k + 1 evaluations per design,
vectorised over designs):

    K_i = ∂ln r/∂ln x_i,   M_i = ∂ln m/∂ln x_i.

A board with part values x_i = x_i0·(1 + d_i) (tolerance and drift) then gets

    f_loaded = f_ideal(board) · exp(ln r0 + Σ K_i·ln(1 + d_i))          (S1)
    ln m     = ln m0 + Σ M_i·ln(1 + d_i)                                 (S2)

(first-order Taylor expansion in ln x). The ideal tank's exact
nonlinearity stays in f_ideal(board); only the small loading correction r is
linearised. Designs whose nominal point or a difference step does not oscillate
(no zero-phase crossing) are evaluated with the full model instead. The
agreement with the full model is measured in tests/test_loaded.py.

Loaded-feasible search
----------------------
A design is loaded-feasible when its loaded nominal frequency lies in the
window, its start-up margin is at least ``min_margin`` and its feedback fraction
lies in the feedback window. Loading moves the frequency by anything from a
fraction of a percent to tens of percent (small capacitors against the device
capacitances and input resistance, or a blocking capacitor in series with a
large C1), so a global widening of the ideal window would have to cover the
worst ratio anywhere in the space. Instead, for every outer combination of the
exact search (a (C1, C2) pair within the feedback window, times C3 or L for a
Clapp tank), the solved position's index range is found locally:

1. start from the ideal index range of the window divided by an estimated ratio
   (the ideal tank with the device capacitances C_mu across C1 and C_pi across
   C2);
2. walk outward one table value at a time until the value just outside the
   range is on the far side of the window: above f_max on the small-value side,
   below f_min on the large-value side. "Which side" is read from the phase of
   the loop gain T at the window edges (the phase falls through zero at the
   oscillation frequency: φ(f_max) > 0 and φ(f_min) > 0 mean the crossing lies
   above the window; both < 0, below);
3. run the full model on every design inside the range and keep those that meet
   the window and the margin.

Assumption: for fixed outer parts the loaded frequency falls monotonically as
the solved part (L or C3) grows, as the ideal one does. The result equals a
brute-force full-model evaluation of every combination on the small spaces of
tests/test_loaded.py (several amplifiers, a lossy inductor, capacitors
comparable to the device capacitances).

Axis convention: samples on axis 0, designs on axis 1.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace

import numpy as np

from picker.circuit import AmplifierParams, LoadedResponse, loaded_response, loop_gain
from picker.search import (
    CHUNK as _SEARCH_CHUNK,
)
from picker.search import (
    Designs,
    Problem,
    _beta_pairs,
    _expand_ranges,
    _solve_interval,
    _solved_position,
)
from picker.topology import Parasitics, Topology, board_beta, board_frequency, board_values

#: Central-difference step in ln x for the surrogate's sensitivities.
SURROGATE_STEP = 0.01
#: Smallest error band (in ln f and ln margin) of the surrogate's edge test.
BAND_FLOOR = 1e-12
#: Outer combinations per chunk of the loaded search (bounds memory).
OUTER_CHUNK = 1 << 15
METHODS = ("surrogate", "full")

__all__ = [
    "METHODS",
    "LoadedModel",
    "LoadedSearch",
    "Surrogate",
    "fit_surrogate",
    "loaded_brute_force",
    "loaded_nominal",
    "loaded_search",
    "surrogate_response",
]


def loaded_nominal(
    topology: Topology,
    values: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
) -> LoadedResponse:
    """Loaded frequency (Hz) and start-up margin of boards with *marked* values ``values``.

    The parasitics are applied first (:func:`picker.topology.board_values`:
    shunts across C1 and C2, inductance scale), the stray goes across L.
    Unpacks as ``f_loaded, margin``; shapes follow ``values``.
    """
    bv = board_values({p: np.asarray(values[p], dtype=float) for p in topology.positions},
                      parasitics)  # fmt: skip
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

    def take(self, sel) -> Surrogate:
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
        return np.array([self.ln_r0[j], self.ln_m0[j], float(self.valid[j])]
                        + [self.k[p][j] for p in self.k] + [self.m[p][j] for p in self.m]
                        + [v[j] for v in self.q.values()])  # fmt: skip

    @classmethod
    def from_rows(cls, positions, nominal, rows: np.ndarray) -> Surrogate:
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


def _pairs(positions) -> list[tuple[str, str]]:
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


def _ln_ideal(topology: Topology, vals: Mapping[str, np.ndarray], par: Parasitics):
    """ln f of the ideal tank on board values: −ln 2π − ½·ln(L·C_eff) (Thomson's formula)."""
    bv = board_values(vals, par)
    return -math.log(2 * math.pi) - 0.5 * np.log(bv["L"] * topology.c_eff(bv, par.stray))


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

    def __init__(self, problem: Problem, params: AmplifierParams, method: str = "surrogate"):
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
            return loaded_nominal(pb.topology, vals, pb.parasitics, self.params)
        ln_f, ln_m = self._logs(vals, designs)
        with np.errstate(invalid="ignore"):
            return np.exp(ln_f), np.exp(ln_m)

    def _calibrate(self, vals: Mapping[str, np.ndarray], sur: Surrogate):
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
        corners = {p: np.stack([box[p][(j >> i) & 1] for j in range(2**k)])
                   for i, p in enumerate(pos)}  # fmt: skip
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

    def _ln_margin(self, vals, sur: Surrogate, cols: np.ndarray) -> np.ndarray:
        """ln margin by (S2) for the designs ``cols`` only, (samples, len(cols))."""
        out = np.broadcast_to(sur.ln_m0[cols], (vals["L"].shape[0], cols.size)).copy()
        for p in self.problem.topology.positions:
            lnd = np.log(vals[p][:, cols] / sur.nominal[p][None, cols])
            lnd *= sur.m[p][None, cols]
            out += lnd
        return out

    def _logs(self, vals: Mapping[str, np.ndarray], designs: Designs):
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
            fn, mn = loaded_nominal(topo, {p: vals[p][full] for p in topo.positions},
                                    pb.parasitics, self.params)  # fmt: skip
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
            f, m = loaded_nominal(topo, {p: vals[p][near] for p in topo.positions},
                                  pb.parasitics, self.params)  # fmt: skip
            ok[near] = (m > 1.0) & (f >= pb.f_min) & (f <= pb.f_max)
        return ok


# ----------------------------------------------------------------------------- search


@dataclass(frozen=True)
class LoadedSearch:
    """Loaded-feasible designs and what kept the others out.

    ``designs`` keeps the *ideal* nominal frequency in ``f_nominal``;
    ``f_loaded`` and ``margin`` are the loaded figures of the same designs
    (shape (n,)). ``in_window`` counts designs whose loaded frequency is in the
    window whatever their margin; ``low_margin`` holds up to
    ``keep`` of those that fail only the margin, best margin first, with
    ``low_margin_f`` and ``low_margin_m``.
    """

    designs: Designs
    f_loaded: np.ndarray
    margin: np.ndarray
    in_window: int
    low_margin: Designs
    low_margin_f: np.ndarray
    low_margin_m: np.ndarray


ABOVE, INSIDE, BELOW, UNCLEAR = 1, 0, -1, 2
#: Phase change across the window (rad) below which the phase test is not trusted
#: against the ideal frequency's side (a flat, featureless loop-gain phase).
FLAT_PHASE = 1e-3


def _side(problem: Problem, params: AmplifierParams, vals: dict[str, np.ndarray]):
    """Where the loaded frequency lies against the window, from the phase of T (step 2).

    The phase falls through zero at the oscillation frequency. With φ_lo, φ_hi the
    phases at f_min and f_max: both > 0 and falling: ABOVE; φ_lo > 0 > φ_hi with a
    fall below π: INSIDE; both < 0, or both > 0 and rising (past a crossing and
    a recovery): BELOW; anything else (a wrap through ±π): UNCLEAR. Returns the
    codes and whether the phase changes by more than FLAT_PHASE.
    """
    pb = problem
    bv = board_values(vals, pb.parasitics)
    st = pb.parasitics.stray
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        lo = np.angle(loop_gain(pb.topology, bv, st, params, pb.f_min))
        hi = np.angle(loop_gain(pb.topology, bv, st, params, pb.f_max))
    fall = lo - hi
    code = np.full(lo.shape, UNCLEAR)
    pos = (lo > 0) & (hi > 0)
    code[pos & (fall > 0)] = ABOVE
    code[((lo < 0) & (hi < 0)) | (pos & (fall <= 0))] = BELOW
    code[(lo > 0) & (hi < 0) & (fall < np.pi)] = INSIDE
    return code, np.abs(fall) > FLAT_PHASE


def _estimated_ratio(problem: Problem, params: AmplifierParams, solved: str, vals) -> np.ndarray:
    """Step 1: f_loaded/f_ideal guessed with C_mu across C1 and C_pi across C2."""
    ss = params.small_signal()
    pb = problem
    centre = math.sqrt(pb.f_min * pb.f_max)
    lo, hi = _solve_interval(replace(pb, f_min=centre, f_max=centre), solved, vals)
    x = lo  # the window is the single point ``centre``, so lo == hi
    full = dict(vals)
    full[solved] = np.where(np.isfinite(x) & (x > 0), x, 1.0)
    bv = board_values(full, pb.parasitics)
    dev = {**bv, "C1": bv["C1"] + ss.c_mu, "C2": bv["C2"] + ss.c_pi}
    r = pb.topology.frequency(dev, pb.parasitics.stray) / pb.topology.frequency(
        bv, pb.parasitics.stray
    )
    return np.where(np.isfinite(x) & (x > 0) & np.isfinite(r), r, 1.0)


def _empty(topology: Topology) -> Designs:
    z = np.zeros(0)
    return Designs({p: np.zeros(0, dtype=np.int32) for p in topology.positions}, z, z)


def _collect(problem, idx, min_margin, params, keep, parts):
    """Full model on candidate index tuples; append feasible and low-margin ones to ``parts``."""
    vals = {p: problem.tables[p].values[i] for p, i in idx.items()}
    f_i = board_frequency(problem.topology, vals, problem.parasitics)
    beta = board_beta(vals, problem.parasitics)
    f_l, m = loaded_nominal(problem.topology, vals, problem.parasitics, params)
    inw = (f_l >= problem.f_min) & (f_l <= problem.f_max)
    inw &= (beta >= problem.beta_min) & (beta <= problem.beta_max)
    ok = inw & (m >= min_margin)
    parts["ok"].append((Designs({p: i[ok] for p, i in idx.items()}, f_i[ok], beta[ok]),
                        f_l[ok], m[ok]))  # fmt: skip
    parts["in_window"] += int(inw.sum())
    low = np.flatnonzero(inw & ~ok)
    if low.size:
        low = low[np.argsort(-m[low], kind="stable")[:keep]]
        parts["low"].append((Designs({p: i[low] for p, i in idx.items()}, f_i[low], beta[low]),
                             f_l[low], m[low]))  # fmt: skip


def _finish(topology, parts, keep) -> LoadedSearch:
    def cat(items):
        if not items:
            return _empty(topology), np.zeros(0), np.zeros(0)
        d = Designs(
            {p: np.concatenate([x[0].idx[p] for x in items]) for p in topology.positions},
            np.concatenate([x[0].f_nominal for x in items]),
            np.concatenate([x[0].beta for x in items]),
        )
        return d, np.concatenate([x[1] for x in items]), np.concatenate([x[2] for x in items])

    d, f, m = cat(parts["ok"])
    ld, lf, lm = cat(parts["low"])
    order = np.lexsort((np.arange(len(lm)), -lm))[:keep]
    return LoadedSearch(d, f, m, parts["in_window"], ld.take(order), lf[order], lm[order])


def loaded_search(
    problem: Problem,
    params: AmplifierParams,
    *,
    min_margin: float,
    max_designs: int = 5_000_000,
    keep: int = 5,
) -> LoadedSearch:
    """Every loaded-feasible design of ``problem`` (module docstring, steps 1-3).

    Designs come in the order of the exact search's enumeration (outer
    combination, then the solved position ascending).
    """
    from picker.errors import SpecError

    topo = problem.topology
    tabs = problem.tables
    i1, i2 = _beta_pairs(problem)
    solved = _solved_position(problem, len(i1))
    rest = [p for p in topo.positions if p not in ("C1", "C2", solved)]
    sv = tabs[solved].values
    ns = len(sv)
    n_outer = len(i1) * int(np.prod([len(tabs[p]) for p in rest]))
    parts: dict = {"ok": [], "low": [], "in_window": 0}
    found = 0
    chunk = min(OUTER_CHUNK, _SEARCH_CHUNK)
    for start in range(0, n_outer, chunk):
        flat = np.arange(start, min(start + chunk, n_outer), dtype=np.int64)
        idx: dict[str, np.ndarray] = {}
        if rest:
            kk = len(tabs[rest[0]])
            pair, idx[rest[0]] = flat // kk, flat % kk
        else:
            pair = flat
        idx["C1"], idx["C2"] = i1[pair], i2[pair]
        vals = {p: tabs[p].values[i] for p, i in idx.items()}
        r = _estimated_ratio(problem, params, solved, vals)
        lo, hi = _solve_interval(
            replace(problem, f_min=problem.f_min / r, f_max=problem.f_max / r), solved, vals
        )
        a = np.searchsorted(sv, lo * (1 - 1e-9), side="left")
        b = np.searchsorted(sv, hi * (1 + 1e-9), side="right")
        b = np.maximum(a, b)
        # step 2: walk each side outward until the next value is beyond the window
        for low_side in (True, False):
            want = 1 if low_side else -1
            open_ = (a > 0) if low_side else (b < ns)
            while open_.any():
                sel = np.flatnonzero(open_)
                j = a[sel] - 1 if low_side else b[sel]
                probe = {p: v[sel] for p, v in vals.items()}
                probe[solved] = sv[j]
                code, sure = _side(problem, params, probe)
                done = code == want
                # the phase test disagrees with the side of the ideal frequency, and the
                # phase is flat or unclear: ask the full model
                f_i = board_frequency(topo, probe, problem.parasitics)
                beyond_ideal = (f_i > problem.f_max) if low_side else (f_i < problem.f_min)
                odd = beyond_ideal & ((code == UNCLEAR) | ((code == -want) & ~sure))
                if odd.any():
                    k = np.flatnonzero(odd)
                    f_l, _ = loaded_nominal(topo, {p: v[k] for p, v in probe.items()},
                                            problem.parasitics, params)  # fmt: skip
                    beyond = (f_l > problem.f_max) if low_side else (f_l < problem.f_min)
                    done[k] = ~np.isfinite(f_l) | beyond
                grow = sel[~done]
                open_[sel[done]] = False
                if low_side:
                    a[grow] -= 1
                    open_[grow] = a[grow] > 0
                else:
                    b[grow] += 1
                    open_[grow] = b[grow] < ns
        owner, js = _expand_ranges(np.arange(len(flat)), a, b)
        if len(owner) == 0:
            continue
        cand = {p: i[owner].astype(np.int32) for p, i in idx.items()}
        cand[solved] = js.astype(np.int32)
        # the phase test puts these beyond the window: no need for the full model
        probe = {p: tabs[p].values[i] for p, i in cand.items()}
        code, _ = _side(problem, params, probe)
        inside = (code == INSIDE) | (code == UNCLEAR)
        cand = {p: i[inside] for p, i in cand.items()}
        before = len(parts["ok"])
        _collect(problem, cand, min_margin, params, keep, parts)
        found += sum(len(x[1]) for x in parts["ok"][before:])
        if found > max_designs:
            raise SpecError(
                f"the search holds more than {max_designs:,} loaded-feasible designs; narrow "
                "the part ranges or the frequency window, or raise search.max_designs",
                key="search.max_designs",
            )
    return _finish(topo, parts, keep)


def loaded_brute_force(
    problem: Problem, params: AmplifierParams, *, min_margin: float, keep: int = 5
) -> LoadedSearch:
    """Full-cube enumeration with the full model: the reference for tests (small spaces)."""
    topo = problem.topology
    sizes = [len(problem.tables[p]) for p in topo.positions]
    grids = np.meshgrid(*[np.arange(n, dtype=np.int32) for n in sizes], indexing="ij")
    idx = {p: g.ravel() for p, g in zip(topo.positions, grids, strict=True)}
    parts: dict = {"ok": [], "low": [], "in_window": 0}
    _collect(problem, idx, min_margin, params, keep, parts)
    return _finish(topo, parts, keep)


# ----------------------------------------------------------------------------- figures

#: Squegging rule of thumb (common practice, no source): the emitter network's time
#: constant R_E·C_E should not exceed this many times the tank's amplitude time constant
#: 2·Q/ω. A bias network much slower than the tank lets the amplitude build up, drive the
#: stage into cut-off and die away in bursts (intermittent "squegging" oscillation).
SQUEGGING_RATIO = 10.0


def inductor_q(topology: Topology, board: Mapping[str, float], stray: float,
               params: AmplifierParams, f_hz: float) -> float:  # fmt: skip
    """Q of the inductor at ``f_hz`` from the amplifier's loss description (inf: lossless).

    Q given at a frequency: ESR = ω_Q·L/Q (constant ESR), as in :mod:`picker.circuit`.
    """
    w = 2 * math.pi * f_hz
    l_ = float(board["L"])
    if params.inductor_q is not None:
        fq = params.q_frequency
        if fq is None:
            fq = float(topology.frequency(board, stray))
        esr = 2 * math.pi * fq * l_ / params.inductor_q
    else:
        esr = params.inductor_esr
    return math.inf if esr <= 0 else w * l_ / esr


def squegging_caution(
    topology: Topology, board: Mapping[str, float], stray: float,
    params: AmplifierParams, f_hz: float, margin: float,
) -> str | None:  # fmt: skip
    """The squegging warning for one design, or None (rule: :data:`SQUEGGING_RATIO`).

    Needs a bypassed emitter resistor and a lossy inductor (Q finite); a design that
    does not start (margin ≤ 1) is not flagged.
    """
    if params.r_e is None or params.c_e is None or not margin > 1 or not math.isfinite(f_hz):
        return None
    q = inductor_q(topology, board, stray, params, f_hz)
    if not math.isfinite(q):
        return None
    tau_e = params.r_e * params.c_e
    tau_tank = 2 * q / (2 * math.pi * f_hz)
    if tau_e <= SQUEGGING_RATIO * tau_tank:
        return None
    return (
        f"emitter bypass R_E·C_E = {tau_e * 1e6:.3g} µs is {tau_e / tau_tank:.0f} times the "
        f"tank's amplitude time constant 2Q/ω = {tau_tank * 1e6:.3g} µs: risk of squegging "
        f"(bursts); a smaller C_E helps (rule of thumb: at most {SQUEGGING_RATIO:g} times, "
        "common practice)"
    )


def nominal_figures(
    topology: Topology,
    values: Mapping[str, float],
    parasitics: Parasitics,
    params: AmplifierParams,
    *,
    voltage_rating: Mapping[str, float | None] | None = None,
    polarised: Mapping[str, bool] | None = None,
) -> dict:
    """Loaded-model figures of one design at its marked values (JSON-ready scalars).

    Keys: ``f_ideal_hz``, ``f_loaded_hz`` (None where it does not oscillate),
    ``startup_margin``, ``amplitude_v`` (peak at the tank top), ``overdriven``,
    ``peak_voltage_v`` (position -> peak V across each capacitor, None where the
    bias point is unknown) and ``cautions`` (:func:`picker.circuit.cautions` plus
    :func:`squegging_caution`).
    """
    from picker.circuit import OVERDRIVE_MARGIN, amplitude_estimate, capacitor_stress, cautions

    pos = topology.positions
    board = board_values({p: np.array([float(values[p])]) for p in pos}, parasitics)
    st = parasitics.stray
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        res = loaded_response(topology, board, st, params)
        amp = amplitude_estimate(topology, board, st, params, res)
        stress = capacitor_stress(topology, board, st, params, amp)
    f = float(res.f_hz[0])
    m = float(res.margin[0])
    scal = {p: float(v[0]) for p, v in board.items()}
    peaks = {k: float(v[0]) for k, v in stress.items()}
    notes = cautions(topology, scal, params, {k: v for k, v in peaks.items() if math.isfinite(v)},
                     voltage_rating=voltage_rating, polarised=polarised)  # fmt: skip
    sq = squegging_caution(topology, scal, st, params, f, m)
    if sq:
        notes.append(sq)
    if bool(amp.overdriven[0]):
        notes.append(
            f"overdriven: a start-up margin above {OVERDRIVE_MARGIN:g} or a collector swing "
            "beyond the supply headroom gives a clipped, harmonic-rich waveform; the amplitude "
            "estimate is not reliable there (threshold: common practice)"
        )
    return {
        "f_ideal_hz": float(topology.frequency(scal, st)),
        "f_loaded_hz": f if math.isfinite(f) else None,
        "startup_margin": m,
        "amplitude_v": float(amp.tank[0]),
        "overdriven": bool(amp.overdriven[0]),
        "peak_voltage_v": {k: (v if math.isfinite(v) else None) for k, v in peaks.items()},
        "cautions": notes,
    }


def worst_margins(sim, designs: Designs, u: np.ndarray) -> np.ndarray:
    """Smallest start-up margin over every simulated board and grid temperature, (n,).

    Uses the simulation's board model, a :class:`LoadedModel` (surrogate or full,
    as the yield), one design at a time so memory stays bounded.
    """
    from picker.montecarlo import drift_factors, sampled_values, values_at

    model = sim.model
    if not isinstance(model, LoadedModel):
        raise ValueError("worst_margins needs a simulation whose board model is a LoadedModel")
    drift = drift_factors(sim, u)
    out = np.empty(len(designs))
    n_t = len(sim.temperatures) if drift else 1
    for r in range(len(designs)):
        d1 = designs.take(np.array([r]))
        vals = sampled_values(sim, d1, u)
        worst = math.inf
        for i in range(n_t):
            v = values_at(vals, drift, i)
            _, m = model.response(v, d1)
            worst = min(worst, float(np.min(m)))
        out[r] = worst
    return out
