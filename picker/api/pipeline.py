"""Solve a spec, or evaluate a given design: search, screen, Monte Carlo, rank.

>>> from picker.api import load_spec, solve                # doctest: +SKIP
>>> result = solve(load_spec("demo_specs/probe_exciter.toml"))  # doctest: +SKIP
>>> result.candidates[0].values                      # doctest: +SKIP

The orchestration only: the spec becomes the core's inputs in
:mod:`picker.api.problem`, ranked designs become candidates in
:mod:`picker.api.candidates`, an empty search is explained in
:mod:`picker.api.misses`. The CLI is a thin client of these functions.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from picker.api.candidates import build_candidates, cost_limited, extras, loaded_view, over_cost
from picker.api.misses import explain_infeasible, explain_loaded_infeasible
from picker.api.problem import (
    GivenPart,
    GivenValue,
    amplifier_params_of,
    build_problem,
    given_tables,
    random_inputs,
    simulation_of,
    warnings_for,
    with_run_settings,
)
from picker.api.results import Candidate, PartPick, SolveResult, given_design
from picker.buyer.costing import below_floor, cost_order, cost_rank
from picker.core.conditional import (
    Tally,
    applies,
    conditional_counts,
    default_workers,
    estimates,
)
from picker.core.montecarlo import Simulation, YieldEstimate, count_passing
from picker.core.precision import refine, refine_tally, reorder
from picker.core.ranking import TIE_RULE, estimate_order, monte_carlo_rank, rank_with_ties
from picker.core.sampling import Rows
from picker.core.screen import screen_yield
from picker.core.search import Designs, Problem, check_size, search
from picker.errors import SpecError
from picker.parts.limits import lumped_warnings
from picker.production.figures import plot_inputs
from picker.spec.load import complete_spec
from picker.spec.model import Spec
from picker.tank.board import board_beta, board_frequency
from picker.units import parse_quantity, parse_tolerance

if TYPE_CHECKING:
    from picker.circuit.loaded_search import LoadedSearch

__all__ = ["evaluate", "solve", "summary"]

#: ``progress(samples, cap, half_width)``, called after each precision batch.
Progress = Callable[[int, int, float], None]


def _nominal_designs(spec: Spec, problem: Problem) -> tuple[Designs, LoadedSearch | None]:
    """Feasible designs, and the loaded search (None without an amplifier).

    With an amplifier the designs are the loaded-feasible ones
    (:func:`picker.circuit.loaded_search.loaded_search`: loaded nominal frequency in the window,
    start-up margin >= ``amplifier.min_margin``) and their ``f_nominal`` holds the
    *loaded* frequency, so the screen, the ranking's error tie-break and the
    reported error use the frequency the board runs at;
    :func:`picker.api.candidates.loaded_view` puts the ideal frequency back into
    each candidate's ``f_nominal_hz``.
    """
    params = amplifier_params_of(spec)
    lim = spec.search
    try:  # a search too large for its limit is a fault of the spec: name its file
        if params is None or spec.amplifier is None:
            designs = search(
                problem, max_designs=lim.max_designs, max_combinations=lim.max_combinations
            )
            return designs, None
        check_size(problem, max_designs=None, max_combinations=lim.max_combinations)
        # the loaded model (its stages import scipy.special): only with an amplifier
        from picker.circuit.loaded_search import loaded_search

        ls = loaded_search(
            problem,
            params,
            min_margin=spec.amplifier.min_margin,
            max_margin=spec.amplifier.max_margin,
            max_designs=lim.max_designs,
        )
    except SpecError as exc:
        raise exc.located(file=spec.source or None) from None
    return Designs(ls.designs.idx, ls.f_loaded, ls.designs.beta), ls


def _rank(
    spec: Spec, sim: Simulation, designs: Designs, u: Rows, m: int, top: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str], int]:
    """Monte Carlo ranking by yield, or by cost with ``[cost] rank_by = "cost"``.

    Returns (ranked, passed, screen, warnings, designs Monte Carlo checked).
    """
    if spec.cost.rank_by != "cost":
        ranked, passed, screen = monte_carlo_rank(
            sim, designs, u, m=m, top=top, target=spec.frequency.target
        )
        return ranked, passed, screen, [], len(ranked)
    ys = spec.yield_
    floor = spec.cost.min_yield if spec.cost.min_yield is not None else ys.target
    assert floor is not None  # the spec's load refuses rank_by = "cost" without a floor
    ranked, passed, screen, met, checked = cost_rank(
        sim,
        designs,
        u,
        m=m,
        top=top,
        floor=floor,
        confidence=ys.confidence,
        method=ys.ci_method,
        target=spec.frequency.target,
    )
    if met:
        return ranked, passed, screen, [], checked
    note = (
        f"no design checked reaches the yield floor {floor * 100:.4g} % (confidence interval "
        "low end); ranked by yield instead of cost"
    )
    return ranked, passed, screen, [note], checked


def _refined(
    spec: Spec,
    sim: Simulation,
    designs: Designs,
    u: Rows,
    passed: np.ndarray,
    seed: int,
    progress: Progress | None,
) -> tuple[np.ndarray, np.ndarray, Rows, bool | None]:
    """Precision on demand: more batches for ``designs`` until the CI is narrow enough.

    Returns (order, passed, u, converged); ``order`` re-ranks ``designs``.
    """
    ys = spec.yield_
    if ys.precision is None:
        return np.arange(len(designs)), passed, u, None
    passed, u, converged = refine(
        sim,
        designs,
        u,
        passed,
        seed=seed,
        method=ys.sampling,
        precision=ys.precision,
        max_samples=max(ys.max_samples, u.shape[0]),
        confidence=ys.confidence,
        progress=progress,
    )
    order = reorder(passed, designs, spec.frequency.target)
    return order, passed[order], u, converged


def _with_orbits(
    spec: Spec, sim: Simulation, designs: Designs, u: Rows, passed: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The reported designs with their nominal orbits (:mod:`picker.circuit.nominal_orbit`:
    the steady frequency shifted by the orbit's offset, the bursting verdict the orbit's):
    where any of them has one, their boards counted again and the designs re-ranked.

    Returns (order, passed); ``order`` re-ranks ``designs``."""
    refine_orbits = getattr(sim.model, "refine_orbits", None)
    if refine_orbits is None or not refine_orbits(designs):
        return np.arange(len(designs)), passed
    passed = count_passing(sim, designs, u)
    order = reorder(passed, designs, spec.frequency.target)
    return order, passed[order]


