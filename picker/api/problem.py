"""Spec -> the core's inputs: the one place where the Spec meets the core.

Every adapter here reads a validated :class:`~picker.spec.model.Spec` and
builds what the core, circuit and production layers take as plain objects:
the value table of each position, the search :class:`~picker.core.search.Problem`,
the per-position :class:`~picker.core.montecarlo.PartVariation` and
temperature grid, the board model, the whole
:class:`~picker.core.montecarlo.Simulation` and the run's common random
numbers. Nothing below this layer imports the spec.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.core.montecarlo import REFERENCE_TEMPERATURE, PartVariation, Simulation
from picker.core.sampling import RandomRows, random_rows
from picker.core.search import Problem
from picker.errors import SpecError
from picker.parts import series as series_mod
from picker.parts.drift import check_range, material_of, temperature_grid
from picker.parts.pairs import pair_table
from picker.parts.table import ValueTable
from picker.spec.load import NORMAL_TOL_MAX, materials_like
from picker.spec.model import PartSpec, Spec
from picker.spec.production import candidate_values
from picker.spec.stock import stock_table, unit_price
from picker.tank.board import Parasitics, board_feedback_bounds
from picker.units import format_percent, format_quantity

if TYPE_CHECKING:
    from picker.circuit.loaded import LoadedModel

__all__ = [
    "amplifier_params_of",
    "board_model_of",
    "build_problem",
    "GivenPart",
    "GivenValue",
    "given_table",
    "given_tables",
    "parasitics_of",
    "part_table",
    "part_variations",
    "random_inputs",
    "recentre_values",
    "simulation_of",
    "temperature_grid_of",
    "warnings_for",
    "with_run_settings",
]


# ---------------------------------------------------------------- value tables and problem


def part_table(spec: Spec, pos: str) -> ValueTable:
    """The value table of one position: its series range, value list or stock parts.

    A stock position holds the stock list's parts of its kind within ``min`` /
    ``max`` (tolerance at most ``tolerance``, its ``dielectric``, rated at least
    ``voltage_rating``), with their ids, on-hand quantities and unit prices at
    the ``[cost] build_quantity`` break. A series or list position takes its
    ``price`` key (NaN without). With ``parallel = true`` the table holds every
    single part and every pair (:func:`picker.parts.pairs.pair_table`).
    """
    part = spec.parts[pos]
    if part.stock_list is not None:
        st = stock_table(
            part.stock_list,
            pos[0],
            part.min or 0.0,
            part.max or np.inf,
            tolerance_max=part.tolerance,
            dielectric=materials_like(part.stock_list, part),
            min_voltage=part.voltage_rating,
            qty=spec.cost.build_quantity,
        )
        table = ValueTable(
            st["values"], st["tol"], "stock", st["part_id"], st["price"], st["stock_qty"]
        )
    else:
        # validated: a series position has its min and max, every position here a tolerance
        lo, hi, tol = part.min, part.max, part.tolerance
        assert tol is not None
        if part.series is not None:
            assert lo is not None and hi is not None
            vals = series_mod.expand(part.series, lo, hi)
            source = part.series
        else:
            vals, source = np.asarray(part.values, dtype=float), "list"
        price = class_price(part, float(tol))
        table = ValueTable(
            vals,
            np.full(vals.shape, float(tol)),
            source,
            price=np.full(vals.shape, float(price)),
        )
    if part.parallel:
        try:
            table = pair_table(table, part.pair_ratio_max)
        except SpecError as exc:  # too many pairs: named at the spec's key
            raise SpecError(
                exc.message, file=spec.source or None, key=f"parts.{pos}.parallel"
            ) from None
    return table


#: What ``evaluate`` may be given for one position: a value (SI), or a parallel pair
#: ``(a, b)`` of two values whose total is ``a + b``.
GivenValue = float | tuple[float, float]
#: A stock part id for a position, or two ids (``"A+B"`` or ``("A", "B")``) for a pair.
GivenPart = str | tuple[str, str]


def class_price(part: PartSpec, tol: float) -> float:
    """A series or list part's unit price: its ``price``, else the ``prices`` entry of
    its tolerance class (``prices = { "5 %" = 0.04 }`` for a 5 % part), else NaN."""
    if part.price is not None:
        return float(part.price)
    for option, price in part.prices or ():
        if not isinstance(option, str) and abs(float(option) - tol) <= 1e-9 * max(tol, 1e-12):
            return float(price)
    return float("nan")


@dataclass(frozen=True)
class _Pick:
    """One part of a given design: value, tolerance, id, unit price, quantity on hand."""

    value: float
    tol: float
    part_id: str = ""
    price: float = float("nan")
    qty: float = float("inf")
    source: str = "given"


def _same(a: float, b: float) -> bool:
    # 1e-9 relative: the same value parsed two ways ("4.7n" and "4.7 nF")
    return abs(a / b - 1.0) < 1e-9


def _stock_single(spec: Spec, pos: str) -> ValueTable:
    """The position's stock parts as single parts (no pairs)."""
    part = spec.parts[pos]
    single = spec.model_copy(
        update={"parts": {**spec.parts, pos: part.model_copy(update={"parallel": False})}}
    )
    return part_table(single, pos)


