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

from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.loaded import LoadedModel
from picker.core.montecarlo import REFERENCE_TEMPERATURE, PartVariation, Simulation
from picker.core.sampling import uniform_matrix
from picker.core.search import Problem
from picker.errors import SpecError
from picker.parts import series as series_mod
from picker.parts.drift import check_range, material_of, temperature_grid
from picker.parts.pairs import pair_table
from picker.parts.table import ValueTable, uniform_table
from picker.spec.load import materials_like
from picker.spec.model import Spec
from picker.spec.production import candidate_values
from picker.spec.stock import stock_table
from picker.tank.board import Parasitics, board_feedback_bounds
from picker.units import format_quantity

__all__ = [
    "amplifier_params_of",
    "board_model_of",
    "build_problem",
    "given_table",
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
        price = np.nan if part.price is None else part.price
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


def given_table(spec: Spec, pos: str, value: float, tol: float | None = None) -> ValueTable:
    """A one-entry table for a given value at ``pos`` (``evaluate``).

    A stock position takes the cheapest stock part of that value within its
    filters (its id, tolerance, price); ``tol`` overrides the tolerance. A
    value the stock list does not hold needs ``tol`` or the position's
    ``tolerance`` key.
    """
    part = spec.parts[pos]
    v = np.array([float(value)])
    if part.stock_list is not None:
        single = spec.model_copy(
            update={"parts": {**spec.parts, pos: part.model_copy(update={"parallel": False})}}
        )
        t = part_table(single, pos)
        hit = np.flatnonzero(np.abs(t.values / value - 1) < 1e-9)
        if hit.size:
            i = hit[:1]
            tt = t.tol[i] if tol is None else np.array([float(tol)])
            return ValueTable(v, tt, "stock", t.part_id[i], t.price[i], t.stock_qty[i])
        tol = part.tolerance if tol is None else tol
        if tol is None:
            raise SpecError(
                f"{value!r} is not in the stock list of parts.{pos}; give its tolerance "
                f"(--tol {pos}=5%)",
                key="--set",
            )
        return uniform_table(v, tol, "given")
    tol = part.tolerance if tol is None else tol
    assert tol is not None  # validated: a series or list position has a tolerance
    src = part.series if part.series and series_mod.is_member(part.series, value) else "given"
    price = np.nan if part.price is None else float(part.price)
    return ValueTable(v, np.array([float(tol)]), src, price=np.array([price]))


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
    passes when it starts, margin > 1, and its loaded frequency is in the
    window), by the surrogate or the full model (``amplifier.monte_carlo``).
    """
    params = amplifier_params_of(spec)
    if params is None or spec.amplifier is None:
        return None
    return LoadedModel(problem, params, spec.amplifier.monte_carlo)


def simulation_of(spec: Spec, problem: Problem) -> Simulation:
    """How the spec's boards vary: per-position distributions, drift, board model."""
    parts = part_variations(spec, problem)
    return Simulation(
        problem, parts, temperature_grid_of(spec, parts), board_model_of(spec, problem)
    )


def random_inputs(spec: Spec, sim: Simulation, samples: int, seed: int) -> np.ndarray:
    """The run's common random numbers, shape (samples', sim.n_columns).

    ``[yield] sampling = "random"``: ``samples`` rows from a seeded
    generator; ``"sobol"``: scrambled Sobol points, ``samples`` rounded up to
    a power of two (:func:`picker.core.sampling.uniform_matrix`). Callers take the
    actual count from ``u.shape[0]``.
    """
    rng = np.random.default_rng(seed)
    return uniform_matrix(samples, sim.n_columns, method=spec.yield_.sampling, rng=rng)


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
