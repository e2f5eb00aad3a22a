"""The common-gate stage: gate at AC ground, the tank fed back from the drain to the source.

The fet counterpart of the common-base stage (:mod:`picker.circuit.stages.common_base`),
as the common-source stage is of the common-emitter one: the drain drives the tank top
``t`` through the blocking capacitor C_B (``c_coupling``); C1 runs from the tank top to
the source, C2 from the source to the supply rail (AC ground), the inductor (with C3 in
series for a Clapp) from the tank top to the supply; the drain load (R_D or a choke)
goes to the supply, the source to ground through R_S (``r_emitter``). The gate is at AC
ground: tied straight to ground (no gate resistors: a JFET's source self-bias, V_G = 0),
or biased by a divider (``r_bias_top``/``r_bias_bottom``) or a single gate resistor
(``r_bias_bottom`` alone) and bypassed by ``c_base`` (the common-base stage's key).

Feedback fraction: picker's convention holds, C1 across the stage's output
(drain–source), C2 across its input (gate–source, the gate at AC ground), L from output
to input; beta = C1/C2 sets how much of the drain–source swing reaches the source
through the divider.

Start-up: the network is the common-base one with r_pi = ∞ exactly (the gate draws no
current), so its high-Q edge, derived in :mod:`picker.circuit.stages.common_base`, holds
for the fet: gm·R_D ≥ (C1 + C2)²/(C1·C2) = (1 + beta)²/beta, 4 at C1 = C2 (the source's
own input conductance gm loads the divider). Checked here against numpy's roots of the
characteristic cubic derived from the ground-referenced node equations
(tests/test_common_gate.py): with the gate grounded, a lossless inductor and the load R
across it, s³·L·C1·C2 + s²·L·(C1 + C2)/R + s·(C1 + C2 + gm·L/R) + gm = 0.

Large signal: the square law of the common-source stage on the gate–source voltage
(:meth:`picker.circuit.stages.common_source.CommonSource.device_currents`), the mean
current held by R_S; the drain reaches its triode edge when its swing pulls V_DS below
V_GS − VTO.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.fet import GENERIC_NMOS
from picker.circuit.stages.base import KICK_FRACTION, StageNetlist, spice_number
from picker.circuit.stages.common_base import CommonBase
from picker.circuit.stages.common_collector import rename_nodes
from picker.circuit.stages.common_source import CommonSource
from picker.tank.base import Topology

__all__ = ["CommonGate"]


class CommonGate(CommonSource, CommonBase):
    """The common-gate fet stage: the square-law device of :class:`CommonSource` in the
    network of :class:`CommonBase`."""

    name = "common-gate"
    grounded_common = False
    device = "fet"
    has_device_law = True
    default_for_device = False
    collector_load = True
    output = "c"
    top = "t"
    input = "b"
    common = "0"
    coupling_parts = ("CB",)
    options = frozenset({"stopper", "p-type"})

    def typical_params(self) -> AmplifierParams:
        """A 9 V MOSFET stage at about 2.3 mA: the generic small-signal n-channel MOSFET,
        gate divider 10 kΩ/10 kΩ bypassed by 100 nF, R_S = 1 kΩ, R_D = 1 kΩ, C_B = 10 nF
        (invented values, not a real circuit; the generic JFET's few mS of gm cannot start
        the typical tank's Clapp form, which needs gm·R_D above (C1 + C2)²/(C1·C2) = 4.65
        with the Clapp's loss on top)."""
        return AmplifierParams(
            kind=self.device,
            stage=self.name,
            vcc=9.0,
            r_c=1000.0,
            r_b1=10e3,
            r_b2=10e3,
            r_e=1000.0,
            c_block=10e-9,
            c_base=100e-9,
            inductor_q=50.0,
            fet=GENERIC_NMOS,
        )

    def gate_grounded(self, params: AmplifierParams) -> bool:
        """Whether the gate is tied straight to ground (no gate resistors)."""
        return params.r_b1 is None and params.r_b2 is None

    def typical_variants(self) -> dict[str, AmplifierParams]:
        """The p-channel stage at −9 V: the mirror image of the typical one; a 220 Ω stopper
        between the grounded gate and the fet (invented values, not real circuits)."""
        p = self.typical_params()
        return {"p-type": replace(p, p_type=True), "stopper": replace(p, r_stopper=220.0)}

    def gate_dc_resistance(self, params: AmplifierParams) -> float:
        """0 with the gate tied to ground (a gate stopper's resistance, if any), else the
        gate network's (as the common-source stage's): the gate junction's rectified
        current then moves only the source (and drops across the stopper)."""
        if self.gate_grounded(params):
            return params.r_stopper or 0.0
        return super().gate_dc_resistance(params)

    def cautions(self, topology: Topology, params: AmplifierParams) -> list[str]:
        """The inductor feeding the drain past its load (a Colpitts without C_B); a gate
        network with no bypass; a bias in the triode region."""
        out = []
        if params.c_block is None and topology.bridge_passes_dc:
            out.append(
                "no DC-blocking capacitor between drain and tank: L feeds the drain from the "
                "supply, past the drain load"
            )
        if not self.gate_grounded(params) and params.c_base is None:
            out.append(
                "no gate bypass (c_base): the model takes the gate as AC ground; the netlist "
                "needs the capacitor"
            )
        return out + self.bias_cautions(params)

    def settling_time(self, params: AmplifierParams) -> float:
        """Five time constants of the bypassed gate (R_th·C_base), none with the gate
        grounded."""
        if params.c_base is None:
            return 0.0
        r = [x for x in (params.r_b1, params.r_b2) if x is not None]
        if not r:
            return 0.0
        return 5.0 / sum(1.0 / x for x in r) * params.c_base

    def netlist(
        self,
        topology: Topology,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        params: AmplifierParams,
    ) -> StageNetlist:
        """The fet from its card, the drain load and C_B, the tank between the tank top
        ``t``, the source ``e`` and the supply rail, the gate grounded (or its network
        with the bypass C_base), R_S."""
        card = params.fet
        bias = self.bias(params)
        if card is None or bias is None:
            raise ValueError(
                "netlist export of a common-gate stage needs the fet's device card "
                "(device, idss/vto/kp) and no gm or bias_current"
            )
        g = spice_number
        col = self.output if params.c_block is not None else self.top
        tank = topology.netlist_lines(values, stray, r_l, params.capacitor_esr, self.top, "vcc")
        lines = [
            f"* {card.label} fet: typical of its class (values from memory), not a real part",
            "* common gate: the gate at AC ground, the tank from t to the source e",
            *self.passive_lines(params, col),
            *rename_nodes(tank, {"0": "e"}),
        ]
        if self.needs_bleed(topology, params):
            lines.append(f"RBLEED {self.top} vcc {g(params.r_bleed)}")
        gate = "0"
        if not self.gate_grounded(params):
            gate = self.input
            lines += self.gate_lines(params)
            if params.c_base is None:
                raise ValueError("the common-gate stage's gate network needs its bypass (c_base)")
            lines.append(f"CBASE {gate} 0 {g(params.c_base)}")
        lines += self.device_lines(params, col, gate, "e")
        if params.r_e is None:
            raise ValueError("the common-gate stage needs a source resistor (r_emitter)")
        lines.append(f"RE e 0 {g(params.r_e)}")
        return StageNetlist(
            elements=lines,
            models=[card.model_card()],
            kick=KICK_FRACTION * bias.ic,
            top_dc=self.tank_top_dc(topology, params, bias.vc),
        )
