"""The loaded-feasible search: every design whose *loaded* nominal frequency is in the
window and whose start-up margin is at least the minimum.

A design is loaded-feasible when its loaded nominal frequency lies in the
window, its start-up margin is at least ``min_margin`` and its feedback fraction
lies in the feedback window. Loading moves the frequency by anything from a
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
3. run the full model on every design inside the range and keep those that meet
   the window and the margin.

Assumption: for fixed outer parts the loaded frequency falls monotonically as
the solved part (L or C3) grows, as the ideal one does. The result equals a
brute-force full-model evaluation of every combination on the small spaces of
tests/test_loaded.py (several amplifiers, a lossy inductor, capacitors
comparable to the device capacitances).

The loaded figures come from :func:`picker.circuit.loaded.loaded_nominal`; the ideal
enumeration (feedback pairs, solved position, analytic interval) is the exact
search's own (:mod:`picker.core.search`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.loaded import loaded_nominal
from picker.circuit.network import loop_gain
from picker.circuit.stages import small_signal
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
    min_margin: float,
    params: AmplifierParams,
    keep: int,
    parts: dict[str, Any],
) -> None:
    """Full model on candidate index tuples; append feasible and low-margin ones to ``parts``."""
    vals = {p: problem.tables[p].values[i] for p, i in idx.items()}
    f_i = board_frequency(problem.topology, vals, problem.parasitics)
    beta = board_beta(problem.topology, vals, problem.parasitics)
    f_l, m = loaded_nominal(problem.topology, vals, problem.parasitics, params)
    inw = (f_l >= problem.f_min) & (f_l <= problem.f_max)
    inw &= (beta >= problem.beta_min) & (beta <= problem.beta_max)
    ok = inw & (m >= min_margin)
    parts["ok"].append(
        (Designs({p: i[ok] for p, i in idx.items()}, f_i[ok], beta[ok]), f_l[ok], m[ok])
    )
    parts["in_window"] += int(inw.sum())
    low = np.flatnonzero(inw & ~ok)
    if low.size:
        low = low[np.argsort(-m[low], kind="stable")[:keep]]
        parts["low"].append(
            (Designs({p: i[low] for p, i in idx.items()}, f_i[low], beta[low]), f_l[low], m[low])
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
    topo = problem.topology
    tabs = problem.tables
    outer = outer_enumeration(problem)
    solved = outer.solved
    sv = tabs[solved].values
    ns = len(sv)
    n_outer = outer.size
    parts: dict[str, Any] = {"ok": [], "low": [], "in_window": 0}
    found = 0
    chunk = min(OUTER_CHUNK, SEARCH_CHUNK)
    for start in range(0, n_outer, chunk):
        flat = np.arange(start, min(start + chunk, n_outer), dtype=np.int64)
        idx = outer.index(flat)
        vals = {p: tabs[p].values[i] for p, i in idx.items()}
        r = _estimated_ratio(problem, params, solved, vals)
        # per-element windows: solve_interval's formulas are elementwise
        lo, hi = solve_interval(
            problem, solved, vals, f_min=problem.f_min / r, f_max=problem.f_max / r
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
        owner, js = expand_ranges(np.arange(len(flat)), a, b)
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
    parts: dict[str, Any] = {"ok": [], "low": [], "in_window": 0}
    _collect(problem, idx, min_margin, params, keep, parts)
    return _finish(topo, parts, keep)
