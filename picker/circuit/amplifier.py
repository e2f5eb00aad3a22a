"""The amplifier's parameters: the active stage and its surroundings, as plain data.

:class:`AmplifierParams` describes the stage (device type, configuration, bias
network, load, coupling and emitter parts) and the tank's losses that the
loaded model needs; it holds no physics. The physics lives in the stage
(:mod:`picker.circuit.stages`: bias solution, small-signal values, admittance
stamps, netlist lines), the generic nodal solver (:mod:`picker.circuit.network`),
the root finder (:mod:`picker.circuit.oscillation`) and the amplitude and stress
estimates (:mod:`picker.circuit.amplitude`).

The circuit (picker's convention, Sedra & Smith, *Microelectronic Circuits*,
Colpitts section): the stage's output (collector ``c``) drives the tank top ``t``
through the DC-blocking capacitor C_B; the tank (:mod:`picker.tank`) sits between
the tank top, the stage's input (base ``b``) and ground; the emitter ``e`` goes to
ground through R_E ∥ C_E. The collector load (R_C, or an RF choke L_ch + winding
resistance) and the base divider R_B1 (to the supply), R_B2 (to ground) are at AC
ground through the supply. A common-source stage uses the same names for drain,
gate and source.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace

from picker.circuit.device import GENERIC_NPN, GenericNPN
from picker.circuit.fet import FetCard

__all__ = ["AmplifierParams", "ideal_params"]


@dataclass(frozen=True)
class AmplifierParams:
    """The active stage and its surroundings, SI floats. ``None`` means "absent" or "derive".

    Attributes
    ----------
    kind: the device type, "bjt" or "fet" (emitter names mean source for a fet).
    stage: the amplifier configuration, a name in :data:`picker.circuit.stages.STAGES`
        ("common-emitter", "common-source"); ``None`` = the default stage of ``kind``.
    vcc: supply voltage, V.
    i_bias: collector/drain DC current, A (bjt: ``None`` = solve from the bias network).
    gm: transconductance, S (overrides ``i_bias`` for the small-signal model).
    current_gain: beta (bjt; ``None`` = the device card's BF).
    early_voltage: V (``None`` = the device card's VAF for a bjt, infinite for a fet).
    r_o: output resistance, ohm (overrides ``early_voltage``).
    c_pi, c_mu: base-emitter and base-collector (gate-source, gate-drain) capacitance, F.
    f_t: transition frequency, Hz (gives c_pi = gm/(2π f_T) − c_mu when c_pi is None).
    overdrive_voltage: fet V_GS − V_th, V (gm = 2·I_D/V_ov, square law; Sedra & Smith).
    r_c: collector load resistor to the supply, ohm.
    l_choke, r_choke: RF choke to the supply (inductance H, winding resistance ohm); with
        ``r_c`` too, the resistor sits in series with the choke (:mod:`picker.circuit.loads`).
    r_b1, r_b2: base divider, supply-to-base and base-to-ground, ohm (r_b2 None: single R_B).
    r_e, c_e: emitter resistor and its bypass capacitor (c_e None: unbypassed, degeneration).
    c_base: the base's bypass capacitor to ground (the common-base stage), F.
    c_block: DC-blocking capacitor collector → tank (None: missing; flagged where the
        tank's bridge passes DC, as in a Colpitts).
    inductor_esr: series loss resistance of the inductor, ohm.
    inductor_q, q_frequency: the inductor's Q at a frequency (Hz; None = at the ideal
        tank frequency).
    capacitor_esr: position → ESR (ohm) in series with that capacitor.
    r_bleed: DC return from the tank top to ground, used only where the tank's bridge
        blocks DC and C_B is present (a Clapp tank: otherwise that node has no DC
        path), ohm.
    device: the NPN card for bias and device values (:data:`picker.circuit.device.GENERIC_NPN`).
    temperature_c: device temperature, °C (SPICE default 27).
    r_next, c_next, c_next_coupling: the next stage's input across the output (ohm, its
        parallel capacitance F or None) through the coupling capacitor (F)
        (:mod:`picker.circuit.loads`); ``r_next`` None: no external load.
    fet: a fet's own SPICE-style parameters (:class:`picker.circuit.fet.FetCard`): the fet
        stages then solve their bias from the gate network and R_S, and take gm, g_ds and
        the gate capacitances from the card; ``None``: the fet is described by ``gm`` or
        ``i_bias`` with ``overdrive_voltage`` and typed capacitances, with no bias solved.

    Bias-network details (:mod:`picker.circuit.bias`; a stage takes those in its
    :attr:`picker.circuit.stages.base.Stage.options`):

    r_feedback: collector-to-base resistor, ohm: the collector-feedback bias (``r_b1``
        is then absent; ``r_b2``, if present, still goes from the base to ground).
    r_e_unbypassed: the part of ``r_e`` that ``c_e`` does not bypass, ohm: a resistor
        in series between the emitter and the bypassed rest (r_e − r_e_unbypassed) ∥ C_E.
    r_stopper: a resistor in series with the base (gate), between the tank's input end
        and the device, ohm.
    p_type: the device is the mirror image (PNP, p-channel): every voltage and current
        of the n-type circuit negated, the supply at −vcc (:mod:`picker.circuit.polarity`).
    """

    kind: str = "bjt"
    stage: str | None = None
    vcc: float = 9.0
    i_bias: float | None = None
    gm: float | None = None
    current_gain: float | None = None
    early_voltage: float | None = None
    r_o: float | None = None
    c_pi: float | None = None
    c_mu: float | None = None
    f_t: float | None = None
    overdrive_voltage: float | None = None
    r_c: float | None = None
    l_choke: float | None = None
    r_choke: float = 0.0
    r_b1: float | None = None
    r_b2: float | None = None
    r_e: float | None = None
    c_e: float | None = None
    c_block: float | None = None
    c_base: float | None = None
    inductor_esr: float = 0.0
    inductor_q: float | None = None
    q_frequency: float | None = None
    capacitor_esr: Mapping[str, float] = field(default_factory=dict)
    r_bleed: float = 1e6
    device: GenericNPN = GENERIC_NPN
    temperature_c: float = 27.0
    fet: FetCard | None = None
    # bias-network details (picker.circuit.bias), kept apart from the fields above
    r_feedback: float | None = None
    r_e_unbypassed: float | None = None
    r_stopper: float | None = None
    p_type: bool = False
    # the external load (the next stage) across the output: picker.circuit.loads
    r_next: float | None = None
    c_next: float | None = None
    c_next_coupling: float = 100e-9

    def effective_device(self) -> GenericNPN:
        """The device card with ``current_gain`` and ``early_voltage`` applied."""
        d = self.device
        if self.current_gain is not None:
            d = replace(d, bf=self.current_gain)
        if self.early_voltage is not None:
            d = replace(d, vaf=self.early_voltage)
        return d

    @property
    def r_collector_dc(self) -> float:
        """DC resistance from the supply to the collector, ohm (a resistor in series with
        the choke adds to its winding resistance)."""
        if self.l_choke is not None:
            return self.r_choke + (self.r_c or 0.0)
        if self.r_c is None:
            raise ValueError("the amplifier needs a collector load: r_c or l_choke")
        return self.r_c


def ideal_params(gm: float, r_load: float, *, r_in: float | None = None) -> AmplifierParams:
    """The textbook amplifier: gm, load R across C1, optional R_in across C2, nothing else.

    r_pi → ∞ (or ``r_in``), zero device capacitance, r_o → ∞, grounded emitter,
    no blocking capacitor, lossless inductor (Sedra & Smith's Colpitts analysis).
    A fet's gate draws no current, so the common-source stage is this limit
    exactly; :meth:`picker.circuit.stages.base.Stage.ideal_params` gives the
    limit of every registered stage.
    """
    return AmplifierParams(
        kind="fet",
        gm=gm,
        r_o=math.inf,
        c_pi=0.0,
        c_mu=0.0,
        r_c=r_load,
        r_b1=r_in,
        r_b2=None,
    )
