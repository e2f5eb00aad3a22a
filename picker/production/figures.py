"""The production view of ranked designs: drift, distributions, spread drivers, what to buy.

API layer between the spec and the core: it turns a :class:`~picker.spec.model.Spec`
into per-position :class:`~picker.core.montecarlo.PartVariation` objects and a
temperature grid, runs the precision-on-demand batches, and computes the
per-candidate figures that :func:`picker.api.solve.production_extras` adds to the
JSON. It prints nothing and writes no files; randomness comes in as the run's
common random numbers ``u`` (samples on axis 0, columns of
:meth:`~picker.core.montecarlo.Simulation.columns` on axis 1).

Every yield here is counted by :func:`picker.core.montecarlo.count_passing` on the
same rows of ``u`` (common random numbers), so the difference between two
options is not sampling noise. The yield over temperature uses every row;
the other analyses use at most :data:`EXTRAS_ROWS` rows of ``u``
(:data:`TRIMMER_ROWS` for the trimmer search); the buy-tighter list is made for the best
:data:`TIGHTER_CANDIDATES` designs only and the trimmer advice for the best
design only, which bounds their time.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from typing import cast

import numpy as np

from picker.core.montecarlo import (
    REFERENCE_TEMPERATURE,
    PartVariation,
    Simulation,
    count_passing,
    drift_factors,
    estimate_yield,
    sampled_values,
    values_at,
)
from picker.core.ranking import rank_order
from picker.core.sampling import adaptive_batches
from picker.core.screen import part_sigmas
from picker.core.search import Designs, Problem
from picker.errors import SpecError
from picker.parts.drift import (
    Material,
    check_range,
    explicit_tempco,
    get_material,
    temperature_grid,
)
from picker.production import drivers, tighter, trimmer
from picker.spec.production import candidate_values
from picker.tank.base import board_frequency, board_sensitivities, board_values
from picker.units import format_quantity

#: Rows of u used for drivers, buy-tighter and plot figures (2^17, a Sobol block).
EXTRAS_ROWS = 1 << 17
#: Rows of u used for the trimmer search (2^16: about 200 boards in the 0.3 % left out).
TRIMMER_ROWS = 1 << 16
#: Designs (best first) that get a buy-tighter list.
TIGHTER_CANDIDATES = 3


# ---------------------------------------------------------------- spec -> simulation


def _mat(v: PartVariation) -> Material | None:
    """A variation's drift class (``PartVariation.material`` is typed loosely)."""
    return cast("Material | None", v.material)


def material_of(part, with_drift: bool):
    """The part's :class:`picker.parts.drift.Material`, or ``None`` (no drift simulated)."""
    if not with_drift:
        return None
    if part.dielectric is not None:
        m = get_material(part.dielectric)
        if part.tempco is not None:  # a datasheet figure for a linear material
            tc, spread = part.tempco, part.tempco_spread or 0.0
            m = dataclasses.replace(m, tempco=tc, spread=spread, source="spec (tempco)")
        return m
    if part.tempco is not None:
        return explicit_tempco(part.tempco, part.tempco_spread or 0.0)
    return None