def _pick_by_id(spec: Spec, pos: str, part_id: str, value: float | None) -> _Pick:
    """The stock part ``part_id`` at ``pos`` (any part of the list of the right kind)."""
    part = spec.parts[pos]
    stock = part.stock_list
    key = f"--part {pos}"
    if stock is None:
        raise SpecError(
            f"parts.{pos} has no stock list, so it has no part ids; got {part_id!r}", key=key
        )
    i = stock.index.get(part_id)
    if i is None:
        raise SpecError(f"expected a part id from the stock list; got {part_id!r}", key=key)
    kind = spec.topo.unit(pos)
    if {"F": "C", "H": "L"}.get(kind) != str(stock.kind[i]):
        what = {"F": "a capacitor", "H": "an inductor"}
        raise SpecError(f"part {part_id!r} is not {what[kind]}, as {pos} needs", key=key)
    v = float(stock.value[i])
    if value is not None and not _same(v, value):
        raise SpecError(
            f"part {part_id!r} is {format_quantity(v, kind)}, not "
            f"{format_quantity(value, kind)} as --set says",
            key=key,
        )
    price = float(unit_price(stock, i, spec.cost.build_quantity)[0])
    return _Pick(v, float(stock.tol[i]), part_id, price, float(stock.on_hand[i]), "stock")


def _pick_value(spec: Spec, pos: str, value: float, tol: float | None, notes: list[str]) -> _Pick:
    """The part for ``value`` at ``pos``: a stock part of that value (of tolerance ``tol``
    when given, the cheapest otherwise) or a part of the position's series or list."""
    part = spec.parts[pos]
    unit = spec.topo.unit(pos)
    if part.stock_list is not None:
        t = _stock_single(spec, pos)
        hit = np.flatnonzero(np.abs(t.values / value - 1) < 1e-9)
        if tol is not None:
            at_tol = hit[np.abs(t.tol[hit] - tol) <= 1e-9 * max(tol, 1e-12)]
            if hit.size and not at_tol.size:
                held = ", ".join(sorted({format_percent(float(x)) for x in t.tol[hit]}))
                notes.append(
                    f"parts.{pos}: the stock list holds {format_quantity(value, unit)} only at "
                    f"{held}; evaluated a {format_percent(tol)} part not in the stock list "
                    "(no part id or price)"
                )
            hit = at_tol
        if hit.size:
            i = int(hit[0])  # the table is sorted by value, then price, then id
            tols = {float(x) for x in t.tol[hit]}
            if tol is None and len(tols) > 1:
                others = ", ".join(
                    f"{t.part_id[j]} {format_percent(float(t.tol[j]))}" for j in hit[1:]
                )
                notes.append(
                    f"parts.{pos}: {format_quantity(value, unit)} is in the stock list at "
                    f"several tolerances; evaluated the cheapest, {t.part_id[i]} "
                    f"{format_percent(float(t.tol[i]))} (also: {others}); choose one with "
                    f"--tol {pos}=... or --part {pos}=ID"
                )
            return _Pick(
                value,
                float(t.tol[i]),
                str(t.part_id[i]),
                float(t.price[i]),
                float(t.stock_qty[i]),
                "stock",
            )
        tol = part.tolerance if tol is None else tol
        if tol is None:
            raise SpecError(
                f"{format_quantity(value, unit)} is not in the stock list of parts.{pos}; "
                f"give its tolerance (--tol {pos}=5%)",
                key="--set",
            )
        return _Pick(value, float(tol))
    tol = part.tolerance if tol is None else tol
    assert tol is not None  # validated: a series or list position has a tolerance
    src = part.series if part.series and series_mod.is_member(part.series, value) else "given"
    price = class_price(part, float(tol))
    return _Pick(value, float(tol), price=price, source=src)