def summary(
    spec: Spec,
    sim: Simulation,
    samples: int,
    converged: bool | None,
    estimator: str = "plain",
) -> dict[str, Any]:
    """Top-level facts of the run for the JSON ``monte_carlo`` object.

    ``estimator``: "conditional" (each yield the mean of the boards'
    conditional pass probabilities, normal interval) or "plain" (share of
    passing boards, binomial interval ``[yield] ci_method``).
    """
    ys = spec.yield_
    parts = {}
    for p, v in sim.parts.items():
        d: dict[str, Any] = {"distribution": v.distribution}
        if v.grade is not None:
            d["grade"] = v.grade
        if v.lot is not None:
            d["lot_size"] = int(np.size(v.lot))
        if v.material is not None:
            d["material"] = v.material.name
        parts[p] = d
    out: dict[str, Any] = {
        "estimator": estimator,
        "interval": "normal" if estimator == "conditional" else ys.ci_method,
        "sampling": ys.sampling,
        "samples_requested": ys.samples,
        "precision": ys.precision,
        "converged": converged,
        "parts": parts,
    }
    if ys.temperature is not None:
        out["temperature_range_c"] = list(ys.temperature)
        out["temperatures_c"] = [float(t) for t in sim.temperatures]
    return out


def _ranked_result(
    spec: Spec,
    problem: Problem,
    sim: Simulation,
    designs: Designs,
    u: Rows,
    passed: np.ndarray,
    screen: np.ndarray,
    *,
    seed: int,
    converged: bool | None,
    plot_data: bool,
    space_size: int,
    feasible: int,
    screened: int,
    estimated: list[YieldEstimate] | None = None,
) -> SolveResult:
    """The ``ok`` result for ``designs`` (best first) and their Monte Carlo counts.

    ``estimated``: each design's yield estimate (default: the plain ``passed``
    counts with the binomial interval).
    """
    samples = u.shape[0]
    cands = build_candidates(
        spec,
        problem,
        designs,
        passed,
        screen,
        samples,
        seed,
        extras(spec, sim, designs, u),
        estimates=estimated,
    )
    conditional = estimated is not None and any(e.estimator != "plain" for e in estimated)
    return SolveResult(
        spec=spec,
        status="ok",
        candidates=loaded_view(spec, cands),
        space_size=space_size,
        feasible=feasible,
        screened=screened,
        distribution=spec.yield_.distribution,
        samples=samples,
        seed=seed,
        warnings=warnings_for(spec) + lumped_warnings(spec.frequency.f_max),
        production=summary(
            spec, sim, samples, converged, "conditional" if conditional else "plain"
        ),
        plot_data=plot_inputs(spec, sim, designs, u) if plot_data else None,
    )


