"""Exact search of the discrete value space.

Every combination of table values whose nominal board frequency lies in
``[f_min, f_max]`` and whose feedback fraction lies in ``[beta_min, beta_max]``
is found, without enumerating the full cube:

1. the pairs of the topology's feedback pair (C1, C2) that satisfy the
   feedback window are found per output-side value with ``searchsorted``
   (beta is monotone in the input-side value);
2. the remaining positions but one are enumerated with those pairs, in chunks;
3. for the last ("solved") position the frequency window is solved
   analytically into a value interval, and ``searchsorted`` gives its index
   range;
4. the hits are re-checked with the very same frequency function a brute force
   would use, so the result set is exactly the brute-force set (a property test
   shows this).

The solved position is the topology's choice
(:meth:`picker.tank.base.Topology.solved_position`: L, or C3 in a Clapp tank
when that makes the outer enumeration smaller); the module itself names no
position. Results are a struct of arrays in a deterministic order
(the order of the enumeration; :func:`sort_designs` orders by index tuple).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from picker.errors import SpecError
from picker.parts.table import ValueTable
from picker.tank.base import Topology
from picker.tank.board import (
    Parasitics,
    board_beta,
    board_feedback_bounds,
    board_frequency,
    board_interval,
)

#: Outer combinations handled per chunk (bounds memory to a few tens of MB).
CHUNK = 1 << 18
#: Relative widening of analytic bounds before the exact re-check.
_WIDEN = 1e-9


@dataclass(frozen=True)
class Problem:
    """What the search needs: topology, value tables, windows and parasitics."""

    topology: Topology
    tables: dict[str, ValueTable]
    f_min: float
    f_max: float
    beta_min: float
    beta_max: float
    parasitics: Parasitics = field(default_factory=Parasitics)

    def space_size(self) -> int:
        """Size of the full cube of combinations (what brute force would visit)."""
        return int(np.prod([len(self.tables[p]) for p in self.topology.positions], dtype=float))


@dataclass(frozen=True)
class Designs:
    """Feasible designs as a struct of arrays (length n, in a deterministic order).

    Attributes
    ----------
    idx : dict position -> (n,) int32 index into that position's table.
    f_nominal : (n,) float, nominal board frequency, Hz.
    beta : (n,) float, feedback fraction.
    """

    idx: dict[str, np.ndarray]
    f_nominal: np.ndarray
    beta: np.ndarray

    def __len__(self) -> int:
        return len(self.f_nominal)

    def take(self, sel: np.ndarray) -> Designs:
        return Designs(
            {p: a[sel] for p, a in self.idx.items()}, self.f_nominal[sel], self.beta[sel]
        )

    def values(self, problem: Problem) -> dict[str, np.ndarray]:
        """Nominal part values of every design, position -> (n,) float."""
        return {p: problem.tables[p].values[i] for p, i in self.idx.items()}


def feedback_pairs(problem: Problem) -> tuple[np.ndarray, np.ndarray]:
    """Every index pair of the feedback pair's tables with beta in the window, exactly.

    Returns ``(i_out, i_in)``, int arrays of equal length, ordered by
    ``i_out`` then ``i_in``: for each output-side value the admissible
    input-side values form one ``searchsorted`` range (beta is monotone in the
    input-side value, :meth:`picker.tank.base.Topology.feedback_bounds`), and
    every pair is then checked with :func:`picker.tank.board.board_beta`.
    """
    topo, par = problem.topology, problem.parasitics
    out, inp = topo.feedback_pair
    first = problem.tables[out].values
    second = problem.tables[inp].values
    lo, hi = board_feedback_bounds(
        topo, first, problem.beta_min, problem.beta_max, par, widen=_WIDEN
    )
    a = np.searchsorted(second, lo, side="left")
    b = np.searchsorted(second, hi, side="right")
    i1, i2 = expand_ranges(np.arange(len(first)), a, b)
    beta = board_beta(topo, {out: first[i1], inp: second[i2]}, par)
    ok = (beta >= problem.beta_min) & (beta <= problem.beta_max)
    return i1[ok], i2[ok]


def expand_ranges(
    owner: np.ndarray, start: np.ndarray, stop: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """For each owner k, emit (owner[k], j) for j in [start[k], stop[k])."""
    count = np.maximum(stop - start, 0)
    total = int(count.sum())
    rep_owner = np.repeat(owner, count)
    # j = start[k] + (position within the run)
    offsets = np.arange(total) - np.repeat(np.cumsum(count) - count, count)
    return rep_owner, np.repeat(start, count) + offsets


def solved_position(problem: Problem) -> str:
    """The position whose frequency window the search solves analytically.

    The topology's choice (:meth:`picker.tank.base.Topology.solved_position`)
    given the table sizes: the one leaving the smallest outer enumeration.
    """
    topo = problem.topology
    return topo.solved_position({p: len(problem.tables[p]) for p in topo.solvable()})


def solve_interval(
    problem: Problem,
    solved: str,
    values: dict[str, np.ndarray],
    *,
    f_min: float | np.ndarray | None = None,
    f_max: float | np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Interval [lo, hi] of the solved position's value that puts the board frequency in the window.

    ``values`` holds the other positions' values (arrays of one shape); the
    window is the problem's unless ``f_min``/``f_max`` (floats or arrays of
    that shape) are given. See :func:`picker.tank.board.board_interval`.
    """
    return board_interval(
        problem.topology,
        values,
        solved,
        problem.f_min if f_min is None else f_min,
        problem.f_max if f_max is None else f_max,
        problem.parasitics,
    )


