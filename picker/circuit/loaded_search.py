"""The loaded-feasible search: every design that starts, runs steady, has its *steady*
nominal frequency in the window and a start-up margin within the bounds.

A design is loaded-feasible when, in the large-signal model
(:func:`picker.circuit.steady.steady_state`), it starts and runs steady (does not
burst), its steady nominal frequency lies in the window, its start-up margin is at
least ``min_margin`` (and at most ``max_margin`` when given) and its feedback
fraction lies in the feedback window. Designs that do not start or that burst are
never ranked. Loading moves the frequency by anything from a
fraction of a percent to tens of percent (small capacitors against the device
capacitances and input resistance, or a blocking capacitor in series with a
large C1), so a global widening of the ideal window would have to cover the
worst ratio anywhere in the space. Instead, for every outer combination of the
exact search (a pair of the feedback pair's values within the feedback window,
times the other free positions: C3 or L for a Clapp tank), the solved
position's index range is found locally:

1. start from the ideal index range of the window divided by an estimated ratio
   (the ideal tank with the device capacitances C_mu across C1 and C_pi across
   C2);
2. walk outward one table value at a time until the value just outside the
   range is on the far side of the window: above f_max on the small-value side,
   below f_min on the large-value side. "Which side" is read from the phase of
   the loop gain T at the window edges (the phase falls through zero at the
   oscillation frequency: φ(f_max) > 0 and φ(f_min) > 0 mean the crossing lies
   above the window; both < 0, below);
3. **the edges by the large-signal model** (what makes the pruning safe whatever
   the steady-state pull): let F(j) be the *running frequency* of the design with
   the solved part's j-th value: its steady frequency (:func:`board_state`) where
   it starts, else its linear zero-phase frequency. F is continuous across the
   start-up edge (at a margin of 1 the steady state has no compression, so the
   steady frequency is the linear one). The design just outside the range on the
   small-value side is evaluated; while F is not above f_max there (so that
   design, or one further out, could run inside the window) the range grows by
   that design and the next one out is evaluated; the same on the large-value
   side with "not below f_min". A design whose F is not finite ends the walk
   (as in step 2);
4. run the large-signal model on every design of the range and keep those that
   run steady with their steady frequency in the window and their margin within
   the bounds.

Why this is exact: under the assumption below (F monotone in the solved part),
the design beyond each end of the range has F beyond the window, so every
design further out has too, and none of them can be kept; every design inside
the range is checked by the same model and rule as a brute force. Nothing is
assumed about the size of the steady-state pull (the steady frequency of a
heavily loaded, device-dominated design can move by tens of per cent from the
linear one), and the large-signal model runs on at most two designs per outer
combination beyond those of the range.

Assumption: for fixed outer parts the running frequency F falls monotonically
as the solved part (L or C3) grows, as the ideal one does. The result equals a
brute-force large-signal evaluation of every combination on the small spaces of
tests/test_loaded.py and tests/test_search_edges.py (several amplifiers, a lossy
inductor, capacitors comparable to the device capacitances, designs pulled by
more than 20 %).

The loaded figures come from :func:`picker.circuit.loaded.loaded_nominal` and
:func:`picker.circuit.loaded.board_state`; the ideal
enumeration (feedback pairs, solved position, analytic interval) is the exact
search's own (:mod:`picker.core.search`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, replace
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.loaded import board_state, loaded_nominal
from picker.circuit.network import loop_gain
from picker.circuit.stages import small_signal
from picker.circuit.steady import SteadyState
from picker.core.search import CHUNK as SEARCH_CHUNK
from picker.core.search import (
    Designs,
    Problem,
    expand_ranges,
    outer_enumeration,
    solve_interval,
)
from picker.errors import SpecError
from picker.tank.base import Topology
from picker.tank.board import board_beta, board_frequency, board_values

#: Outer combinations per chunk of the loaded search (bounds memory).
OUTER_CHUNK = 1 << 15

__all__ = ["LoadedSearch", "loaded_brute_force", "loaded_search"]


@dataclass(frozen=True)
class LoadedSearch:
    """Loaded-feasible designs and what kept the others out.

    ``designs`` keeps the *ideal* nominal frequency in ``f_nominal``;
    ``f_loaded`` and ``margin`` are the loaded figures of the same designs
    (shape (n,)). ``in_window`` counts designs whose loaded frequency is in the
    window whatever their margin; ``low_margin`` holds up to
    ``keep`` of those whose margin is below the minimum, best margin first, with
    ``low_margin_f`` and ``low_margin_m``. ``f_loaded`` and ``margin`` of the
    feasible designs are the large-signal model's (steady frequency).
    ``not_steady`` counts designs the linear model passes but that do not start or
    that burst in the large-signal model, and ``unsteady`` holds up to ``keep`` of them,
    lowest margin first (the nearest to running steady), with their linear frequency
    ``unsteady_f``, margin ``unsteady_m`` and whether they start (``unsteady_starts``;
    those that start burst); ``over_margin`` counts those whose margin exceeds
    ``max_margin``.
    """

    designs: Designs
    f_loaded: np.ndarray
    margin: np.ndarray
    in_window: int
    low_margin: Designs
    low_margin_f: np.ndarray
    low_margin_m: np.ndarray
    not_steady: int = 0
    over_margin: int = 0
    unsteady: Designs | None = None
    unsteady_f: np.ndarray | None = None
    unsteady_m: np.ndarray | None = None
    unsteady_starts: np.ndarray | None = None


ABOVE, INSIDE, BELOW, UNCLEAR = 1, 0, -1, 2
#: Phase change across the window (rad) below which the phase test is not trusted
#: against the ideal frequency's side (a flat, featureless loop-gain phase).
FLAT_PHASE = 1e-3


def _side(
    problem: Problem, params: AmplifierParams, vals: dict[str, np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """Where the loaded frequency lies against the window, from the phase of T (step 2).

    The phase falls through zero at the oscillation frequency. With φ_lo, φ_hi the
    phases at f_min and f_max: both > 0 and falling: ABOVE; φ_lo > 0 > φ_hi with a
    fall below π: INSIDE; both < 0, or both > 0 and rising (past a crossing and
    a recovery): BELOW; anything else (a wrap through ±π): UNCLEAR. Returns the
    codes and whether the phase changes by more than FLAT_PHASE.
    """
    pb = problem
    bv = board_values(pb.topology, vals, pb.parasitics)
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


def _estimated_ratio(
    problem: Problem, params: AmplifierParams, solved: str, vals: dict[str, np.ndarray]
) -> np.ndarray:
    """Step 1: f_loaded/f_ideal guessed with C_mu across C1 and C_pi across C2.

    C_mu sits across the feedback pair's output side, C_pi across its input side.
    """
    ss = small_signal(params)
    pb = problem
    centre = math.sqrt(pb.f_min * pb.f_max)
    lo, hi = solve_interval(pb, solved, vals, f_min=centre, f_max=centre)
    x = lo  # the window is the single point ``centre``, so lo == hi
    full = dict(vals)
    full[solved] = np.where(np.isfinite(x) & (x > 0), x, 1.0)
    bv = board_values(pb.topology, full, pb.parasitics)
    out, inp = pb.topology.feedback_pair
    dev = {**bv, out: bv[out] + ss.c_mu, inp: bv[inp] + ss.c_pi}
    r = pb.topology.frequency(dev, pb.parasitics.stray) / pb.topology.frequency(
        bv, pb.parasitics.stray
    )
    return np.where(np.isfinite(x) & (x > 0) & np.isfinite(r), r, 1.0)


def _empty(topology: Topology) -> Designs:
    z = np.zeros(0)
    return Designs({p: np.zeros(0, dtype=np.int32) for p in topology.positions}, z, z)


def _collect(
    problem: Problem,
    idx: dict[str, np.ndarray],
    margins: tuple[float, float],
    params: AmplifierParams,
    keep: int,
    parts: dict[str, Any],
    window: tuple[float, float] | None = None,
    state: SteadyState | None = None,
) -> None:
    """Both models on candidate index tuples; append feasible and low-margin ones to ``parts``.

    The large-signal model (:func:`board_state`, or ``state`` when the caller has it
    already) decides: starts and runs steady, margin within ``margins``, steady
    frequency within ``window`` (default: the problem's), feedback fraction within the
    problem's. The linear model (:func:`loaded_nominal`) gives the counts of designs
    whose linear frequency lies in the window (``in_window``) and the figures of the
    low-margin ones.
    """
    f_lo, f_hi = window if window is not None else (problem.f_min, problem.f_max)
    m_lo, m_hi = margins
    vals = {p: problem.tables[p].values[i] for p, i in idx.items()}
    f_i = board_frequency(problem.topology, vals, problem.parasitics)
    beta = board_beta(problem.topology, vals, problem.parasitics)
    f_l, m = loaded_nominal(problem.topology, vals, problem.parasitics, params)
    fb = (beta >= problem.beta_min) & (beta <= problem.beta_max)
    inw = fb & (f_l >= f_lo) & (f_l <= f_hi)
    ok = np.zeros(len(f_l), dtype=bool)
    f_s, m_s = f_l.copy(), m.copy()
    if len(f_l):
        st = (
            state
            if state is not None
            else board_state(problem.topology, vals, problem.parasitics, params)
        )
        f_s, m_s = np.asarray(st.f_hz, dtype=float), np.asarray(st.margin, dtype=float)
        runs = np.asarray(st.runs, dtype=bool)
        in_steady = (f_s >= f_lo) & (f_s <= f_hi)
        ok = fb & runs & in_steady & (m_s >= m_lo) & ~(m_s > m_hi)
        unsteady = np.flatnonzero(~runs & (m_s >= m_lo) & inw)
        parts["not_steady"] += int(unsteady.size)
        if unsteady.size:
            unsteady = unsteady[np.argsort(m_s[unsteady], kind="stable")[:keep]]
            starts = np.asarray(st.starts, dtype=bool)[unsteady]
            parts["unsteady"].append(
                (
                    Designs(
                        {p: i[unsteady] for p, i in idx.items()}, f_i[unsteady], beta[unsteady]
                    ),
                    f_l[unsteady],
                    m_s[unsteady],
                    starts,
                )
            )
        parts["over_margin"] += int((fb & runs & in_steady & (m_s > m_hi)).sum())
    parts["ok"].append(
        (Designs({p: i[ok] for p, i in idx.items()}, f_i[ok], beta[ok]), f_s[ok], m_s[ok])
    )
    parts["in_window"] += int(inw.sum())
    low = np.flatnonzero(inw & ~ok & (m_s < m_lo))
    if low.size:
        low = low[np.argsort(-m_s[low], kind="stable")[:keep]]
        parts["low"].append(
            (
                Designs({p: i[low] for p, i in idx.items()}, f_i[low], beta[low]),
                f_l[low],
                m_s[low],
            )
        )


def _finish(topology: Topology, parts: dict[str, Any], keep: int) -> LoadedSearch:
    def cat(items: list[Any]) -> tuple[Designs, np.ndarray, np.ndarray]:
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
    ud, uf, um = cat(parts["unsteady"])
    us = np.concatenate([x[3] for x in parts["unsteady"]]) if parts["unsteady"] else uf > 0
    u_order = np.lexsort((np.arange(len(um)), um))[:keep]
    return LoadedSearch(
        d,
        f,
        m,
        parts["in_window"],
        ld.take(order),
        lf[order],
        lm[order],
        parts["not_steady"],
        parts["over_margin"],
        ud.take(u_order),
        uf[u_order],
        um[u_order],
        us[u_order],
    )


def _new_parts() -> dict[str, Any]:
    return {
        "ok": [],
        "low": [],
        "unsteady": [],
        "in_window": 0,
        "not_steady": 0,
        "over_margin": 0,
    }


def loaded_search(
    problem: Problem,
    params: AmplifierParams,
    *,
    min_margin: float,
    max_margin: float | None = None,
    max_designs: int = 5_000_000,
    keep: int = 5,
) -> LoadedSearch:
    """Every loaded-feasible design of ``problem`` (module docstring, steps 1-4).

    Designs come in the order of the exact search's enumeration (outer
    combination, then the solved position ascending).
    """
    margins = (min_margin, math.inf if max_margin is None else max_margin)
    parts = _walk(problem, params, margins, max_designs, keep)
    return _finish(problem.topology, parts, keep)


def _take_state(st: SteadyState, k: np.ndarray) -> SteadyState:
    """The elements ``k`` of a 1-D :class:`SteadyState`."""
    return SteadyState(**{f.name: getattr(st, f.name)[k] for f in fields(SteadyState)})


def _running_frequency(
    problem: Problem, params: AmplifierParams, vals: dict[str, np.ndarray]
) -> tuple[np.ndarray, SteadyState]:
    """F of step 3 (steady frequency where the design starts, else the linear zero-phase
    frequency; Hz) and the large-signal state of designs ``vals`` (1-D)."""
    st = board_state(problem.topology, vals, problem.parasitics, params)
    f = np.asarray(st.f_hz, dtype=float)
    lin = ~(np.asarray(st.starts, dtype=bool) & np.isfinite(f))
    if lin.any():
        f_l, _ = loaded_nominal(
            problem.topology, {p: v[lin] for p, v in vals.items()}, problem.parasitics, params
        )
        f = f.copy()
        f[lin] = f_l
    return f, st


def _walk(
    problem: Problem,
    params: AmplifierParams,
    margins: tuple[float, float],
    max_designs: int,
    keep: int,
) -> dict[str, Any]:
    """Steps 1-4 over ``problem``."""
    tabs = problem.tables
    outer = outer_enumeration(problem)
    solved = outer.solved
    sv = tabs[solved].values
    ns = len(sv)
    n_outer = outer.size
    parts = _new_parts()
    found = 0
    chunk = min(OUTER_CHUNK, SEARCH_CHUNK)
    for start in range(0, n_outer, chunk):
        flat = np.arange(start, min(start + chunk, n_outer), dtype=np.int64)
        idx = outer.index(flat)
        vals = {p: tabs[p].values[i] for p, i in idx.items()}
        a, b = _linear_range(problem, params, solved, vals)
        # step 3: the edges by the large-signal model; the designs it adds keep their state
        a0, b0 = a.copy(), b.copy()
        probed: list[tuple[np.ndarray, np.ndarray, SteadyState]] = []
        for low_side in (True, False):
            open_ = (a > 0) if low_side else (b < ns)
            while open_.any():
                sel = np.flatnonzero(open_)
                j = a[sel] - 1 if low_side else b[sel]
                probe = {p: v[sel] for p, v in vals.items()}
                probe[solved] = sv[j]
                f_run, st = _running_frequency(problem, params, probe)
                with np.errstate(invalid="ignore"):
                    inner = (f_run <= problem.f_max) if low_side else (f_run >= problem.f_min)
                grow = inner & np.isfinite(f_run)
                if grow.any():
                    probed.append((sel[grow], j[grow], _take_state(st, np.flatnonzero(grow))))
                open_[sel[~grow]] = False
                g = sel[grow]
                if low_side:
                    a[g] -= 1
                    open_[g] = a[g] > 0
                else:
                    b[g] += 1
                    open_[g] = b[g] < ns
        owner, js = expand_ranges(np.arange(len(flat)), a, b)
        if len(owner) == 0:
            continue
        cand = {p: i[owner].astype(np.int32) for p, i in idx.items()}
        cand[solved] = js.astype(np.int32)
        state = _range_state(problem, params, cand, owner, js, a0, b0, probed)
        before = len(parts["ok"])
        _collect(problem, cand, margins, params, keep, parts, None, state)
        found += sum(len(x[1]) for x in parts["ok"][before:])
        if found > max_designs:
            raise SpecError(
                f"the search holds more than {max_designs:,} loaded-feasible designs; narrow "
                "the part ranges or the frequency window, or raise search.max_designs",
                key="search.max_designs",
            )
    return parts


def _range_state(
    problem: Problem,
    params: AmplifierParams,
    cand: dict[str, np.ndarray],
    owner: np.ndarray,
    js: np.ndarray,
    a0: np.ndarray,
    b0: np.ndarray,
    probed: list[tuple[np.ndarray, np.ndarray, SteadyState]],
) -> SteadyState:
    """The large-signal state of every design of the ranges (``cand``, in enumeration
    order): computed for those of the linear ranges [a0, b0), taken from the edge walk
    for the others (each design's state does not depend on its batch)."""
    inner = (js >= a0[owner]) & (js < b0[owner])
    k_new = np.flatnonzero(inner)
    vals = {p: problem.tables[p].values[i[k_new]] for p, i in cand.items()}
    st_new = board_state(problem.topology, vals, problem.parasitics, params)
    if not probed:
        return st_new
    # each design's place in the concatenation [new, probed...], by its key (outer, j)
    ns = int(js.max()) + 1  # every probed design lies in the ranges: j < ns
    keys = [owner[k_new].astype(np.int64) * ns + js[k_new]]
    states = [st_new]
    for o, j, st in probed:
        keys.append(o.astype(np.int64) * ns + j)
        states.append(st)
    k_all = np.concatenate(keys)
    order = np.argsort(k_all, kind="stable")
    pos = order[np.searchsorted(k_all[order], owner.astype(np.int64) * ns + js)]
    return SteadyState(
        **{
            f.name: np.concatenate([np.asarray(getattr(x, f.name)) for x in states])[pos]
            for f in fields(SteadyState)
        }
    )


def _linear_range(
    problem: Problem, params: AmplifierParams, solved: str, vals: dict[str, np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """Steps 1-2: per outer combination, the index range [a, b) of the solved position
    whose linear frequency may lie in the window."""
    topo = problem.topology
    sv = problem.tables[solved].values
    ns = len(sv)
    r = _estimated_ratio(problem, params, solved, vals)
    # per-element windows: solve_interval's formulas are elementwise
    lo, hi = solve_interval(problem, solved, vals, f_min=problem.f_min / r, f_max=problem.f_max / r)
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
                f_l, _ = loaded_nominal(
                    topo, {p: v[k] for p, v in probe.items()}, problem.parasitics, params
                )
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
    return a, b


def loaded_brute_force(
    problem: Problem,
    params: AmplifierParams,
    *,
    min_margin: float,
    max_margin: float | None = None,
    keep: int = 5,
) -> LoadedSearch:
    """Full-cube enumeration with both models: the reference for tests (small spaces)."""
    topo = problem.topology
    sizes = [len(problem.tables[p]) for p in topo.positions]
    grids = np.meshgrid(*[np.arange(n, dtype=np.int32) for n in sizes], indexing="ij")
    idx = {p: g.ravel() for p, g in zip(topo.positions, grids, strict=True)}
    parts = _new_parts()
    margins = (min_margin, math.inf if max_margin is None else max_margin)
    # the large-signal model on every design that starts, wherever its linear frequency
    everywhere = replace(problem, f_min=0.0, f_max=math.inf)
    _collect(everywhere, idx, margins, params, keep, parts, (problem.f_min, problem.f_max))
    return _finish(topo, parts, keep)