def _as_pair(x: GivenValue | None) -> tuple[float, ...] | None:
    if x is None:
        return None
    if isinstance(x, tuple | list):
        return tuple(float(v) for v in x)
    return (float(x),)


def _ids(x: GivenPart | None) -> tuple[str, ...] | None:
    if x is None:
        return None
    if isinstance(x, str):
        return tuple(s.strip() for s in x.split("+"))
    return tuple(str(s).strip() for s in x)


def given_table(
    spec: Spec,
    pos: str,
    value: GivenValue | None,
    tol: float | None = None,
    part: GivenPart | None = None,
    notes: list[str] | None = None,
) -> ValueTable:
    """A one-entry table for a given part (or parallel pair) at ``pos`` (``evaluate``).

    ``value`` is a value (SI) or a pair ``(a, b)``; ``part`` a stock part id or
    two ids, from which the value follows when ``value`` is None. A stock
    position without ``part`` takes the stock part of that value whose
    tolerance is ``tol`` when given, else the cheapest (a note in ``notes``
    says when several tolerances were on offer). A value or tolerance the stock
    list does not hold is a part with no id or price. A position with
    ``parallel = true`` gets a pair table (second part 0 for a single part),
    so the Monte Carlo draws the same random columns as ``solve`` and the same
    seed reproduces solve's boards.
    """
    spec_part = spec.parts[pos]
    notes = [] if notes is None else notes
    values = _as_pair(value)
    stock = spec_part.stock_list
    whole = isinstance(part, str) and stock is not None and part.strip() in stock.index
    ids = (str(part).strip(),) if whole else _ids(part)  # an id may itself hold a '+'
    if values is not None and ids is not None and len(values) != len(ids):
        raise SpecError(
            f"--set gives {len(values)} part(s) and --part {len(ids)} for {pos}", key="--part"
        )
    n = len(values) if values is not None else len(ids) if ids is not None else 0
    if n not in (1, 2):
        raise SpecError(f"expected one part or a pair of two for {pos}", key="--set")
    if n == 2 and spec.topo.unit(pos) != "F":
        raise SpecError(f"a parallel pair is for capacitors only; got one for {pos}", key="--set")
    picks = []
    for k in range(n):
        v = None if values is None else values[k]
        if v is not None and not (math.isfinite(v) and v > 0):
            raise SpecError(f"expected a positive value; got {v!r}", key=f"--set {pos}")
        if ids is not None and ids[k]:
            pk = _pick_by_id(spec, pos, ids[k], v)
            if tol is not None and abs(pk.tol - tol) > 1e-9 * tol:
                raise SpecError(
                    f"part {ids[k]!r} is a {format_percent(pk.tol)} part, not "
                    f"{format_percent(tol)} as --tol says",
                    key=f"--tol {pos}",
                )
            picks.append(pk)
        else:
            assert v is not None
            picks.append(_pick_value(spec, pos, v, tol, notes))
    picks.sort(key=lambda q: -q.value)  # the larger part first, as pair_table
    a = picks[0]
    source = a.source if all(q.source == a.source for q in picks) else "given"
    if len(picks) == 1 and not spec_part.parallel:
        return ValueTable(
            np.array([a.value]),
            np.array([a.tol]),
            source,
            np.array([a.part_id], dtype=object),
            np.array([a.price]),
            np.array([a.qty]),
        )
    b = picks[1] if len(picks) == 2 else _Pick(0.0, a.tol)
    same = len(picks) == 2 and a.part_id != "" and a.part_id == b.part_id
    qty = math.floor(a.qty / 2) if same else min(a.qty, b.qty if b.value > 0 else math.inf)
    return ValueTable(
        np.array([a.value + b.value]),
        np.array([a.tol]),
        source,
        np.array([a.part_id], dtype=object),
        np.array([a.price + b.price if b.value > 0 else a.price]),
        np.array([float(qty)]),
        second=np.array([b.value]),
        second_tol=np.array([b.tol]),
        second_id=np.array([b.part_id], dtype=object),
    )