def variations(spec, problem: Problem) -> dict[str, PartVariation]:
    """Per-position distribution, grade, measured lot and drift class.

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


def grid(spec, parts: dict[str, PartVariation]) -> np.ndarray:
    """Temperatures (°C) a board must pass at: :func:`picker.parts.drift.temperature_grid`."""
    ys = spec.yield_
    if ys.temperature is None:
        return np.array([REFERENCE_TEMPERATURE])
    mats = [v.material for v in parts.values() if v.material is not None]
    return temperature_grid(ys.temperature[0], ys.temperature[1], ys.temperature_points, mats)


def warnings_for(spec) -> list[str]:
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


def summary(spec, sim: Simulation, samples: int, converged: bool | None) -> dict:
    """Top-level facts of the run for the JSON ``monte_carlo`` object."""
    ys = spec.yield_
    parts = {}
    for p, v in sim.parts.items():
        d: dict = {"distribution": v.distribution}
        if v.grade is not None:
            d["grade"] = v.grade
        if v.lot is not None:
            d["lot_size"] = int(np.size(v.lot))
        m = _mat(v)
        if m is not None:
            d["material"] = m.name
        parts[p] = d
    out = {
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


# ---------------------------------------------------------------- precision on demand


def refine(
    sim: Simulation,
    designs: Designs,
    u0: np.ndarray,
    passed0: np.ndarray,
    *,
    seed: int,
    method: str,
    precision: float,
    max_samples: int,
    confidence: float,
    progress: Callable[[int, int, float], None] | None = None,
):
    """Continue the Monte Carlo of ``designs`` in batches until the CI is narrow enough.

    The batch stream is :func:`picker.core.sampling.adaptive_batches` seeded like
    the run, so its first batch *is* ``u0`` (whose counts ``passed0`` are
    reused) and the whole run is reproducible from the seed.

    Returns
    -------
    (passed, u, converged) : (n,) int64, (samples, k) float, bool
    """
    batches: list[np.ndarray] = []

    def count(u: np.ndarray) -> np.ndarray:
        first = not batches
        batches.append(u)
        if first and u.shape == u0.shape and np.array_equal(u, u0):
            return passed0
        return count_passing(sim, designs, u)

    res = adaptive_batches(
        count,
        u0.shape[1],
        precision=precision,
        max_samples=max_samples,
        rng=np.random.default_rng(seed),
        method=method,
        first=u0.shape[0],
        confidence=confidence,
        progress=progress,
    )
    return res.passed, np.vstack(batches), res.converged


# ---------------------------------------------------------------- one design, modified


def single(designs: Designs, r: int) -> Designs:
    return designs.take(np.array([r]))


def with_tolerance(sim: Simulation, d1: Designs, pos: str, tol: float, fallback: str) -> Simulation:
    """The same run with position ``pos`` of design ``d1`` at tolerance ``tol``.

    A graded part whose new tolerance is within its grade is one of the
    sorted-out inner parts, so it becomes uniform (normal for graded-normal);
    a measured lot bought tighter is no longer that lot, so it takes the
    ``fallback`` distribution ([yield] distribution, if uniform or normal).
    """
    t = sim.problem.tables[pos]
    i = int(d1.idx[pos][0])
    new_tol = t.tol.copy()
    new_tol[i] = tol
    repl: dict = {"tol": new_tol}
    if t.second_tol is not None:
        st = t.second_tol.copy()
        st[i] = tol
        repl["second_tol"] = st
    tables = {**sim.problem.tables, pos: dataclasses.replace(t, **repl)}
    var = sim.parts[pos]
    if var.distribution in ("graded", "graded-normal") and not (var.grade or 0.0) < tol:
        base = "uniform" if var.distribution == "graded" else "normal"
        var = dataclasses.replace(var, distribution=base, grade=None)
    elif var.distribution == "empirical":
        base = fallback if fallback in ("uniform", "normal") else "uniform"
        var = dataclasses.replace(var, distribution=base, lot=None)
    return dataclasses.replace(
        sim,
        problem=dataclasses.replace(sim.problem, tables=tables),
        parts={**sim.parts, pos: var},
    )


def with_material(sim: Simulation, pos: str, name: str) -> Simulation:
    var = dataclasses.replace(sim.parts[pos], material=get_material(name))
    return dataclasses.replace(sim, parts={**sim.parts, pos: var})


def at_temperatures(sim: Simulation, temps) -> Simulation:
    return dataclasses.replace(sim, temperatures=np.atleast_1d(np.asarray(temps, dtype=float)))


# ---------------------------------------------------------------- spread drivers


def _materials(sim: Simulation) -> dict:
    return {p: v.material for p, v in sim.parts.items() if v.material is not None}


def first_order(sim: Simulation, designs: Designs, with_temperature: bool) -> dict[str, np.ndarray]:
    """First-order variance shares per position (and temperature), name -> (n,)."""
    problem = sim.problem
    sens = board_sensitivities(problem.topology, designs.values(problem), problem.parasitics)
    t_std = None
    if with_temperature:
        t_std = drivers.temperature_std(sens, _materials(sim), sim.temperatures)
        t_std = np.broadcast_to(t_std, (len(designs),))
    return drivers.first_order_shares(sens, part_sigmas(sim, designs), t_std)


def _worst_drift_index(sim: Simulation, d1: Designs) -> int:
    """Grid index where the drift spread of ln f is largest (first order)."""
    problem = sim.problem
    sens = board_sensitivities(problem.topology, d1.values(problem), problem.parasitics)
    mats = _materials(sim)
    per_t = [float(drivers.temperature_std(sens, mats, [t])[0]) for t in sim.temperatures]
    return int(np.argmax(per_t))


def monte_carlo_drivers(sim: Simulation, d1: Designs, u: np.ndarray, with_temperature: bool):
    """Regression shares of one design from its simulated boards (:func:`drivers.regression_fit`).

    Inputs: x_i = ln(x_i/x_i,nom) of each position at 25 °C and, with a
    temperature range, the drift-induced change of ln f at the grid
    temperature where its first-order spread is largest.
    """
    problem = sim.problem
    topo, par = problem.topology, problem.parasitics
    vals = sampled_values(sim, d1, u)
    nominal = d1.values(problem)
    inputs = {p: np.log(vals[p][:, 0] / nominal[p][0]) for p in topo.positions}
    ln_f = np.log(board_frequency(topo, vals, par)[:, 0])
    t_worst = None
    drift = drift_factors(sim, u)
    if with_temperature and drift:
        i = _worst_drift_index(sim, d1)
        ln_ft = np.log(board_frequency(topo, values_at(vals, drift, i), par)[:, 0])
        inputs[drivers.TEMPERATURE] = ln_ft - ln_f
        ln_f, t_worst = ln_ft, float(sim.temperatures[i])
    fit = drivers.regression_fit(inputs, ln_f)
    out = {"shares": fit.shares, "r2": fit.r2}
    if t_worst is not None:
        out["temperature_c"] = t_worst
    return out


# ---------------------------------------------------------------- temperature


def over_temperature(sim: Simulation, designs: Designs, u: np.ndarray, passed, ys, seed: int):
    """Yield at 25 °C alone, at each grid temperature, and across the whole range."""
    n = u.shape[0]
    per_t = np.stack(
        [count_passing(at_temperatures(sim, [t]), designs, u) for t in sim.temperatures]
    )
    at25 = count_passing(at_temperatures(sim, [REFERENCE_TEMPERATURE]), designs, u)
    shift, _ = _shift(sim, designs)
    out = []
    for r in range(len(designs)):
        est = {
            k: estimate_yield(int(v), n, confidence=ys.confidence, method=ys.ci_method, seed=seed)
            for k, v in (("at", at25[r]), ("all", passed[r]))
        }
        worst = int(np.argmin(per_t[:, r]))
        out.append(
            {
                "range_c": list(ys.temperature),
                "temperatures_c": [float(t) for t in sim.temperatures],
                "yield_at_temperature": [float(k) / n for k in per_t[:, r]],
                "frequency_shift": [float(x) for x in np.expm1(shift[:, r])],
                "at_25c": est["at"].as_dict(),
                "over_range": est["all"].as_dict(),
                "worst_temperature_c": float(sim.temperatures[worst]),
            }
        )
    return out


def _shift(sim: Simulation, designs: Designs):
    from picker.core.screen import temperature_terms

    shift, var = temperature_terms(sim, designs)
    if shift.shape[0] != len(sim.temperatures):  # no drifting part
        shift = np.zeros((len(sim.temperatures), len(designs)))
    return shift, var


# ---------------------------------------------------------------- buy tighter


def _key(x: float | str) -> float | str:
    """Canonical price-table key: tolerances to 12 significant digits."""
    return x if isinstance(x, str) else float(f"{float(x):.12g}")


def _current(spec, sim: Simulation, d1: Designs):
    """Tolerance, swappable material, price table and part count of each position."""
    tols: dict[str, float | str] = {}
    mats: dict[str, str | None] = {}
    prices: dict[str, dict[float | str, float]] = {}
    counts: dict[str, int] = {}
    for p in sim.problem.topology.positions:
        t = sim.problem.tables[p]
        i = int(d1.idx[p][0])
        tols[p] = _key(float(t.tol[i]))
        m = _mat(sim.parts[p])
        mats[p] = m.name if m is not None and m.name != "tempco" else None
        part = spec.parts.get(p)
        table = {_key(k): v for k, v in (part.prices or ())} if part is not None else {}
        # The current part's price: ``price``, else its tolerance's entry, else its
        # material's; it is the price of both its tolerance and its material.
        now = part.price if part is not None else None
        for k in (tols[p], mats[p]):
            if now is None and k is not None:
                now = table.get(k)
        mat = mats[p]
        if now is not None:
            table.setdefault(tols[p], now)
            if mat is not None:
                table.setdefault(mat, now)
        if table:
            prices[p] = table
        counts[p] = 2 if t.second is not None and t.second[i] > 0 else 1
    return tols, mats, prices, counts


def yield_function(spec, sim: Simulation, d1: Designs, u: np.ndarray):
    """``fn(tol_overrides, material_overrides) -> yield`` on the rows ``u`` (cached)."""
    cache: dict = {}
    n = u.shape[0]
    fallback = spec.yield_.distribution

    def fn(tol_over, mat_over) -> float:
        key = (tuple(sorted(tol_over.items())), tuple(sorted(mat_over.items())))
        if key not in cache:
            s = sim
            for p, t in tol_over.items():
                s = with_tolerance(s, d1, p, float(t), fallback)
            for p, m in mat_over.items():
                s = with_material(s, p, m)
            cache[key] = float(count_passing(s, d1, u)[0]) / n
        return cache[key]

    return fn


def _tidy(change: dict) -> dict:
    """A change's dict with its cost rounded to 12 significant digits (no float noise)."""
    c = change.get("extra_cost_per_board")
    return {**change, "extra_cost_per_board": None if c is None else float(f"{c:.12g}")}


