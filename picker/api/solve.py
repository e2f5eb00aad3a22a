"""What a notebook user imports: load a spec, solve it, evaluate a given design.

>>> from picker.api.solve import load_spec, solve          # doctest: +SKIP
>>> result = solve(load_spec("demo_specs/probe_exciter.toml"))  # doctest: +SKIP
>>> result.candidates[0].values                      # doctest: +SKIP

The CLI is a thin client of these functions.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from picker.core.montecarlo import (
    PartVariation,
    Simulation,
    YieldEstimate,
    count_passing,
    estimate_yield,
)
from picker.core.ranking import monte_carlo_rank
from picker.core.screen import corner_span, screen_yield
from picker.core.search import Designs, Problem, ValueTable, check_size, search, uniform_table
from picker.errors import SpecError
from picker.parts import series as series_mod
from picker.parts.limits import lumped_warnings
from picker.spec.model import Spec, load_spec, position_unit, spec_from_dict
from picker.tank.base import Parasitics, board_beta, board_frequency, board_sensitivities

__all__ = [
    "Candidate",
    "Miss",
    "PartPick",
    "SolveResult",
    "build_problem",
    "evaluate",
    "load_spec",
    "solve",
    "spec_from_dict",
]


@dataclass(frozen=True)
class PartPick:
    """One chosen part: its value (SI), where it comes from and its tolerance."""

    position: str
    value: float
    unit: str
    source: str
    tolerance: float
    part_id: str = ""
    price: float = float("nan")
    #: A parallel pair: ``value`` is the total, the first part (``value -
    #: second_value``, ``tolerance``, ``part_id``) the larger one, the second part
    #: ``second_value`` (0 for a single part), ``second_part_id``, ``second_tolerance``.
    #: ``price`` is the pair's (both parts).
    second_value: float = 0.0
    second_part_id: str = ""
    second_tolerance: float = float("nan")

    @property
    def is_pair(self) -> bool:
        return self.second_value > 0

    @property
    def first_value(self) -> float:
        return self.value - self.second_value


@dataclass(frozen=True)
class Candidate:
    """A ranked design with its figures."""

    rank: int
    parts: dict[str, PartPick]
    f_nominal_hz: float
    error: float
    feedback_fraction: float
    yield_: YieldEstimate
    screen_yield: float
    f_worst_low_hz: float
    f_worst_high_hz: float
    sensitivities: dict[str, float]
    in_window: bool = True
    feedback_ok: bool = True
    extra: dict = field(default_factory=dict)

    @property
    def values(self) -> dict[str, float]:
        return {p: pp.value for p, pp in self.parts.items()}

    @property
    def part_ids(self) -> dict[str, str]:
        return {p: pp.part_id for p, pp in self.parts.items()}

    @property
    def yield_estimate(self) -> float:
        return self.yield_.estimate

    @property
    def ci_low(self) -> float:
        return self.yield_.ci_low

    @property
    def ci_high(self) -> float:
        return self.yield_.ci_high


@dataclass(frozen=True)
class Miss:
    """A near-feasible design and the constraint it fails."""

    values: dict[str, float]
    f_nominal_hz: float
    feedback_fraction: float
    failed: str


@dataclass(frozen=True)
class SolveResult:
    """Everything ``solve`` or ``evaluate`` found, best design first."""

    spec: Spec
    status: str
    candidates: list[Candidate]
    space_size: int = 0
    feasible: int = 0
    screened: int = 0
    misses: list[Miss] = field(default_factory=list)
    advice: list[str] = field(default_factory=list)
    distribution: str = "uniform"
    samples: int = 0
    seed: int = 0
    #: Production view: warnings (e.g. a temperature outside a part's rating),
    #: run facts for the JSON ``monte_carlo`` object, and arrays for the plots
    #: (``plot_data``, only when asked for; never in the JSON).
    warnings: list[str] = field(default_factory=list)
    production: dict = field(default_factory=dict)
    plot_data: dict | None = None


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
        from picker.spec.model import _materials_like
        from picker.spec.stock import stock_table

        st = stock_table(part.stock_list, pos[0], part.min or 0.0, part.max or np.inf,
                         tolerance_max=part.tolerance, dielectric=_materials_like(part.stock_list, part),
                         min_voltage=part.voltage_rating, qty=spec.cost.build_quantity)  # fmt: skip
        table = ValueTable(st["values"], st["tol"], "stock", st["part_id"], st["price"],
                           st["stock_qty"])  # fmt: skip
    else:
        if part.series is not None:
            vals = series_mod.expand(part.series, part.min, part.max)
            source = part.series
        else:
            vals, source = np.asarray(part.values, dtype=float), "list"
        price = np.nan if part.price is None else part.price
        table = ValueTable(vals, np.full(vals.shape, float(part.tolerance)), source,
                           price=np.full(vals.shape, float(price)))  # fmt: skip
    if part.parallel:
        from picker.parts.pairs import pair_table

        table = pair_table(table, part.pair_ratio_max)
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
    src = part.series if part.series and series_mod.is_member(part.series, value) else "given"
    price = np.nan if part.price is None else float(part.price)
    return ValueTable(v, np.array([float(tol)]), src, price=np.array([price]))


def parasitics_of(spec: Spec) -> Parasitics:
    p = spec.parasitics
    return Parasitics(p.stray, p.c1_shunt, p.c2_shunt, p.l_scale)


def build_problem(spec: Spec, *, f_min=None, f_max=None, beta_min=None, beta_max=None) -> Problem:
    """Turn a validated spec into the core's search problem (optionally relaxed)."""
    topo = spec.topo
    return Problem(
        topology=topo,
        tables={p: part_table(spec, p) for p in topo.positions},
        f_min=spec.frequency.f_min if f_min is None else f_min,
        f_max=spec.frequency.f_max if f_max is None else f_max,
        beta_min=spec.feedback.min if beta_min is None else beta_min,
        beta_max=spec.feedback.max if beta_max is None else beta_max,
        parasitics=parasitics_of(spec),
    )