def given_tables(
    spec: Spec,
    values: Mapping[str, GivenValue],
    tolerances: Mapping[str, float] | None = None,
    parts: Mapping[str, GivenPart] | None = None,
) -> tuple[dict[str, ValueTable], list[str]]:
    """One-entry tables for a given design (every position), and notes for the result.

    Each position needs a value in ``values`` or a part id in ``parts``
    (see :func:`given_table`).
    """
    topo = spec.topo
    tolerances, parts = tolerances or {}, parts or {}
    missing = [p for p in topo.positions if p not in values and p not in parts]
    if missing:
        raise SpecError(
            f"expected a value for every position ({', '.join(topo.positions)}); "
            f"missing {', '.join(missing)}",
            key="--set",
        )
    for what, given in (("--set", values), ("--tol", tolerances), ("--part", parts)):
        extra = [p for p in given if p not in topo.positions]
        if extra:
            raise SpecError(
                f"unknown position {', '.join(extra)} for a {topo.name} tank; "
                f"expected {', '.join(topo.positions)}",
                key=what,
            )
    notes: list[str] = []
    tables = {
        p: given_table(spec, p, values.get(p), tolerances.get(p), parts.get(p), notes)
        for p in topo.positions
    }
    for p in topo.positions:  # the spec-level check of spec.load, for the given parts
        part = spec.parts[p]
        if part.lot is not None or (part.distribution or spec.yield_.distribution) != "normal":
            continue
        t = tables[p]
        tol = max(float(t.tol[0]), float(t.second_tol[0]))
        if tol > NORMAL_TOL_MAX:
            raise SpecError(
                f"a normal distribution (sigma = tolerance/3) with a tolerance of "
                f"{format_percent(tol)} draws part values at or below zero in its tail "
                f"(from {NORMAL_TOL_MAX * 100:.1f} %); use distribution = 'uniform' or a tighter "
                f"tolerance",
                key=f"--tol {p}",
            )
    return tables, notes


def parasitics_of(spec: Spec) -> Parasitics:
    """The board and device parasitics of ``[parasitics]``."""
    p = spec.parasitics
    return Parasitics(p.stray, p.c1_shunt, p.c2_shunt, p.l_scale)


def build_problem(
    spec: Spec,
    *,
    f_min: float | None = None,
    f_max: float | None = None,
    beta_min: float | None = None,
    beta_max: float | None = None,
) -> Problem:
    """Turn a validated spec into the core's search problem (optionally relaxed).

    Sized before the search builds anything: a feedback pair of more than
    :data:`MAX_FEEDBACK_PAIRS` (value, value) pairs in the beta window is refused
    here (:func:`check_feedback_pairs`), so memory stays bounded.
    """
    topo = spec.topo
    problem = Problem(
        topology=topo,
        tables={p: part_table(spec, p) for p in topo.positions},
        f_min=spec.frequency.f_min if f_min is None else f_min,
        f_max=spec.frequency.f_max if f_max is None else f_max,
        beta_min=spec.feedback.min if beta_min is None else beta_min,
        beta_max=spec.feedback.max if beta_max is None else beta_max,
        parasitics=parasitics_of(spec),
    )
    check_feedback_pairs(problem, file=spec.source or None)
    return problem


