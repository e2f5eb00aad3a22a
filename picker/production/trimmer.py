"""Trimmer sizing: the capacitance range that lets a stated share of boards be tuned.

When no fixed design reaches the yield target, a trimmer capacitor is added
either **across the tank** (``placement="across"``: in parallel with the whole
effective capacitance) or, in a Clapp, **at C3** (``placement="C3"``: the
trimmer in parallel with a fixed C3 part, which may be left out).

For each simulated board (its own L and capacitors, tolerance and drift
included) the tank frequency f = 1/(2π√(L·C)) (Thomson) fixes the capacitance
that puts it at f_max, at f_min and at the window centre (f_min + f_max)/2; the
board can be tuned into the window if the trimmer's range overlaps the
interval [need_lo, need_hi] of extra capacitance it needs. In a Clapp the
chain 1/C_eff = 1/C1 + 1/C2 + 1/C3 is solved for C3.

Sizing: re-centre the fixed part (try each candidate series value for it, so
that the boards' needs start above the trimmer's minimum), then take the
smallest trimmer of the table (``series_data/trimmers.csv``; common catalogue
ranges, no single source) that covers the requested share of boards (default
0.997, the 3-sigma share). Shapes: board arrays are (samples,).
"""

from __future__ import annotations

import functools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from picker.errors import SpecError
from picker.parts.series import data_dir
from picker.tank import TOPOLOGIES
from picker.tank.base import TWO_PI, Topology, series_capacitance

#: "across" the whole tank, or in parallel with a topology's ``trimmer_position``
#: (C3 of a Clapp tank), from the registry.
PLACEMENTS = (
    "across",
    *sorted({t.trimmer_position for t in TOPOLOGIES.values() if t.trimmer_position}),
)


@dataclass(frozen=True)
class Trimmer:
    """A trimmer's adjustment range in F."""

    c_min: float
    c_max: float

    @property
    def span(self) -> float:
        return self.c_max - self.c_min


def parse_trimmer_table(text: str, *, file: str = "trimmers.csv") -> tuple[Trimmer, ...]:
    """Parse the trimmer table (``#`` comments, header ``min_pf,max_pf``, one range a line).

    Returns
    -------
    tuple of Trimmer
        Sorted by span, then by maximum.
    """
    rows = [
        (i, ln.strip())
        for i, ln in enumerate(text.splitlines(), 1)
        if ln.strip() and not ln.lstrip().startswith("#")
    ]
    if not rows or rows[0][1].replace(" ", "").lower() != "min_pf,max_pf":
        raise SpecError("expected a header line 'min_pf,max_pf'", file=file)
    out = []
    for i, ln in rows[1:]:
        parts = ln.split(",")
        try:
            lo, hi = (float(x) * 1e-12 for x in parts)
        except ValueError:
            raise SpecError(
                f"expected two numbers in pF (min,max); got {ln!r}", file=file, key=f"row {i}"
            ) from None
        if not 0 <= lo < hi:
            raise SpecError(f"expected 0 <= min < max; got {ln!r}", file=file, key=f"row {i}")
        out.append(Trimmer(lo, hi))
    return tuple(sorted(out, key=lambda t: (t.span, t.c_max)))


@functools.cache
def load_trimmer_table() -> tuple[Trimmer, ...]:
    """The shipped table of common trimmer ranges (read once, cached)."""
    text = (data_dir() / "trimmers.csv").read_text(encoding="utf-8")
    return parse_trimmer_table(text)


def tank_capacitance(l: ArrayLike, f: ArrayLike) -> np.ndarray:
    """Tank capacitance that resonates with ``l`` at ``f``: C = 1/((2πf)²·L) (Thomson)."""
    return 1.0 / ((TWO_PI * np.asarray(f, dtype=float)) ** 2 * np.asarray(l, dtype=float))


def across_need(
    c_eff: ArrayLike, l: ArrayLike, f_min: float, f_max: float
) -> tuple[np.ndarray, ...]:
    """Extra capacitance across the tank each board needs.

    Parameters
    ----------
    c_eff : array, shape (samples,)
        Each board's effective tank capacitance without the trimmer (stray included), F.
    l : array, shape (samples,)
        Each board's inductance, H.
    f_min, f_max : float
        The frequency window, Hz.

    Returns
    -------
    (need_lo, need_hi, need_centre) : arrays, shape (samples,)
        Trimmer values putting the board at f_max, f_min and the window centre.
    """
    c = np.asarray(c_eff, dtype=float)
    f_c = 0.5 * (f_min + f_max)
    return (
        tank_capacitance(l, f_max) - c,
        tank_capacitance(l, f_min) - c,
        tank_capacitance(l, f_c) - c,
    )


