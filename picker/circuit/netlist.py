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

from collections.abc import Mapping
from typing import Any

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.stages import stage_of
from picker.circuit.stages.base import spice_number
from picker.tank.base import TWO_PI, Topology

__all__ = ["inductor_esr", "simulation_window", "write_netlist"]


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
    half = 0.5 / f0
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
