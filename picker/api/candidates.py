"""Ranked designs -> :class:`~picker.api.results.Candidate` objects, with their extras.

:func:`build_candidates` turns the ranked struct of arrays into candidates with
their part picks, yield estimate, corners and sensitivities;
:func:`extras` adds the per-candidate JSON figures of the circuit-aware model
(:func:`circuit_extras`), the production view (:func:`production_extras`) and
the buyer's view (:func:`cost_extras`); :func:`loaded_view` reports the ideal
and the loaded frequency side by side. The cost limit (``[cost]
max_per_board``) drops designs before the Monte Carlo (:func:`cost_limited`) and
explains an empty result (:func:`over_cost`).
"""

from __future__ import annotations

from dataclasses import replace
from functools import partial
from typing import Any

import numpy as np

from picker.api.problem import amplifier_params_of, recentre_values
from picker.api.results import Candidate, Miss, PartPick
from picker.buyer.costing import cost_figures, design_costs, within_cost
from picker.core.montecarlo import Simulation, YieldEstimate, estimate_yield
from picker.core.sampling import Rows
from picker.core.screen import corner_span
from picker.core.search import Designs, Problem
from picker.production import figures as production
from picker.spec.model import Spec
from picker.tank.board import board_sensitivities

__all__ = [
    "build_candidates",
    "circuit_extras",
    "cost_extras",
    "cost_limited",
    "extras",
    "loaded_view",
    "over_cost",
    "production_extras",
]


