"""Per-design figures of the loaded model for the report: loaded and ideal frequency,
start-up margin (nominal and worst over the Monte Carlo boards), amplitude, peak voltage
across each capacitor and plain-language cautions (:mod:`picker.circuit.oscillation` and
:mod:`picker.circuit.amplitude` and :mod:`picker.circuit.steady` do the physics; this
module gathers JSON-ready scalars, the ``large_signal`` object and the bursting caution).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import replace
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
from picker.circuit.nominal_orbit import NominalOrbit
from picker.circuit.oscillation import loaded_response
from picker.circuit.steady import DISTORTED_DBC, SteadyState, distorted, envelope_of, steady_state
from picker.core.montecarlo import ROWS, Simulation, drift_factors, sampled_values, values_at
from picker.core.sampling import Rows, row_chunks
from picker.core.search import Designs
from picker.tank.base import Topology
from picker.tank.board import Parasitics, board_values
from picker.units import json_number

__all__ = [
    "HARMONICS",
    "bursting_caution",
    "distorted_caution",
    "inductor_q",
    "large_signal",
    "nominal_figures",
    "worst_margins",
]

#: Keys of the ``large_signal`` object's ``harmonics_dbc``, in the order of
#: :attr:`picker.circuit.steady.SteadyState.harmonics_dbc`'s last axis.
HARMONICS = ("h2", "h3")
#: Optional fields of a :class:`~picker.circuit.steady.SteadyState` reported when the
#: model provides them (attribute -> JSON key).
OPTIONAL = {"peak_current_a": "peak_current_a", "dissipation_w": "dissipation_w"}


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


def large_signal(st: SteadyState, r: int = 0) -> dict[str, Any]:
    """The JSON ``large_signal`` object of board ``r`` of ``st`` (1-D arrays).

    ``starts`` (bool), ``f_hz`` (steady frequency, None where it does not start),
    ``f_start_hz`` (frequency of the growing pole pair at start-up), ``amplitude_v``
    (peak at the tank's output node), ``envelope`` ("steady", "bursting" or
    :data:`picker.circuit.steady.NO_STEADY_STATE`; None where it does not start), ``startup_time_s`` and ``harmonics_dbc`` {"h2", "h3"}
    (None where the model gives none), ``overdriven``, and ``peak_current_a`` /
    ``dissipation_w`` when the model provides them.
    """
    starts = bool(st.starts[r])
    out: dict[str, Any] = {
        "starts": starts,
        "f_hz": json_number(st.f_hz[r]) if starts else None,
        "f_start_hz": json_number(st.f_start_hz[r]) if starts else None,
        "amplitude_v": float(st.amplitude_v[r]) if starts else 0.0,
        "envelope": envelope_of(starts, bool(st.bursting[r]), float(st.f_hz[r])),
        "startup_time_s": json_number(st.startup_time_s[r]) if starts else None,
        "harmonics_dbc": {
            k: (json_number(st.harmonics_dbc[r, i]) if starts else None)
            for i, k in enumerate(HARMONICS)
        },
        "overdriven": bool(st.overdriven[r]),
    }
    for attr, key in OPTIONAL.items():
        v = getattr(st, attr, None)
        if v is not None:
            out[key] = json_number(np.asarray(v)[r]) if starts else None
    return out


def bursting_caution(st: SteadyState, params: AmplifierParams, r: int = 0) -> str | None:
    """The caution for a design the large-signal model finds bursting, or None.

    The verdict is the model's (:attr:`picker.circuit.steady.SteadyState.bursting`);
    the advice is the usual cure (common practice, no source): a bias network that
    follows the envelope faster (a smaller bypass capacitor) or less excess loop gain
    (a smaller start-up margin).
    """
    if not (bool(st.starts[r]) and bool(st.bursting[r])):
        return None
    m = float(st.margin[r])
    bias = ""
    if params.r_e is not None and params.c_e is not None:
        bias = f" (now R_E·C_E = {params.r_e * params.c_e * 1e6:.3g} µs)"
    return (
        f"bursting: the large-signal model finds the oscillation unsteady at start-up margin "
        f"{m:.3g}; it builds up, stops and restarts (squegging), and the carrier comes in "
        f"bursts. Make the emitter (source) bypass network faster{bias}: a smaller bypass "
        "capacitor, or lower the margin (a smaller C1/C2 ratio or less bias current)"
    )


#: Where more than one pole pair of the linearised loop lies in the right half-plane
#: (:mod:`picker.circuit.stability`, (N1)): which mode the board settles in is the
#: model's rule (M2), right on 67 of 91 random designs with two growing modes in ngspice
#: and on 20 of 35 common-base Clapps with a collector choke
#: (tests/validation/mode_study.md).
MODES_CAUTION = (
    "two modes grow at start-up (e.g. a collector choke's own resonance beside the tank's): "
    "which one the board settles in is not reliably predicted (the model picked ngspice's "
    "on 67 of 91 random designs with two growing modes); check it with --verify, or damp "
    "the choke with a resistor across it (common practice)"
)

#: The caution for a design that starts with no steady solution (:data:`NO_STEADY_STATE`).
NO_STEADY_CAUTION = (
    "starts, but the model finds no steady oscillation (the start-up pole pair meets the "
    "real axis before the drive compresses it: a relaxation or a waveform far from a sine), "
    "so it gives no loaded frequency and its boards do not count towards yield; run --verify "
    "to see what the board does in ngspice and in its own circuit run from rest"
)


def distorted_caution(harmonic_dbc: float) -> str:
    """The caution for a design the describing function calls steady with a waveform far
    from a sine and no orbit shot (:func:`picker.circuit.steady.distorted`): its figures
    lie outside the one-harmonic balance's premise, and ``solve`` and ``evaluate`` make no
    run from rest to check them (``simulate`` and ``--verify`` do)."""
    return (
        f"far from a sine: the model puts a harmonic at the tank top at {harmonic_dbc:.1f} dBc "
        f"(above {DISTORTED_DBC:g} dBc), outside the premise of its steady-state figures; such "
        "a board may burst where they say steady, and its frequency may be several per cent "
        "off (one held-out test design ran in bursts 11 % below it). Run simulate or --verify, "
        "which run its own circuit from rest"
    )


def nominal_figures(
    topology: Topology,
    values: Mapping[str, float],
    parasitics: Parasitics,
    params: AmplifierParams,
    *,
    voltage_rating: Mapping[str, float | None] | None = None,
    polarised: Mapping[str, bool] | None = None,
    orbit: NominalOrbit | None = None,
) -> dict[str, Any]:
    """Loaded-model figures of one design at its marked values (JSON-ready scalars).

    Keys: ``f_ideal_hz``, ``f_loaded_hz`` (the steady frequency of the large-signal
    model; where it does not start, the linear model's; None where neither oscillates
    and where it starts with no steady solution),
    ``startup_margin``, ``amplitude_v`` (peak at the tank top), ``overdriven``,
    ``peak_voltage_v`` (position -> peak V across each capacitor, None where the
    bias point is unknown), ``cautions`` (:func:`picker.circuit.amplitude.cautions` plus
    :func:`bursting_caution` and :data:`MODES_CAUTION` where two modes grow) and
    ``large_signal`` (:func:`large_signal`).
    ``startup_margin`` is the large-signal model's margin. With the design's nominal
    ``orbit`` (:mod:`picker.circuit.nominal_orbit`), its frequency, amplitude,
    harmonics, peak current, dissipation and Floquet verdict replace the model's.
    """
    pos = topology.positions
    board = board_values(topology, {p: np.array([float(values[p])]) for p in pos}, parasitics)
    st_ = parasitics.stray
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        res = loaded_response(topology, board, st_, params)
        amp = amplitude_estimate(topology, board, st_, params, res)
        stress = capacitor_stress(topology, board, st_, params, amp)
        ls = steady_state(topology, board, st_, params)
    if orbit is not None:
        ls = replace(
            ls,
            f_hz=np.array([orbit.f_hz]),
            amplitude_v=np.array([orbit.amplitude_v]),
            bursting=np.array([orbit.bursting]),
            harmonics_dbc=np.array([orbit.harmonics_dbc]),
            peak_current_a=np.array([orbit.peak_current_a]),
            dissipation_w=np.array([orbit.dissipation_w]),
        )
    f_lin = float(res.f_hz[0])
    f_ss = float(ls.f_hz[0])
    # a design that starts with no steady solution has no loaded frequency: its start-up
    # pole's (the linear model's) is not where the board runs (hs004 of the series-capacitor
    # Hartley set: 161.7 kHz linear; in ngspice a pulse train repeating at 32.3 kHz)
    f = f_lin if not bool(ls.starts[0]) else f_ss
    m = float(ls.margin[0])
    scal = {p: float(v[0]) for p, v in board.items()}
    peaks = {k: float(v[0]) for k, v in stress.items()}
    finite = {k: v for k, v in peaks.items() if math.isfinite(v)}
    notes = cautions(
        topology, scal, params, finite, voltage_rating=voltage_rating, polarised=polarised
    )
    burst = bursting_caution(ls, params)
    if burst:
        notes.append(burst)
    if bool(ls.starts[0]) and not math.isfinite(f_ss):
        notes.append(NO_STEADY_CAUTION)
    if int(ls.pairs[0]) >= 2:
        notes.append(MODES_CAUTION)
    harm = np.asarray(ls.harmonics_dbc[0], dtype=float)
    if distorted(orbit is not None, bool(ls.starts[0]), bool(ls.bursting[0]), harm):
        notes.append(distorted_caution(float(np.nanmax(harm))))
    if bool(amp.overdriven[0]):
        # the start-up time too: against ngspice's records (scripts/startup_by_margin.py,
        # the validation sets' 279 steady designs the describing function times), within
        # ±30 % on 71 % of the 163 at a margin of at most 5 and on 22 % of the 116 above
        notes.append(
            f"overdriven: a start-up margin above {OVERDRIVE_MARGIN:g} or a collector swing "
            "beyond the supply headroom gives a clipped, harmonic-rich waveform; the amplitude "
            "estimate and the start-up time are not reliable there (threshold: common practice)"
        )
    return {
        "f_ideal_hz": float(topology.frequency(board, st_)[0]),
        "f_loaded_hz": json_number(f),
        "startup_margin": m,
        "amplitude_v": float(amp.tank[0]),
        "overdriven": bool(amp.overdriven[0]),
        "peak_voltage_v": {k: json_number(v) for k, v in peaks.items()},
        "cautions": notes,
        "large_signal": large_signal(ls),
    }


def worst_margins(sim: Simulation, designs: Designs, u: Rows) -> np.ndarray:
    """Smallest start-up margin over every simulated board and grid temperature, (n,).

    Uses the simulation's board model, a :class:`LoadedModel` (surrogate or full,
    as the yield), one design and :data:`picker.core.montecarlo.ROWS` boards at a
    time so memory stays bounded (``u`` may be a stream drawn batch by batch).
    """
    model = sim.model
    if not isinstance(model, LoadedModel):
        raise ValueError("worst_margins needs a simulation whose board model is a LoadedModel")
    out = np.full(len(designs), math.inf)
    for uc in row_chunks(u, ROWS):
        drift = drift_factors(sim, uc)
        n_t = len(sim.temperatures) if drift else 1
        for r in range(len(designs)):
            d1 = designs.take(np.array([r]))
            vals = sampled_values(sim, d1, uc)
            for i in range(n_t):
                v = values_at(vals, drift, i)
                _, m = model.response(v, d1)
                out[r] = min(out[r], float(np.min(m)))
    return out
