"""Exact search of the discrete value space.

Every combination of table values whose nominal board frequency lies in
``[f_min, f_max]`` and whose feedback fraction lies in ``[beta_min, beta_max]``
is found, without enumerating the full cube:

1. the (C1, C2) pairs that satisfy the feedback window are found per C1 with
   ``searchsorted`` (beta is monotone in C2);
2. the remaining positions but one are enumerated with those pairs, in chunks;
3. for the last ("solved") position the frequency window is solved
   analytically into a value interval, and ``searchsorted`` gives its index
   range;
4. the hits are re-checked with the very same frequency function a brute force
   would use, so the result set is exactly the brute-force set (a property test
   shows this).

The solved position is L, or C3 in a Clapp tank when that makes the outer
enumeration smaller. Results are a struct of arrays in a deterministic order
(the order of the enumeration; :func:`sort_designs` orders by index tuple).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from picker.errors import SpecError
from picker.tank.base import TWO_PI, Parasitics, Topology, board_beta, board_frequency

#: Outer combinations handled per chunk (bounds memory to a few tens of MB).
CHUNK = 1 << 20
#: Relative widening of analytic bounds before the exact re-check.
_WIDEN = 1e-9


@dataclass(frozen=True)
class ValueTable:
    """The values one position may take, sorted ascending, with per-value facts.

    Attributes
    ----------
    values : (n,) float, SI units, sorted ascending.
    tol : (n,) float, relative tolerance of each value.
    source : str, series name ("E12"), "list" or "stock".
    part_id : (n,) object, a stock part id or "" for a series value.
    price : (n,) float, unit price (NaN when unknown).
    stock_qty : (n,) float, quantity on hand (inf when unlimited).
    second : (n,) float or None, value of a second part in parallel (0 where
        the entry is a single part); ``values`` is then the pair's total and
        ``values - second`` the first part.
    second_tol : (n,) float or None, relative tolerance of the second part.
    second_id : (n,) object or None, stock part id of the second part ("" for a
        series value or a single part); set with ``second``.
    """

    values: np.ndarray
    tol: np.ndarray
    source: str = "list"
    part_id: np.ndarray | None = None
    price: np.ndarray | None = None
    stock_qty: np.ndarray | None = None
    second: np.ndarray | None = None
    second_tol: np.ndarray | None = None
    second_id: np.ndarray | None = None

    def __post_init__(self) -> None:
        n = len(self.values)
        if self.second is not None and self.second_id is None:
            object.__setattr__(self, "second_id", np.full(n, "", dtype=object))
        if self.part_id is None:
            object.__setattr__(self, "part_id", np.full(n, "", dtype=object))
        if self.price is None:
            object.__setattr__(self, "price", np.full(n, np.nan))
        if self.stock_qty is None:
            object.__setattr__(self, "stock_qty", np.full(n, np.inf))
        if n and np.any(np.diff(self.values) < 0):
            raise ValueError("ValueTable.values must be sorted ascending")

    def __len__(self) -> int:
        return len(self.values)


def uniform_table(values: np.ndarray, tol: float, source: str) -> ValueTable:
    """A table where every value carries the same relative tolerance."""
    v = np.asarray(values, dtype=float)
    return ValueTable(v, np.full(v.shape, float(tol)), source)


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


def _beta_pairs(problem: Problem) -> tuple[np.ndarray, np.ndarray]:
    """All (i1, i2) with beta_min <= beta(C1, C2) <= beta_max, exactly."""
    par = problem.parasitics
    c1 = problem.tables["C1"].values
    c2 = problem.tables["C2"].values
    c1e = c1 + par.c1_shunt
    # beta = c1e / (c2 + c2_shunt) falls as C2 grows.
    lo = c1e / problem.beta_max * (1 - _WIDEN) - par.c2_shunt
    hi = c1e / problem.beta_min * (1 + _WIDEN) - par.c2_shunt
    a = np.searchsorted(c2, lo, side="left")
    b = np.searchsorted(c2, hi, side="right")
    i1, i2 = _expand_ranges(np.arange(len(c1)), a, b)
    beta = board_beta({"C1": c1[i1], "C2": c2[i2]}, par)
    ok = (beta >= problem.beta_min) & (beta <= problem.beta_max)
    return i1[ok], i2[ok]


def _expand_ranges(owner: np.ndarray, start: np.ndarray, stop: np.ndarray):
    """For each owner k, emit (owner[k], j) for j in [start[k], stop[k])."""
    count = np.maximum(stop - start, 0)
    total = int(count.sum())
    rep_owner = np.repeat(owner, count)
    # j = start[k] + (position within the run)
    offsets = np.arange(total) - np.repeat(np.cumsum(count) - count, count)
    return rep_owner, np.repeat(start, count) + offsets


def _solved_position(problem: Problem, n_pairs: int) -> str:
    t = problem.topology
    if "C3" not in t.positions:
        return "L"
    # Outer size when solving L is pairs*|C3|; when solving C3 it is pairs*|L|.
    return "C3" if len(problem.tables["L"]) < len(problem.tables["C3"]) else "L"


def _solve_interval(problem: Problem, solved: str, vals: dict[str, np.ndarray]):
    """Interval [lo, hi] of the solved position's value that puts f in the window."""
    par = problem.parasitics
    w_min = (TWO_PI * problem.f_min) ** 2
    w_max = (TWO_PI * problem.f_max) ** 2
    topo = problem.topology
    c1e = vals["C1"] + par.c1_shunt
    c2e = vals["C2"] + par.c2_shunt
    if solved == "L":
        caps = [c1e, c2e] + ([vals["C3"]] if "C3" in topo.positions else [])
        ce = 1.0 / sum(1.0 / c for c in caps) + par.stray
        lo = 1.0 / (w_max * ce * par.l_scale)
        hi = 1.0 / (w_min * ce * par.l_scale)
        return lo, hi
    # solved == "C3": need C_series in [cs_lo, cs_hi]
    lt = vals["L"] * par.l_scale
    cs_lo = 1.0 / (w_max * lt) - par.stray
    cs_hi = 1.0 / (w_min * lt) - par.stray
    a = 1.0 / c1e + 1.0 / c2e
    with np.errstate(divide="ignore", invalid="ignore"):
        inv_lo = 1.0 / cs_hi - a  # smallest 1/C3 -> largest C3
        inv_hi = 1.0 / cs_lo - a
        c3_hi = np.where((cs_hi > 0) & (inv_lo > 0), 1.0 / inv_lo, np.inf)
        c3_lo = np.where((cs_lo > 0) & (inv_hi > 0), 1.0 / inv_hi, np.inf)
    c3_lo = np.where(cs_hi <= 0, np.inf, np.where(cs_lo <= 0, 0.0, c3_lo))
    return c3_lo, c3_hi