#: Most (output-side, input-side) value pairs of the feedback pair the search may
#: build at once: about 80 bytes each while they are built and checked, 0.8 GB.
MAX_FEEDBACK_PAIRS = 10_000_000


def feedback_pair_count(problem: Problem) -> int:
    """How many value pairs of the feedback pair lie in the beta window (a slight over-count).

    One binary search per output-side value against the input side's sorted
    values, with the window's bounds (:func:`picker.tank.board.board_feedback_bounds`)
    widened by 1e-6: nothing is built.
    """
    out, inp = problem.topology.feedback_pair
    first = problem.tables[out].values
    second = problem.tables[inp].values
    lo, hi = board_feedback_bounds(
        problem.topology, first, problem.beta_min, problem.beta_max, problem.parasitics, widen=1e-6
    )
    a = np.searchsorted(second, lo, side="left")
    b = np.searchsorted(second, hi, side="right")
    return int(np.maximum(b - a, 0).sum())


def check_feedback_pairs(problem: Problem, *, file: str | None = None) -> None:
    """Refuse, before the search, a feedback pair whose beta-window pairs would not fit."""
    n = feedback_pair_count(problem)
    if n > MAX_FEEDBACK_PAIRS:
        out, inp = problem.topology.feedback_pair
        raise SpecError(
            f"the feedback pair {out}, {inp} has about {n:,} value pairs in the beta window, "
            f"more than the {MAX_FEEDBACK_PAIRS:,} the search may hold (about 0.8 GB); "
            f"narrow min and max of {out} and {inp}, the feedback window, or pair_ratio_max",
            file=file,
            key="feedback",
        )


# ---------------------------------------------------------------- how the boards vary


def part_variations(spec: Spec, problem: Problem) -> dict[str, PartVariation]:
    """Per-position distribution, grade, measured lot and drift class (production view).

    Drift is simulated only when ``[yield] temperature`` gives a range:
    without one every board is judged at 25 °C, the reference temperature of
    the ratings, where every drift model is zero.
    """
    ys = spec.yield_
    with_drift = ys.temperature is not None
    out = {}
    for p in problem.topology.positions:
        part = spec.parts[p]
        lot = None
        kind = part.distribution or ys.distribution
        if part.lot_deviations is not None:
            kind, lot = "empirical", np.asarray(part.lot_deviations, dtype=float)
            (nominal,) = candidate_values(part)
            vals = problem.tables[p].values
            if not np.allclose(vals, nominal, rtol=1e-9, atol=0.0):
                raise SpecError(
                    f"the lot was measured on {format_quantity(nominal, part.unit)} parts; "
                    f"this design has {format_quantity(float(vals[0]), part.unit)} at {p}",
                    file=spec.source or None,
                    key=f"parts.{p}.lot",
                )
        grade = part.grade if kind in ("graded", "graded-normal") else None
        out[p] = PartVariation(kind, grade, lot, material_of(part, with_drift))
    return out


def temperature_grid_of(spec: Spec, parts: dict[str, PartVariation]) -> np.ndarray:
    """Temperatures (°C) a board must pass at: :func:`picker.parts.drift.temperature_grid`."""
    ys = spec.yield_
    if ys.temperature is None:
        return np.array([REFERENCE_TEMPERATURE])
    mats = [v.material for v in parts.values() if v.material is not None]
    return temperature_grid(ys.temperature[0], ys.temperature[1], ys.temperature_points, mats)


def warnings_for(spec: Spec) -> list[str]:
    """Operating range outside a part's rated range; drift classes without a range."""
    ys = spec.yield_
    out = []
    for p, part in spec.parts.items():
        m = material_of(part, True)
        if m is None:
            continue
        if ys.temperature is None:
            out.append(
                f"parts.{p}: {m.name} drift is not simulated without "
                "[yield] temperature = ['low', 'high']"
            )
            continue
        out.extend(f"parts.{p}: {w}" for w in check_range(m, *ys.temperature))
    return out