def solve(
    spec: Spec,
    *,
    top: int | None = None,
    samples: int | None = None,
    seed: int | None = None,
    candidates: int | None = None,
    precision: float | None = None,
    sampling: str | None = None,
    progress: Progress | None = None,
    plot_data: bool = False,
    workers: int | None = None,
    estimator: str | None = None,
) -> SolveResult:
    """Search, screen, Monte Carlo and rank; the best ``top`` designs first.

    With the ideal tank (and ``[cost] rank_by = "yield"``) the yields are
    conditional Monte Carlo estimates (:mod:`picker.core.conditional`) and the
    top-up checks only designs whose proven yield bound can still reach the
    top N (:func:`picker.core.ranking.rank_with_ties`); otherwise each board
    passes or fails (:func:`picker.core.ranking.monte_carlo_rank`). ``workers``
    threads share the Monte Carlo (default :func:`picker.core.conditional.default_workers`);
    the result does not depend on it. ``estimator="plain"`` forces pass/fail
    sampling with binomial intervals (the reference the conditional estimator
    is checked against).

    ``precision`` (a CI half-width, 0.005 = ±0.5 %) continues the Monte Carlo
    of the reported designs in batches until every interval is that narrow or
    ``[yield] max_samples`` is reached; ``progress(samples, cap, half_width)``
    is called after each batch. ``sampling`` is "random" or "sobol".
    ``plot_data`` keeps the arrays the plots need in ``result.plot_data``.
    """
    spec = with_run_settings(complete_spec(spec), precision, sampling)
    ys = spec.yield_
    top = spec.report.top if top is None else top
    samples = ys.samples if samples is None else samples
    seed = ys.seed if seed is None else seed
    m = ys.candidates if candidates is None else candidates
    problem = build_problem(spec)
    designs, loaded = _nominal_designs(spec, problem)
    designs, dropped = cost_limited(spec, problem, designs)
    if len(designs) == 0:
        if dropped is not None and len(dropped):
            misses, advice = over_cost(spec, problem, dropped)
        elif loaded is None:
            misses, advice = explain_infeasible(spec, problem)
        else:
            misses, advice = explain_loaded_infeasible(spec, problem, loaded)
        return SolveResult(
            spec=spec,
            status="infeasible",
            candidates=[],
            space_size=problem.space_size(),
            feasible=0,
            misses=misses,
            advice=advice,
            distribution=ys.distribution,
            samples=samples,
            seed=seed,
            warnings=lumped_warnings(spec.frequency.f_max),
        )
    sim = simulation_of(spec, problem)
    u: Rows = random_inputs(spec, sim, samples, seed)
    workers = default_workers() if workers is None else max(1, int(workers))
    if estimator not in (None, "plain", "conditional"):
        raise ValueError(f"expected estimator None, 'plain' or 'conditional'; got {estimator!r}")
    if estimator != "plain" and spec.cost.rank_by != "cost" and applies(sim):
        return _conditional_solve(
            spec,
            problem,
            sim,
            designs,
            u,
            m=m,
            top=top,
            seed=seed,
            workers=workers,
            progress=progress,
            plot_data=plot_data,
        )
    ranked, passed, screen, notes, screened = _rank(spec, sim, designs, u, m, top)
    best = designs.take(ranked[:top])
    order, passed = _with_orbits(spec, sim, best, u, passed[:top])
    best, screen = best.take(order), screen[:top][order]
    order, passed, u, converged = _refined(spec, sim, best, u, passed, seed, progress)
    best, screen = best.take(order), screen[order]
    if spec.cost.rank_by == "cost" and not notes:
        # the orbit's recount (and the refinement) may have moved a design chosen by
        # cost_rank below the floor: those go after the ones that still meet it
        floor = spec.cost.min_yield if spec.cost.min_yield is not None else ys.target
        assert floor is not None  # the spec's load refuses rank_by = "cost" without a floor
        below = below_floor(passed, u.shape[0], floor, ys.confidence, ys.ci_method)
        order = cost_order(problem, best, passed, ~below)
        best, screen, passed = best.take(order), screen[order], passed[order]
        if below.any():
            notes = [
                f"{int(below.sum())} of the designs chosen by cost fell below the yield floor "
                f"{floor * 100:.4g} % when counted with the periodic orbit; listed after "
                "those that meet it"
            ]
    res = _ranked_result(
        spec,
        problem,
        sim,
        best,
        u,
        passed,
        screen,
        seed=seed,
        converged=converged,
        plot_data=plot_data,
        space_size=problem.space_size(),
        feasible=len(designs),
        screened=screened,
    )
    return replace(res, warnings=[*res.warnings, *notes]) if notes else res


