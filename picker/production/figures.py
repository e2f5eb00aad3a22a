"""The production view of ranked designs: spread drivers, yield over temperature, plot inputs.

The per-candidate figures that :func:`picker.api.candidates.production_extras`
adds to the JSON, and the arrays the plots of the best design need. It prints
nothing and writes no files; randomness comes in as the run's common random
numbers ``u`` (samples on axis 0, columns of
:meth:`~picker.core.montecarlo.Simulation.columns` on axis 1), a matrix or a
:class:`~picker.core.sampling.RandomRows` stream that is drawn in batches and
never held whole (memory does not grow with the samples).

Every yield here is counted by :func:`picker.core.montecarlo.count_passing` on the
same rows of ``u`` (common random numbers), so the difference between two
options is not sampling noise. The yield over temperature uses every row;
the other analyses (the regression drivers ``drivers_mc``, the buy-tighter
list, the histogram and sweep of the plots) use a bounded subsample, the
first :data:`EXTRAS_ROWS` rows of ``u`` (:data:`TRIMMER_ROWS` for the trimmer
search), whatever the run's sample count; the buy-tighter list
(:mod:`picker.production.advice`) is made for the best
:data:`TIGHTER_CANDIDATES` designs only and the trimmer advice for the best
design only, which bounds their time.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from picker.core.montecarlo import (
    REFERENCE_TEMPERATURE,
    STRAY,
    Simulation,
    count_passing,
    drift_factors,
    estimate_yield,
    sampled_values,
    values_at,
)
from picker.core.precision import single
from picker.core.propagation import TEMPERATURE, first_order_shares, temperature_std
from picker.core.sampling import Rows, head
from picker.core.screen import part_sigmas, temperature_terms
from picker.core.search import Designs
from picker.parts.drift import Material, envelope
from picker.parts.pairs import effective_tolerance
from picker.production.advice import (
    ProductionSpec,
    Recentre,
    YieldKeys,
    at_temperatures,
    buy_plan,
    buy_tighter,
    tolerance_sweep,
    trimmer_advice,
    yield_function,
)
from picker.production.drivers import board_frequencies, model_sensitivities, regression_fit
from picker.tank.base import COUPLING
from picker.tank.board import board_frequency, board_values
from picker.units import json_number

#: Rows of u used for drivers, buy-tighter and plot figures (2^17, a Sobol block).
EXTRAS_ROWS = 1 << 17
#: Rows of u used for the trimmer search (2^16: about 200 boards in the 0.3 % left out).
TRIMMER_ROWS = 1 << 16
#: Designs (best first) that get a buy-tighter list.
TIGHTER_CANDIDATES = 3


# ---------------------------------------------------------------- spread drivers


def _materials(sim: Simulation) -> dict[str, Material]:
    return {p: v.material for p, v in sim.parts.items() if v.material is not None}


def first_order(sim: Simulation, designs: Designs, with_temperature: bool) -> dict[str, np.ndarray]:
    """First-order variance shares per position (and temperature), name -> (n,).

    :func:`picker.core.propagation.first_order_shares` of the board sensitivities
    (the board model's: :func:`picker.production.drivers.model_sensitivities`)
    and part spreads; with a temperature range, σ_T is
    :func:`picker.core.propagation.temperature_std` over the grid.
    """
    sens = model_sensitivities(sim, designs)
    t_std = None
    if with_temperature:
        t_std = temperature_std(sens, _materials(sim), sim.temperatures)
        t_std = np.broadcast_to(t_std, (len(designs),))
    sigmas = part_sigmas(sim, designs)
    if sim.stray_tol > 0:  # the stray as one more input (picker.tank.board: ∂f/∂stray)
        s_stray, sig_stray = _stray_terms(sim, designs)
        sens = {**sens, STRAY: s_stray}
        sigmas = {**sigmas, STRAY: sig_stray}
    for p, q in sim.shared.items():  # a tapped coil's sections: one input, named by q
        sens = {**sens, q: np.asarray(sens[q]) + sens[p], p: 0.0 * np.asarray(sens[p])}
    if sim.coupling_tol > 0:  # k as one more input: ∂ln f/∂k and σ_k = t/√3 (GUM 4.3.7)
        problem = sim.problem
        bv = board_values(problem.topology, designs.values(problem), problem.parasitics)
        s_k = np.broadcast_to(problem.topology.coupling_sensitivity(bv), (len(designs),))
        sens = {**sens, COUPLING: s_k + _loaded_slope(sim, designs, COUPLING)}
        sigmas = {**sigmas, COUPLING: np.full(len(designs), sim.coupling_tol / np.sqrt(3.0))}
    return first_order_shares(sens, sigmas, t_std)


def _stray_terms(sim: Simulation, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """S = ∂ln f/∂ln stray = −stray/(2·C_t) and σ_rel = stray_tol/(√3·stray), shape (n,);
    with the loaded model, S takes its large-signal slope (:meth:`LoadedModel.spread_terms`).

    C_t = C_s + stray is the tank's total capacitance (f ∝ (L·C_t)^(-1/2),
    :func:`picker.tank.board.ideal_jacobian`); a uniform spread over ±t has
    σ = t/√3 (GUM JCGM 100:2008, 4.3.7).
    """
    problem = sim.problem
    topo, par = problem.topology, problem.parasitics
    bv = board_values(topo, designs.values(problem), par)
    c_t = np.asarray(topo.c_eff(bv, par.stray), dtype=float)
    s = -par.stray / (2.0 * c_t)
    s = s + par.stray * _loaded_slope(sim, designs, STRAY)
    sig = np.full(len(designs), sim.stray_tol / (np.sqrt(3.0) * par.stray))
    return s, sig


def _loaded_slope(sim: Simulation, designs: Designs, key: str) -> Any:
    """With the loaded model, the large-signal model's own slope ∂L/∂x beyond the ideal
    tank's for a board's own stray or k (``key``; a of (X1) in
    :mod:`picker.circuit.board_spread`, L = ln f_steady − ln f_ideal), so the share is the
    yield model's; 0 with the ideal tank, (n,) otherwise."""
    terms = getattr(sim.model, "spread_terms", None)
    tol = getattr(sim.model, "spread_tol", None)
    if terms is None or tol is None or tol(key) <= 0:
        return 0.0
    return np.nan_to_num(terms(designs, key)[0])