@dataclass(frozen=True)
class Outer:
    """The exact search's outer enumeration: the feedback pairs times every other free position.

    Outer combination ``k`` (0 <= k < :attr:`size`) is, in C order, a
    feedback pair index and one index into each ``rest`` table, the last
    fastest; the ``solved`` position is not enumerated.
    """

    pair: tuple[str, str]
    i_out: np.ndarray
    i_in: np.ndarray
    rest: tuple[str, ...]
    rest_sizes: tuple[int, ...]
    solved: str

    @property
    def size(self) -> int:
        """Number of outer combinations."""
        return len(self.i_out) * math.prod(self.rest_sizes)

    def index(self, flat: np.ndarray) -> dict[str, np.ndarray]:
        """Table indices (position -> int array, shape of ``flat``) of outer combinations."""
        idx: dict[str, np.ndarray] = {}
        pair = flat
        digits = []
        for k in reversed(self.rest_sizes):
            digits.append(pair % k)
            pair = pair // k
        for p, i in zip(self.rest, reversed(digits), strict=True):
            idx[p] = i
        idx[self.pair[0]], idx[self.pair[1]] = self.i_out[pair], self.i_in[pair]
        return idx


def outer_enumeration(problem: Problem) -> Outer:
    """The outer enumeration of ``problem`` (:func:`feedback_pairs` x the rest)."""
    topo = problem.topology
    i1, i2 = feedback_pairs(problem)
    solved = solved_position(problem)
    rest = tuple(p for p in topo.positions if p not in (*topo.feedback_pair, solved))
    sizes = tuple(len(problem.tables[p]) for p in rest)
    return Outer(topo.feedback_pair, i1, i2, rest, sizes, solved)


def estimate_outer(problem: Problem) -> tuple[int, str]:
    """Outer combinations the search will visit, and the solved position."""
    outer = outer_enumeration(problem)
    return outer.size, outer.solved


#: Outer combinations a search may visit by default: at about 14 million a
#: second on the 2-core benchmark machine, a little over a minute.
MAX_COMBINATIONS = 1_000_000_000
#: Outer combinations sampled to estimate the feasible count before a search.
_ESTIMATE_SAMPLE = 1 << 18


