"""Check boards in ngspice: the model's answer beside the transient's, with a verdict.

:func:`check_boards` writes picker's netlist of each board
(:func:`picker.circuit.netlist.write_netlist`, long enough to see start-up, the settled
envelope and bursting: :func:`picker.circuit.netlist.verify_plan`, from the model's
start-up time and the bias time constants), runs the transients
in parallel ngspice processes, measures each waveform with
:func:`picker.circuit.waveform.measure` (the carrier from the phase slope inside the bursts,
the amplitude, the envelope state, the start-up time) and sets the model's answer
(:func:`picker.circuit.steady.steady_state`) beside it.

A board whose transient bursts or stays unsettled is run again at a five times finer step
(:func:`picker.circuit.ngspice.simulate` with ``confirm``): where that run disagrees, the
burst was the trapezoidal rule's and the finer run counts (``step_refined`` in the JSON).

A board whose steady carrier still moves across the measured tail (the bias had not
settled: :attr:`picker.circuit.ngspice.SimulationResult.drifting`, a slow time constant
the plan undercounts) is run again :data:`LENGTHEN` times as long, its tail read over the
same span at the new end, until it settles or the run is :data:`LONGEST_RUN` times the
plan's: the longest run counts (``lengthened`` in the JSON, with the planned run's reading).

A board passes when in ngspice it **starts**, runs **steady** (not bursting, not
unsettled) and its carrier lies **in the window**; :attr:`BoardCheck.verdict` says which
of the three fail. ``picker solve --verify`` and ``picker evaluate --verify`` (through
:mod:`picker.api.verify`) check the top designs at nominal and at their two worst
tolerance corners; ``picker simulate`` checks one board.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import partial
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.burst_carrier import distorted, network_carriers, run_bursts, run_hint
from picker.circuit.netlist import TransientPlan, verify_plan, write_netlist
from picker.circuit.network import Network
from picker.circuit.ngspice import SimulationResult, simulate, step_note
from picker.circuit.nominal_orbit import NominalOrbit, board_orbits
from picker.circuit.steady import SteadyState, envelope_of, steady_state
from picker.tank.base import Topology
from picker.units import json_number

__all__ = [
    "BoardCheck",
    "board_plans",
    "check_boards",
    "model_figures",
    "settled_run",
    "verdict",
]

#: Parallel ngspice processes (the target machine has two cores).
WORKERS = 2
#: A board whose steady carrier drifts is run this many times as long (again, up to
#: :data:`LONGEST_RUN`). The bias settles exponentially with its slow time constant τ, so
#: moving the tail later by Δt takes the drift read there down by e^(−Δt/τ): four times a
#: run that ended near τ cuts it about twentyfold (a choice of the project, no source).
LENGTHEN = 4
#: The longest run, as a multiple of the plan's.
LONGEST_RUN = 16


def _figures(st: SteadyState, i: int) -> dict[str, Any]:
    """Board ``i`` of a batch of :func:`steady_state` answers, JSON-ready."""
    starts = bool(st.starts[i])
    bursting = bool(st.bursting[i])
    return {
        "starts": starts,
        "f_hz": json_number(st.f_hz[i]),
        "amplitude_v": json_number(st.amplitude_v[i]),
        "envelope": envelope_of(starts, bursting, float(st.f_hz[i])),
        "startup_time_s": json_number(st.startup_time_s[i]),
        "margin": json_number(st.margin[i]),
    }


def _with_orbit(fig: dict[str, Any], orb: NominalOrbit | None) -> dict[str, Any]:
    """The board's figures with its periodic orbit's frequency, amplitude and Floquet
    verdict where it has one."""
    if orb is None:
        return fig
    envelope = "bursting" if orb.bursting else "steady"
    return {**fig, "f_hz": orb.f_hz, "amplitude_v": orb.amplitude_v, "envelope": envelope}


def _batch(
    topology: Topology, boards: Sequence[Mapping[str, Any]], stray: float, params: AmplifierParams
) -> SteadyState:
    """:func:`steady_state` of several boards in one vectorised call (arrays over boards;
    one call is about ten times faster than one per board)."""
    vals = {p: np.array([float(b[p]) for b in boards]) for p in topology.positions}
    return steady_state(topology, vals, stray, params)


def board_plans(
    topology: Topology, boards: Sequence[Mapping[str, Any]], stray: float, params: AmplifierParams
) -> tuple[SteadyState, list[TransientPlan]]:
    """The model's answer for each board (one vectorised call) and the transient each
    needs (:func:`picker.circuit.netlist.verify_plan`, from the predicted start-up time,
    the margin and the bias time constants)."""
    st = _batch(topology, boards, stray, params)
    plans = [
        verify_plan(
            topology,
            b,
            stray,
            params,
            startup_time_s=float(st.startup_time_s[i]),
            margin=float(st.margin[i]),
        )
        for i, b in enumerate(boards)
    ]
    return st, plans


def model_figures(
    topology: Topology, board: Mapping[str, Any], stray: float, params: AmplifierParams
) -> dict[str, Any]:
    """The large-signal model's answer for one board (JSON-ready; None where undefined)."""
    return _figures(_batch(topology, [board], stray, params), 0)


