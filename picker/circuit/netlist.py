"""SPICE netlist of the whole oscillator, consistent with the loaded model in :mod:`picker.circuit.network`.

Node names: ``vcc`` supply, ``c`` collector, ``t`` tank top (across C1; the
collector itself is ``t`` when there is no blocking capacitor), ``b`` base, ``e``
emitter, ``m`` the Clapp node between C3 and L. Everything the linear model
contains is in the netlist with the same values: bias divider, emitter
resistor and bypass, blocking capacitor, collector resistor or choke with its
winding resistance, inductor ESR (from Q at the same frequency as the model),
capacitor ESR, stray capacitance across L, the Clapp bleed resistor. The tank
writes its own lines (:meth:`picker.tank.base.Topology.netlist_lines`), the stage
its own and the device (:meth:`picker.circuit.stages.base.Stage.netlist`; the
common-emitter stage uses the project's generic small-signal NPN,
:data:`picker.circuit.device.GENERIC_NPN`, typical of the class, [memory]; not a
real part). A current pulse into the tank top starts the oscillation.

The text is SPICE syntax as read by ngspice (ngspice manual, chapters on
circuit elements, ``.tran`` and ``.meas``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.stages import stage_of
from picker.circuit.stages.base import spice_number
from picker.tank.base import TWO_PI, Topology

__all__ = [
    "MAX_CYCLES",
    "TransientPlan",
    "inductor_esr",
    "kick_time",
    "simulation_window",
    "transient_plan",
    "write_netlist",
]

#: Most carrier periods a verification transient observes (beyond the bias settling).
MAX_CYCLES = 8000


def inductor_esr(
    topology: Topology, values: Mapping[str, Any], stray: float, params: AmplifierParams
) -> float:
    """The inductor's series resistance as the loaded model uses it (ESR = ω_Q·L/Q), ohm."""
    if params.inductor_q is None:
        return float(params.inductor_esr)
    fq = params.q_frequency or float(topology.frequency(values, stray))
    return float(TWO_PI * fq * float(values[topology.inductor]) / params.inductor_q)


def simulation_window(
    f_hz: float, params: AmplifierParams, cycles: int = 300
) -> tuple[float, float]:
    """(tstop, tmax) for the transient: ``cycles`` periods plus the stage's bias settling
    time (five emitter time constants R_E·C_E), and at most 1/60 period per step."""
    period = 1.0 / f_hz
    settle = stage_of(params).settling_time(params)
    return cycles * period + settle, period / 60.0


def kick_time(f0: float) -> float:
    """When the start-up kick of :func:`write_netlist` begins: one ideal period in, s."""
    return 1.0 / f0


@dataclass(frozen=True)
class TransientPlan:
    """How long a verification transient runs and where it is read.

    ``f0``: the ideal tank frequency, Hz; ``cycles``: the observed periods
    (:func:`write_netlist`'s ``cycles``; the stage's bias settling time is added to
    them); ``tstop``: the run's length, s; ``t_kick``: when the kick starts, s;
    ``tail_start``: where the settled tail that is measured begins (half way), s;
    ``resolved``: whether the wanted length fitted under the cap (when not, a burst
    slower than the run may be missed).
    """

    f0: float
    cycles: int
    tstop: float
    t_kick: float
    tail_start: float
    resolved: bool


