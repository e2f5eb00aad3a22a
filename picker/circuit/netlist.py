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
from picker.circuit.polarity import mirror_netlist
from picker.circuit.stages import stage_of
from picker.circuit.stages.base import spice_number
from picker.tank.base import TWO_PI, Topology

__all__ = [
    "MAX_CYCLES",
    "MIN_OBSERVED",
    "MIN_SETTLE",
    "OVERDRIVE_SETTLE",
    "OBSERVE_STARTUPS",
    "OBSERVE_TAUS",
    "SETTLE_TAUS",
    "STEPS_PER_PERIOD",
    "TransientPlan",
    "bias_time_constant",
    "inductor_esr",
    "kick_time",
    "simulation_window",
    "transient_plan",
    "verify_plan",
    "write_netlist",
]

#: Most carrier periods a verification transient observes (beyond the bias settling).
MAX_CYCLES = 8000
#: Time steps per carrier period (the largest step ngspice may take: ``.tran``'s TMAX).
#: Measured on the colpitts_bjt demo's top design: after the warping correction
#: (:func:`picker.circuit.ngspice.trapezoid_frequency`) 60 steps give the carrier within
#: 0.014 % of 200 steps, 40 steps within 0.03 %, 30 steps 0.2 % off.
STEPS_PER_PERIOD = 60
#: :func:`verify_plan`: slow time constants allowed for the bias to settle after start-up.
SETTLE_TAUS = 2.0
#: :func:`verify_plan`: fewest carrier periods allowed for the bias to settle.
MIN_SETTLE = 200
#: :func:`verify_plan`: the settling is stretched by margin / OVERDRIVE_SETTLE above it.
OVERDRIVE_SETTLE = 10.0
#: :func:`verify_plan`: slow time constants observed after settling.
OBSERVE_TAUS = 3.0
#: :func:`verify_plan`: predicted start-up times observed after settling (at least).
OBSERVE_STARTUPS = 20.0
#: :func:`verify_plan`: fewest carrier periods observed after settling.
MIN_OBSERVED = 300


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
    time (five emitter time constants R_E·C_E), and at most 1/:data:`STEPS_PER_PERIOD`
    period per step."""
    period = 1.0 / f_hz
    settle = stage_of(params).settling_time(params)
    return cycles * period + settle, period / STEPS_PER_PERIOD


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


def bias_time_constant(
    topology: Topology, values: Mapping[str, float], params: AmplifierParams
) -> float:
    """The slowest bias time constant read off the schematic, s (0.0 without a bias network).

    The largest of R_E·C_E, the input's DC node, C_B with the collector resistor, and
    the next stage's coupling capacitor with its resistance: the RC products of the
    nodes that hold the stage's DC voltages (common practice, no source). The input's
    DC node is charged through the base divider's Thevenin resistance R_th (or a lone
    gate or base resistor's) and holds the tank's capacitance to ground
    (``Topology.end_capacitance``: C1 + C2 of a Colpitts, the tap bypass of a Hartley).
    Where the tank's coil joins C_B to that node as well
    (:meth:`~picker.circuit.stages.base.Stage.blocking_joins_input`: a common-emitter or
    common-source stage on a Colpitts or a Hartley), the node's two capacitors are
    counted by the open-circuit time-constant method (the sum, over the capacitors, of
    each one's capacitance times the resistance it sees with the others open: Gray,
    Hurst, Lewis & Meyer, *Analysis and Design of Analog Integrated Circuits*, the
    zero-value time-constant analysis; from memory), R_th·C_end + (R_th + R_dc)·C_B,
    R_dc the collector's DC resistance to the supply (R_C, the choke's winding, or both).
    """
    taus = [0.0]
    if params.r_e is not None and params.c_e is not None:
        taus.append(params.r_e * params.c_e)
    r_dc = (params.r_c or 0.0) + (params.r_choke if params.l_choke is not None else 0.0)
    r_bias = [r for r in (params.r_b1, params.r_b2) if r is not None]
    if r_bias:  # the divider, or a lone gate (base) resistor: a JFET's self-bias
        r_th = 1.0 / sum(1.0 / r for r in r_bias)
        tau_in = r_th * float(topology.end_capacitance(values))
        if params.c_block is not None and stage_of(params).blocking_joins_input(topology, params):
            tau_in += (r_th + r_dc) * params.c_block
        taus.append(tau_in)
    if params.c_block is not None and params.r_c is not None:
        taus.append(params.c_block * params.r_c)
    if params.r_next is not None:  # the next stage's coupling capacitor (picker.circuit.loads)
        taus.append(params.c_next_coupling * (params.r_next + r_dc))
    return max(taus)


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
    * the slowest bias time constant τ (:func:`bias_time_constant`): R_E·C_E, the
      base divider's Thevenin resistance (or a lone gate resistor's: a JFET's
      self-bias) with the input's DC node (the tank's capacitance to ground, and C_B
      where the coil joins it), and C_B with the collector resistor. A bursting
      oscillator comes and goes about once per few τ.

    cycles = 400 + 20·Q/π + 10·τ/T, at most ``max_cycles`` (the run then adds the
    stage's own settling, five R_E·C_E). Common practice, no source: twenty envelope
    time constants to settle and several bias time constants to see a burst repeat.
    """
    vals = {p: float(values[p]) for p in topology.positions}
    f0 = float(topology.frequency(vals, stray))
    r_l = inductor_esr(topology, vals, stray, params)
    q = TWO_PI * f0 * vals[topology.inductor] / r_l if r_l > 0 else 1000.0
    tau = bias_time_constant(topology, vals, params)
    cycles = 400.0 + 20.0 * q / math.pi + 10.0 * tau * f0
    n = int(min(max_cycles, math.ceil(cycles)))
    tstop, _ = simulation_window(f0, params, n)
    return TransientPlan(f0, n, tstop, kick_time(f0), 0.5 * tstop, cycles <= max_cycles)