def build_candidates(
    spec: Spec,
    problem: Problem,
    designs: Designs,
    passed: np.ndarray,
    screen: np.ndarray,
    samples: int,
    seed: int,
    extras: list[dict[str, Any]] | None = None,
    *,
    estimates: list[YieldEstimate] | None = None,
) -> list[Candidate]:
    """One :class:`Candidate` per design, rank 1 first.

    ``passed`` (n,) boards that passed of ``samples``, ``screen`` (n,) the
    first-order screen yield, ``extras`` one JSON dict per design;
    ``estimates`` replaces the binomial estimate from ``passed`` (the
    conditional Monte Carlo's, :mod:`picker.core.conditional`).
    """
    ys = spec.yield_
    lo, hi = corner_span(problem, designs)
    st, dst = problem.parasitics.stray, spec.parasitics.stray_tolerance
    for edge in (st - dst, st + dst) if dst > 0 else ():  # the stray's own two corners
        at = replace(problem, parasitics=replace(problem.parasitics, stray=edge))
        lo_e, hi_e = corner_span(at, designs)
        lo, hi = np.minimum(lo, lo_e), np.maximum(hi, hi_e)
    k, dk = problem.topology.coupling, spec.tank.coupling_tolerance
    for edge in (k - dk, k + dk) if dk > 0 else ():  # k's own two corners, with the stray's
        for st_e in (st - dst, st + dst) if dst > 0 else (st,):
            at = replace(
                problem,
                topology=problem.topology.configured(edge),
                parasitics=replace(problem.parasitics, stray=st_e),
            )
            lo_e, hi_e = corner_span(at, designs)
            lo, hi = np.minimum(lo, lo_e), np.maximum(hi, hi_e)
    vals = designs.values(problem)
    sens = board_sensitivities(problem.topology, vals, problem.parasitics)
    target = spec.frequency.target
    out = []
    for r in range(len(designs)):
        parts = {}
        for p in problem.topology.positions:
            t = problem.tables[p]
            i = designs.idx[p][r]
            pair: dict[str, Any] = {}
            if t.second is not None and t.second[i] > 0:
                pair = dict(
                    second_value=float(t.second[i]),
                    second_part_id=str(t.second_id[i]),
                    second_tolerance=float(t.second_tol[i]),
                )
            parts[p] = PartPick(
                p,
                float(t.values[i]),
                problem.topology.unit(p),
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
                yield_=estimates[r]
                if estimates is not None
                else estimate_yield(
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


def loaded_view(spec: Spec, cands: list[Candidate]) -> list[Candidate]:
    """With an amplifier: ``f_nominal_hz`` is the ideal frequency; ``error``,
    ``in_window`` and the worst-case corners follow the loaded one (the ideal
    corners times the nominal loaded/ideal ratio); ``extra`` has both."""
    if spec.amplifier is None:
        return cands
    out = []
    f = spec.frequency
    for c in cands:
        fl = c.extra.get("f_loaded_hz")
        f_ideal = c.extra["f_ideal_hz"]
        if fl is None:
            out.append(
                replace(c, f_nominal_hz=f_ideal, error=f_ideal / f.target - 1.0, in_window=False)
            )
            continue
        r = fl / f_ideal  # corners scaled by the nominal loading ratio
        out.append(
            replace(
                c,
                f_nominal_hz=f_ideal,
                error=fl / f.target - 1.0,
                in_window=bool(f.f_min <= fl <= f.f_max),
                f_worst_low_hz=c.f_worst_low_hz * r,
                f_worst_high_hz=c.f_worst_high_hz * r,
                extra=_scaled_over_range(c.extra, r),
            )
        )
    return out


def _scaled_over_range(extra: dict[str, Any], r: float) -> dict[str, Any]:
    """``extra`` with the worst case over temperature scaled by the loading ratio ``r``."""
    wc = extra.get("worst_case_over_range")
    if not wc:
        return extra
    scaled = {**wc, "f_low_hz": wc["f_low_hz"] * r, "f_high_hz": wc["f_high_hz"] * r}
    return {**extra, "worst_case_over_range": scaled}


# ---------------------------------------------------------------- per-candidate extras


def circuit_extras(spec: Spec, sim: Simulation, designs: Designs, u: Rows) -> list[dict[str, Any]]:
    """Extra per-candidate figures of the circuit-aware model (JSON fields), one dict each.

    Empty without an ``[amplifier]`` section. Otherwise (:func:`picker.circuit.figures.nominal_figures`):
    ``f_ideal_hz``, ``f_loaded_hz``, ``startup_margin`` (nominal),
    ``startup_margin_worst`` (smallest over every Monte Carlo board and
    temperature), ``amplitude_v``, ``overdriven``, ``peak_voltage_v``, ``cautions``.
    """
    params = amplifier_params_of(spec)
    if params is None:
        return [{} for _ in range(len(designs))]
    pb = sim.problem
    vals = designs.values(pb)
    rating = {p: spec.parts[p].voltage_rating for p in pb.topology.positions}
    polar = {p: spec.parts[p].polarised for p in pb.topology.positions}
    # the loaded model (its stages import scipy.special): only with an amplifier
    from picker.circuit.figures import nominal_figures, worst_margins

    worst = worst_margins(sim, designs, u)
    orbits = getattr(sim.model, "orbits", lambda d: [None] * len(d))(designs)
    out = []
    for r in range(len(designs)):
        fig = nominal_figures(
            pb.topology,
            {p: float(v[r]) for p, v in vals.items()},
            pb.parasitics,
            params,
            voltage_rating=rating,
            polarised=polar,
            orbit=orbits[r],
        )
        fig["startup_margin_worst"] = float(worst[r])
        out.append(fig)
    return out


def production_extras(
    spec: Spec, sim: Simulation, designs: Designs, u: Rows
) -> list[dict[str, Any]]:
    """Extra per-candidate figures of the production view (JSON fields), one dict each.

    ``drivers`` (name -> first-order variance share; None where the nominal design has no
    steady frequency), ``drivers_mc``,
    ``yield_over_temperature``, ``tighter`` (best few), ``tighter_plan`` and
    ``trimmer`` (best design, below the yield target): see :mod:`picker.production.figures`.
    """
    recentre = partial(recentre_values, spec, sim.problem)
    return production.extras(spec, sim, designs, u, recentre)


def cost_extras(spec: Spec, sim: Simulation, designs: Designs, u: Rows) -> list[dict[str, Any]]:
    """Per-candidate ``cost`` {per_board, build, build_quantity, stock_ok, short}
    (:func:`picker.buyer.costing.cost_figures`)."""
    on_hand: dict[str, float] = {}
    for part in spec.parts.values():
        if part.stock_list is not None:
            sl = part.stock_list
            on_hand.update({str(i): float(q) for i, q in zip(sl.ids, sl.on_hand, strict=True)})
    return cost_figures(sim.problem, designs, spec.cost.build_quantity, on_hand)


def extras(spec: Spec, sim: Simulation, designs: Designs, u: Rows) -> list[dict[str, Any]]:
    """Every per-candidate JSON figure: circuit, production and cost, merged per design."""
    out: list[dict[str, Any]] = [{} for _ in range(len(designs))]
    for hook in (circuit_extras, production_extras, cost_extras):
        for d, more in zip(out, hook(spec, sim, designs, u), strict=True):
            d.update(more)
    return out


# ---------------------------------------------------------------- cost limit


def cost_limited(spec: Spec, problem: Problem, designs: Designs) -> tuple[Designs, Designs | None]:
    """Designs within ``[cost] max_per_board``, and the ones dropped (None without a limit)."""
    limit = spec.cost.max_per_board
    if limit is None or len(designs) == 0:
        return designs, None
    ok = within_cost(problem, designs, limit)
    return designs.take(np.flatnonzero(ok)), designs.take(np.flatnonzero(~ok))


def over_cost(spec: Spec, problem: Problem, dropped: Designs) -> tuple[list[Miss], list[str]]:
    """Nearest misses and advice when every feasible design is over the cost limit."""
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
        )
        for r in sel
    ]
    limit = spec.cost.max_per_board
    if np.isfinite(key[sel[0]]):
        advice = [
            f"raise cost.max_per_board from {limit:g} to at least {key[sel[0]]:.4g} "
            "(the cheapest design in the window)"
        ]
    else:
        advice = [
            "give every position a price (parts.X.price or priced stock parts): "
            "a design without a cost cannot meet cost.max_per_board"
        ]
    return misses, advice
