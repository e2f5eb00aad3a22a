"""The common-base stage: base decoupled to ground, the tank fed back from collector to emitter.

The circuit (the common-base Colpitts usual at VHF; Sedra & Smith, *Microelectronic
Circuits*, LC oscillators, and Razavi, *RF Microelectronics*, Colpitts oscillator,
attributions from memory): the base divider R_B1 (supply) / R_B2 (ground) is bypassed
to ground by C_base (``c_base``), so the base is at AC ground. The collector drives the
tank top ``t`` through the DC-blocking capacitor C_B (``c_block``; without it ``t`` is
the collector and the inductor feeds it from the supply); C1 runs from the tank top to
the emitter, C2 from the emitter to the supply rail (AC ground; an ideal supply makes
it the same as to ground), and the inductor (with C3 in series for a Clapp) from the
tank top to the supply. The collector load (R_C, or a choke) goes to the supply; the
emitter to ground through R_E.

Picker's tank convention holds unchanged: C1 across the stage's output
(collector–emitter), C2 across its input (base–emitter, the base being AC ground), L
from output to input; the feedback fraction beta = C1/C2 sets how much of the
collector–emitter swing reaches the emitter through the divider.

Small-signal network. As for the emitter follower
(:mod:`picker.circuit.stages.common_collector`), the tank's feedback capacitors meet at
the emitter, so the emitter is the reference node "0" (nodal analysis may take any node
as reference) and the base, the supply and ground (one AC node with an ideal base
bypass) are node ``b``. Stamps: R_C (or the choke) c–b, C_B c–t, the bleed t–b, R_E and
r_pi ∥ C_pi b–0, C_mu b–c, r_o c–0. Relabelled, this is the common-emitter network with
a grounded emitter (:func:`picker.circuit.stages.common_emitter.solve_loop`): no load to
the reference, the collector load beside C_mu, R_E in the bias position. The amplitude
the model reports is the tank top to ground, v_t − v_b (:meth:`CommonBase.probe`), the
node the netlist's transient measures. The base bypass is taken as a short (the netlist
has the real C_base).

Start-up (derived here; checked numerically in tests/test_common_base.py). With an
ideal device (β → ∞, no capacitance, r_o → ∞), no R_E, a lossless tank and the load R
(collector to AC ground, across the bridge), the return ratio is
T = −gm·Y_p/(Y1·Y2 + (Y1 + Y2)·Y_p), Y_p = G + jB the bridge with the load beside it,
Y1 = jωC1, Y2 = jωC2. T = 1 is Y1·Y2/Y_p + Y1 + Y2 = −gm; its imaginary part,
ω²·C1·C2·B/(G² + B²) + ω·(C1 + C2) = 0, gives in the high-Q limit (G ≪ |B|)
B = −ω·C1·C2/(C1 + C2): the tank's own resonance (ω0² = (C1 + C2)/(L·C1·C2) for a
Colpitts, Clapp's formula with C3); its real part, ω²·C1·C2·G/(G² + B²) = gm, then gives
gm·R = (C1 + C2)²/(C1·C2) = (1 + beta)²/beta (:meth:`required_gain`):
4 at C1 = C2, the textbook minimum of the common-base Colpitts (Razavi, *RF
Microelectronics*, Colpitts oscillator: g_m·R_p ≥ 4, from memory). Unlike the
common-emitter stage, the emitter's own input conductance (gm, the current the
emitter draws) loads the divider, so the gain needed never falls below 4.

Large signal: the bjt's exponential describing function on the base–emitter junction
and the bias shift through the divider and R_E as for the common-emitter stage
(:meth:`CommonEmitter.bias_loop`); the collector saturates when its swing pulls it
below the base, as there. Steadiness: the envelope equations take the stage's own DC
nodes (:meth:`CommonBase.slow_network`: the base bypass charged through R_th is the slow
state) and, for saturated boards, the base bypass's recovery time
(:meth:`CommonBase.relaxation_time`).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.bias import dc_loop
from picker.circuit.device import GENERIC_PNP, SmallSignal
from picker.circuit.loads import output_admittance
from picker.circuit.stages.base import (
    KICK_FRACTION,
    BiasLoop,
    StageNetlist,
    Stamp,
    need,
    spice_number,
)
from picker.circuit.stages.common_collector import rename_nodes
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

__all__ = ["BASE_PULL", "CommonBase"]

#: The weight of the base bypass's time constant R_th·C_base in the bursting criterion of
#: saturated boards (:meth:`CommonBase.relaxation_time`, compared with
#: :data:`picker.circuit.envelope.SATURATED_BURST` start-up times): empirical, chosen on a
#: development set of 40 random designs simulated in ngspice and not committed
#: (``scripts/make_validation.py --stage common-base --count 40 --unbypassed 0 --seed
#: 777001``): its one saturated burster had R_th·C_base at 448 start-up times, its saturated
#: steady or unsettled boards at most 342; 120/400 puts the threshold at 400. The committed
#: set (``tests/validation/stage_common_base.json``) was not used to choose it.
BASE_PULL = 0.3


class CommonBase(CommonEmitter):
    """The common-base bjt stage with divider bias and a bypassed base."""

    name = "common-base"
    grounded_common = False
    device = "bjt"
    default_for_device = False
    output = "c"
    top = "t"
    input = "b"
    common = "0"
    coupling_parts = ("CB",)
    options = frozenset({"collector-feedback", "stopper", "p-type"})
    #: the balance of both junctions on saturated boards with a stopper: 0.46-0.61 % off in
    #: frequency against ngspice where the describing function is 0.21-0.40 % off (the
    #: typical stage with R_C 4.7 kΩ, R_E 1 kΩ, 100 and 220 Ω, an 18 MHz tank; README)
    saturated_balance = False
    refusals = {
        "emitter-split": "its emitter (source) resistor is the stage's input, fed by the "
        "tank, and takes no bypass (c_emitter): all of it is unbypassed already",
    }

    # ------------------------------------------------------------ bias and device values

    def collector_dc(self, params: AmplifierParams) -> float:
        """The load's DC resistance (a ValueError for an emitter bypass, which would short
        the emitter's feedback)."""
        if params.c_e is not None:
            raise ValueError(
                "the common-base stage takes no emitter bypass (c_emitter): the tank feeds "
                "the emitter"
            )
        return params.r_collector_dc

    def typical_params(self) -> AmplifierParams:
        """A 9 V stage at about 0.5 mA (invented values, not a real circuit)."""
        return AmplifierParams(
            kind=self.device,
            stage=self.name,
            vcc=9.0,
            r_c=2200.0,
            r_b1=47e3,
            r_b2=10e3,
            r_e=2200.0,
            c_block=10e-9,
            c_base=100e-9,
            inductor_q=50.0,
        )

    def typical_variants(self) -> dict[str, AmplifierParams]:
        """Collector feedback R_F = 47 kΩ with R_B2 = 10 kΩ (about 0.33 mA; the base
        node's resistance kept near the divider's, so its bypass settles as fast), and
        the PNP stage at −9 V, and a 100 Ω stopper between the bypassed base and the
        transistor (invented values, not real circuits)."""
        p = self.typical_params()
        return {
            "collector-feedback": replace(p, r_b1=None, r_feedback=47e3),
            "p-type": replace(p, p_type=True, device=GENERIC_PNP),
            "stopper": replace(p, r_stopper=100.0),
        }

    # ------------------------------------------------------------ start-up

    def required_gain(self, topology: Topology, values: Mapping[str, Any]) -> Any:
        """(C1 + C2)²/(C1·C2) = (1 + β)²/β of the feedback pair (module docstring: derived
        here, the high-Q limit of the edge; 4 at C1 = C2)."""
        out, inp = topology.feedback_pair
        c1, c2 = np.asarray(values[out]), np.asarray(values[inp])
        return (c1 + c2) ** 2 / (c1 * c2)

    # ------------------------------------------------------------ the small-signal network

    def _branches(self, s: np.ndarray, params: AmplifierParams, ss: SmallSignal) -> dict[str, Any]:
        """The stage's branch admittances at ``s`` by name."""
        y_load = output_admittance(params, s)  # the collector load and the next stage
        if params.r_feedback is not None:  # collector to the bypassed base: beside the load
            y_load = y_load + 1.0 / params.r_feedback
        return {
            "load": y_load,
            "re": (0.0 if params.r_e is None else 1.0 / params.r_e) + 0.0 * s,
            "pi": 1.0 / ss.r_pi + s * ss.c_pi,
            "mu": s * ss.c_mu,
            "o": 1.0 / ss.r_o + 0.0 * s,
            "cb": None if params.c_block is None else s * params.c_block,
        }

    def stamps(
        self, s: np.ndarray, topology: Topology, params: AmplifierParams, ss: SmallSignal
    ) -> list[Stamp]:
        """Load (c–b; a collector-feedback resistor R_F beside it, both ends of R_F at AC
        ground but the collector), C_B (c–t; a 1 MS short without it), bleed (t–b), R_E
        (b–0), y_pi (b–0), y_mu (b–c), g_o (c–0)."""
        c, t, b = self.output, self.top, self.input
        y = self._branches(s, params, ss)
        out = [
            Stamp(c, b, y["load"]),
            Stamp(c, t, SHORT + 0 * s if y["cb"] is None else y["cb"]),
            Stamp(b, "0", y["re"]),
            Stamp(b, "0", y["pi"]),
            Stamp(b, c, y["mu"]),
            Stamp(c, "0", y["o"]),
        ]
        if self.needs_bleed(topology, params):
            out.append(Stamp(t, b, 1.0 / params.r_bleed + 0 * s))
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
        (t–b) lies beside the tank's bridge."""
        y1, y2, ytb = tank
        if self.needs_bleed(topology, params):
            ytb = ytb + 1.0 / params.r_bleed
        y = self._branches(s, params, ss)
        adm = (0.0 * s, y["re"], y["pi"], y["mu"] + y["load"], y["o"], None, y["cb"])
        names = (self.output, self.top, self.input, self.common)
        return solve_loop(s, (y1, y2, ytb), adm, ss.gm, names if nodes else None)

    def probe(self, x: Mapping[str, Any]) -> Any:
        """The tank top to ground, the node the netlist's transient measures: ground (with
        the supply) is the base's AC node ``b``, so v_t − v_b (not v_t, the swing across C1
        from the emitter)."""
        return x[self.top] - x[self.input]

    def loaded_tank(
        self, topology: Topology, values: Mapping[str, Any], ss: SmallSignal
    ) -> dict[str, Any]:
        """C_pi across C2 (base–emitter, the base at AC ground); C_mu runs from the
        collector to AC ground, beside the bridge, and is left to the root finder."""
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
        """The DC nodes collector ``c``, tank top ``t``, base ``b`` and emitter ``e``
        (:func:`picker.circuit.stages.slow.build`; the supply is a slow-signal ground): the
        load c–supply, C_B c–t (a short without it), the tank's C1 t–e and C2 e–supply,
        its bridge t–supply (a short where it passes DC: the inductor to the supply), the
        bleed t–supply, the base bypass C_base and the divider's R_th b–ground, C_pi b–e,
        C_mu b–c, R_E e–ground. The base bypass, charged by the base current through
        R_th, is the slow state the common-emitter layout does not have."""
        y_out, y_in, y_br = tank
        c, t, b, e, gnd = "c", "t", "b", "e", GROUND
        parts = Parts()
        parts.cap(t, e, lowfreq_capacitance(y_out, s_lo))
        parts.cap(e, gnd, lowfreq_capacitance(y_in, s_lo))
        parts.cap(b, e, ss.c_pi)
        parts.cap(b, c, ss.c_mu)
        parts.cap(c, t, params.c_block)
        parts.cap(t, gnd, None if topology.bridge_passes_dc else lowfreq_capacitance(y_br, s_lo))
        if params.c_base is not None:
            parts.cap(b, gnd, params.c_base)
        parts.conds.append((c, gnd, 1.0 / max(loop.r_out, 1e-3)))
        parts.bias(loop, params, b, e)
        if self.needs_bleed(topology, params):
            parts.conds.append((t, gnd, 1.0 / params.r_bleed))
        return parts.network((c, t, b, e), s_lo.size, loop, (c, b, e))

    def relaxation_time(self, params: AmplifierParams) -> float:
        """:data:`BASE_PULL`·R_th·C_base: the base bypass, pulled by the junctions' pulses
        (the base current, and the base-collector junction when the collector swings below
        the base), recovers through the divider's Thevenin resistance R_th = R_B1 ∥ R_B2
        (0 without a bypass). The base current is the emitter's over β, so the bypass is
        pulled less than a common-emitter's emitter bypass: its time constant counts for
        :data:`BASE_PULL` of one."""
        r_th = divider_resistance(params)
        if params.c_base is None or r_th is None or params.r_b1 is None:
            return 0.0
        return BASE_PULL * r_th * params.c_base

    # ------------------------------------------------------------ DC voltages, cautions

    def tank_top_dc(self, topology: Topology, params: AmplifierParams, vc: float) -> float:
        """DC voltage of the tank top: the supply through the inductor (or, with C_B and a
        bridge that blocks DC, through the bleed); without C_B, the collector's."""
        if params.c_block is None and not topology.bridge_passes_dc:
            return vc
        return params.vcc

    def dc_voltages(self, topology: Topology, params: AmplifierParams) -> dict[str, float]:
        """The tank's parts from the emitter (the tank's common end), C2 from the emitter
        to the supply rail; C_B between the collector and the tank top."""
        b = self.bias(params)
        if b is None:
            return super().dc_voltages(topology, params)
        top = self.tank_top_dc(topology, params, b.vc)
        out = {k: abs(v) for k, v in topology.dc_across(top - b.ve, params.vcc - b.ve).items()}
        if params.c_block is not None:
            out["CB"] = abs(b.vc - top)
        return out

    def cautions(self, topology: Topology, params: AmplifierParams) -> list[str]:
        """The inductor feeding the collector past its load (a Colpitts without C_B); no
        base bypass; a bias that saturates the transistor."""
        out = []
        if params.c_block is None and topology.bridge_passes_dc:
            out.append(
                "no DC-blocking capacitor between collector and tank: L feeds the collector "
                "from the supply, past the collector load (the bias point's V_C is then the "
                "supply)"
            )
        if params.c_base is None:
            out.append(
                "no base bypass (c_base): the model takes the base as AC ground; the netlist "
                "needs the capacitor"
            )
        return out + self.bias_cautions(params)

    # ------------------------------------------------------------ netlist

    def blocking_joins_input(self, topology: Topology, params: AmplifierParams) -> bool:
        """C_B joins the collector to the tank top, whose coil leads to the emitter (held
        by the device), not to the bypassed base: its bias node is the base's alone."""
        return False

    def settling_time(self, params: AmplifierParams) -> float:
        """Five time constants R_th·C_base of the bypassed base (R_th = R_B1 ∥ R_B2; with
        collector feedback R_B2 ∥ (R_F + R_C), :func:`picker.circuit.bias.dc_loop`)."""
        if params.c_base is None:
            return 0.0
        if params.r_feedback is not None:
            r_loop = dc_loop(params, self.collector_dc(params), params.effective_device().bf)[2]
            return 5.0 * r_loop * params.c_base
        r_th = divider_resistance(params)
        if r_th is None or params.r_b1 is None:
            return 0.0
        return 5.0 * r_th * params.c_base

    def netlist(
        self,
        topology: Topology,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        params: AmplifierParams,
    ) -> StageNetlist:
        """The generic NPN (as the common-emitter stage's netlist), the collector load and
        C_B, the tank between the tank top ``t``, the emitter ``e`` and the supply rail,
        the base divider with its bypass, R_E."""
        bias = self.bias(params)
        if bias is None:
            raise ValueError("netlist export needs the base bias network (r_b1, r_b2)")
        c_base = need(params.c_base, "a base bypass capacitor (c_base)")
        g = spice_number
        col = self.output if params.c_block is not None else self.top
        tank = topology.netlist_lines(values, stray, r_l, params.capacitor_esr, self.top, "vcc")
        lines = [
            "* generic small-signal NPN: typical of the class (values from memory), not a real part",
            "* common base: the base bypassed to ground, the tank from t to the emitter e",
            *self.passive_lines(params, col),
            *rename_nodes(tank, {"0": "e"}),
        ]
        if self.needs_bleed(topology, params):
            lines.append(f"RBLEED {self.top} vcc {g(params.r_bleed)}")
        lines += self.bias_lines(params, params.r_b1)
        lines.append(f"CBASE {self.input} 0 {g(c_base)}")
        card = self.model_card(params, bias)
        stop, base = stopper_lines(params, self.input)  # between the bypassed base and the device
        lines += stop
        lines.append(f"Q1 {col} {base} e {card.split()[1]}")
        lines.append(f"RE e 0 {g(need(params.r_e, 'r_e'))}")
        return StageNetlist(
            elements=lines,
            models=[card],
            kick=KICK_FRACTION * bias.ic,
            top_dc=self.tank_top_dc(topology, params, bias.vc),
        )
