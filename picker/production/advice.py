"""What to buy or fit for a better yield: tighter parts, other dielectrics, a trimmer.

For one design, the run's :class:`~picker.core.montecarlo.Simulation` is
modified (a position at another tolerance or material, the grid at other
temperatures) and every yield is counted by
:func:`picker.core.montecarlo.count_passing` on the same rows of ``u`` (common
random numbers), so the difference between two options is not sampling noise.
:func:`buy_tighter` ranks single changes, :func:`buy_plan` chains them up to the
yield target (:mod:`picker.production.tighter`), :func:`tolerance_sweep` feeds the
yield-against-tolerance plot and :func:`trimmer_advice` sizes a trimmer
(:mod:`picker.production.trimmer`).

The spec's keys come in through the small protocols below (the API hands its
``Spec`` in; nothing here imports it), and the values a part may be re-centred
to come in as a function of the position (``picker.api.problem.recentre_values``).
"""

from __future__ import annotations

import dataclasses
import functools
from collections.abc import Callable, Mapping
from typing import Any, Protocol

import numpy as np
from numpy.typing import ArrayLike

from picker.core.montecarlo import (
    Simulation,
    count_passing,
    drift_factors,
    estimate_yield,
    sampled_values,
    values_at,
)
from picker.core.search import Designs
from picker.parts.drift import get_material
from picker.production import tighter, trimmer
from picker.production.tighter import YieldFn
from picker.tank.board import board_beta, board_scale, board_shunt, board_values
from picker.units import json_number

#: ``recentre(position) -> values`` the trimmer advice may re-centre a position to, (n,) float.
Recentre = Callable[[str], np.ndarray]


# ---------------------------------------------------------------- what is read of the spec


class YieldKeys(Protocol):
    """The ``[yield]`` keys the production figures read."""

    @property
    def seed(self) -> int: ...

    @property
    def confidence(self) -> float: ...

    @property
    def ci_method(self) -> str: ...

    @property
    def distribution(self) -> str: ...

    @property
    def temperature(self) -> tuple[float, float] | None: ...

    @property
    def target(self) -> float | None: ...

    @property
    def trimmer(self) -> str: ...

    @property
    def trimmer_share(self) -> float: ...


class PartPrices(Protocol):
    """A position's ``price`` and ``prices`` keys (per tolerance class or material)."""

    @property
    def price(self) -> float | None: ...

    @property
    def prices(self) -> tuple[tuple[float | str, float], ...] | None: ...


class FrequencyKeys(Protocol):
    """The ``[frequency]`` key the plots read."""

    @property
    def target(self) -> float: ...


class ProductionSpec(Protocol):
    """What the production figures read of a spec."""

    @property
    def yield_(self) -> YieldKeys: ...

    @property
    def parts(self) -> Mapping[str, PartPrices]: ...

    @property
    def frequency(self) -> FrequencyKeys: ...


# ---------------------------------------------------------------- one design, modified


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
    repl: dict[str, Any] = {"tol": new_tol}
    if t.second is not None:
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
    """The same run with position ``pos`` of another material (:func:`picker.parts.drift.get_material`)."""
    var = dataclasses.replace(sim.parts[pos], material=get_material(name))
    return dataclasses.replace(sim, parts={**sim.parts, pos: var})


def at_temperatures(sim: Simulation, temps: ArrayLike) -> Simulation:
    """The same run judged at the temperatures ``temps`` (°C) only."""
    return dataclasses.replace(sim, temperatures=np.atleast_1d(np.asarray(temps, dtype=float)))


# ---------------------------------------------------------------- buy tighter


def _tol_key(x: float) -> float:
    """Canonical price-table key of a tolerance: 12 significant digits."""
    return float(f"{float(x):.12g}")


def _key(x: float | str) -> float | str:
    """Canonical price-table key: tolerances to 12 significant digits, materials as named."""
    return x if isinstance(x, str) else _tol_key(x)