def part_variations(spec: Spec, problem: Problem) -> dict[str, PartVariation]:
    """Per-position tolerance distribution and drift class (production view)."""
    from picker.production import figures as production

    return production.variations(spec, problem)


def temperature_grid_of(spec: Spec, parts: dict[str, PartVariation]) -> np.ndarray:
    """Temperatures a board must stay in the window at (°C)."""
    from picker.production import figures as production

    return production.grid(spec, parts)


def amplifier_params_of(spec: Spec):
    """The loaded model's amplifier (``[amplifier]`` with the parts' Q/ESR), or None."""
    if spec.amplifier is None:
        return None
    return spec.amplifier.to_params(spec.parts)


def board_model_of(spec: Spec, problem: Problem):
    """The pass test for one board: None means the ideal tank.

    With an ``[amplifier]`` section: :class:`picker.circuit.loaded.LoadedModel` (a board
    passes when it starts, margin > 1, and its loaded frequency is in the
    window), by the surrogate or the full model (``amplifier.monte_carlo``).
    """
    params = amplifier_params_of(spec)
    if params is None:
        return None
    from picker.circuit.loaded import LoadedModel

    return LoadedModel(problem, params, spec.amplifier.monte_carlo)


def _nominal_designs(spec: Spec, problem: Problem):
    """Feasible designs, and the loaded search (None without an amplifier).

    With an amplifier the designs are the loaded-feasible ones
    (:func:`picker.circuit.loaded.loaded_search`: loaded nominal frequency in the window,
    start-up margin >= ``amplifier.min_margin``) and their ``f_nominal`` holds the
    *loaded* frequency, so the screen, the ranking's error tie-break and the
    reported error use the frequency the board runs at; :func:`_loaded_view` puts
    the ideal frequency back into each candidate's ``f_nominal_hz``.
    """
    params = amplifier_params_of(spec)
    try:  # a search too large for its limit is a fault of the spec: name its file
        lim = spec.search
        if params is None:
            return search(problem, max_designs=lim.max_designs,
                          max_combinations=lim.max_combinations), None  # fmt: skip
        from picker.circuit.loaded_search import loaded_search

        check_size(problem, max_designs=None, max_combinations=lim.max_combinations)
        ls = loaded_search(problem, params, min_margin=spec.amplifier.min_margin,
                           max_designs=lim.max_designs)  # fmt: skip
    except SpecError as exc:
        raise exc.located(file=spec.source or None) from None
    return Designs(ls.designs.idx, ls.f_loaded, ls.designs.beta), ls