def estimate_outer(problem: Problem) -> tuple[int, str]:
    """Outer combinations the search will visit, and the solved position."""
    i1, _ = _beta_pairs(problem)
    solved = _solved_position(problem, len(i1))
    rest = [p for p in problem.topology.positions if p not in ("C1", "C2", solved)]
    n = len(i1)
    for p in rest:
        n *= len(problem.tables[p])
    return n, solved


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
    i1, i2 = _beta_pairs(problem)
    solved = _solved_position(problem, len(i1))
    rest = [p for p in problem.topology.positions if p not in ("C1", "C2", solved)]
    n_outer = len(i1) * int(np.prod([len(problem.tables[p]) for p in rest], dtype=np.int64))
    if n_outer == 0:
        return 0, 0
    flat = np.linspace(0, n_outer - 1, min(n_outer, sample)).astype(np.int64)
    flat = flat[np.concatenate(([True], np.diff(flat) > 0))]  # sorted: drop repeats cheaply
    idx: dict[str, np.ndarray] = {}
    if rest:
        k = len(problem.tables[rest[0]])
        pair, idx[rest[0]] = flat // k, flat % k
    else:
        pair = flat
    idx["C1"], idx["C2"] = i1[pair], i2[pair]
    vals = {p: problem.tables[p].values[i] for p, i in idx.items()}
    lo, hi = _solve_interval(problem, solved, vals)
    sol = problem.tables[solved].values
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
    check_size(problem, max_designs=max_designs, max_combinations=max_combinations)
    topo = problem.topology
    tabs = problem.tables
    i1, i2 = _beta_pairs(problem)
    solved = _solved_position(problem, len(i1))
    rest = [p for p in topo.positions if p not in ("C1", "C2", solved)]
    # Outer grid: pairs x rest (at most one rest position: C3 or L for Clapp).
    outer_sizes = [len(i1)] + [len(tabs[p]) for p in rest]
    n_outer = int(np.prod(outer_sizes))
    found: list[dict[str, np.ndarray]] = []
    total = 0
    sol_vals = tabs[solved].values
    for start in range(0, n_outer, CHUNK):
        flat = np.arange(start, min(start + CHUNK, n_outer), dtype=np.int64)
        idx: dict[str, np.ndarray] = {}
        if rest:
            k = len(tabs[rest[0]])
            pair = flat // k
            idx[rest[0]] = flat % k
        else:
            pair = flat
        idx["C1"], idx["C2"] = i1[pair], i2[pair]
        vals = {p: tabs[p].values[i] for p, i in idx.items()}
        lo, hi = _solve_interval(problem, solved, vals)
        a = np.searchsorted(sol_vals, lo * (1 - _WIDEN), side="left")
        b = np.searchsorted(sol_vals, hi * (1 + _WIDEN), side="right")
        total += int(np.maximum(b - a, 0).sum())
        if total > max_designs * 1.01 + 100:
            raise SpecError(
                f"the search holds more than {max_designs:,} feasible designs; narrow the part "
                "ranges or the frequency window, or raise search.max_designs",
                key="search.max_designs",
            )
        owner, js = _expand_ranges(np.arange(len(flat)), a, b)
        if len(owner) == 0:
            continue
        hit = {p: i[owner].astype(np.int32) for p, i in idx.items()}
        hit[solved] = js.astype(np.int32)
        del owner, js, idx, vals
        found.append(_exact(problem, hit))
    if not found:
        empty = np.zeros(0)
        return Designs({p: np.zeros(0, dtype=np.int32) for p in topo.positions}, empty, empty)
    out = Designs(
        {p: np.concatenate([d.idx[p] for d in found]) for p in topo.positions},
        np.concatenate([d.f_nominal for d in found]),
        np.concatenate([d.beta for d in found]),
    )
    if len(out) > max_designs:
        raise SpecError(
            f"the search holds {len(out):,} feasible designs, more than {max_designs:,}; "
            "narrow the part ranges or the frequency window, or raise search.max_designs",
            key="search.max_designs",
        )
    return out


def _exact(problem: Problem, idx: dict[str, np.ndarray]) -> Designs:
    """Keep the index tuples whose frequency and feedback fraction really meet the spec.

    Uses the same functions as :func:`brute_force`, so both agree bit for bit.
    """
    vals = {p: problem.tables[p].values[i] for p, i in idx.items()}
    f = board_frequency(problem.topology, vals, problem.parasitics)
    beta = board_beta(vals, problem.parasitics)
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