def _current(
    spec: ProductionSpec, sim: Simulation, d1: Designs
) -> tuple[
    dict[str, float], dict[str, str | None], dict[str, dict[float | str, float]], dict[str, int]
]:
    """Tolerance, swappable material, price table and part count of each position."""
    tols: dict[str, float] = {}
    mats: dict[str, str | None] = {}
    prices: dict[str, dict[float | str, float]] = {}
    counts: dict[str, int] = {}
    for p in sim.problem.topology.positions:
        if p in sim.shared:  # a tapped coil's section: bought with its coil (one part)
            continue
        t = sim.problem.tables[p]
        i = int(d1.idx[p][0])
        tols[p] = _tol_key(float(t.tol[i]))
        m = sim.parts[p].material
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


def yield_function(spec: ProductionSpec, sim: Simulation, d1: Designs, u: np.ndarray) -> YieldFn:
    """``fn(tol_overrides, material_overrides) -> yield`` on the rows ``u`` (cached)."""
    cache: dict[tuple[tuple[tuple[str, float], ...], tuple[tuple[str, str], ...]], float] = {}
    n = u.shape[0]
    fallback = spec.yield_.distribution
    sections: dict[str, list[str]] = {}
    for q, p in sim.shared.items():  # a tapped coil's sections, by their coil's position
        sections.setdefault(p, []).append(q)

    def fn(tol_over: dict[str, float], mat_over: dict[str, str]) -> float:
        key = (tuple(sorted(tol_over.items())), tuple(sorted(mat_over.items())))
        if key not in cache:
            s = sim
            for p, t in tol_over.items():
                for q in (p, *sections.get(p, ())):  # a coil's sections move with it
                    s = with_tolerance(s, d1, q, float(t), fallback)
            for p, m in mat_over.items():
                for q in (p, *sections.get(p, ())):
                    s = with_material(s, q, m)
            cache[key] = float(count_passing(s, d1, u)[0]) / n
        return cache[key]

    return fn


def _tidy(change: dict[str, Any]) -> dict[str, Any]:
    """A change's dict with its cost rounded to 12 significant digits (no float noise)."""
    c = change.get("extra_cost_per_board")
    return {**change, "extra_cost_per_board": None if c is None else float(f"{c:.12g}")}


def buy_tighter(
    spec: ProductionSpec,
    sim: Simulation,
    d1: Designs,
    u: np.ndarray,
    fn: YieldFn | None = None,
) -> list[dict[str, Any]]:
    """Ranked single changes (next tolerance class, dielectric swap) for one design."""
    tols, mats, prices, counts = _current(spec, sim, d1)
    fn = fn or yield_function(spec, sim, d1, u)
    ranked = tighter.rank_changes(tols, fn, materials=mats, prices=prices, parts_per_board=counts)
    return [_tidy(c.as_dict()) for c in ranked]


def buy_plan(
    spec: ProductionSpec,
    sim: Simulation,
    d1: Designs,
    u: np.ndarray,
    target: float,
    fn: YieldFn | None = None,
) -> dict[str, Any]:
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


def tolerance_sweep(
    spec: ProductionSpec,
    sim: Simulation,
    d1: Designs,
    u: np.ndarray,
    fn: YieldFn | None = None,
) -> dict[str, list[tuple[float, float, float, float]]]:
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
            ci = estimate_yield(
                round(y * n), n, confidence=ys.confidence, method=ys.ci_method, seed=ys.seed
            )
            rows.append((t, y, ci.ci_low, ci.ci_high))
        out[p] = rows
    return out


# ---------------------------------------------------------------- trimmer


def _factors(
    sim: Simulation, d1: Designs, u: np.ndarray
) -> tuple[dict[str, float], dict[str, float], dict[str, np.ndarray]]:
    """Marked and board-level nominal values, and per-board factors (n_temps, samples) with drift."""
    problem = sim.problem
    topo, par = problem.topology, problem.parasitics
    marked = {p: v[0] for p, v in d1.values(problem).items()}
    nominal = {p: float(v) for p, v in board_values(topo, marked, par).items()}
    vals = sampled_values(sim, d1, u)
    drift = drift_factors(sim, u)
    n_t = len(sim.temperatures) if drift else 1
    per_t = [board_values(topo, values_at(vals, drift, i), par) for i in range(n_t)]
    fac = {p: np.stack([bv[p][:, 0] / nominal[p] for bv in per_t]) for p in nominal}
    if n_t == 1:
        fac = {p: f[0] for p, f in fac.items()}
    return marked, nominal, fac