def buy_tighter(spec, sim: Simulation, d1: Designs, u: np.ndarray, fn=None) -> list[dict]:
    """Ranked single changes (next tolerance class, dielectric swap) for one design."""
    tols, mats, prices, counts = _current(spec, sim, d1)
    fn = fn or yield_function(spec, sim, d1, u)
    ranked = tighter.rank_changes(tols, fn, materials=mats, prices=prices, parts_per_board=counts)
    return [_tidy(c.as_dict()) for c in ranked]


def buy_plan(spec, sim: Simulation, d1: Designs, u: np.ndarray, target: float, fn=None) -> dict:
    """Greedy set of changes that reaches ``target`` (:func:`picker.production.tighter.greedy_plan`)."""
    tols, mats, prices, counts = _current(spec, sim, d1)
    fn = fn or yield_function(spec, sim, d1, u)
    steps = tighter.greedy_plan(
        tols, fn, target=target, materials=mats, prices=prices, parts_per_board=counts
    )
    final = steps[-1].yield_after if steps else fn({}, {})
    costs = [s.extra_cost for s in steps]
    known = [c for c in costs if c is not None]
    return {
        "target": target,
        "steps": [_tidy(s.as_dict()) for s in steps],
        "yield": final,
        "reaches_target": bool(final >= target),
        "extra_cost_per_board": (
            float(f"{sum(known):.12g}") if steps and len(known) == len(costs) else None
        ),
    }