#: A '+' joining the two values of a pair given as text, not an exponent's sign (4.7e+3p).
_PAIR_SPLIT = re.compile(r"(?<![eE])\+")


def _given_value(v: Any, unit: str, pos: str) -> Any:
    """A value given to :func:`evaluate` as text, parsed as the command line does:
    ``"150 pF"``, ``"150p"``, or a parallel pair ``"4.7n+3.3n"`` / ``("4.7n", "3.3n")``."""
    key = f"--set {pos}"
    if isinstance(v, str):
        body = v.strip()
        halves = _PAIR_SPLIT.split(body.lstrip("+"))
        if len(halves) == 2:
            return tuple(parse_quantity(h, unit, key=key) for h in halves)
        return parse_quantity(body, unit, key=key)
    if isinstance(v, tuple | list):
        return tuple(parse_quantity(x, unit, key=key) if isinstance(x, str) else x for x in v)
    return v


def _conditional_solve(
    spec: Spec,
    problem: Problem,
    sim: Simulation,
    designs: Designs,
    u: Rows,
    *,
    m: int,
    top: int,
    seed: int,
    workers: int,
    progress: Progress | None,
    plot_data: bool,
) -> SolveResult:
    """The ranking, precision and result of :func:`solve` with the conditional estimator."""
    ys = spec.yield_
    target = spec.frequency.target
    r = rank_with_ties(
        sim, designs, u, m=m, top=top, target=target, workers=workers, confidence=ys.confidence
    )
    ranked, tally, screen = r.checked, r.tally, r.screen
    keep = np.arange(min(top, len(ranked)))
    best, tally, screen = designs.take(ranked[keep]), tally.take(keep), screen[keep]
    tally, u, converged = _refined_tally(spec, sim, best, u, tally, seed, workers, progress)
    if converged is not None:
        order = estimate_order(tally.mean(), best.f_nominal, target)
        best, screen, tally = best.take(order), screen[order], tally.take(order)
    res = _ranked_result(
        spec,
        problem,
        sim,
        best,
        u,
        tally.passed,
        screen,
        seed=seed,
        converged=converged,
        plot_data=plot_data,
        space_size=problem.space_size(),
        feasible=len(designs),
        screened=len(ranked),
        estimated=estimates(tally, confidence=ys.confidence, method=ys.ci_method, seed=seed),
    )
    # the stop rule's count: designs not checked in full that can only tie with the N-th
    ties = {"count": r.ties, "unresolved": r.unresolved, "resolution": r.resolution}
    return replace(res, ties={**ties, "rule": TIE_RULE})