def _loaded_view(spec: Spec, cands: list[Candidate]) -> list[Candidate]:
    """With an amplifier: ``f_nominal_hz`` is the ideal frequency; ``error``,
    ``in_window`` and the worst-case corners follow the loaded one (the ideal
    corners times the nominal loaded/ideal ratio); ``extra`` has both."""
    if spec.amplifier is None:
        return cands
    from dataclasses import replace

    out = []
    f = spec.frequency
    for c in cands:
        fl = c.extra.get("f_loaded_hz")
        upd: dict = {"f_nominal_hz": c.extra["f_ideal_hz"]}
        if fl is None:
            upd.update(error=c.extra["f_ideal_hz"] / f.target - 1.0, in_window=False)
        else:
            r = fl / c.extra["f_ideal_hz"]  # corners scaled by the nominal loading ratio
            upd.update(error=fl / f.target - 1.0, in_window=bool(f.f_min <= fl <= f.f_max),
                       f_worst_low_hz=c.f_worst_low_hz * r, f_worst_high_hz=c.f_worst_high_hz * r)  # fmt: skip
        out.append(replace(c, **upd))
    return out


def simulation_of(spec: Spec, problem: Problem) -> Simulation:
    """How the spec's boards vary: per-position distributions, drift, board model."""
    parts = part_variations(spec, problem)
    return Simulation(
        problem, parts, temperature_grid_of(spec, parts), board_model_of(spec, problem)
    )


def circuit_extras(spec: Spec, sim: Simulation, designs: Designs, u: np.ndarray) -> list[dict]:
    """Extra per-candidate figures of the circuit-aware model (JSON fields), one dict each.

    Empty without an ``[amplifier]`` section. Otherwise (:func:`picker.circuit.loaded.nominal_figures`):
    ``f_ideal_hz``, ``f_loaded_hz``, ``startup_margin`` (nominal),
    ``startup_margin_worst`` (smallest over every Monte Carlo board and
    temperature), ``amplitude_v``, ``overdriven``, ``peak_voltage_v``, ``cautions``.
    """
    params = amplifier_params_of(spec)
    if params is None:
        return [{} for _ in range(len(designs))]
    from picker.circuit.figures import nominal_figures, worst_margins

    pb = sim.problem
    vals = designs.values(pb)
    rating = {p: spec.parts[p].voltage_rating for p in pb.topology.positions}
    polar = {p: spec.parts[p].polarised for p in pb.topology.positions}
    worst = worst_margins(sim, designs, u)
    out = []
    for r in range(len(designs)):
        fig = nominal_figures(pb.topology, {p: float(v[r]) for p, v in vals.items()},
                              pb.parasitics, params, voltage_rating=rating, polarised=polar)  # fmt: skip
        fig["startup_margin_worst"] = float(worst[r])
        out.append(fig)
    return out


def production_extras(spec: Spec, sim: Simulation, designs: Designs, u: np.ndarray) -> list[dict]:
    """Extra per-candidate figures of the production view (JSON fields), one dict each.

    ``drivers`` (name -> first-order variance share), ``drivers_mc``,
    ``yield_over_temperature``, ``tighter`` (best few), ``tighter_plan`` and
    ``trimmer`` (best design, below the yield target): see :mod:`picker.production.figures`.
    """
    from picker.production import figures as production

    return production.extras(spec, sim, designs, u)


def cost_extras(spec: Spec, sim: Simulation, designs: Designs, u: np.ndarray) -> list[dict]:
    """Per-candidate ``cost`` {per_board, build, build_quantity, stock_ok, short}
    (:func:`picker.buyer.costing.cost_figures`)."""
    from picker.buyer.costing import cost_figures

    on_hand: dict[str, float] = {}
    for part in spec.parts.values():
        if part.stock_list is not None:
            sl = part.stock_list
            on_hand.update({str(i): float(q) for i, q in zip(sl.ids, sl.on_hand, strict=True)})
    return cost_figures(sim.problem, designs, spec.cost.build_quantity, on_hand)


def _cost_limited(spec: Spec, problem: Problem, designs: Designs):
    """Designs within ``[cost] max_per_board``, and the ones dropped (None without a limit)."""
    limit = spec.cost.max_per_board
    if limit is None or len(designs) == 0:
        return designs, None
    from picker.buyer.costing import within_cost

    ok = within_cost(problem, designs, limit)
    return designs.take(np.flatnonzero(ok)), designs.take(np.flatnonzero(~ok))