def tolerance_sweep(spec, sim: Simulation, d1: Designs, u: np.ndarray, fn=None) -> dict:
    """Yield at the neighbouring tolerance classes of each position (for the plot).

    Rows ``(tolerance, yield, ci_low, ci_high)``: the current class, one looser
    and up to three tighter classes of :data:`picker.production.tighter.TOLERANCE_LADDER`.
    """
    ys = spec.yield_
    n = u.shape[0]
    tols, _, _, _ = _current(spec, sim, d1)
    fn = fn or yield_function(spec, sim, d1, u)
    ladder = tighter.TOLERANCE_LADDER
    out = {}
    for p, t0 in tols.items():
        looser = [t for t in ladder if t > t0 * (1 + 1e-9)][-1:]
        tighter_ = [t for t in ladder if t < t0 * (1 - 1e-9)][:3]
        rows = []
        for t in sorted({*looser, float(t0), *tighter_}, reverse=True):
            y = fn({} if t == t0 else {p: t}, {})
            ci = estimate_yield(round(y * n), n, confidence=ys.confidence, method=ys.ci_method,
                                seed=ys.seed)  # fmt: skip
            rows.append((t, y, ci.ci_low, ci.ci_high))
        out[p] = rows
    return out


# ---------------------------------------------------------------- trimmer