def verify_plan(
    topology: Topology,
    values: Mapping[str, float],
    stray: float,
    params: AmplifierParams,
    *,
    startup_time_s: float,
    margin: float,
    max_cycles: int = MAX_CYCLES,
) -> TransientPlan:
    """The transient ``--verify`` and ``simulate`` run: long enough to see start-up, the
    settled envelope and bursting, and no longer.

    From the large-signal model's predicted start-up time t_s
    (:attr:`picker.circuit.steady.SteadyState.startup_time_s`: the growth from the kick to
    90 % of the steady amplitude, several envelope time constants 2·Q_L/(ω·(m − 1))), its
    start-up margin m, and the slow time constant τ of the schematic: the largest of the
    bias time constants (:func:`bias_time_constant`) and, with a collector choke, its
    decay time 2·L_ch/R_ch. τ sets both how long the bias takes to shift after start-up
    and how fast a burst repeats (an oscillation that has choked itself off returns as
    the bypass capacitor discharges). With T = 1/f0 (the ideal tank):

    * the kick at T (:func:`kick_time`);
    * the measured tail from t_kick + 2·t_s + max(:data:`SETTLE_TAUS`·τ,
      :data:`MIN_SETTLE`·T)·max(1, m/:data:`OVERDRIVE_SETTLE`) (an overdriven board's
      bias moves further and settles for longer);
    * observed for max(:data:`OBSERVE_TAUS`·τ, :data:`OBSERVE_STARTUPS`·t_s,
      :data:`MIN_OBSERVED`·T): many envelope time constants and several burst periods;
    * a step of at most T/:data:`STEPS_PER_PERIOD` (:func:`simulation_window`).

    Never longer than :func:`transient_plan` (the length of the validation set's runs);
    that plan is used as it is where it is shorter, and where the model gives no start-up
    time (a board it says does not start, whose start in ngspice must not be missed).
    Choices of the project, no source, checked on the 136 validation designs
    (``tests/validation/``): the envelope state of every design measured on this
    shorter run is the one its full run shows, and the carrier of every steady one
    within 0.05 % of the full run's (``tests/test_verify_plan.py`` re-runs the designs
    that burst and those it shortens most). Twice t_s, because the prediction may be off.
    """
    vals = {p: float(values[p]) for p in topology.positions}
    full = transient_plan(topology, vals, stray, params, max_cycles=max_cycles)
    t_s, m = float(startup_time_s), float(margin)
    if not math.isfinite(t_s) or t_s < 0 or not math.isfinite(m):
        return full
    period = 1.0 / full.f0
    tau = bias_time_constant(topology, vals, params)
    if params.l_choke is not None:
        if params.r_collector_dc <= 0:  # a lossless choke rings on: no shorter plan
            return full
        tau = max(tau, 2.0 * params.l_choke / params.r_collector_dc)
    t_kick = kick_time(full.f0)
    settle = max(SETTLE_TAUS * tau, MIN_SETTLE * period) * max(1.0, m / OVERDRIVE_SETTLE)
    tail = t_kick + 2.0 * t_s + settle
    observe = max(OBSERVE_TAUS * tau, OBSERVE_STARTUPS * t_s, MIN_OBSERVED * period)
    tstop = tail + observe
    if tstop >= full.tstop:
        return full
    return TransientPlan(full.f0, int(math.ceil(tstop * full.f0)), tstop, t_kick, tail, True)


def write_netlist(
    topology: Topology,
    values: Mapping[str, float],
    stray: float,
    params: AmplifierParams,
    *,
    title: str = "picker oscillator",
    cycles: int = 300,
    tstop: float | None = None,
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
    tstop:
        Transient length, s (in place of ``cycles``; e.g. :attr:`TransientPlan.tstop`).

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
    length, tmax = simulation_window(f0, params, cycles)
    tstop = length if tstop is None else float(tstop)
    r_l = inductor_esr(topology, vals, stray, params)
    part = stage.netlist(topology, vals, stray, r_l, params)
    if params.p_type:  # the mirror image of the n-type circuit (picker.circuit.polarity)
        part = mirror_netlist(part)
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