def _series_element(c_target: ArrayLike, c_other: ArrayLike, stray: float) -> np.ndarray:
    """C3 that makes series(C_other, C3) + stray equal c_target (∞ when out of reach)."""
    cs = np.asarray(c_target, dtype=float) - stray
    inv = 1.0 / np.where(cs > 0, cs, np.nan) - 1.0 / np.asarray(c_other, dtype=float)
    out = np.where(inv > 0, 1.0 / np.where(inv > 0, inv, 1.0), np.inf)
    return np.where(cs > 0, out, 0.0)


def series_need(
    c_other: ArrayLike,
    c_fixed: ArrayLike,
    l: ArrayLike,
    f_min: float,
    f_max: float,
    stray: float = 0.0,
) -> tuple[np.ndarray, ...]:
    """Trimmer capacitance needed at C3 (in parallel with a fixed part ``c_fixed``).

    ``c_other`` is series(C1, C2) of each board; the chain
    1/C_eff = 1/C_other + 1/C3 (REFERENCES.md, Clapp) is solved for C3.

    Returns
    -------
    (need_lo, need_hi, need_centre) : arrays, shape (samples,)
        ``need_hi`` is ``inf`` for a board that no C3 can pull down to f_min.
    """
    f_c = 0.5 * (f_min + f_max)
    cf = np.asarray(c_fixed, dtype=float)
    return tuple(
        _series_element(tank_capacitance(l, f), c_other, stray) - cf for f in (f_max, f_min, f_c)
    )


def tunable_share(need_lo: ArrayLike, need_hi: ArrayLike, c_min: float, c_max: float) -> float:
    """Share of boards whose needed interval overlaps the trimmer range [c_min, c_max]."""
    lo, hi = np.asarray(need_lo), np.asarray(need_hi)
    return float(np.mean((hi >= c_min) & (lo <= c_max)))


def required_range(
    need_lo: ArrayLike, need_hi: ArrayLike, share: float = 0.997, *, steps: int = 101
) -> tuple[float, float]:
    """Narrowest range [a, b] that overlaps the needs of at least ``share`` of the boards.

    The excluded boards are split between the low and the high end; ``steps``
    splits are tried and for each the exact b is found by partial sorting.

    Returns
    -------
    (a, b) : floats, F (``a`` may be negative: the fixed part needs re-centring).
    """
    lo, hi = np.asarray(need_lo, dtype=float), np.asarray(need_hi, dtype=float)
    n = lo.size
    k = int(np.ceil(share * n - 1e-9))
    if not 0 < k <= n:
        raise ValueError(f"share {share} of {n} boards is empty or more than all")
    best = (-np.inf, np.inf)
    for q in np.linspace(0.0, (n - k) / n, steps):
        a = float(np.quantile(hi, q, method="lower"))  # at least n·(1-q) boards have hi >= a
        sel = lo[hi >= a]
        if sel.size < k:
            continue
        b = max(float(np.partition(sel, k - 1)[k - 1]), a)  # k-th smallest need among them
        if b - a < best[1] - best[0]:
            best = (a, b)
    return best


def choose_trimmer(
    need_lo: ArrayLike,
    need_hi: ArrayLike,
    share: float = 0.997,
    table: Sequence[Trimmer] | None = None,
    margin: float = 0.0,
) -> tuple[Trimmer | None, float]:
    """Smallest trimmer of ``table`` that lets at least ``share`` of the boards be tuned.

    ``margin`` shrinks each range to [c_min·(1+margin), c_max·(1−margin)] for the
    trimmer's own part-to-part spread.

    Returns
    -------
    (Trimmer or None, float)
        The trimmer (``None`` if none suffices) and the share it reaches (the
        best share of any trimmer when none suffices).
    """
    table = load_trimmer_table() if table is None else tuple(table)
    best_share = 0.0
    for t in sorted(table, key=lambda t: (t.span, t.c_max)):
        s = tunable_share(need_lo, need_hi, t.c_min * (1 + margin), t.c_max * (1 - margin))
        if s >= share:
            return t, s
        best_share = max(best_share, s)
    return None, best_share


@dataclass(frozen=True)
class TrimmerAdvice:
    """Result of :func:`size_trimmer`.

    Attributes
    ----------
    placement : str
        ``"across"`` or ``"C3"``.
    position : str or None
        The re-centred fixed part's position (``None``: nothing re-centred).
    fixed_value : float or None
        Its new nominal value, F (0.0: leave the fixed part out, trimmer alone).
    trimmer : Trimmer or None
        Smallest table trimmer reaching ``share`` (``None``: none does).
    tunable : float
        Share of simulated boards that the trimmer can tune into the window.
    required : (float, float)
        Narrowest range covering ``share`` of boards with this fixed value, F.
    share : float
        The share asked for.
    """

    placement: str
    position: str | None
    fixed_value: float | None
    trimmer: Trimmer | None
    tunable: float
    required: tuple[float, float]
    share: float