def recentre_values(spec: Spec, problem: Problem, pos: str) -> np.ndarray:
    """Values the trimmer advice may re-centre ``pos`` to: its table's and its range's.

    Shape (n,), sorted ascending, each value once: the position's value table
    and every value of its series range or value list
    (:func:`picker.spec.production.candidate_values`); a stock position has
    neither, so its stock values are all it may take.
    """
    part = spec.parts[pos]
    listed = candidate_values(part) if part.series or part.values is not None else ()
    return np.unique(np.concatenate([problem.tables[pos].values, listed]))


def amplifier_params_of(spec: Spec) -> AmplifierParams | None:
    """The loaded model's amplifier (``[amplifier]`` with the parts' Q/ESR), or None."""
    if spec.amplifier is None:
        return None
    return spec.amplifier.to_params(spec.parts)


def board_model_of(spec: Spec, problem: Problem) -> LoadedModel | None:
    """The pass test for one board: None means the ideal tank.

    With an ``[amplifier]`` section: :class:`picker.circuit.loaded.LoadedModel` (a board
    passes when it starts, runs steady, its margin is at most ``amplifier.max_margin``
    and its steady frequency is in the window), by the nominal-offset approximation or
    the large-signal model on every board (``amplifier.monte_carlo``).
    """
    params = amplifier_params_of(spec)
    if params is None or spec.amplifier is None:
        return None
    # the loaded model (its stages import scipy.special): only with an amplifier
    from picker.circuit.loaded import LoadedModel

    amp = spec.amplifier
    return LoadedModel(
        problem,
        params,
        amp.monte_carlo,
        max_margin=amp.max_margin,
        stray_tol=spec.parasitics.stray_tolerance,
        coupling_tol=spec.tank.coupling_tolerance,
    )


def _sections(spec: Spec) -> dict[str, str]:
    """A tapped coil's input-side section takes the output side's variate (one part)."""
    if spec.tank.tapped_coil is None:
        return {}
    out, inp = spec.topo.feedback_pair
    return {inp: out}


def simulation_of(spec: Spec, problem: Problem) -> Simulation:
    """How the spec's boards vary: per-position distributions, drift, board model."""
    parts = part_variations(spec, problem)
    return Simulation(
        problem,
        parts,
        temperature_grid_of(spec, parts),
        board_model_of(spec, problem),
        stray_tol=spec.parasitics.stray_tolerance,
        coupling_tol=spec.tank.coupling_tolerance,
        shared=_sections(spec),
    )


def random_inputs(spec: Spec, sim: Simulation, samples: int, seed: int) -> RandomRows:
    """The run's common random numbers, shape (samples', sim.n_columns), drawn on demand.

    ``[yield] sampling = "random"``: ``samples`` rows from a seeded
    generator; ``"sobol"``: scrambled Sobol points, ``samples`` rounded up to
    a power of two (:func:`picker.core.sampling.random_rows`: the rows of
    ``uniform_matrix``, streamed in batches, never held whole). Callers take the
    actual count from ``u.shape[0]``.
    """
    return random_rows(samples, sim.n_columns, method=spec.yield_.sampling, seed=seed)


def with_run_settings(spec: Spec, precision: float | None, sampling: str | None) -> Spec:
    """The spec with ``[yield] precision`` / ``sampling`` overridden (None keeps the spec's)."""
    upd: dict[str, Any] = {}
    if precision is not None:
        if not 0 < precision <= 0.5:
            raise SpecError(
                f"expected a half-width above 0 and at most 50 %; got {precision!r}",
                key="--precision",
            )
        upd["precision"] = float(precision)
    if sampling is not None:
        if sampling not in ("random", "sobol"):
            raise SpecError(f"expected random or sobol; got {sampling!r}", key="--sampling")
        upd["sampling"] = sampling
    if not upd:
        return spec
    return spec.model_copy(update={"yield_": spec.yield_.model_copy(update=upd)})