def _over_cost(spec: Spec, problem: Problem, dropped: Designs) -> tuple[list[Miss], list[str]]:
    """Nearest misses and advice when every feasible design is over the cost limit."""
    from picker.buyer.costing import design_costs

    cost = design_costs(problem, dropped)
    key = np.where(np.isfinite(cost), cost, np.inf)
    sel = np.lexsort((np.arange(len(dropped)), key))[:5]
    vals = dropped.values(problem)
    misses = [
        Miss(
            {p: float(v[r]) for p, v in vals.items()},
            float(dropped.f_nominal[r]),
            float(dropped.beta[r]),
            f"cost {cost[r]:.4g} per board" if np.isfinite(cost[r]) else "no price",
        )  # fmt: skip
        for r in sel
    ]
    limit = spec.cost.max_per_board
    if np.isfinite(key[sel[0]]):
        advice = [f"raise cost.max_per_board from {limit:g} to at least {key[sel[0]]:.4g} "
                  "(the cheapest design in the window)"]  # fmt: skip
    else:
        advice = ["give every position a price (parts.X.price or priced stock parts): "
                  "a design without a cost cannot meet cost.max_per_board"]  # fmt: skip
    return misses, advice


def _rank(spec: Spec, sim: Simulation, designs: Designs, u: np.ndarray, m: int, top: int):
    """Monte Carlo ranking by yield, or by cost with ``[cost] rank_by = "cost"``.

    Returns (ranked, passed, screen, warnings, designs Monte Carlo checked).
    """
    if spec.cost.rank_by != "cost":
        ranked, passed, screen = monte_carlo_rank(
            sim, designs, u, m=m, top=top, target=spec.frequency.target
        )
        return ranked, passed, screen, [], len(ranked)
    from picker.buyer.costing import cost_rank

    ys = spec.yield_
    floor = spec.cost.min_yield if spec.cost.min_yield is not None else ys.target
    ranked, passed, screen, met, checked = cost_rank(sim, designs, u, m=m, top=top, floor=floor,
                                                     confidence=ys.confidence, method=ys.ci_method,
                                                     target=spec.frequency.target)  # fmt: skip
    if met:
        return ranked, passed, screen, [], checked
    return (
        ranked,
        passed,
        screen,
        [
            f"no design checked reaches the yield floor {floor:.4g} (confidence interval low end); "
            "ranked by yield instead of cost"
        ],
        checked,
    )


def _extras(spec: Spec, sim: Simulation, designs: Designs, u: np.ndarray) -> list[dict]:
    out = [{} for _ in range(len(designs))]
    for hook in (circuit_extras, production_extras, cost_extras):
        for d, more in zip(out, hook(spec, sim, designs, u), strict=True):
            d.update(more)
    return out


def random_inputs(spec: Spec, sim: Simulation, samples: int, seed: int) -> np.ndarray:
    """The run's common random numbers, shape (samples', sim.n_columns).

    ``[yield] sampling = "random"``: ``samples`` rows from a seeded
    generator; ``"sobol"``: scrambled Sobol points, ``samples`` rounded up to
    a power of two (:func:`picker.core.sampling.uniform_matrix`). Callers take the
    actual count from ``u.shape[0]``.
    """
    from picker.core.sampling import uniform_matrix

    rng = np.random.default_rng(seed)
    return uniform_matrix(samples, sim.n_columns, method=spec.yield_.sampling, rng=rng)