def estimate_designs(problem: Problem, *, sample: int = _ESTIMATE_SAMPLE) -> tuple[int, int]:
    """Outer combinations a search visits, and an estimate of its feasible designs.

    The estimate counts the solved position's admissible index range (before
    the exact re-check) over ``sample`` evenly spaced outer combinations and
    scales it up: within 10 % on the benchmark spaces, and equal to the count
    before the re-check when the outer grid has at most ``sample`` combinations.
    Costs milliseconds.
    """
    outer = outer_enumeration(problem)
    n_outer = outer.size
    if n_outer == 0:
        return 0, 0
    flat = np.linspace(0, n_outer - 1, min(n_outer, sample)).astype(np.int64)
    flat = flat[np.concatenate(([True], np.diff(flat) > 0))]  # sorted: drop repeats cheaply
    idx = outer.index(flat)
    vals = {p: problem.tables[p].values[i] for p, i in idx.items()}
    lo, hi = solve_interval(problem, outer.solved, vals)
    sol = problem.tables[outer.solved].values
    a = np.searchsorted(sol, lo * (1 - _WIDEN), side="left")
    b = np.searchsorted(sol, hi * (1 + _WIDEN), side="right")
    hits = int(np.maximum(b - a, 0).sum())
    return n_outer, int(round(hits * n_outer / len(flat)))


def check_size(
    problem: Problem,
    *,
    max_designs: int | None = 5_000_000,
    max_combinations: int = MAX_COMBINATIONS,
) -> tuple[int, int]:
    """Refuse, before it runs, a search that would take too long or hold too much.

    Raises SpecError (key ``search.max_combinations`` or ``search.max_designs``)
    when the outer grid exceeds ``max_combinations``, or when the estimated
    feasible count exceeds twice ``max_designs`` (the margin keeps a sampling
    error from refusing a search the exact count would allow; the exact count
    is checked again while the search runs). ``max_designs=None`` skips that
    check (the loaded search, whose window differs). Returns
    :func:`estimate_designs`.
    """
    n_outer, est = estimate_designs(problem)
    if n_outer > max_combinations:
        raise SpecError(
            f"the search would visit {n_outer:,} combinations of part values, more than "
            f"{max_combinations:,} (about a minute per billion); narrow the part ranges "
            "(parts.*.min/max), the feedback window or the series, or raise "
            "search.max_combinations",
            key="search.max_combinations",
        )
    if max_designs is not None and est > 2 * max_designs:
        raise SpecError(
            f"the search would hold about {est:,} feasible designs, more than {max_designs:,}; "
            "narrow the part ranges or the frequency window, or raise search.max_designs",
            key="search.max_designs",
        )
    return n_outer, est


def search(
    problem: Problem,
    *,
    max_designs: int = 5_000_000,
    max_combinations: int = MAX_COMBINATIONS,
) -> Designs:
    """Every feasible design of ``problem``, exactly (see the module docstring).

    Raises
    ------
    SpecError
        Before the search, when :func:`check_size` refuses it; during it, when
        the feasible set exceeds ``max_designs`` (narrow the ranges or the
        window, or raise ``search.max_designs``).
    """
    _, estimate = check_size(problem, max_designs=max_designs, max_combinations=max_combinations)
    topo = problem.topology
    tabs = problem.tables
    outer = outer_enumeration(problem)
    solved = outer.solved
    n_outer = outer.size
    # preallocated result, filled chunk by chunk (no list of chunks to concatenate: that
    # held every design twice at the end); grown by doubling if the estimate was low
    out = _Buffer(topo.positions, max(1 << 12, int(estimate * 1.25)))
    total = 0
    sol_vals = tabs[solved].values
    for start in range(0, n_outer, CHUNK):
        flat = np.arange(start, min(start + CHUNK, n_outer), dtype=np.int64)
        idx = outer.index(flat)
        vals = {p: tabs[p].values[i] for p, i in idx.items()}
        lo, hi = solve_interval(problem, solved, vals)
        a = np.searchsorted(sol_vals, lo * (1 - _WIDEN), side="left")
        b = np.searchsorted(sol_vals, hi * (1 + _WIDEN), side="right")
        total += int(np.maximum(b - a, 0).sum())
        if total > max_designs * 1.01 + 100:
            raise SpecError(
                f"the search holds more than {max_designs:,} feasible designs; narrow the part "
                "ranges or the frequency window, or raise search.max_designs",
                key="search.max_designs",
            )
        owner, js = expand_ranges(np.arange(len(flat)), a, b)
        if len(owner) == 0:
            continue
        hit = {p: i[owner].astype(np.int32) for p, i in idx.items()}
        hit[solved] = js.astype(np.int32)
        del owner, js, idx, vals
        out.append(_exact(problem, hit))
    if out.size > max_designs:
        raise SpecError(
            f"the search holds {out.size:,} feasible designs, more than {max_designs:,}; "
            "narrow the part ranges or the frequency window, or raise search.max_designs",
            key="search.max_designs",
        )
    return out.designs()