def _recentre_options(
    sim: Simulation, pos: str, marked: Mapping[str, float], candidates: np.ndarray
) -> list[float]:
    """The ``candidates`` for ``pos`` from half its current value up to it, where the
    feedback window still holds (for a position of the feedback pair)."""
    problem = sim.problem
    topo, par = problem.topology, problem.parasitics
    vals = np.asarray(candidates, dtype=float)
    cur = marked[pos]
    keep = (vals >= 0.5 * cur) & (vals <= cur * (1 + 1e-12))
    if pos in topo.feedback_pair:
        pair = {p: (vals if p == pos else marked[p]) for p in topo.feedback_pair}
        beta = board_beta(topo, pair, par)
        keep &= (beta >= problem.beta_min) & (beta <= problem.beta_max)
    return [float(v) for v in vals[keep]]


def trimmer_advice(
    spec: ProductionSpec, sim: Simulation, d1: Designs, u: np.ndarray, recentre: Recentre
) -> dict[str, Any] | None:
    """Trimmer range and re-centred fixed part for one design (:func:`picker.production.trimmer.size_trimmer`).

    ``[yield] trimmer = "across"``: every fixed part that can be re-centred
    exactly (the inductor, the chain capacitors, and the feedback pair when it
    carries no shunt) is tried over the values ``recentre(position)`` from half
    its value up to it (the feedback pair only where the feedback window still
    holds); the smallest trimmer wins, then the smallest change.
    ``"<position>"`` (the topology's ``trimmer_position``, C3 of a Clapp tank): a
    trimmer in parallel with that capacitor, re-centred or removed.
    """
    ys = spec.yield_
    if ys.trimmer == "none":
        return None
    problem = sim.problem
    topo, par = problem.topology, problem.parasitics
    marked, nominal, fac = _factors(sim, d1, u)
    size = functools.partial(
        trimmer.size_trimmer,
        topo,
        nominal,
        fac,
        problem.f_min,
        problem.f_max,
        share=ys.trimmer_share,
        stray=par.stray,
    )
    if ys.trimmer != "across":  # in parallel with a chain capacitor
        at = ys.trimmer
        found = [
            size(placement=at, recentre_values=_recentre_options(sim, at, marked, recentre(at)))
        ]
    else:
        found = []
        for p in topo.positions:
            if board_shunt(topo, p, par):
                continue
            scale = board_scale(topo, p, par)
            opts = [v * scale for v in _recentre_options(sim, p, marked, recentre(p))]
            found.append(size(placement="across", recentre=p, recentre_values=opts))

    def rank(a: trimmer.TrimmerAdvice) -> tuple[bool, float, float, float, float]:
        assert a.position is not None and a.fixed_value is not None  # every option re-centres
        t = a.trimmer
        moved = abs(np.log(max(a.fixed_value, 1e-30) / nominal[a.position]))
        return (t is None, t.span if t else 0.0, t.c_max if t else 0.0, -a.tunable, moved)

    best = min(found, key=rank)
    pos = best.position
    assert pos is not None
    new = (best.fixed_value or 0.0) / board_scale(topo, pos, par)
    t = best.trimmer
    return {
        "placement": best.placement,
        "share": best.share,
        "trimmer": None if t is None else {"min_f": t.c_min, "max_f": t.c_max},
        "tunable": best.tunable,
        "required_f": [json_number(x) for x in best.required],
        "recentre": {"position": pos, "from": float(marked[pos]), "to": float(new)},
        "temperatures_c": [float(x) for x in sim.temperatures],
    }