def _factors(sim: Simulation, d1: Designs, u: np.ndarray):
    """Board-level nominal values and per-board factors, (n_temps, samples) with drift."""
    problem = sim.problem
    par = problem.parasitics
    marked = {p: v[0] for p, v in d1.values(problem).items()}
    nominal = {p: float(v) for p, v in board_values(marked, par).items()}
    vals = sampled_values(sim, d1, u)
    drift = drift_factors(sim, u)
    n_t = len(sim.temperatures) if drift else 1
    per_t = [board_values(values_at(vals, drift, i), par) for i in range(n_t)]
    fac = {p: np.stack([bv[p][:, 0] / nominal[p] for bv in per_t]) for p in nominal}
    if n_t == 1:
        fac = {p: f[0] for p, f in fac.items()}
    return marked, nominal, fac


def _recentre_options(spec, sim: Simulation, pos: str, marked: dict) -> list[float]:
    """Values of ``pos`` (its table and the spec's range) from half the current value up
    to it, where the feedback window still holds."""
    problem = sim.problem
    par = problem.parasitics
    vals = np.unique(
        np.concatenate([problem.tables[pos].values, candidate_values(spec.parts[pos])])
    )
    cur = marked[pos]
    keep = (vals >= 0.5 * cur) & (vals <= cur * (1 + 1e-12))
    if pos in ("C1", "C2"):
        c1 = np.where(pos == "C1", vals, marked["C1"]) + par.c1_shunt
        c2 = np.where(pos == "C2", vals, marked["C2"]) + par.c2_shunt
        beta = c1 / c2
        keep &= (beta >= problem.beta_min) & (beta <= problem.beta_max)
    return [float(v) for v in vals[keep]]


def trimmer_advice(spec, sim: Simulation, d1: Designs, u: np.ndarray) -> dict | None:
    """Trimmer range and re-centred fixed part for one design (:func:`picker.production.trimmer.size_trimmer`).

    ``[yield] trimmer = "across"``: every fixed part that can be re-centred
    exactly (L, C3, and C1/C2 when they carry no shunt) is tried over its
    table values from half its value up to it (C1/C2 only where the feedback
    window still holds); the smallest trimmer wins, then the smallest change.
    ``"C3"``: a trimmer in parallel with a re-centred (or removed) C3.
    """
    ys = spec.yield_
    if ys.trimmer == "none":
        return None
    problem = sim.problem
    topo, par = problem.topology, problem.parasitics
    marked, nominal, fac = _factors(sim, d1, u)
    common = dict(share=ys.trimmer_share, stray=par.stray)
    if ys.trimmer == "C3":
        opts = _recentre_options(spec, sim, "C3", marked)
        found = [trimmer.size_trimmer(topo, nominal, fac, problem.f_min, problem.f_max,
                                      placement="C3", recentre_values=opts, **common)]  # fmt: skip
    else:
        found = []
        for p in topo.positions:
            if (p == "C1" and par.c1_shunt) or (p == "C2" and par.c2_shunt):
                continue
            scale = par.l_scale if p == "L" else 1.0
            opts = [v * scale for v in _recentre_options(spec, sim, p, marked)]
            found.append(trimmer.size_trimmer(topo, nominal, fac, problem.f_min, problem.f_max,
                                              placement="across", recentre=p,
                                              recentre_values=opts, **common))  # fmt: skip

    def rank(a):
        t = a.trimmer
        moved = abs(np.log(max(a.fixed_value, 1e-30) / nominal[a.position]))
        return (t is None, t.span if t else 0.0, t.c_max if t else 0.0, -a.tunable, moved)

    best = min(found, key=rank)
    pos = best.position
    scale = par.l_scale if pos == "L" else 1.0
    new = (best.fixed_value or 0.0) / scale
    t = best.trimmer
    return {
        "placement": best.placement,
        "share": best.share,
        "trimmer": None if t is None else {"min_f": t.c_min, "max_f": t.c_max},
        "tunable": best.tunable,
        "required_f": [float(x) if np.isfinite(x) else None for x in best.required],
        "recentre": {"position": pos, "from": float(marked[pos]), "to": float(new)},
        "temperatures_c": [float(x) for x in sim.temperatures],
    }


