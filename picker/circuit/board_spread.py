"""A board's own stray and coupling k with the loaded model: (X1) of :mod:`picker.circuit.loaded`.

Besides its parts, a board may draw two values of its own: the stray capacitance across
the inductor (key :data:`picker.core.montecarlo.STRAY`, ``[parasitics] stray_tolerance``)
and, on a tank with coupled inductors, the coupling k (key
:data:`picker.tank.base.COUPLING`, ``[tank] coupling_tolerance``). Both are drawn once a
board (samples, 1), uniform in centre ± t (GUM JCGM 100:2008, 4.3.7). The ideal tank takes
each board's own value exactly (Thomson's formula on the board's L_eff and C_eff in
:func:`picker.circuit.surrogate.surrogate_logs`); what the amplifier adds on top is a
quadratic in d = x − x0 per design, fitted to the large-signal model at x0 − t, x0, x0 + t:

    L(x) = L(x0) + a·d + b·d²,   a = (L₊ − L₋)/(2t),   b = (L₊ − 2L₀ + L₋)/(2t²)      (X1)

(the central-difference quadratic through three points), for L = ln f_steady − ln f_ideal,
ln m and each bursting condition of the board fit
(:func:`picker.circuit.board_fit.point_quantities`). The two spreads add: their cross term
is left out (the stray moves C_eff, k moves L_eff, and each is a few per cent of f at most;
on the Hartley demo with k = 0.3 ± 0.1 and the stray 3 ± 1 pF the sum misses the
large-signal model at the four corners by at most 3.6e-5 in ln f and 3.4e-5 in ln m, where
the k term alone reaches 1.9e-3: ``tests/test_loaded_coupling.py``).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import fields, replace
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.board_fit import point_quantities
from picker.circuit.steady import SteadyState
from picker.circuit.surrogate import loaded_nominal
from picker.core.montecarlo import STRAY
from picker.tank.base import COUPLING, Topology
from picker.tank.board import Parasitics, board_frequency

#: The values a board draws of its own besides its parts, in the order of their terms.
SPREADS = (STRAY, COUPLING)

#: The large-signal model of boards: (topology, marked values, parasitics) -> SteadyState.
StateFn = Callable[[Topology, Mapping[str, np.ndarray], Parasitics], SteadyState]
#: The same with the parasitics fixed: (topology, marked values) -> SteadyState.
TankFn = Callable[[Topology, Mapping[str, np.ndarray]], SteadyState]

__all__ = [
    "SPREADS",
    "by_coupling",
    "spread_centre",
    "spread_point",
    "spread_shift",
    "spread_terms",
]


def spread_centre(topology: Topology, parasitics: Parasitics, key: str) -> float:
    """The spec's value of the spread ``key``: the stray, or the tank's k."""
    return float(parasitics.stray if key == STRAY else topology.coupling)


def spread_point(
    topology: Topology, parasitics: Parasitics, key: str, x: float
) -> tuple[Topology, Parasitics]:
    """The tank and parasitics with the spread ``key`` set to ``x`` for every board."""
    if key == STRAY:
        return topology, replace(parasitics, stray=x)
    return topology.configured(x), parasitics


def by_coupling(topology: Topology, values: Mapping[str, Any], run: TankFn) -> SteadyState:
    """``run(tank, values)`` on boards that each hold their own k (key :data:`COUPLING`):
    once per distinct k (a board's k is drawn once a sample, so there are as many calls
    as samples), with the tank configured to it, the results put back in place."""
    keys = [p for p in (*topology.positions, STRAY, COUPLING) if p in values]
    arrays = np.broadcast_arrays(*(np.asarray(values[p], dtype=float) for p in keys))
    shape = arrays[0].shape
    flat = {p: a.reshape(-1) for p, a in zip(keys, arrays, strict=True)}
    ks = flat.pop(COUPLING)
    parts: list[tuple[np.ndarray, SteadyState]] = []
    for k in np.unique(ks):
        sel = np.flatnonzero(ks == k)
        parts.append(
            (sel, run(topology.configured(float(k)), {p: a[sel] for p, a in flat.items()}))
        )
    out = {}
    for f in fields(SteadyState):
        first = np.asarray(getattr(parts[0][1], f.name))
        tail = first.shape[1:]
        arr = np.empty((ks.size, *tail), dtype=first.dtype)
        for sel, st in parts:
            arr[sel] = np.asarray(getattr(st, f.name)).reshape(sel.size, *tail)
        out[f.name] = arr.reshape(*shape, *tail)
    return SteadyState(**out)


def spread_terms(
    topology: Topology,
    parasitics: Parasitics,
    params: AmplifierParams,
    values: Mapping[str, np.ndarray],
    key: str,
    tol: float,
    state: StateFn,
) -> np.ndarray:
    """The coefficients (a, b) of (X1) for the spread ``key`` (± ``tol``) of designs with
    marked values ``values`` (n,): shape (2·(2 + HURWITZ), n), rows a, b of L, then of
    ln m, then of each bursting condition. ``state``: the large-signal model."""
    x0 = spread_centre(topology, parasitics, key)
    logs = []
    for x in (x0 - tol, x0, x0 + tol):
        tank, par = spread_point(topology, parasitics, key, x)
        bs = state(tank, values, par)
        lin_f, lin_m = loaded_nominal(tank, values, par, params)
        _, _, steady, _, _ = point_quantities(lin_f, lin_m, bs, params)
        ideal = np.log(board_frequency(tank, values, par))
        with np.errstate(divide="ignore", invalid="ignore"):
            logs.append(np.concatenate([[np.log(bs.f_hz) - ideal, np.log(bs.margin)], steady]))
    lo, mid, hi = logs
    with np.errstate(invalid="ignore"):
        a = (hi - lo) / (2 * tol)
        b = (hi - 2 * mid + lo) / (2 * tol * tol)
    return np.stack([a, b], axis=1).reshape(-1, lo.shape[-1])


def spread_shift(
    terms: Mapping[str, np.ndarray], dev: Mapping[str, np.ndarray]
) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """(Δln f, Δln m, Δ bursting conditions) of boards by (X1) summed over the spreads:
    ``terms[key]`` the coefficients of :func:`spread_terms` of the designs (2·Q, c),
    ``dev[key]`` the boards' deviations x − x0, (samples, c); shapes (samples, c) and
    (HURWITZ, samples, c). None without spreads."""
    out: list[np.ndarray] = []
    for key, coef in terms.items():
        d = np.asarray(dev[key], dtype=float)
        with np.errstate(invalid="ignore"):
            got = [
                np.nan_to_num(d * coef[2 * q][None, :] + d * d * coef[2 * q + 1][None, :])
                for q in range(coef.shape[0] // 2)
            ]
        out = got if not out else [a + b for a, b in zip(out, got, strict=True)]
    if not out:
        return None
    return out[0], out[1], np.stack(out[2:])
