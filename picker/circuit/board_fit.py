"""Per-design fits of the large-signal model across the boards of a design.

The large-signal model (:func:`picker.circuit.steady.steady_state`) costs one to a few
milliseconds per board: far too much for every board of a few hundred candidates ×
20,000 boards. Its verdicts on a board, though, are smooth functions of the board's
part values over the small box the boards of one design span (a few per cent per
part), so :class:`picker.circuit.loaded.LoadedModel` evaluates it at a few points of
that box per design and carries it to every board by a polynomial in the normalised
log deviations t_i = ln(v_i / a_i) / h_i (a the box's centre, h_i its half-width in
ln v_i, so t lies in [−1, 1]^k; a Taylor polynomial fitted by least squares, no
source needed):

    q(t) ≈ Σ_α b_α·t^α,   |α| ≤ d                                                (F1)

for the quantities q of the large-signal model, each measured *against the
linear model* where that is what it corrects:

- ``off_f`` = ln f_steady − ln f_linear (the steady state's pull on the frequency);
- ``off_m`` = ln m_steady − ln m_linear (the Nyquist margin against the linear
  model's |T| at the zero-phase crossing);
- ``steady_1`` … ``steady_5`` (:data:`STEADY`), the bursting verdict as continuous
  quantities, all positive exactly where the board runs steady: where the device stays
  out of saturation, the Routh-Hurwitz conditions of the envelope-and-bias Jacobian
  (:func:`picker.circuit.envelope.hurwitz_conditions`, the field
  ``envelope_hurwitz`` of :class:`picker.circuit.steady.SteadyState`); where it
  saturates, −ln(R_E·C_E / (SATURATED_BURST·t_up)) (the relaxation rule of
  :data:`picker.circuit.envelope.SATURATED_BURST`) and 1 for the rest. The
  conditions are polynomials in the Jacobian's entries, so smooth across the box;
  the largest real part of the eigenvalues, fitted before, bends sharply where two
  eigenvalues meet (a square-root kink no polynomial follows), and on the loaded
  benchmark (:mod:`picker.bench.loaded`) left 33,700 of 4,000,000 boards within its
  band of the edge, to the large-signal model (134 with the conditions).

Two stages per design:

1. d = 2 by least squares from 1 + 2k + 2^k points: the centre, t_i = ±1 along each
   position and the 2^k corners of the box (the corners fix the cross terms). The
   corners are needed: without them (the quadratic exactly determined by the centre,
   the axes and one point per pair) the drift test of tests/test_loaded.py counted two
   designs 59 and 48 boards of 3,000 too high, their bursting confined to unsampled
   (+, −) corners (one a kink of the envelope eigenvalue, one a corner that leaves
   saturation). The cross terms matter: on a design of the demo ``colpitts_bjt.toml``
   the frequency offset changes by 2e-3 in ln f across the ±5 % box; a quadratic
   without them misses it by 3e-5 (rms over 500 boards), with them by 1e-6.
2. Where the bursting verdict may change inside the box or a stage-1 point does not
   start: d = :data:`EDGE_DEGREE` by least squares over :data:`EDGE_POINTS` × the
   number of terms points (the stage-1 points and a Halton sequence over the box;
   Halton 1960, Numer. Math. 2: radical inverses in the first primes). A condition is
   proven positive (negative) over the box where it is so at every stage-1 point and
   its quadratic's range over a 5^k grid of the box, widened on both sides by
   :data:`EDGE_SAFETY` times its width plus :data:`BAND_FACTOR` times its largest
   residual at the points, stays above (below) zero; a design whose conditions are
   all proven positive runs steady on every board, one with a condition proven
   negative bursts on every board, the others go to stage 2. On the benchmark's 32
   designs that went there, the quadratic of a condition missed the degree-4 fit by
   at most 1.4 % of the condition's range over a 9^3 grid of the box (median 0.8 %),
   so :data:`EDGE_SAFETY` is seven times that.

On the stage-2 designs each board is decided by the fitted conditions that were not
proven positive: it bursts where one lies below minus :data:`BAND_FACTOR` times that
fit's largest residual at its own points, runs steady where all lie above it, and
goes through the large-signal model itself in between.

A design is fitted only where the fit can describe it: its box centre starts and
runs without a numerical failure, every point that starts saturates alike (the
conditions change form across saturation), at every point "starts" agrees with
"margin > 1" and "bursts" with "not every condition positive", and the least squares have at least as
many finite points as terms. ``ok`` is False elsewhere, and
:class:`picker.circuit.loaded.LoadedModel` runs the large-signal model on every
board of those designs.

Axis convention: samples on axis 0, designs on axis 1; every per-design array (c,).
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.envelope import HURWITZ, SATURATED_BURST
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import stage_of
from picker.circuit.steady import SteadyState, steady_state
from picker.tank.base import Topology
from picker.tank.board import Parasitics, board_values

__all__ = [
    "BAND_FACTOR",
    "EDGE_DEGREE",
    "EDGE_POINTS",
    "EDGE_SAFETY",
    "QUANTITIES",
    "STEADY",
    "StateFn",
    "BoardFit",
    "fit_boards",
    "halton",
    "monomials",
    "point_quantities",
]

#: The large-signal model's signature: (topology, board values, stray, params) -> state.
StateFn = Callable[[Topology, Mapping[str, Any], Any, AmplifierParams], SteadyState]
#: The bursting conditions fitted (module docstring): a board runs steady where all are positive.
STEADY = tuple(f"steady_{i + 1}" for i in range(HURWITZ))
#: The fitted quantities, in the order of :attr:`BoardFit.coef`'s first axis.
QUANTITIES = ("off_f", "off_m", *STEADY)
#: Smallest half-width (ln v) an axis is fitted over (a part without spread).
MIN_STEP = 1e-7
#: Stage 2 runs unless each condition's quadratic stays this many times its own range over
#: the box away from zero (the quadratic misses the degree-4 fit by at most 1.4 % of the
#: range on the designs measured, see the module docstring).
EDGE_SAFETY = 0.1
#: Stage 2's points: this many times its number of terms.
EDGE_POINTS = 2.5
#: Stage 2's degree.
EDGE_DEGREE = 4
#: The burst band: this many times the stage-2 fit's largest residual of a condition.
BAND_FACTOR = 2.0
_PRIMES = (2, 3, 5, 7, 11, 13, 17, 19)


def monomials(k: int, degree: int) -> list[tuple[int, ...]]:
    """Exponent tuples α of the monomials t^α with |α| ≤ ``degree`` in k variables,
    constant first, then degree 1 in position order, then higher degrees."""
    out = [tuple([0] * k)]
    for d in range(1, degree + 1):
        for comb in itertools.combinations_with_replacement(range(k), d):
            e = [0] * k
            for i in comb:
                e[i] += 1
            out.append(tuple(e))
    return out


def halton(n: int, k: int) -> np.ndarray:
    """The first ``n`` points (from index 1) of the k-dimensional Halton sequence,
    mapped to [−1, 1]^k, shape (n, k) (Halton 1960: radical inverse of the index in
    the i-th prime)."""
    out = np.zeros((n, k))
    for j in range(k):
        b = _PRIMES[j]
        for i in range(n):
            f, r, m = 1.0, 0.0, i + 1
            while m > 0:
                f /= b
                r += f * (m % b)
                m //= b
            out[i, j] = r
    return 2.0 * out - 1.0


def _basis(t: np.ndarray, terms: list[tuple[int, ...]]) -> np.ndarray:
    """Monomials of points t (P, k) -> (P, len(terms))."""
    return np.stack([np.prod(t ** np.array(e), axis=1) for e in terms], axis=1)


@dataclass(frozen=True)
class BoardFit:
    """Coefficients of (F1) per design.

    ``anchor`` and ``h``: position -> box centre and half-width in ln v (c,);
    ``coef`` (Q, T, c), rows in :data:`QUANTITIES` order, terms as
    :func:`monomials` (k, :data:`EDGE_DEGREE`) gives them (zero beyond degree 2 where
    ``edge`` is False); ``edge`` (c,): the bursting verdict is decided board by board
    (stage 2), elsewhere ``bursts`` (c,) holds it for the whole box; ``band``
    (:data:`HURWITZ`, c): the burst band of each condition of :data:`STEADY`; ``live``
    (:data:`HURWITZ`, c): the conditions not proven positive over the whole box (the
    only ones checked board by board); ``ok`` (c,) marks designs the fit describes.
    """

    anchor: dict[str, np.ndarray]
    h: dict[str, np.ndarray]
    coef: np.ndarray
    edge: np.ndarray
    band: np.ndarray
    live: np.ndarray
    bursts: np.ndarray
    ok: np.ndarray

    def take(self, sel: Any) -> BoardFit:
        return BoardFit(
            {p: a[sel] for p, a in self.anchor.items()},
            {p: a[sel] for p, a in self.h.items()},
            self.coef[:, :, sel],
            self.edge[sel],
            self.band[:, sel],
            self.live[:, sel],
            self.bursts[sel],
            self.ok[sel],
        )

    @staticmethod
    def concat(parts: list[BoardFit]) -> BoardFit:
        """The fits of ``parts`` side by side (designs in order)."""
        pos = list(parts[0].anchor)
        return BoardFit(
            {p: np.concatenate([f.anchor[p] for f in parts]) for p in pos},
            {p: np.concatenate([f.h[p] for f in parts]) for p in pos},
            np.concatenate([f.coef for f in parts], axis=2),
            np.concatenate([f.edge for f in parts]),
            np.concatenate([f.band for f in parts], axis=1),
            np.concatenate([f.live for f in parts], axis=1),
            np.concatenate([f.bursts for f in parts]),
            np.concatenate([f.ok for f in parts]),
        )

    @classmethod
    def empty(cls, anchor: dict[str, np.ndarray]) -> BoardFit:
        """A fit that describes none of the designs at ``anchor`` (no boards to span a box)."""
        n = len(next(iter(anchor.values())))
        z = np.zeros((len(QUANTITIES), len(monomials(len(anchor), EDGE_DEGREE)), n))
        no = np.zeros(n, dtype=bool)
        b = np.zeros((len(STEADY), n))
        return cls(anchor, {p: np.ones(n) for p in anchor}, z, no, b, b > 0, no, no)

    def verdicts(
        self, vals: Mapping[str, np.ndarray], shift: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """(A3) of :mod:`picker.circuit.loaded` on every board: (bursts, undecided), each
        (samples, c). The designs the fit decides for the whole box take its verdict; on
        the others (``edge``) a board bursts where a fitted condition of :data:`STEADY`
        lies below minus its band, runs steady where every live one lies above its band,
        and is undecided otherwise. ``shift`` (:data:`HURWITZ`, samples, c), optional, is
        added to the fitted conditions (what an input outside the fit moves them by: a
        board's own stray, (X1) of :mod:`picker.circuit.loaded`), and the band widened by
        its size: the boards it may carry across the edge are left undecided (the
        large-signal model decides them)."""
        shape = np.shape(next(iter(vals.values())))
        burst = np.broadcast_to(self.bursts, shape).copy()
        unsure = np.zeros(shape, dtype=bool)
        cols = np.flatnonzero(self.edge)
        if cols.size == 0:
            return burst, unsure
        live = self.live[:, cols]
        rows = [j for j in range(len(STEADY)) if live[j].any()]
        sure_b = np.zeros((shape[0], cols.size), dtype=bool)
        sure_s = np.ones((shape[0], cols.size), dtype=bool)
        qs = self.quantities(tuple(STEADY[j] for j in rows), vals, cols)
        with np.errstate(invalid="ignore"):
            for j, q in zip(rows, qs, strict=True):
                band = self.band[j, cols]
                if shift is not None:  # shifted, the band widened by the shift (undecided)
                    q = q + shift[j][:, cols]
                    band = band + np.abs(shift[j][:, cols])
                sure_b |= live[j] & (q < -band)
                sure_s &= ~live[j] | (q > band)
        burst[:, cols] = sure_b
        unsure[:, cols] = ~sure_b & ~sure_s
        return burst, unsure

    def quantity(
        self, name: str, vals: Mapping[str, np.ndarray], cols: np.ndarray | None = None
    ) -> np.ndarray:
        """(F1) for quantity ``name`` on boards ``vals`` (position -> (samples, c)), on the
        designs ``cols`` only when given ((samples, len(cols)))."""
        return self.quantities((name,), vals, cols)[0]

    def quantities(
        self,
        names: tuple[str, ...],
        vals: Mapping[str, np.ndarray],
        cols: np.ndarray | None = None,
    ) -> list[np.ndarray]:
        """:meth:`quantity` of several quantities, the normalised deviations computed once."""
        sel: Any = slice(None) if cols is None else cols
        pos = list(self.anchor)
        k = len(pos)
        t = [np.log(vals[p][:, sel] / self.anchor[p][sel]) / self.h[p][sel] for p in pos]
        terms = monomials(k, EDGE_DEGREE)
        n2 = len(monomials(k, 2))
        coefs = [self.coef[QUANTITIES.index(name)][:, sel] for name in names]  # (T, c')
        outs = [np.broadcast_to(c[0], t[0].shape).copy() for c in coefs]
        tmp = np.empty(t[0].shape)

        def add(m: np.ndarray, j: int) -> None:  # every quantity += its coefficient · m
            for out, c in zip(outs, coefs, strict=True):
                np.multiply(m, c[j], out=tmp)
                out += tmp

        for j, e in enumerate(terms[1:n2], start=1):  # (F1), degrees 1 and 2
            ix = [i for i, ei in enumerate(e) for _ in range(ei)]
            add(t[ix[0]] if len(ix) == 1 else t[ix[0]] * t[ix[1]], j)
        ecols = np.flatnonzero(self.edge[sel])
        if ecols.size:  # (F1), degrees 3 .. EDGE_DEGREE, on the designs fitted with them
            tc = [ti[:, ecols] for ti in t]
            extra = [np.zeros(tc[0].shape) for _ in names]
            for j, e in enumerate(terms[n2:], start=n2):
                ix = [i for i, ei in enumerate(e) for _ in range(ei)]
                m = tc[ix[0]] * tc[ix[1]]
                for i in ix[2:]:
                    m *= tc[i]
                for x, c in zip(extra, coefs, strict=True):
                    x += m * c[j, ecols]
            for out, x in zip(outs, extra, strict=True):
                out[:, ecols] += x
        return outs


def point_quantities(
    lin_f: np.ndarray, lin_m: np.ndarray, st: SteadyState, params: AmplifierParams
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The fitted quantities at evaluated points, and what the checks need.

    Returns ``(off_f, off_m, steady, good, saturated)``: ``off_f`` NaN where the board
    does not start; ``steady`` (:data:`HURWITZ`, *shape) the conditions of
    :data:`STEADY` (module docstring; NaN where the board does not start or the steady
    state was not found); ``good``: starts and a steady state was found; ``saturated``:
    good and overdriven.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        off_f = np.log(st.f_hz) - np.log(lin_f)
        off_m = np.log(st.margin) - np.log(lin_m)
        good = st.starts & np.isfinite(st.amplitude_v) & np.isfinite(st.f_hz)
        saturated = good & st.overdriven
        t_relax = stage_of(params).relaxation_time(params) / SATURATED_BURST
        relax = np.log(t_relax / st.startup_time_s)  # > 0: τ_relax > SATURATED_BURST·t_up
    steady = np.moveaxis(np.asarray(st.envelope_hurwitz, dtype=float), -1, 0).copy()
    steady[:, saturated] = 1.0
    steady[0][saturated] = -relax[saturated]
    steady[:, ~good] = np.nan
    off_f = np.where(good, off_f, np.nan)
    return off_f, off_m, steady, good, saturated


@dataclass(frozen=True)
class _Points:
    """The models at points t (P, k) of the boxes of c designs."""

    q: np.ndarray  # (Q, P, c)
    ok: np.ndarray  # (c,): the consistency checks of the module docstring hold
    good: np.ndarray  # (P, c)
    sat: np.ndarray  # (P, c)


def _evaluate(
    topology: Topology,
    t: np.ndarray,
    anchor: Mapping[str, np.ndarray],
    h: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
    state: StateFn,
) -> _Points:
    pos = topology.positions
    vals = {
        p: anchor[p][None, :] * np.exp(t[:, i, None] * h[p][None, :]) for i, p in enumerate(pos)
    }
    bv = board_values(topology, vals, parasitics)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        lin = loaded_response(topology, bv, parasitics.stray, params)
        st = state(topology, bv, parasitics.stray, params)
    off_f, off_m, steady, good, sat = point_quantities(lin.f_hz, lin.margin, st, params)
    with np.errstate(invalid="ignore"):
        ok = np.all(st.starts == (st.margin > 1.0), axis=0)
        ok &= np.all(~good | (st.bursting == ~np.all(steady > 0.0, axis=0)), axis=0)
        ok &= np.all(np.isfinite(off_m), axis=0)
    return _Points(np.concatenate([off_f[None], off_m[None], steady]), ok, good, sat)


def _least_squares(a_mat: np.ndarray, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients (3, c, T) of (F1) by least squares over the finite points of each
    quantity and design (normal equations; the basis lives on [−1, 1]^k, so they are
    well conditioned), and (c,) whether every quantity had at least T finite points
    and the solution is finite. ``a_mat`` (P, T) the basis at the points, ``q`` (3, P, c)."""
    fin = np.isfinite(q)
    w = fin.astype(float)
    normal = np.einsum("rpe,pi,pj->reij", w, a_mat, a_mat)
    rhs = np.einsum("rpe,pi,rpe->rei", w, a_mat, np.where(fin, q, 0.0))
    n_terms = a_mat.shape[1]
    enough = fin.sum(axis=1).min(axis=0) >= n_terms
    normal[:, ~enough] = np.eye(n_terms)
    sol = np.linalg.solve(normal, rhs[..., None])[..., 0]
    return sol, enough & np.all(np.isfinite(sol), axis=(0, 2))


def _residual(a_mat: np.ndarray, q: np.ndarray, sol: np.ndarray) -> np.ndarray:
    """Largest |fit − q| over the finite points, (3, c); ``sol`` (3, c, T). An infinite
    miss stays infinite (not the largest float, whose multiples would overflow)."""
    fitted = np.einsum("pi,rei->rpe", a_mat, sol)
    with np.errstate(invalid="ignore"):
        return np.nan_to_num(np.abs(fitted - q), nan=0.0, posinf=np.inf).max(axis=1)


def fit_boards(
    topology: Topology,
    lo: Mapping[str, np.ndarray],
    hi: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
    state: StateFn = steady_state,
) -> BoardFit:
    """:class:`BoardFit` of designs whose boards span the box [lo, hi] per position (c,).

    Calls the linear model (:func:`picker.circuit.oscillation.loaded_response`) and the
    large-signal model (:func:`picker.circuit.steady.steady_state`) on the stage-1 board
    values (marked values with the parasitics applied; ``state`` is the large-signal
    model, :func:`picker.circuit.steady.steady_state` by default), and again on the stage-2 points
    of the designs that need them (module docstring).
    """
    pos = topology.positions
    k = len(pos)
    lo_ = {p: np.asarray(lo[p], dtype=float) for p in pos}
    hi_ = {p: np.asarray(hi[p], dtype=float) for p in pos}
    anchor = {p: np.sqrt(lo_[p] * hi_[p]) for p in pos}
    h = {p: np.maximum(0.5 * np.log(hi_[p] / lo_[p]), MIN_STEP) for p in pos}
    c = len(anchor[pos[0]])
    terms = monomials(k, EDGE_DEGREE)
    coef = np.zeros((len(QUANTITIES), len(terms), c))
    band = np.zeros((len(STEADY), c))
    # stage 1: the centre, ±1 along each axis, +1 along each pair of axes and the corners;
    # (F1) with d = 2 by least squares
    corners = np.array(list(itertools.product((-1.0, 1.0), repeat=k)))
    t1 = np.vstack(
        [np.zeros(k), np.repeat(np.eye(k), 2, axis=0) * np.tile([1.0, -1.0], k)[:, None]]
        + [corners]
    )
    s1 = _evaluate(topology, t1, anchor, h, parasitics, params, state)
    n2 = len(monomials(k, 2))
    a1 = _basis(t1, terms[:n2])
    sol, enough = _least_squares(a1, s1.q)
    coef[:, :n2] = np.swapaxes(sol, 1, 2)
    resid1 = _residual(a1, s1.q, sol)[2:]  # the quadratics' miss of the conditions (B, c)
    ok = s1.ok & s1.good[0]
    sat0 = s1.sat[0]
    same = np.all(~s1.good | (s1.sat == sat0[None, :]), axis=0)
    with np.errstate(invalid="ignore"):
        # each condition's quadratic over a grid of the box, widened by EDGE_SAFETY times
        # its own width and BAND_FACTOR times its residual: proven positive (or negative)
        # over the box where that range stays on one side of zero and so do the points
        grid = np.array(list(itertools.product(np.linspace(-1.0, 1.0, 5), repeat=k)))
        on_grid = np.einsum("gt,btc->bgc", _basis(grid, terms[:n2]), coef[2:, :n2])
        s_lo, s_hi = on_grid.min(axis=1), on_grid.max(axis=1)  # (B, c)
        pad = EDGE_SAFETY * (s_hi - s_lo) + BAND_FACTOR * resid1
        q_pts = s1.q[2:]  # (B, P, c)
        positive = (s_lo - pad > 0.0) & np.all(q_pts > 0.0, axis=1)
        negative = (s_hi + pad <= 0.0) & np.all(q_pts <= 0.0, axis=1)
        bursts = np.any(negative, axis=0)
        edge = ~(np.all(positive, axis=0) | bursts)
    edge |= ~enough | ~np.all(np.isfinite(s1.q), axis=(0, 1))
    edge &= ok
    live = ~positive
    e = np.flatnonzero(edge)
    if e.size:  # stage 2: degree EDGE_DEGREE by least squares
        n_pts = int(np.ceil(EDGE_POINTS * len(terms)))
        extra = halton(max(0, n_pts - len(t1)), k)
        s2 = _evaluate(
            topology,
            extra,
            {p: a[e] for p, a in anchor.items()},
            {p: a[e] for p, a in h.items()},
            parasitics,
            params,
            state,
        )
        qa = np.concatenate([s1.q[:, :, e], s2.q], axis=1)  # (Q, P, n_e)
        a_mat = _basis(np.vstack([t1, extra]), terms)
        sol, enough2 = _least_squares(a_mat, qa)
        band[:, e] = BAND_FACTOR * _residual(a_mat, qa, sol)[2:]
        coef[:, :, e] = np.swapaxes(sol, 1, 2)
        good = np.concatenate([s1.good[:, e], s2.good], axis=0)
        sat = np.concatenate([s1.sat[:, e], s2.sat], axis=0)
        ok[e] &= s2.ok & enough2
        same[e] &= np.all(~good | (sat == sat0[e][None, :]), axis=0)
    ok &= same & (edge | enough)
    return BoardFit(anchor, h, coef, edge, band, live, bursts & ~edge, ok)