def transient_plan(
    topology: Topology,
    values: Mapping[str, float],
    stray: float,
    params: AmplifierParams,
    *,
    max_cycles: int = MAX_CYCLES,
) -> TransientPlan:
    """The length of a transient that shows start-up, the settled envelope and bursting.

    Written without the loaded model, from time constants any designer can read off
    the schematic, in periods T = 1/f0 of the ideal tank:

    * the tank's envelope time constant 2Q/ω = Q/π periods (the unloaded inductor Q;
      the loaded Q is lower, so the envelope is at least this fast for a loop gain
      margin of 2 and slower only for a margin close to 1);
    * the slowest bias time constant τ: R_E·C_E, the base divider's Thevenin
      resistance with the tank's capacitors to ground (C1 + C2), and C_B with the
      collector resistor. A bursting oscillator comes and goes about once per few τ.

    cycles = 400 + 20·Q/π + 10·τ/T, at most ``max_cycles`` (the run then adds the
    stage's own settling, five R_E·C_E). Common practice, no source: twenty envelope
    time constants to settle and several bias time constants to see a burst repeat.
    """
    vals = {p: float(values[p]) for p in topology.positions}
    f0 = float(topology.frequency(vals, stray))
    r_l = inductor_esr(topology, vals, stray, params)
    q = TWO_PI * f0 * vals[topology.inductor] / r_l if r_l > 0 else 1000.0
    taus = [0.0]
    if params.r_e is not None and params.c_e is not None:
        taus.append(params.r_e * params.c_e)
    if params.r_b1 is not None:
        r_th = params.r_b1
        if params.r_b2 is not None:
            r_th = params.r_b1 * params.r_b2 / (params.r_b1 + params.r_b2)
        taus.append(r_th * sum(vals[p] for p in topology.feedback_pair))
    if params.c_block is not None and params.r_c is not None:
        taus.append(params.c_block * params.r_c)
    cycles = 400.0 + 20.0 * q / math.pi + 10.0 * max(taus) * f0
    n = int(min(max_cycles, math.ceil(cycles)))
    tstop, _ = simulation_window(f0, params, n)
    return TransientPlan(f0, n, tstop, kick_time(f0), 0.5 * tstop, cycles <= max_cycles)


def write_netlist(
    topology: Topology,
    values: Mapping[str, float],
    stray: float,
    params: AmplifierParams,
    *,
    title: str = "picker oscillator",
    cycles: int = 300,
) -> str:
    """SPICE netlist (text) of the oscillator with ``.tran`` and ``.meas`` statements.

    Parameters
    ----------
    topology, values, stray, params:
        As for :func:`picker.circuit.oscillation.loaded_response`; ``values`` are scalars
        (F, H).
    title:
        First line of the netlist (SPICE's title line).
    cycles:
        Transient length in periods of the ideal tank frequency (plus bias settling).

    Returns
    -------
    str
        The netlist; ``.meas`` results ``f_osc`` (Hz, from 20 periods late in the run) and
        ``amp`` (V peak at the tank top, over the last 10 % of the run).

    Raises
    ------
    ValueError
        Where the stage cannot be written (e.g. no bias network).
    """
    g = spice_number
    stage = stage_of(params)
    vals = {p: float(values[p]) for p in topology.positions}
    f0 = float(topology.frequency(vals, stray))
    tstop, tmax = simulation_window(f0, params, cycles)
    r_l = inductor_esr(topology, vals, stray, params)
    part = stage.netlist(topology, vals, stray, r_l, params)
    top = stage.top  # the tank top; also the collector when there is no blocking capacitor
    lines = [
        title.replace("\n", " "),
        f"* picker netlist: {topology.name} tank, ideal f = {f0:.6g} Hz",
        *part.elements,
    ]
    half = 0.5 / f0  # the kick starts at 2·half = kick_time(f0)
    kick = part.kick
    lines += [
        f"* start-up kick: one {g(kick)} A pulse of half a period into the tank top",
        f"IKICK 0 {top} PULSE(0 {g(kick)} {g(2 * half)} {g(half / 20)} {g(half / 20)} "
        f"{g(half)} {g(10 * tstop)})",
        *part.models,
        f".tran {g(tmax)} {g(tstop)} 0 {g(tmax)}",
    ]
    t_meas = 0.8 * tstop
    v_mid = part.top_dc
    lines += [
        f".meas tran tp20 TRIG v({top}) VAL={g(v_mid)} RISE=1 TD={g(t_meas)} "
        f"TARG v({top}) VAL={g(v_mid)} RISE=21 TD={g(t_meas)}",
        ".meas tran f_osc param='20/tp20'",
        f".meas tran vmax MAX v({top}) FROM={g(0.9 * tstop)} TO={g(tstop)}",
        f".meas tran vmin MIN v({top}) FROM={g(0.9 * tstop)} TO={g(tstop)}",
        ".meas tran amp param='(vmax-vmin)/2'",
        ".end",
    ]
    return "\n".join(lines) + "\n"