# ---------------------------------------------------------------- per-candidate figures


def extras(spec, sim: Simulation, designs: Designs, u: np.ndarray) -> list[dict]:
    """Production figures of every candidate (best first), one JSON-ready dict each."""
    ys = spec.yield_
    n = len(designs)
    if n == 0:
        return []
    with_t = ys.temperature is not None
    ux = u[:EXTRAS_ROWS]
    shares = first_order(sim, designs, with_t)
    out: list[dict] = [{"drivers": {k: float(v[r]) for k, v in shares.items()}} for r in range(n)]
    for r in range(n):
        out[r]["drivers_mc"] = monte_carlo_drivers(sim, single(designs, r), ux, with_t)
    passed = count_passing(sim, designs, u)
    if with_t:
        for d, t in zip(out, over_temperature(sim, designs, u, passed, ys, ys.seed), strict=True):
            d["yield_over_temperature"] = t
    for r in range(min(n, TIGHTER_CANDIDATES)):
        d1 = single(designs, r)
        fn = yield_function(spec, sim, d1, ux)
        out[r]["tighter"] = buy_tighter(spec, sim, d1, ux, fn)
        if r == 0 and ys.target is not None and passed[0] / u.shape[0] < ys.target:
            out[r]["tighter_plan"] = buy_plan(spec, sim, d1, ux, ys.target, fn)
            advice = trimmer_advice(spec, sim, d1, u[:TRIMMER_ROWS])
            if advice is not None:
                out[r]["trimmer"] = advice
    return out


def plot_inputs(spec, sim: Simulation, designs: Designs, u: np.ndarray) -> dict:
    """Arrays the plots of the best design need (not part of the JSON)."""
    with_t = spec.yield_.temperature is not None
    ux = u[:EXTRAS_ROWS]
    d1 = single(designs, 0)
    problem = sim.problem
    vals = sampled_values(sim, d1, ux)
    drift = drift_factors(sim, ux)
    i, t_label = 0, REFERENCE_TEMPERATURE
    if drift:
        per_t = [count_passing(at_temperatures(sim, [t]), d1, ux)[0] for t in sim.temperatures]
        i = int(np.argmin(per_t))
        t_label = float(sim.temperatures[i])
    f = board_frequency(problem.topology, values_at(vals, drift, i), problem.parasitics)[:, 0]
    shares = {k: float(v[0]) for k, v in first_order(sim, d1, with_t).items()}
    return {
        "frequencies": f,
        "temperature_c": t_label,
        "f_min": problem.f_min,
        "f_max": problem.f_max,
        "target": spec.frequency.target,
        "drivers": shares,
        "drivers_mc": monte_carlo_drivers(sim, d1, ux, with_t)["shares"],
        "sweep": tolerance_sweep(spec, sim, d1, ux),
        "tolerances": {p: float(problem.tables[p].tol[d1.idx[p][0]]) for p in d1.idx},
    }


def reorder(passed: np.ndarray, designs: Designs, target: float) -> np.ndarray:
    """Rank order after refinement (:func:`picker.core.ranking.rank_order`)."""
    return rank_order(passed, designs.f_nominal, target)
