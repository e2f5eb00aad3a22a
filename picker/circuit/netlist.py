"""SPICE netlist of the whole oscillator, consistent with the loaded model in :mod:`picker.circuit.amplifier`.

Node names: ``vcc`` supply, ``c`` collector, ``t`` tank top (across C1; the
collector itself is ``t`` when there is no blocking capacitor), ``b`` base, ``e``
emitter, ``m`` the Clapp node between C3 and L. Everything the linear model
contains is in the netlist with the same values: bias divider, emitter
resistor and bypass, blocking capacitor, collector resistor or choke with its
winding resistance, inductor ESR (from Q at the same frequency as the model),
capacitor ESR, stray capacitance across L, the Clapp bleed resistor. The
transistor is the project's generic small-signal NPN
(:data:`picker.circuit.device.GENERIC_NPN`, typical of the class, [memory]; not a real
part). A current pulse into the tank top starts the oscillation.

The text is SPICE syntax as read by ngspice (ngspice manual, chapters on
circuit elements, ``.tran`` and ``.meas``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import thermal_voltage
from picker.tank.base import TWO_PI, Topology


def _g(x: float) -> str:
    return f"{float(x):.6g}"


def inductor_esr(topology: Topology, values: Mapping[str, float], stray: float, params) -> float:
    """The inductor's series resistance as the loaded model uses it (ESR = ω_Q·L/Q), ohm."""
    if params.inductor_q is None:
        return float(params.inductor_esr)
    fq = params.q_frequency or float(topology.frequency(values, stray))
    return TWO_PI * fq * float(values["L"]) / params.inductor_q


def simulation_window(
    f_hz: float, params: AmplifierParams, cycles: int = 300
) -> tuple[float, float]:
    """(tstop, tmax) for the transient: ``cycles`` periods plus five emitter time constants
    R_E·C_E for the bias shift to settle, and at most 1/60 period per step."""
    period = 1.0 / f_hz
    settle = 0.0
    if params.r_e is not None and params.c_e is not None:
        settle = 5.0 * params.r_e * params.c_e
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
        As for :func:`picker.circuit.amplifier.loaded_response`; ``values`` are scalars (F, H).
    title:
        First line of the netlist (SPICE's title line).
    cycles:
        Transient length in periods of the ideal tank frequency (plus bias settling).

    Returns
    -------
    str
        The netlist; ``.meas`` results ``f_osc`` (Hz, from 20 periods late in the run) and
        ``amp`` (V peak at the tank top, over the last 10 % of the run).
    """
    if params.kind != "bjt":
        raise ValueError("netlist export supports the bjt amplifier only")
    vals = {p: float(values[p]) for p in topology.positions}
    f0 = float(topology.frequency(vals, stray))
    tstop, tmax = simulation_window(f0, params, cycles)
    bias = params.bias()
    if bias is None:
        raise ValueError("netlist export needs the base bias network (r_b1, r_b2)")
    dev = params.effective_device()
    ss = params.small_signal()
    vt = thermal_voltage(params.temperature_c)
    # make the card reproduce the small-signal capacitances the model uses
    cje = max(ss.c_pi - dev.tf * bias.ic / vt, 0.0)
    tf = dev.tf if ss.c_pi >= dev.tf * bias.ic / vt else ss.c_pi * vt / bias.ic
    card = replace(dev, cje=cje, tf=tf, cjc=ss.c_mu).model_card()
    esr = params.capacitor_esr
    top = "t"  # the tank top; also the collector when there is no blocking capacitor
    col = "c" if params.c_block is not None else "t"
    lines = [
        title.replace("\n", " "),
        f"* picker netlist: {topology.name} tank, ideal f = {f0:.6g} Hz",
        "* generic small-signal NPN: typical of the class (values from memory), not a real part",
        f"VCC vcc 0 DC {_g(params.vcc)}",
    ]
    if params.l_choke is not None:
        if params.r_choke > 0:
            lines += [f"LCH vcc nch {_g(params.l_choke)}", f"RCH nch {col} {_g(params.r_choke)}"]
        else:
            lines += [f"LCH vcc {col} {_g(params.l_choke)}"]
    else:
        lines.append(f"RC vcc {col} {_g(params.r_c)}")
    if params.c_block is not None:
        lines.append(f"CB c t {_g(params.c_block)}")

    def cap(name: str, a: str, b: str) -> None:
        r = esr.get(name, 0.0)
        if r:
            lines.extend(
                [f"{name} {a} n{name} {_g(vals[name])}", f"R{name}ESR n{name} {b} {_g(r)}"]
            )
        else:
            lines.append(f"{name} {a} {b} {_g(vals[name])}")

    cap("C1", top, "0")
    cap("C2", "b", "0")
    l_from = top
    if "C3" in topology.capacitors:
        cap("C3", top, "m")
        l_from = "m"
        if params.c_block is not None:
            lines.append(f"RBLEED t 0 {_g(params.r_bleed)}")
    r_l = inductor_esr(topology, vals, stray, params)
    if r_l > 0:
        lines += [f"L1 {l_from} nl {_g(vals['L'])}", f"RLESR nl b {_g(r_l)}"]
    else:
        lines.append(f"L1 {l_from} b {_g(vals['L'])}")
    if stray > 0:
        lines.append(f"CSTRAY {l_from} b {_g(stray)}")
    lines.append(f"RB1 vcc b {_g(params.r_b1)}")
    if params.r_b2 is not None:
        lines.append(f"RB2 b 0 {_g(params.r_b2)}")
    if params.r_e is not None:
        lines.append(f"Q1 {col} b e {card.split()[1]}")
        lines.append(f"RE e 0 {_g(params.r_e)}")
        if params.c_e is not None:
            lines.append(f"CE e 0 {_g(params.c_e)}")
    else:
        lines.append(f"Q1 {col} b 0 {card.split()[1]}")
    half = 0.5 / f0
    kick = 0.2 * bias.ic
    lines += [
        f"* start-up kick: one {_g(kick)} A pulse of half a period into the tank top",
        f"IKICK 0 {top} PULSE(0 {_g(kick)} {_g(2 * half)} {_g(half / 20)} {_g(half / 20)} "
        f"{_g(half)} {_g(10 * tstop)})",
        card,
        f".tran {_g(tmax)} {_g(tstop)} 0 {_g(tmax)}",
    ]
    t_meas = 0.8 * tstop
    v_mid = (
        bias.vb
        if (params.c_block is not None and "C3" not in topology.capacitors)
        else (bias.vc if params.c_block is None else 0.0)
    )
    lines += [
        f".meas tran tp20 TRIG v({top}) VAL={_g(v_mid)} RISE=1 TD={_g(t_meas)} "
        f"TARG v({top}) VAL={_g(v_mid)} RISE=21 TD={_g(t_meas)}",
        ".meas tran f_osc param='20/tp20'",
        f".meas tran vmax MAX v({top}) FROM={_g(0.9 * tstop)} TO={_g(tstop)}",
        f".meas tran vmin MIN v({top}) FROM={_g(0.9 * tstop)} TO={_g(tstop)}",
        ".meas tran amp param='(vmax-vmin)/2'",
        ".end",
    ]
    return "\n".join(lines) + "\n"