def _refined_tally(
    spec: Spec,
    sim: Simulation,
    designs: Designs,
    u: Rows,
    tally: Tally,
    seed: int,
    workers: int,
    progress: Progress | None,
) -> tuple[Tally, Rows, bool | None]:
    """Precision on demand for the conditional estimator (:func:`picker.core.precision.refine_tally`)."""
    ys = spec.yield_
    if ys.precision is None:
        return tally, u, None
    return refine_tally(
        sim,
        designs,
        u,
        tally,
        seed=seed,
        method=ys.sampling,
        precision=ys.precision,
        max_samples=max(ys.max_samples, u.shape[0]),
        confidence=ys.confidence,
        workers=workers,
        progress=progress,
    )


def evaluate(
    spec: Spec,
    values: Candidate | Mapping[str, GivenValue | PartPick | str],
    *,
    tolerances: Mapping[str, float | str] | None = None,
    parts: Mapping[str, GivenPart] | None = None,
    samples: int | None = None,
    seed: int | None = None,
    precision: float | None = None,
    sampling: str | None = None,
    progress: Progress | None = None,
    plot_data: bool = False,
    workers: int | None = None,
) -> SolveResult:
    """The same figures as ``solve`` for one given design (an existing board).

    ``values`` maps each position to a value (SI) or a parallel pair ``(a, b)``;
    ``parts`` names stock parts by id (``"A"`` or ``"A+B"`` for a pair) and
    ``tolerances`` picks the stock part of that tolerance
    (:func:`picker.api.problem.given_tables`). A :class:`Candidate` of a
    ``solve`` (or its ``parts``) gives its values, pairs, part ids and
    tolerances, so ``evaluate(spec, candidate)`` with solve's seed and samples
    reproduces solve's figures for it.
    Values and tolerances may also be text as on the command line
    (``{"C1": "150 pF"}``, ``{"C1": "2 %"}``, a pair as ``("4.7n", "3.3n")``).
    ``precision``, ``sampling``, ``progress`` and ``plot_data`` as for :func:`solve`.
    """
    spec = with_run_settings(complete_spec(spec), precision, sampling)
    ys = spec.yield_
    samples = ys.samples if samples is None else samples
    seed = ys.seed if seed is None else seed
    topo = spec.topo
    given, tols, parts = given_design(values, tolerances, parts)
    si: dict[str, GivenValue] = {
        p: _given_value(v, topo.unit(p), p) if p in topo.positions else v for p, v in given.items()
    }
    tols = {
        p: parse_tolerance(t, key=f"--tol {p}") if isinstance(t, str) else t
        for p, t in tols.items()
    }
    tables, notes = given_tables(spec, si, tols, parts)
    base = build_problem(spec)
    problem = Problem(
        topo, tables, base.f_min, base.f_max, base.beta_min, base.beta_max, base.parasitics
    )
    idx = {p: np.zeros(1, dtype=np.int64) for p in topo.positions}
    vals = {p: tables[p].values for p in topo.positions}
    designs = Designs(
        idx,
        np.asarray(board_frequency(topo, vals, problem.parasitics), dtype=float),
        np.asarray(board_beta(topo, vals, problem.parasitics), dtype=float),
    )
    sim = simulation_of(spec, problem)
    u: Rows = random_inputs(spec, sim, samples, seed)
    estimated = None
    if applies(sim):
        w = default_workers() if workers is None else max(1, int(workers))
        tally = conditional_counts(sim, designs, u, workers=w)
        tally, u, converged = _refined_tally(spec, sim, designs, u, tally, seed, w, progress)
        passed = tally.passed
        ys = spec.yield_
        estimated = estimates(tally, confidence=ys.confidence, method=ys.ci_method, seed=seed)
    else:
        refine_orbits = getattr(sim.model, "refine_orbits", None)
        if refine_orbits is not None:
            refine_orbits(designs)
        passed = count_passing(sim, designs, u)
        _, passed, u, converged = _refined(spec, sim, designs, u, passed, seed, progress)
    screen = screen_yield(sim, designs)
    res = _ranked_result(
        spec,
        problem,
        sim,
        designs,
        u,
        passed,
        screen,
        seed=seed,
        converged=converged,
        plot_data=plot_data,
        space_size=1,
        feasible=0,
        screened=1,
        estimated=estimated,
    )
    ok = res.candidates[0].in_window and res.candidates[0].feedback_ok
    return replace(res, feasible=int(ok), warnings=[*res.warnings, *notes])