def intersect_needs(need_lo: ArrayLike, need_hi: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Needs over a temperature axis: one trimmer setting must serve every temperature.

    Parameters
    ----------
    need_lo, need_hi : arrays, shape (n_temps, samples)
        Each board's needed interval at each temperature (the trimmer's own
        drift is not modelled).

    Returns
    -------
    (need_lo, need_hi) : arrays, shape (samples,)
        The intersection [max lo, min hi]; a board whose intervals do not
        overlap gets [inf, inf], which no trimmer reaches.
    """
    lo = np.max(np.asarray(need_lo, dtype=float), axis=0)
    hi = np.min(np.asarray(need_hi, dtype=float), axis=0)
    empty = ~(lo <= hi)
    return np.where(empty, np.inf, lo), np.where(empty, np.inf, hi)


def _needs(
    topology: Topology,
    values: Mapping[str, np.ndarray],
    placement: str,
    f_min: float,
    f_max: float,
    stray: float,
    position: str | None,
) -> tuple[np.ndarray, ...]:
    """Each board's needed trimmer interval and centre (:func:`across_need`, :func:`series_need`)."""
    l = topology.l_eff(values)
    if placement == "across" or position is None:
        return across_need(topology.c_eff(values, stray), l, f_min, f_max)
    others = [p for p in topology.capacitors if p != position]
    c_other = series_capacitance(*(values[p] for p in others))
    return series_need(c_other, values[position], l, f_min, f_max, stray)


def size_trimmer(
    topology: Topology,
    nominal: Mapping[str, float],
    factors: Mapping[str, np.ndarray],
    f_min: float,
    f_max: float,
    *,
    placement: str = "across",
    recentre: str | None = None,
    recentre_values: Sequence[float] = (),
    share: float = 0.997,
    table: Sequence[Trimmer] | None = None,
    margin: float = 0.0,
    stray: float = 0.0,
) -> TrimmerAdvice:
    """Size a trimmer for one design and re-centre its fixed part.

    Parameters
    ----------
    topology : Topology
    nominal : mapping position -> float
        The design's nominal values, SI units.
    factors : mapping position -> array, shape (samples,) or (n_temps, samples)
        Each simulated board's value / nominal (1 + tolerance deviation, times
        1 + drift at the temperature of interest). With a temperature axis a
        board counts as tunable when one trimmer setting keeps it in the
        window at every temperature (:func:`intersect_needs`).
    f_min, f_max : float
        The window, Hz.
    placement : {"across", "C3"}
        Trimmer across the tank, or in parallel with a fixed C3 (Clapp).
    recentre : str, optional
        Position whose nominal is re-chosen; for ``"C3"`` it is always "C3".
    recentre_values : sequence of float
        Candidate nominal values for it (e.g. the series values below the
        current one). The current value is always tried; for ``"C3"`` so is 0
        (no fixed part).
    share, table, margin
        As for :func:`choose_trimmer`.
    stray : float
        Stray capacitance across the tank, F.

    Returns
    -------
    TrimmerAdvice
        The smallest trimmer reaching ``share``; among fixed values giving the
        same trimmer, the one nearest the current value (log distance).
    """
    if placement not in PLACEMENTS:
        raise SpecError(
            f"expected a trimmer placement, one of {', '.join(PLACEMENTS)}; got {placement!r}"
        )
    at_part = placement != "across"  # in parallel with the topology's trimmer_position
    if at_part:
        if placement != topology.trimmer_position:
            owners = [
                t.name.capitalize() for t in TOPOLOGIES.values() if t.trimmer_position == placement
            ]
            raise SpecError(
                f"a trimmer at {placement} needs the {' or '.join(owners)} topology",
                key="trimmer.placement",
            )
        recentre = placement
    table = load_trimmer_table() if table is None else tuple(table)
    cands = (
        [None]
        if recentre is None
        else sorted({float(nominal[recentre]), *map(float, recentre_values)})
    )
    if at_part:
        cands = sorted({0.0, *cands})

    def dist(v: float | None) -> float:
        if v is None or recentre is None:
            return 0.0
        return abs(np.log(max(v, 1e-18) / nominal[recentre]))

    best = None
    for v in cands:
        nom = dict(nominal)
        if v is not None and recentre is not None:
            nom[recentre] = v
        vals = {p: nom[p] * np.asarray(factors[p], dtype=float) for p in topology.positions}
        lo, hi, _ = _needs(topology, vals, placement, f_min, f_max, stray, recentre)
        if np.ndim(lo) == 2:
            lo, hi = intersect_needs(lo, hi)
        trim, got = choose_trimmer(lo, hi, share, table, margin)
        rank = (
            trim is None,
            trim.span if trim else 0.0,
            trim.c_max if trim else 0.0,
            -got,
            dist(v),
        )
        if best is None or rank < best[0]:
            best = (rank, v, trim, got, lo, hi)
    assert best is not None  # cands is never empty
    _, v, trim, got, lo, hi = best
    return TrimmerAdvice(placement, recentre, v, trim, got, required_range(lo, hi, share), share)
