"""Per-design figures of the loaded model for the report: loaded and ideal frequency,
start-up margin (nominal and worst over the Monte Carlo boards), amplitude, peak voltage
across each capacitor and plain-language cautions (:mod:`picker.circuit.oscillation` and
:mod:`picker.circuit.amplitude` do the physics; this module adds the squegging rule and
gathers JSON-ready scalars).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.amplitude import (
    OVERDRIVE_MARGIN,
    amplitude_estimate,
    capacitor_stress,
    cautions,
)
from picker.circuit.loaded import LoadedModel
from picker.circuit.oscillation import loaded_response
from picker.core.montecarlo import Simulation, drift_factors, sampled_values, values_at
from picker.core.search import Designs
from picker.tank.base import Topology
from picker.tank.board import Parasitics, board_values

__all__ = ["SQUEGGING_RATIO", "inductor_q", "nominal_figures", "squegging_caution", "worst_margins"]

#: Squegging rule of thumb (common practice, no source): the emitter network's time
#: constant R_E·C_E should not exceed this many times the tank's amplitude time constant
#: 2·Q/ω. A bias network much slower than the tank lets the amplitude build up, drive the
#: stage into cut-off and die away in bursts (intermittent "squegging" oscillation).
SQUEGGING_RATIO = 10.0


def inductor_q(
    topology: Topology,
    board: Mapping[str, float],
    stray: float,
    params: AmplifierParams,
    f_hz: float,
) -> float:
    """Q of the inductor at ``f_hz`` from the amplifier's loss description (inf: lossless).

    Q given at a frequency: ESR = ω_Q·L/Q (constant ESR), as in :mod:`picker.circuit.network`.
    """
    w = 2 * math.pi * f_hz
    l_ = float(board[topology.inductor])
    if params.inductor_q is not None:
        fq = params.q_frequency
        if fq is None:
            fq = float(topology.frequency({k: np.asarray(v) for k, v in board.items()}, stray))
        esr = 2 * math.pi * fq * l_ / params.inductor_q
    else:
        esr = params.inductor_esr
    return math.inf if esr <= 0 else w * l_ / esr


def squegging_caution(
    topology: Topology,
    board: Mapping[str, float],
    stray: float,
    params: AmplifierParams,
    f_hz: float,
    margin: float,
) -> str | None:
    """The squegging warning for one design, or None (rule: :data:`SQUEGGING_RATIO`).

    Needs a bypassed emitter resistor and a lossy inductor (Q finite); a design that
    does not start (margin ≤ 1) is not flagged.
    """
    if params.r_e is None or params.c_e is None or not margin > 1 or not math.isfinite(f_hz):
        return None
    q = inductor_q(topology, board, stray, params, f_hz)
    if not math.isfinite(q):
        return None
    tau_e = params.r_e * params.c_e
    tau_tank = 2 * q / (2 * math.pi * f_hz)
    if tau_e <= SQUEGGING_RATIO * tau_tank:
        return None
    return (
        f"emitter bypass R_E·C_E = {tau_e * 1e6:.3g} µs is {tau_e / tau_tank:.0f} times the "
        f"tank's amplitude time constant 2Q/ω = {tau_tank * 1e6:.3g} µs: risk of squegging "
        f"(bursts); a smaller C_E helps (rule of thumb: at most {SQUEGGING_RATIO:g} times, "
        "common practice)"
    )


def nominal_figures(
    topology: Topology,
    values: Mapping[str, float],
    parasitics: Parasitics,
    params: AmplifierParams,
    *,
    voltage_rating: Mapping[str, float | None] | None = None,
    polarised: Mapping[str, bool] | None = None,
) -> dict[str, Any]:
    """Loaded-model figures of one design at its marked values (JSON-ready scalars).

    Keys: ``f_ideal_hz``, ``f_loaded_hz`` (None where it does not oscillate),
    ``startup_margin``, ``amplitude_v`` (peak at the tank top), ``overdriven``,
    ``peak_voltage_v`` (position -> peak V across each capacitor, None where the
    bias point is unknown) and ``cautions`` (:func:`picker.circuit.amplitude.cautions` plus
    :func:`squegging_caution`).
    """
    pos = topology.positions
    board = board_values(topology, {p: np.array([float(values[p])]) for p in pos}, parasitics)
    st = parasitics.stray
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        res = loaded_response(topology, board, st, params)
        amp = amplitude_estimate(topology, board, st, params, res)
        stress = capacitor_stress(topology, board, st, params, amp)
    f = float(res.f_hz[0])
    m = float(res.margin[0])
    scal = {p: float(v[0]) for p, v in board.items()}
    peaks = {k: float(v[0]) for k, v in stress.items()}
    finite = {k: v for k, v in peaks.items() if math.isfinite(v)}
    notes = cautions(
        topology, scal, params, finite, voltage_rating=voltage_rating, polarised=polarised
    )
    sq = squegging_caution(topology, scal, st, params, f, m)
    if sq:
        notes.append(sq)
    if bool(amp.overdriven[0]):
        notes.append(
            f"overdriven: a start-up margin above {OVERDRIVE_MARGIN:g} or a collector swing "
            "beyond the supply headroom gives a clipped, harmonic-rich waveform; the amplitude "
            "estimate is not reliable there (threshold: common practice)"
        )
    return {
        "f_ideal_hz": float(topology.frequency(board, st)[0]),
        "f_loaded_hz": f if math.isfinite(f) else None,
        "startup_margin": m,
        "amplitude_v": float(amp.tank[0]),
        "overdriven": bool(amp.overdriven[0]),
        "peak_voltage_v": {k: (v if math.isfinite(v) else None) for k, v in peaks.items()},
        "cautions": notes,
    }


def worst_margins(sim: Simulation, designs: Designs, u: np.ndarray) -> np.ndarray:
    """Smallest start-up margin over every simulated board and grid temperature, (n,).

    Uses the simulation's board model, a :class:`LoadedModel` (surrogate or full,
    as the yield), one design at a time so memory stays bounded.
    """
    model = sim.model
    if not isinstance(model, LoadedModel):
        raise ValueError("worst_margins needs a simulation whose board model is a LoadedModel")
    drift = drift_factors(sim, u)
    out = np.empty(len(designs))
    n_t = len(sim.temperatures) if drift else 1
    for r in range(len(designs)):
        d1 = designs.take(np.array([r]))
        vals = sampled_values(sim, d1, u)
        worst = math.inf
        for i in range(n_t):
            v = values_at(vals, drift, i)
            _, m = model.response(v, d1)
            worst = min(worst, float(np.min(m)))
        out[r] = worst
    return out