def verdict(state: str, f_hz: float | None, window: tuple[float, float] | None) -> str:
    """Return "ok" when the board starts, runs steady and (with a window) its carrier lies in
    it; otherwise what fails: "does not start", "bursts", "unsettled", "below the
    window", "above the window" (joined by "; ")."""
    if state == "none":
        return "does not start"
    out = []
    if state == "bursting":
        out.append("bursts")
    elif state == "unsettled":
        out.append("unsettled")
    if window is not None and f_hz is not None:
        if f_hz < window[0]:
            out.append("below the window")
        elif f_hz > window[1]:
            out.append("above the window")
    return "; ".join(out) or "ok"


@dataclass(frozen=True)
class BoardCheck:
    """One board in ngspice beside the model.

    ``label`` names the board ("nominal", "low corner", ...); ``values`` are the board
    values (F, H); ``model`` is :func:`model_figures`; ``sim`` the simulation (the
    measurement is ``sim.waveform``); ``window`` the frequency window (Hz) or None;
    ``cycles`` and ``resolved`` the transient's length in carrier periods and whether it
    was as long as wanted (:class:`picker.circuit.netlist.TransientPlan`); ``lengthened``
    how many times the plan's length the run that counts lasted (1: as planned; more where
    the planned run's carrier still drifted), and ``planned`` the planned run then.
    """

    label: str
    values: dict[str, float]
    model: dict[str, Any]
    sim: SimulationResult
    window: tuple[float, float] | None
    cycles: int
    resolved: bool
    lengthened: int = 1
    planned: SimulationResult | None = None

    @property
    def state(self) -> str:
        """The envelope in ngspice: "none", "steady", "bursting" or "unsettled"."""
        return self.sim.waveform.state

    @property
    def f_sim(self) -> float | None:
        """The carrier in ngspice, Hz (None where it does not oscillate)."""
        f = self.sim.frequency_hz
        return f if self.sim.oscillating and math.isfinite(f) else None

    @property
    def in_window(self) -> bool | None:
        """Whether the simulated carrier lies in the window (None: no window or no carrier)."""
        f = self.f_sim
        if self.window is None or f is None:
            return None
        return self.window[0] <= f <= self.window[1]

    @property
    def verdict(self) -> str:
        """:func:`verdict` of this board."""
        return verdict(self.state, self.f_sim, self.window)

    @property
    def ok(self) -> bool:
        """Starts, runs steady and (with a window) lands in it."""
        return self.verdict == "ok"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: the board, the model's answer, ngspice's, the verdict."""
        w = self.sim.waveform
        f_model = self.model["f_hz"]
        f_sim = self.f_sim
        diff = None if f_model is None or f_sim is None else f_model / f_sim - 1.0
        return {
            "board": self.label,
            "values": dict(self.values),
            "model": dict(self.model),
            "ngspice": {
                **w.to_dict(),
                "f_hz": f_sim,
                "cycles": self.cycles,
                "long_enough": self.resolved,
                "warnings": list(self.sim.warnings),
                "carrier_drift": json_number(self.sim.carrier_drift),
                **step_note(self.sim),
                **self.lengthened_note(),
            },
            "model_minus_ngspice": diff,
            "in_window": self.in_window,
            "verdict": self.verdict,
        }

    def lengthened_note(self) -> dict[str, Any]:
        """``{"lengthened": ...}`` where the run that counts is longer than planned: the
        factor and what the planned run read; empty otherwise."""
        if self.planned is None:
            return {}
        return {
            "lengthened": {
                "factor": self.lengthened,
                "f_hz_planned": json_number(self.planned.frequency_hz),
                "carrier_drift_planned": json_number(self.planned.carrier_drift),
            }
        }


def settled_run(
    text: str,
    plan: TransientPlan,
    longer: Callable[[float], str],
    *,
    timeout: float,
) -> tuple[SimulationResult, int, SimulationResult | None]:
    """ngspice's run of ``text`` (planned by ``plan``), lengthened while its steady
    carrier drifts: ``(run that counts, its length as a multiple of the plan's, the
    planned run or None where it counts)``.

    ``longer(tstop)`` writes the same netlist stopping at ``tstop``. Each longer run is
    :data:`LENGTHEN` times the last, up to :data:`LONGEST_RUN` times the plan, with the
    plan's measured span (``tstop − tail_start``) at its end and ``timeout`` scaled
    alike; a run that bursts or wanders ends the lengthening too (it counts: the longer
    run shows more of the board)."""
    span = plan.tstop - plan.tail_start
    run = partial(simulate, f_hint=plan.f0, t_kick=plan.t_kick, confirm=True)
    sim = run(text, timeout=timeout, tail_start=plan.tail_start)
    planned, factor = sim, 1
    while sim.drifting and factor < LONGEST_RUN:
        factor = min(factor * LENGTHEN, LONGEST_RUN)
        tstop = plan.tstop * factor
        sim = run(longer(tstop), timeout=timeout * factor, tail_start=tstop - span)
    return sim, factor, (None if factor == 1 else planned)


def check_boards(
    topology: Topology,
    boards: Sequence[tuple[str, Mapping[str, float]]],
    stray: float,
    params: AmplifierParams,
    *,
    window: tuple[float, float] | None = None,
    workers: int = WORKERS,
    timeout: float = 120.0,
) -> list[BoardCheck]:
    """Simulate each ``(label, board values)`` in ngspice (``workers`` processes at a time)
    and set the model beside it; in the order given.

    Raises
    ------
    SolverError
        ngspice missing, failing or taking longer than ``timeout`` seconds on a board.
    ValueError
        A netlist cannot be written (e.g. no bias network).
    """
    vals = [{p: float(board[p]) for p in topology.positions} for _, board in boards]
    if not vals:
        return []
    st, plans = board_plans(topology, vals, stray, params)
    jobs = []
    for (label, _), v, plan in zip(boards, vals, plans, strict=True):
        text = write_netlist(topology, v, stray, params, title=label, tstop=plan.tstop)
        jobs.append((label, v, plan, text))

    def run(
        job: tuple[str, dict[str, float], TransientPlan, str],
    ) -> tuple[SimulationResult, int, SimulationResult | None]:
        label, v, plan, text = job

        def longer(tstop: float) -> str:
            return write_netlist(topology, v, stray, params, title=label, tstop=tstop)

        return settled_run(text, plan, longer, timeout=timeout)

    with ThreadPoolExecutor(max_workers=max(1, workers)) as pool:
        outcomes = list(pool.map(run, jobs))
    # the boards where solve's table takes the periodic orbit (picker.circuit.nominal_orbit:
    # a saturated drive) get the orbit's figures beside ngspice, as the table gives them
    arr = {p: np.array([v[p] for v in vals]) for p in topology.positions}
    net = Network.build(topology, arr, stray, params)
    orbits = board_orbits([net])[0]
    models = [_with_orbit(_figures(st, i), orbits[i]) for i in range(len(jobs))]
    # a board the model calls bursting, one that starts with no steady solution (a
    # relaxation) and one whose orbit did not converge (run_hint): its carrier and amplitude
    # from its own circuit run from rest, measured as ngspice's run is, as the validation's
    # answers take them (picker.circuit.validation.model_answers), and its start-up time
    # too (read from the whole run as ngspice's is: the describing function's start-up
    # pole says nothing of a burst's first crest); its envelope is the
    # run's where the verdict changes (run_bursts: the orbit's instability said only that
    # the board does not hold that orbit) and, for a relaxation, always
    # and one the describing function calls steady far outside its premise (distorted)
    harm = np.asarray(st.harmonics_dbc, dtype=float).reshape(len(vals), -1)
    warped = [
        distorted(o is not None, bool(m["starts"]), m["envelope"] == "bursting", harm[i])
        for i, (m, o) in enumerate(zip(models, orbits, strict=True))
    ]
    hints = [
        run_hint(
            bool(m["starts"]),
            m["envelope"] == "bursting",
            math.nan if m["f_hz"] is None else float(m["f_hz"]),
            float(topology.frequency(v, stray)),
            converged=o is None or o.converged,
            warped=warped[i],
        )
        for i, (m, v, o) in enumerate(zip(models, vals, orbits, strict=True))
    ]
    if any(h is not None for h in hints):
        idx = [i for i, h in enumerate(hints) if h is not None]
        sub = {p: arr[p][idx] for p in topology.positions}
        one = [
            Network.build(topology, {p: sub[p][[k]] for p in sub}, stray, params)
            for k in range(len(idx))
        ]
        runs = network_carriers(
            one,
            [True] * len(idx),
            [float(hints[i] or 0.0) for i in idx],
            [models[i]["f_hz"] is None for i in idx],
        )
        for i, r in zip(idx, runs, strict=True):
            if r is not None and math.isfinite(r.f_hz):
                relaxes = models[i]["f_hz"] is None
                was = models[i]["envelope"] == "bursting"
                models[i] = {
                    **models[i],
                    "f_hz": r.f_hz,
                    "amplitude_v": r.amplitude_v,
                    "startup_time_s": json_number(r.startup_time_s),
                }
                models[i]["carrier_from"] = "run from rest"
                if relaxes or run_bursts(was, relaxes, r, warped=warped[i]) != was:
                    models[i]["envelope"] = r.state
                models[i]["carrier_spread"] = json_number(r.spread)
                models[i]["carrier_kick_spread"] = json_number(r.kick_spread)
                # runs that split give the board's carrier as their range (SPLIT)
                models[i]["carrier_low_hz"] = json_number(r.f_low_hz) if r.split else None
                models[i]["carrier_high_hz"] = json_number(r.f_high_hz) if r.split else None
    return [
        BoardCheck(
            label=label,
            values=v,
            model=models[i],
            sim=sim,
            window=window,
            cycles=math.ceil(plan.tstop * factor * plan.f0) if factor > 1 else plan.cycles,
            resolved=plan.resolved,
            lengthened=factor,
            planned=planned,
        )
        for i, ((label, v, plan, _), (sim, factor, planned)) in enumerate(
            zip(jobs, outcomes, strict=True)
        )
    ]