class _Buffer:
    """Growable struct of arrays for the search's result (amortised doubling)."""

    def __init__(self, positions: tuple[str, ...], capacity: int) -> None:
        self.size = 0
        self.idx = {p: np.empty(capacity, dtype=np.int32) for p in positions}
        self.f = np.empty(capacity)
        self.beta = np.empty(capacity)

    def append(self, d: Designs) -> None:
        n, k = self.size, len(d)
        if n + k > len(self.f):
            cap = max(2 * len(self.f), n + k)
            for p, a in self.idx.items():
                self.idx[p] = _grown(a, n, cap)
            self.f, self.beta = _grown(self.f, n, cap), _grown(self.beta, n, cap)
        for p, a in self.idx.items():
            a[n : n + k] = d.idx[p]
        self.f[n : n + k] = d.f_nominal
        self.beta[n : n + k] = d.beta
        self.size = n + k

    def designs(self) -> Designs:
        """The filled part, as views (no copy: pages of the spare capacity never
        written are never resident)."""
        n = self.size
        return Designs({p: a[:n] for p, a in self.idx.items()}, self.f[:n], self.beta[:n])


def _grown(a: np.ndarray, n: int, cap: int) -> np.ndarray:
    b = np.empty(cap, dtype=a.dtype)
    b[:n] = a[:n]
    return b


def _exact(problem: Problem, idx: dict[str, np.ndarray]) -> Designs:
    """Keep the index tuples whose frequency and feedback fraction really meet the spec.

    Uses the same functions as :func:`brute_force`, so both agree bit for bit.
    """
    vals = {p: problem.tables[p].values[i] for p, i in idx.items()}
    f = board_frequency(problem.topology, vals, problem.parasitics)
    beta = board_beta(problem.topology, vals, problem.parasitics)
    ok = (f >= problem.f_min) & (f <= problem.f_max)
    ok &= (beta >= problem.beta_min) & (beta <= problem.beta_max)
    return Designs({p: i[ok] for p, i in idx.items()}, f[ok], beta[ok])


def sort_designs(problem: Problem, d: Designs) -> Designs:
    """The same designs ordered by their index tuple (positions in topology order)."""
    order = np.lexsort([d.idx[p] for p in reversed(problem.topology.positions)])
    return d.take(order)


def brute_force(problem: Problem) -> Designs:
    """Full-cube enumeration: the reference the exact search must equal (tests only)."""
    topo = problem.topology
    sizes = [len(problem.tables[p]) for p in topo.positions]
    grids = np.meshgrid(*[np.arange(n, dtype=np.int32) for n in sizes], indexing="ij")
    idx = {p: g.ravel() for p, g in zip(topo.positions, grids, strict=True)}
    return _exact(problem, idx)