def _candidates(
    spec: Spec,
    problem: Problem,
    designs: Designs,
    passed: np.ndarray,
    screen: np.ndarray,
    samples: int,
    seed: int,
    extras: list[dict] | None = None,
) -> list[Candidate]:
    ys = spec.yield_
    lo, hi = corner_span(problem, designs)
    vals = designs.values(problem)
    sens = board_sensitivities(problem.topology, vals, problem.parasitics)
    target = spec.frequency.target
    out = []
    for r in range(len(designs)):
        parts = {}
        for p in problem.topology.positions:
            t = problem.tables[p]
            i = designs.idx[p][r]
            pair = {}
            if t.second is not None and t.second[i] > 0:
                pair = dict(second_value=float(t.second[i]), second_part_id=str(t.second_id[i]),
                            second_tolerance=float(t.second_tol[i]))  # fmt: skip
            parts[p] = PartPick(
                p,
                float(t.values[i]),
                position_unit(p),
                t.source,
                float(t.tol[i]),
                str(t.part_id[i]),
                float(t.price[i]),
                **pair,
            )
        f = float(designs.f_nominal[r])
        beta = float(designs.beta[r])
        out.append(
            Candidate(
                rank=r + 1,
                parts=parts,
                f_nominal_hz=f,
                error=f / target - 1.0,
                feedback_fraction=beta,
                yield_=estimate_yield(
                    int(passed[r]),
                    samples,
                    confidence=ys.confidence,
                    method=ys.ci_method,
                    seed=seed,
                ),
                screen_yield=float(screen[r]),
                f_worst_low_hz=float(lo[r]),
                f_worst_high_hz=float(hi[r]),
                sensitivities={p: float(s[r]) for p, s in sens.items()},
                in_window=bool(problem.f_min <= f <= problem.f_max),
                feedback_ok=bool(problem.beta_min <= beta <= problem.beta_max),
                extra=extras[r] if extras else {},
            )
        )
    return out


def _with_run_settings(spec: Spec, precision: float | None, sampling: str | None) -> Spec:
    """The spec with ``[yield] precision`` / ``sampling`` overridden (None keeps the spec's)."""
    upd: dict = {}
    if precision is not None:
        if not 0 < precision <= 0.5:
            raise SpecError(f"expected a half-width above 0 and at most 50 %; got {precision!r}",
                            key="--precision")  # fmt: skip
        upd["precision"] = float(precision)
    if sampling is not None:
        if sampling not in ("random", "sobol"):
            raise SpecError(f"expected random or sobol; got {sampling!r}", key="--sampling")
        upd["sampling"] = sampling
    if not upd:
        return spec
    return spec.model_copy(update={"yield_": spec.yield_.model_copy(update=upd)})


def _refined(spec, sim, designs, u, passed, seed, progress):
    """Precision on demand: more batches for ``designs`` until the CI is narrow enough.

    Returns (order, passed, u, converged); ``order`` re-ranks ``designs``.
    """
    from picker.production import figures as production

    ys = spec.yield_
    if ys.precision is None:
        return np.arange(len(designs)), passed, u, None
    passed, u, converged = production.refine(
        sim, designs, u, passed, seed=seed, method=ys.sampling, precision=ys.precision,
        max_samples=max(ys.max_samples, u.shape[0]), confidence=ys.confidence,
        progress=progress,
    )  # fmt: skip
    order = production.reorder(passed, designs, spec.frequency.target)
    return order, passed[order], u, converged


