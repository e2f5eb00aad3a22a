"""The common-collector stage (emitter follower): the emitter taps the capacitive divider.

The circuit (the emitter-follower Colpitts or Clapp of VFOs; Clarke & Hess,
*Communication Circuits: Analysis and Design*, 1971, oscillator chapter, attribution
from memory): the collector goes straight to the supply (AC ground); the tank's
inductor (with C3 in series for a Clapp) runs from the base to the tank's grounded
end ``t``; C2 sits between base and emitter, C1 between the emitter and ``t``, so the
emitter taps the divider C2–C1 and the base is fed from the tank top. The emitter
goes to ground through R_E; the base divider R_B1 (supply) / R_B2 (ground) sets the
bias. The tank's grounded end reaches ground through the DC-blocking capacitor C_B
(``c_block``, the spec's ``c_coupling``), which keeps the inductor from shorting the
base to ground in a Colpitts (a Clapp's C3 already blocks DC and needs none); with C_B
and a Clapp, the bleed resistor gives ``t`` a DC path.

Picker's tank convention holds unchanged: C1 is across the stage's output
(collector–emitter: here the emitter-to-ground capacitor, in parallel with R_E), C2
across its input (base–emitter), L from output to input. The feedback fraction
beta = C1/C2 is the part of the emitter's swing that appears across base and emitter.

Small-signal network. The tank's two feedback capacitors meet at the emitter, so the
emitter is the reference node "0" of the nodal network (nodal analysis may take any
node as reference; the return ratio and every voltage difference are unchanged) and
ground — with the supply and the collector, all one AC node — is node ``c``. Every
node voltage the model reports is taken from the emitter: node ``t`` (the tank's
grounded end, ``c`` itself without C_B) carries −v_E, so the swing the model gives at
the tank top is the emitter's swing (across C1); the netlist, referenced to ground,
names the emitter ``t`` so that its measured swing is that same quantity. Stamps:
R_E and r_o c–0, r_pi ∥ C_pi b–0, C_mu and the bias divider b–c (both its ends are AC
ground), C_B c–t, the bleed t–c. After relabelling, this is the common-emitter network
with a grounded emitter (:func:`picker.circuit.stages.common_emitter.solve_loop`): load
1/R_E, no bias admittance to the reference, the divider beside C_mu.

Start-up (derived here from the nodal equations; checked numerically in
tests/test_common_collector.py). With r_pi → ∞, no device capacitance, r_o → ∞, the
bias divider absent and a lossless inductor, the ground-referenced node equations at
the base and the emitter,

    v_b·(1/(sL) + sC2) = sC2·v_e
    v_e·(s(C1 + C2) + 1/R_E + gm) = v_b·(sC2 + gm),

have the determinant s³·L·C1·C2·R_E + s²·L·C2 + s·(C1 + C2)·R_E + (1 + gm·R_E) = 0:
Sedra & Smith's characteristic equation of the common-emitter Colpitts (*Microelectronic
Circuits*, Colpitts section) with R_E in place of the collector load. So
ω0² = (C1 + C2)/(L·C1·C2) and the follower starts when gm·R_E ≥ C2/C1 = 1/beta (the
same :meth:`required_gain` as the common-emitter stage). With the real device the
base's r_pi lies across C2 and R_E ∥ r_o across C1; the loaded model keeps them.

Large signal. The bjt's exponential describing function applies to the base–emitter
junction as in the common-emitter stage (the bias shift through the same divider
and R_E: :meth:`CommonEmitter.bias_loop` with no collector resistance). Saturation
needs the base to swing above the supply (the collector is held there), which a
follower reaches only with a tank swing of several volts: rarer than in the
common-emitter stage.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import GENERIC_PNP, SmallSignal
from picker.circuit.loads import next_stage_admittance, next_stage_lines
from picker.circuit.stages.base import (
    KICK_FRACTION,
    BiasLoop,
    StageNetlist,
    Stamp,
    need,
    spice_number,
)
from picker.circuit.stages.common_emitter import SHORT, CommonEmitter, solve_loop
from picker.circuit.stages.slow import (
    GROUND,
    Parts,
    SlowNetwork,
    divider_resistance,
    lowfreq_capacitance,
)
from picker.circuit.stages.stopper import stopper_lines
from picker.tank.base import Topology

__all__ = ["CommonCollector", "rename_nodes"]


def rename_nodes(lines: list[str], mapping: Mapping[str, str]) -> list[str]:
    """Netlist element lines with their two node words (the 2nd and 3rd) renamed by
    ``mapping`` (each word once, not chained); other words are left as they are."""
    out = []
    for line in lines:
        words = line.split()
        if len(words) >= 3 and words[0][0].upper() in "RLC":
            words[1:3] = [mapping.get(w, w) for w in words[1:3]]
        out.append(" ".join(words))
    return out


class CommonCollector(CommonEmitter):
    """The emitter follower (common-collector bjt stage) with divider bias."""

    name = "common-collector"
    grounded_common = False
    device = "bjt"
    default_for_device = False
    collector_load = False
    orbit_on_start = True
    output = "c"
    top = "t"
    input = "b"
    common = "0"
    coupling_parts = ("CB",)
    options = frozenset({"stopper", "p-type"})
    refusals = {
        "collector-feedback": "the follower's collector (drain) sits on the supply, so there "
        "is no collector voltage to feed back to the base; use r_bias_top alone, a base "
        "resistor",
        "emitter-split": "the follower's emitter (source) resistor carries its output and "
        "takes no bypass (c_emitter): all of it is unbypassed already",
    }

    # ------------------------------------------------------------ bias and device values

    def collector_dc(self, params: AmplifierParams) -> float:
        """0: the collector goes straight to the supply (a ValueError for a collector load
        or an emitter bypass, which this stage cannot take)."""
        if params.r_c is not None or params.l_choke is not None:
            raise ValueError(
                "the common-collector stage takes no collector load (its collector goes to "
                "the supply): remove r_load and choke"
            )
        if params.c_e is not None:
            raise ValueError(
                "the common-collector stage takes no emitter bypass (c_emitter): it would "
                "short the emitter's tap on the divider"
            )
        return 0.0

    def ideal_params(self, gm: float, r_load: float) -> AmplifierParams:
        """The common-emitter stage's idealised device (β → ∞, C_pi = C_mu = 0, r_o → ∞, no
        bias network) with the load moved to the emitter: R_E = ``r_load``."""
        return replace(super().ideal_params(gm, r_load), r_c=None, r_e=r_load)

    def typical_params(self) -> AmplifierParams:
        """A 9 V follower at about 1.6 mA (invented values, not a real circuit)."""
        return AmplifierParams(
            kind=self.device,
            stage=self.name,
            vcc=9.0,
            r_b1=47e3,
            r_b2=47e3,
            r_e=2200.0,
            c_block=22e-9,
            inductor_q=50.0,
        )

    def typical_variants(self) -> dict[str, AmplifierParams]:
        """The PNP follower: the generic PNP, the supply at −9 V (the mirror image); a 100 Ω
        base stopper (invented values, not real circuits)."""
        p = self.typical_params()
        return {
            "p-type": replace(p, p_type=True, device=GENERIC_PNP),
            "stopper": replace(p, r_stopper=100.0),
        }

    # ------------------------------------------------------------ start-up

    def required_gain(self, topology: Topology, values: Mapping[str, Any]) -> Any:
        """1/β = C2/C1 (β = :meth:`picker.tank.base.Topology.beta`): the follower needs
        gm·R_E ≥ C2/C1, C1 the emitter-to-ground capacitor, C2 base to emitter (the
        characteristic equation in the module docstring, derived here)."""
        return 1.0 / np.asarray(topology.beta(values))

    # ------------------------------------------------------------ the small-signal network

    def _admittances(
        self, s: np.ndarray, params: AmplifierParams, ss: SmallSignal
    ) -> tuple[Any, float, Any, Any, float, Any, Any]:
        """The branches in the order of :func:`solve_loop` after relabelling: load c–0
        (1/R_E), bias to the reference (none), y_pi, y_mu with the divider beside it
        (b–c), g_o, no emitter branch (the emitter is the reference), C_B (c–t)."""
        y_re = 1.0 / need(params.r_e, "an emitter resistor (r_e)") + 0.0 * s
        y_re = y_re + next_stage_admittance(params, s)  # the next stage beside R_E
        g_bias = sum(1.0 / r for r in (params.r_b1, params.r_b2) if r is not None)
        y_pi = 1.0 / ss.r_pi + s * ss.c_pi
        y_mu = s * ss.c_mu + g_bias
        y_cb = None if params.c_block is None else s * params.c_block
        return y_re, 0.0, y_pi, y_mu, 1.0 / ss.r_o, None, y_cb

    def stamps(
        self, s: np.ndarray, topology: Topology, params: AmplifierParams, ss: SmallSignal
    ) -> list[Stamp]:
        """R_E (c–0: ground to emitter), C_B (c–t; a 1 MS short without it), bleed (t–c),
        bias divider (b–c), y_pi (b–0), y_mu (b–c), g_o (c–0)."""
        c, t, b = self.output, self.top, self.input
        y_cb = None if params.c_block is None else s * params.c_block
        g_bias = sum(1.0 / r for r in (params.r_b1, params.r_b2) if r is not None)
        out = [
            Stamp(c, "0", 1.0 / need(params.r_e, "an emitter resistor (r_e)") + 0 * s),
            Stamp(c, "0", next_stage_admittance(params, s)),  # the next stage
            Stamp(c, t, SHORT + 0 * s if y_cb is None else y_cb),
            Stamp(b, c, g_bias + 0 * s),
            Stamp(b, "0", 1.0 / ss.r_pi + s * ss.c_pi),
            Stamp(b, c, s * ss.c_mu),
            Stamp(c, "0", 1.0 / ss.r_o + 0 * s),
        ]
        if self.needs_bleed(topology, params):
            out.append(Stamp(t, c, 1.0 / params.r_bleed + 0 * s))
        return out

    def loop_gain(
        self,
        s: np.ndarray,
        tank: tuple[Any, Any, Any],
        topology: Topology,
        params: AmplifierParams,
        ss: SmallSignal,
        *,
        nodes: bool = False,
    ) -> Any:
        """:func:`solve_loop` on the relabelled network (module docstring); the bleed
        (t–c) lies beside C_B."""
        y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb = self._admittances(s, params, ss)
        if self.needs_bleed(topology, params) and y_cb is not None:
            y_cb = y_cb + 1.0 / params.r_bleed
        adm = (y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb)
        names = (self.output, self.top, self.input, self.common)
        return solve_loop(s, tank, adm, ss.gm, names if nodes else None)

    def probe(self, x: Mapping[str, Any]) -> Any:
        """The emitter to ground, the node the netlist's transient measures (named ``t``
        there): the emitter is the reference "0" and ground the collector's AC node ``c``,
        so −v_c (the tank's grounded end ``t`` differs from ground by C_B's drop)."""
        return -x[self.output]

    def loaded_tank(
        self, topology: Topology, values: Mapping[str, Any], ss: SmallSignal
    ) -> dict[str, Any]:
        """C_pi across C2 (base–emitter); C_mu runs from the base to AC ground, beside the
        inductor, and is left to the root finder."""
        return topology.with_end_capacitance(values, 0.0, ss.c_pi)

    # ------------------------------------------------------------ large signal

    def slow_network(
        self,
        topology: Topology,
        params: AmplifierParams,
        ss: SmallSignal,
        loop: BiasLoop,
        tank: tuple[Any, Any, Any],
        s_lo: np.ndarray,
    ) -> SlowNetwork:
        """The DC nodes tank end ``g``, base ``b`` and emitter ``e``
        (:func:`picker.circuit.stages.slow.build`; the collector sits on the supply, a
        slow-signal ground): C_B g–ground (a short without it), the tank's C1 g–e and C2
        b–e with C_pi, its bridge g–b (a short where it passes DC: the inductor), C_mu
        b–ground, the divider's R_th b–ground, R_E e–ground, the bleed g–ground. The
        emitter resistor with the divider's capacitors and C_B through R_th are the slow
        states, in place of the common-emitter's R_E·C_E."""
        y_out, y_in, y_br = tank
        g, b, e, gnd = "g", "b", "e", GROUND
        parts = Parts()
        parts.cap(g, e, lowfreq_capacitance(y_out, s_lo))
        parts.cap(b, e, lowfreq_capacitance(y_in, s_lo) + ss.c_pi)
        parts.cap(b, gnd, ss.c_mu)
        parts.cap(g, gnd, params.c_block)
        parts.cap(g, b, None if topology.bridge_passes_dc else lowfreq_capacitance(y_br, s_lo))
        parts.bias(loop, params, b, e)
        if self.needs_bleed(topology, params):
            parts.conds.append((g, gnd, 1.0 / params.r_bleed))
        return parts.network((g, b, e), s_lo.size, loop, (None, b, e))

    # ------------------------------------------------------------ DC voltages, cautions

    def tank_end_dc(self, topology: Topology, params: AmplifierParams, vb: float) -> float:
        """DC voltage of the tank's grounded end to ground: 0 V without C_B; with C_B, V_B
        through the inductor where the bridge passes DC, else 0 V through the bleed."""
        if params.c_block is None or not topology.bridge_passes_dc:
            return 0.0
        return vb

    def dc_voltages(self, topology: Topology, params: AmplifierParams) -> dict[str, float]:
        """The tank's parts from the emitter (the tank's common end): C1 between the tank's
        grounded end and the emitter, C2 base to emitter; C_B from that end to ground."""
        b = self.bias(params)
        if b is None:
            return super().dc_voltages(topology, params)
        end = self.tank_end_dc(topology, params, b.vb)
        out = {k: abs(v) for k, v in topology.dc_across(end - b.ve, b.vb - b.ve).items()}
        if params.c_block is not None:
            out["CB"] = end
        return out

    def cautions(self, topology: Topology, params: AmplifierParams) -> list[str]:
        """A Colpitts with no blocking capacitor (L shorts the base to ground); a bias that
        saturates the transistor."""
        out = []
        if params.c_block is None and topology.bridge_passes_dc:
            out.append(
                "no DC-blocking capacitor at the tank's grounded end: L shorts the base to "
                "ground and the follower has no bias"
            )
        return out + self.bias_cautions(params)

    # ------------------------------------------------------------ netlist

    def blocking_joins_input(self, topology: Topology, params: AmplifierParams) -> bool:
        """C_B holds the base from ground (the inductor joins it to the base): the base's
        settling with it is :meth:`settling_time`'s, not the collector side's."""
        return False

    def settling_time(self, params: AmplifierParams) -> float:
        """Five time constants R_th·C_B of the base's DC node (the blocking capacitor holds
        the base through the inductor; R_th = R_B1 ∥ R_B2)."""
        r_th = divider_resistance(params)
        if params.c_block is None or r_th is None or params.r_b1 is None:
            return 0.0
        return 5.0 * r_th * params.c_block

    def netlist(
        self,
        topology: Topology,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        params: AmplifierParams,
    ) -> StageNetlist:
        """The generic NPN (as the common-emitter stage's netlist) with its collector on the
        supply, the emitter named ``t`` (the node the transient measures), R_E, the base
        divider, the tank between base, emitter and its grounded end ``g`` (C_B from ``g``
        to ground, or ``g`` = ground without it)."""
        bias = self.bias(params)
        if bias is None:
            raise ValueError("netlist export needs the base bias network (r_b1, r_b2)")
        g = spice_number
        emitter, end = self.top, ("g" if params.c_block is not None else "0")
        tank = topology.netlist_lines(values, stray, r_l, params.capacitor_esr, "g", "b")
        lines = [
            "* generic small-signal NPN: typical of the class (values from memory), not a real part",
            f"* emitter follower: the emitter is node {emitter}, the tank's grounded end {end}",
            f"VCC vcc 0 DC {g(params.vcc)}",
            *rename_nodes(tank, {"0": emitter, "g": end}),
        ]
        if params.c_block is not None:
            lines.append(f"CB g 0 {g(params.c_block)}")
            if self.needs_bleed(topology, params):
                lines.append(f"RBLEED g 0 {g(params.r_bleed)}")
        lines += self.bias_lines(params, need(params.r_b1, "r_b1"))
        card = self.model_card(params, bias)
        stop, base = stopper_lines(params, self.input)  # a base stopper: the base behind it
        lines += stop
        lines.append(f"Q1 vcc {base} {emitter} {card.split()[1]}")
        lines.append(f"RE {emitter} 0 {g(need(params.r_e, 'r_e'))}")
        lines += next_stage_lines(params, emitter)
        return StageNetlist(
            elements=lines, models=[card], kick=KICK_FRACTION * bias.ic, top_dc=bias.ve
        )