def _worst_drift_index(sim: Simulation, d1: Designs) -> int:
    """Grid index where the drift spread of ln f is largest (first order)."""
    sens = model_sensitivities(sim, d1)
    mats = _materials(sim)
    per_t = [float(temperature_std(sens, mats, [t])[0]) for t in sim.temperatures]
    return int(np.argmax(per_t))


def monte_carlo_drivers(
    sim: Simulation, d1: Designs, u: np.ndarray, with_temperature: bool
) -> dict[str, Any]:
    """Regression shares of one design from its simulated boards.

    :func:`picker.production.drivers.regression_fit` with inputs x_i =
    ln(x_i/x_i,nom) of each position at 25 °C and, with a temperature range,
    the drift-induced change of ln f at the grid temperature where its
    first-order spread is largest.
    """
    problem = sim.problem
    topo = problem.topology
    vals = sampled_values(sim, d1, u)
    nominal = d1.values(problem)
    inputs = {p: np.log(vals[p][:, 0] / nominal[p][0]) for p in topo.positions}
    if STRAY in vals:  # ln f is linear in the stray itself (C_t = C_s + stray), not in its log
        inputs[STRAY] = vals[STRAY][:, 0] / problem.parasitics.stray - 1.0
    for p in sim.shared:  # moves with its coil: one input (the regression's share is q's)
        inputs[p] = np.zeros_like(inputs[p])
    if COUPLING in vals:  # ln f against k itself (k may be 0: no log)
        inputs[COUPLING] = vals[COUPLING][:, 0] - topo.coupling
    ln_f = np.log(board_frequencies(sim, d1, vals)[:, 0])
    t_worst = None
    drift = drift_factors(sim, u)
    if with_temperature and drift:
        i = _worst_drift_index(sim, d1)
        ln_ft = np.log(board_frequencies(sim, d1, values_at(vals, drift, i))[:, 0])
        inputs[TEMPERATURE] = ln_ft - ln_f
        ln_f, t_worst = ln_ft, float(sim.temperatures[i])
    fit = regression_fit(inputs, ln_f)
    # null where fewer than two boards oscillate (regression_fit: no spread to apportion)
    out: dict[str, Any] = {
        "shares": {k: json_number(v) for k, v in fit.shares.items()},
        "r2": json_number(fit.r2),
    }
    if t_worst is not None:
        out["temperature_c"] = t_worst
    return out


# ---------------------------------------------------------------- temperature


def over_temperature(
    sim: Simulation,
    designs: Designs,
    u: Rows,
    passed: np.ndarray,
    ys: YieldKeys,
    seed: int,
) -> list[dict[str, Any]]:
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
                "range_c": list(ys.temperature or ()),
                "temperatures_c": [float(t) for t in sim.temperatures],
                "yield_at_temperature": [float(k) / n for k in per_t[:, r]],
                "frequency_shift": [float(x) for x in np.expm1(shift[:, r])],
                "at_25c": est["at"].as_dict(),
                "over_range": est["all"].as_dict(),
                "worst_temperature_c": float(sim.temperatures[worst]),
            }
        )
    return out