def _production_fields(spec, sim, best, u, converged, plot_data: bool) -> dict:
    from picker.production import figures as production

    return dict(
        warnings=production.warnings_for(spec) + lumped_warnings(spec.frequency.f_max),
        production=production.summary(spec, sim, u.shape[0], converged),
        plot_data=production.plot_inputs(spec, sim, best, u) if plot_data else None,
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
    progress=None,
    plot_data: bool = False,
) -> SolveResult:
    """Search, screen, Monte Carlo and rank; the best ``top`` designs first.

    ``precision`` (a CI half-width, 0.005 = ±0.5 %) continues the Monte Carlo
    of the reported designs in batches until every interval is that narrow or
    ``[yield] max_samples`` is reached; ``progress(samples, cap, half_width)``
    is called after each batch. ``sampling`` is "random" or "sobol".
    ``plot_data`` keeps the arrays the plots need in ``result.plot_data``.
    """
    spec = _with_run_settings(spec, precision, sampling)
    ys = spec.yield_
    top = spec.report.top if top is None else top
    samples = ys.samples if samples is None else samples
    seed = ys.seed if seed is None else seed
    m = ys.candidates if candidates is None else candidates
    problem = build_problem(spec)
    designs, loaded = _nominal_designs(spec, problem)
    designs, over_cost = _cost_limited(spec, problem, designs)
    common = dict(
        spec=spec,
        space_size=problem.space_size(),
        feasible=len(designs),
        distribution=ys.distribution,
        samples=samples,
        seed=seed,
    )
    if len(designs) == 0:
        from picker.api.misses import explain_infeasible, explain_loaded_infeasible

        if over_cost is not None and len(over_cost):
            misses, advice = _over_cost(spec, problem, over_cost)
        elif loaded is None:
            misses, advice = explain_infeasible(spec, problem)
        else:
            misses, advice = explain_loaded_infeasible(spec, problem, loaded)
        return SolveResult(
            status="infeasible", candidates=[], misses=misses, advice=advice, **common,
            warnings=lumped_warnings(spec.frequency.f_max),
        )  # fmt: skip
    sim = simulation_of(spec, problem)
    u = random_inputs(spec, sim, samples, seed)
    ranked, passed, screen, notes, screened = _rank(spec, sim, designs, u, m, top)
    best = designs.take(ranked[:top])
    order, passed, u, converged = _refined(spec, sim, best, u, passed[:top], seed, progress)
    best, screen = best.take(order), screen[:top][order]
    if spec.cost.rank_by == "cost" and not notes:
        from picker.buyer.costing import cost_order

        order = cost_order(problem, best, passed)
        best, screen, passed = best.take(order), screen[order], passed[order]
    samples = common["samples"] = u.shape[0]
    cands = _candidates(
        spec, problem, best, passed, screen, samples, seed, _extras(spec, sim, best, u)
    )
    cands = _loaded_view(spec, cands)
    res = SolveResult(
        status="ok",
        candidates=cands,
        screened=screened,
        **common,
        **_production_fields(spec, sim, best, u, converged, plot_data),
    )
    return replace(res, warnings=[*res.warnings, *notes]) if notes else res


def evaluate(
    spec: Spec,
    values: dict[str, float],
    *,
    tolerances: dict[str, float] | None = None,
    samples: int | None = None,
    seed: int | None = None,
    precision: float | None = None,
    sampling: str | None = None,
    progress=None,
    plot_data: bool = False,
) -> SolveResult:
    """The same figures as ``solve`` for one given design (an existing board).

    ``precision``, ``sampling``, ``progress`` and ``plot_data`` as for :func:`solve`.
    """
    spec = _with_run_settings(spec, precision, sampling)
    ys = spec.yield_
    samples = ys.samples if samples is None else samples
    seed = ys.seed if seed is None else seed
    topo = spec.topo
    missing = [p for p in topo.positions if p not in values]
    if missing:
        raise SpecError(
            f"expected a value for every position ({', '.join(topo.positions)}); "
            f"missing {', '.join(missing)}",
            key="--set",
        )
    extra = [p for p in values if p not in topo.positions]
    if extra:
        raise SpecError(
            f"unknown position {', '.join(extra)} for a {topo.name} tank; "
            f"expected {', '.join(topo.positions)}",
            key="--set",
        )
    tolerances = tolerances or {}
    tables = {p: given_table(spec, p, values[p], tolerances.get(p)) for p in topo.positions}
    base = build_problem(spec)
    problem = Problem(
        topo, tables, base.f_min, base.f_max, base.beta_min, base.beta_max, base.parasitics
    )
    idx = {p: np.zeros(1, dtype=np.int64) for p in topo.positions}
    vals = {p: tables[p].values for p in topo.positions}
    designs = Designs(
        idx,
        np.asarray(board_frequency(topo, vals, problem.parasitics), dtype=float),
        np.asarray(board_beta(vals, problem.parasitics), dtype=float),
    )
    sim = simulation_of(spec, problem)
    u = random_inputs(spec, sim, samples, seed)
    passed = count_passing(sim, designs, u)
    _, passed, u, converged = _refined(spec, sim, designs, u, passed, seed, progress)
    samples = u.shape[0]
    screen = screen_yield(sim, designs)
    cands = _candidates(
        spec, problem, designs, passed, screen, samples, seed, _extras(spec, sim, designs, u)
    )
    cands = _loaded_view(spec, cands)
    return SolveResult(
        spec=spec,
        status="ok",
        candidates=cands,
        space_size=1,
        feasible=int(cands[0].in_window and cands[0].feedback_ok),
        screened=1,
        distribution=ys.distribution,
        samples=samples,
        seed=seed,
        **_production_fields(spec, sim, designs, u, converged, plot_data),
    )