def _shift(sim: Simulation, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """First-order drift of ln f (:func:`picker.core.screen.temperature_terms`), (n_temps, n)."""
    shift, var = temperature_terms(sim, designs)
    if shift.shape[0] != len(sim.temperatures):  # no drifting part
        shift = np.zeros((len(sim.temperatures), len(designs)))
    return shift, var


def worst_case_over_range(sim: Simulation, designs: Designs) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest frequency over the temperature range, worst case, shape (n,) each.

    The worst-case method of :func:`picker.core.screen.corner_span` with the
    drift added: at each temperature of the grid every part is set to
    nominal·(1 ± t)·(1 + d), with d at the low or high edge of its material's
    drift envelope there (:func:`picker.parts.drift.envelope`), in all 2^k
    combinations, with the stray at stray ± ``sim.stray_tol`` and a coupled tank's k at
    k ± ``sim.coupling_tol`` (f falls as k grows); a part without a
    material does not drift. The board
    frequency is monotone in each part value, so its extremes lie at these
    corners; the grid holds both ends of the range and every material's
    turning points (:func:`picker.parts.drift.temperature_grid`), where the
    envelope's extremes lie.
    """
    problem = sim.problem
    topo = problem.topology
    vals = designs.values(problem)
    tols = {p: effective_tolerance(problem.tables[p], designs.idx[p]) for p in topo.positions}
    env = {p: envelope(m, sim.temperatures) for p, m in _materials(sim).items()}
    lo = np.full(len(designs), np.inf)
    hi = np.full(len(designs), -np.inf)
    k = len(topo.positions)
    par = problem.parasitics
    strays = {par.stray - sim.stray_tol, par.stray + sim.stray_tol}  # its own two corners
    kc, dk = topo.coupling, sim.coupling_tol
    tanks = [topo.configured(e) for e in sorted({kc - dk, kc + dk})] if dk > 0 else [topo]
    for i in range(len(sim.temperatures)):
        for corner in range(2**k):
            v = {}
            for j, p in enumerate(topo.positions):
                up = bool((corner >> j) & 1)
                d = float(env[p][int(up)][i]) if p in env else 0.0
                v[p] = vals[p] * (1.0 + (tols[p] if up else -tols[p])) * (1.0 + d)
            for st in sorted(strays):
                for tank in tanks:  # k's two corners where it spreads
                    f = board_frequency(tank, v, replace(par, stray=st))
                    lo = np.minimum(lo, f)
                    hi = np.maximum(hi, f)
    return lo, hi


# ---------------------------------------------------------------- per-candidate figures


def extras(
    spec: ProductionSpec, sim: Simulation, designs: Designs, u: Rows, recentre: Recentre
) -> list[dict[str, Any]]:
    """Production figures of every candidate (best first), one JSON-ready dict each.

    ``recentre(position)`` gives the values the trimmer advice may re-centre a
    position to (:func:`picker.production.advice.trimmer_advice`).
    """
    ys = spec.yield_
    n = len(designs)
    if n == 0:
        return []
    with_t = ys.temperature is not None
    ux = head(u, EXTRAS_ROWS)  # a bounded subsample of the run's rows
    shares = first_order(sim, designs, with_t)
    out: list[dict[str, Any]] = [
        {"drivers": {k: json_number(v[r]) for k, v in shares.items()}} for r in range(n)
    ]
    for r in range(n):
        out[r]["drivers_mc"] = monte_carlo_drivers(sim, single(designs, r), ux, with_t)
    passed = count_passing(sim, designs, u)
    if with_t:
        for d, t in zip(out, over_temperature(sim, designs, u, passed, ys, ys.seed), strict=True):
            d["yield_over_temperature"] = t
        wlo, whi = worst_case_over_range(sim, designs)
        for r in range(n):
            out[r]["worst_case_over_range"] = {
                "range_c": list(ys.temperature or ()),
                "f_low_hz": float(wlo[r]),
                "f_high_hz": float(whi[r]),
            }
    for r in range(min(n, TIGHTER_CANDIDATES)):
        d1 = single(designs, r)
        fn = yield_function(spec, sim, d1, ux)
        out[r]["tighter"] = buy_tighter(spec, sim, d1, ux, fn)
        if r == 0 and ys.target is not None and passed[0] / u.shape[0] < ys.target:
            out[r]["tighter_plan"] = buy_plan(spec, sim, d1, ux, ys.target, fn)
            advice = trimmer_advice(spec, sim, d1, head(u, TRIMMER_ROWS), recentre)
            if advice is not None:
                out[r]["trimmer"] = advice
    return out


def plot_inputs(spec: ProductionSpec, sim: Simulation, designs: Designs, u: Rows) -> dict[str, Any]:
    """Arrays the plots of the best design need (not part of the JSON)."""
    with_t = spec.yield_.temperature is not None
    ux = head(u, EXTRAS_ROWS)  # a bounded subsample of the run's rows
    d1 = single(designs, 0)
    problem = sim.problem
    vals = sampled_values(sim, d1, ux)
    drift = drift_factors(sim, ux)
    i, t_label = 0, REFERENCE_TEMPERATURE
    if drift:
        per_t = [count_passing(at_temperatures(sim, [t]), d1, ux)[0] for t in sim.temperatures]
        i = int(np.argmin(per_t))
        t_label = float(sim.temperatures[i])
    f = board_frequencies(sim, d1, values_at(vals, drift, i))[:, 0]
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
