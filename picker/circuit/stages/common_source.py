"""The common-source stage: a fet whose drain drives the tank, gate fed back from it.

The same circuit as the common-emitter stage (:mod:`picker.circuit.stages.common_emitter`)
with drain, gate and source in the places of collector, base and emitter: the
node names, the passive parts and the closed-form loop gain are shared. What
differs is the device: the gate draws no current (r_pi = ∞ exactly), the
small-signal values come from the drain current and the square law (gm =
2·I_D/V_ov; Sedra & Smith, *Microelectronic Circuits*, MOSFET chapter), there is
no bias solution (the drain current is given), and the amplitude is limited by
the drain current rather than by an exponential law.

Start-up: the common-emitter condition with r_pi = ∞ exactly, gm·R_D ≥ 1/β =
C2/C1 for a Colpitts tank (Sedra & Smith, Colpitts section, whose analysis
neglects r_pi; the fet form is the same loop, e.g. Boylestad & Nashelsky, *Electronic
Devices and Circuit Theory*, FET Colpitts oscillator, attribution [memory]).

With a device card (``params.fet``, :class:`picker.circuit.fet.FetCard`: a JFET from IDSS,
V_P and λ, or a MOSFET from V_T, KP and λ) the stage solves its own bias: the gate at
the divider's Thevenin voltage (no gate current), or at 0 V through a single gate
resistor to ground (``r_b2`` alone: the JFET's source self-bias), the source through R_S
(:func:`picker.circuit.fet.square_law_bias`); gm = 2·I_D/u and g_ds = λ·k·u² at that
point (equation (F3) there), C_gs and C_gd from the card unless given; the netlist
writes the card itself.

Large signal: the square law with cut-off (:meth:`CommonSource.device_currents`); a
JFET's gate junction conducts once the swing passes |V_GS| and its rectified current,
returned through the gate and source resistors, shifts the bias (grid-leak bias:
:meth:`CommonSource.gate_leak`), which clamps a self-biased JFET's swing.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import replace

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import BiasPoint, SmallSignal
from picker.circuit.fet import FetBias, FetCard, gate_junction_mean, square_law_bias
from picker.circuit.stages.base import (
    KICK_FRACTION,
    BiasLoop,
    DeviceCurrents,
    StageNetlist,
    need,
    spice_number,
)
from picker.circuit.stages.common_emitter import CommonEmitter
from picker.circuit.stages.stopper import stopper_lines
from picker.tank.base import Topology

__all__ = ["CommonSource", "NMOS_NAME"]

#: Name of the netlist's square-law NMOS card.
NMOS_NAME = "PICKER_NMOS"


def _need_c_gs(params: AmplifierParams) -> float:
    """C_gs as given, 0.0 when it will come from f_t; a ValueError when neither is given."""
    if params.c_pi is None and params.f_t is None:
        raise ValueError("a fet amplifier needs c_pi (C_gs) or f_t")
    return params.c_pi if params.c_pi is not None else 0.0


def _card(params: AmplifierParams) -> FetCard:
    """The device card, or a ValueError saying that the amplifier needs one."""
    if params.fet is None:
        raise ValueError("the amplifier needs a fet device card")
    return params.fet


class CommonSource(CommonEmitter):
    """The common-source fet stage (a square-law device described by its small-signal values)."""

    name = "common-source"
    has_device_law = True
    device = "fet"
    options = frozenset({"emitter-split", "stopper", "p-type"})

    def gate_voltage(self, params: AmplifierParams) -> float:
        """DC gate voltage: the divider's V_DD·R_B2/(R_B1 + R_B2) (no gate current), the
        supply through R_B1 alone, or 0 V without R_B1 (a gate resistor to ground)."""
        if params.r_b1 is None:
            return 0.0
        if params.r_b2 is None:
            return params.vcc
        return params.vcc * params.r_b2 / (params.r_b1 + params.r_b2)

    def fet_bias(self, params: AmplifierParams) -> FetBias | None:
        """The square-law bias point from the device card (``None`` without one, or where
        the drain current or gm is given directly)."""
        if params.fet is None or params.gm is not None or params.i_bias is not None:
            return None
        return square_law_bias(
            params.fet,
            v_g=self.gate_voltage(params),
            r_s=params.r_e or 0.0,
            v_dd=params.vcc,
            r_d=self.collector_dc(params),
        )

    def bias(self, params: AmplifierParams) -> BiasPoint | None:
        """The card's bias point (:meth:`fet_bias`) in the stage's terms (drain, gate, source
        for collector, base, emitter; no gate current; "saturated" meaning the triode
        region); None without a card: the drain current is then given (``i_bias``)."""
        fb = self.fet_bias(params)
        if fb is None:
            return None
        return BiasPoint(
            ic=fb.i_d, ib=0.0, vbe=fb.vgs, vb=fb.vg, vc=fb.vd, ve=fb.vs, saturated=fb.triode
        )

    def device_small_signal(self, params: AmplifierParams) -> SmallSignal:
        """gm as given, or 2·I_D/V_ov (square law, Sedra & Smith); r_o = V_A/I_D
        (``early_voltage``; infinite without), r_pi = ∞, C_gs and C_gd as given. With a
        device card: gm = 2·I_D/u, r_o = 1/(λ·k·u²) at the solved bias (equation (F3) of
        :mod:`picker.circuit.fet`), C_gs and C_gd from the card."""
        fb = self.fet_bias(params)
        if fb is not None and params.fet is not None:
            card = params.fet
            g_ds = card.lam * card.k * fb.u * fb.u
            r_o = params.r_o if params.r_o is not None else (1.0 / g_ds if g_ds > 0 else math.inf)
            return SmallSignal(2.0 * fb.i_d / fb.u, math.inf, r_o, card.cgs, card.cgd, fb.i_d)
        if params.gm is not None:
            gm = params.gm
            i_dc = params.i_bias if params.i_bias is not None else math.nan
        else:
            i_dc = need(params.i_bias, "i_bias or gm")
            gm = 2.0 * i_dc / need(params.overdrive_voltage, "overdrive_voltage")
        ev = params.early_voltage
        r_o = params.r_o if params.r_o is not None else (ev / i_dc if ev else math.inf)
        return SmallSignal(gm, math.inf, r_o, _need_c_gs(params), need(params.c_mu, "c_mu"), i_dc)

    def ideal_params(self, gm: float, r_load: float) -> AmplifierParams:
        """The fet as Sedra & Smith idealise it: C_gs = C_gd = 0, r_o → ∞, no bias network."""
        return AmplifierParams(
            kind=self.device,
            stage=self.name,
            gm=gm,
            r_o=math.inf,
            c_pi=0.0,
            c_mu=0.0,
            r_c=r_load,
        )

    def typical_params(self) -> AmplifierParams:
        """A 9 V stage at 2 mA and 0.4 V overdrive (gm = 10 mS; invented values, not a
        real part), gate divider to about 2.9 V, source resistor bypassed."""
        return AmplifierParams(
            kind=self.device,
            stage=self.name,
            vcc=9.0,
            i_bias=2e-3,
            overdrive_voltage=0.4,
            early_voltage=50.0,
            c_pi=5e-12,
            c_mu=1e-12,
            r_c=680.0,
            r_b1=1e6,
            r_b2=470e3,
            r_e=470.0,
            c_e=47e-9,
            c_block=10e-9,
            inductor_q=50.0,
        )

    def typical_variants(self) -> dict[str, AmplifierParams]:
        """The source resistor split 22 Ω unbypassed + 448 Ω bypassed (with R_D = 1 kΩ to
        make up the gain the split takes), the p-channel stage at −9 V (the mirror image)
        and a 220 Ω gate stopper (invented values, not real circuits)."""
        p = self.typical_params()
        return {
            "emitter-split": replace(p, r_e_unbypassed=22.0, r_c=1000.0),
            "p-type": replace(p, p_type=True),
            "stopper": replace(p, r_stopper=220.0),
        }

    def overdrive(self, params: AmplifierParams, ss: SmallSignal) -> float:
        """V_ov = V_GS − V_th at rest: given, or 2·I_D/gm (square law); NaN when unknown."""
        if params.overdrive_voltage is not None:
            return params.overdrive_voltage
        fb = self.fet_bias(params)
        if fb is not None:
            return fb.u
        return 2.0 * ss.i_dc / ss.gm

    def bias_loop(self, params: AmplifierParams, ss: SmallSignal) -> BiasLoop | None:
        """The gate sits at the divider's voltage (no drain current reaches it), so only
        the source resistor R_S acts on the mean drain current: r_dc = R_S, β = inf;
        r_th the gate's DC resistance for a JFET (its gate junction's current returns
        through it), inf for a MOSFET; the knee is the
        triode edge V_DS = V_GS − V_th (Sedra & Smith, MOSFET chapter). ``None`` where
        the drain current is unknown."""
        v_ov = self.overdrive(params, ss)
        if not (math.isfinite(ss.i_dc) and ss.i_dc > 0 and math.isfinite(v_ov)):
            return None
        r_s = params.r_e or 0.0
        r_d = self.collector_dc(params) if (params.r_c or params.l_choke) else 0.0
        # a JFET's gate junction injects current at the gate, which returns through the
        # gate's DC resistance (:meth:`gate_leak`); a MOSFET's gate draws none
        junction = self.gate_current(params, ss, np.zeros(1)) is not None
        return BiasLoop(
            i_rest=ss.i_dc,
            gm_rest=2.0 * ss.i_dc / v_ov,
            r_dc=r_s,
            # (a gate tied to ground: a milliohm, so the slow network's node stays finite)
            r_th=max(self.gate_dc_resistance(params), 1e-3) if junction else math.inf,
            r_e=r_s,
            c_e=params.c_e or 0.0,
            beta=math.inf,
            v_out=params.vcc - ss.i_dc * (r_d + r_s),
            r_out=r_d,
            v_knee=v_ov,
        )

    def device_currents(
        self, params: AmplifierParams, ss: SmallSignal, dv: np.ndarray, a: np.ndarray
    ) -> DeviceCurrents:
        """Square law with cut-off, i_D = K·max(V + a·cos θ, 0)², V = V_ov + ΔV, K =
        I_D/V_ov² (Sedra & Smith, MOSFET chapter), its Fourier cosine coefficients in
        closed form: the device conducts for |θ| < φ, cos φ = −V/a clipped to [−1, 1];
        with (V + a·cos θ)² = (V² + a²/2) + 2Va·cos θ + (a²/2)·cos 2θ and
        ∫₀^φ cos pθ·cos nθ dθ = (S(p − n) + S(p + n))/2, S(0) = φ, S(m) = sin(mφ)/m
        (the conduction-angle analysis of Clarke & Hess, *Communication Circuits*,
        large-signal transconductance, here for the square law), the mean is
        (K/π)·[(V² + a²/2)·φ + 2Va·S(1) + (a²/2)·S(2)] and the n-th harmonic
        (2K/π)·[(V² + a²/2)·S(n) + Va·(S(n−1) + S(n+1)) + (a²/4)·(S(|n−2|) + S(n+2))].
        Unclipped (φ = π) they give K·(V² + a²/2), 2K·V·a, K·a²/2 and 0."""
        k, v, a, p0, va, q, sn = self._conduction(params, ss, dv, a, 6)
        two_k = 2.0 * k / np.pi
        return DeviceCurrents(
            mean=k / np.pi * (p0 * sn[0] + 2.0 * va * sn[1] + 2.0 * q * sn[2]),
            h1=two_k * (p0 * sn[1] + va * (sn[0] + sn[2]) + q * (sn[1] + sn[3])),
            h2=two_k * (p0 * sn[2] + va * (sn[1] + sn[3]) + q * (sn[0] + sn[4])),
            h3=two_k * (p0 * sn[3] + va * (sn[2] + sn[4]) + q * (sn[1] + sn[5])),
            peak=k * np.maximum(v + a, 0.0) ** 2,
        )

    def mean_current(
        self, params: AmplifierParams, ss: SmallSignal, a: np.ndarray
    ) -> Callable[[np.ndarray], np.ndarray]:
        """The mean of :meth:`device_currents` alone (three of its six S terms), by the
        same operations in the same order, so equal to it bit for bit; for a JFET card
        with a source resistor, plus its gate junction's share (:meth:`gate_leak`)."""

        def mean(dv: np.ndarray) -> np.ndarray:
            k, _, _, p0, va, q, sn = self._conduction(params, ss, dv, a, 3)
            return k / np.pi * (p0 * sn[0] + 2.0 * va * sn[1] + 2.0 * q * sn[2])

        leak = self.gate_leak(params, ss, a)
        if leak is None:
            return mean
        return lambda dv: mean(dv) + leak(dv)

    def gate_dc_resistance(self, params: AmplifierParams) -> float:
        """The DC resistance from the gate to ground, ohm: the divider's R_B1·R_B2/(R_B1 +
        R_B2), R_B1 or the gate resistor R_G (``r_b2``) alone, 1 TΩ (a floating gate)
        without either. A bleed resistor reaching the gate through the inductor is left
        out (the clamp level moves only with ln R, :meth:`gate_leak`). A gate stopper
        carries the junction's current too: its resistance adds."""
        r1, r2 = params.r_b1, params.r_b2
        r_s = params.r_stopper or 0.0
        if r1 is not None and r2 is not None:
            return r1 * r2 / (r1 + r2) + r_s
        return (r1 if r1 is not None else (r2 if r2 is not None else 1e12)) + r_s

    def gate_current(
        self, params: AmplifierParams, ss: SmallSignal, a: np.ndarray
    ) -> Callable[[np.ndarray], np.ndarray] | None:
        """ΔV ↦ the JFET gate junction's mean forward current I_G at drive ``a``
        (:func:`picker.circuit.fet.gate_junction_mean` at V_GS = V_GS,rest + ΔV), A;
        ``None`` without a JFET card or without its solved bias."""
        card = params.fet
        if card is None or card.kind != "njf" or self.fet_bias(params) is None:
            return None
        v_rest = card.vto + self.overdrive(params, ss)
        return lambda dv: gate_junction_mean(v_rest + dv, a)

    def gate_leak(
        self, params: AmplifierParams, ss: SmallSignal, a: np.ndarray
    ) -> Callable[[np.ndarray], np.ndarray] | None:
        """ΔV ↦ I_G·(1 + R_G/R_S): the JFET gate junction's share of the bias shift's
        mean current at drive ``a`` (``None`` without a JFET card, or without a source
        resistor, where the bias shift holds ΔV = 0).

        The junction's mean forward current I_G (:meth:`gate_current`) flows from the
        gate through the source resistor: it lowers the gate through the gate's DC
        resistance R_G (:meth:`gate_dc_resistance`) by R_G·I_G and raises the source by
        R_S·I_G, so the bias shift ΔV = −R_S·(I_D − I_rest) − (R_S + R_G)·I_G
        (:func:`picker.circuit.large_signal.bias_shift` with r_dc = R_S) takes
        I_D + I_G·(1 + R_G/R_S) as its mean current. This is grid-leak (gate-leak) bias:
        at large drive the gate's DC level settles where the junction conducts only
        near the positive peak, V_GS,dc + a ≈ V_T·ln(|V_G|/(R_G·IS)), a few tenths of a
        volt (Clarke & Hess, *Communication Circuits: Analysis and Design*, 1971,
        self-bias of a driven junction; the grid-leak bias of valve oscillators;
        attribution from memory). The junction's fundamental current, which loads the
        gate (about R_G/2 for a grid leak), is left out.
        """
        r_s = params.r_e or 0.0
        junction = self.gate_current(params, ss, a)
        if junction is None or r_s <= 0.0:
            return None
        scale = 1.0 + self.gate_dc_resistance(params) / r_s
        return lambda dv: scale * junction(dv)

    def _conduction(
        self, params: AmplifierParams, ss: SmallSignal, dv: np.ndarray, a: np.ndarray, terms: int
    ) -> tuple[float, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[np.ndarray]]:
        """(K, V, |a|, V² + a²/2, V·a, a²/4, [S(0) … S(terms − 1)]) of
        :meth:`device_currents`, S(0) = φ, S(m) = sin(mφ)/m."""
        v_ov = self.overdrive(params, ss)
        k = ss.i_dc / (v_ov * v_ov)
        dv, a = np.broadcast_arrays(np.asarray(dv, dtype=float), np.asarray(a, dtype=float))
        v = v_ov + dv
        a = np.abs(a)
        pos = a > 0.0
        c = np.where(pos, -v / np.where(pos, a, 1.0), np.where(v > 0.0, -1.0, 1.0))
        phi = np.arccos(np.clip(c, -1.0, 1.0))
        sn = [phi] + [np.sin(m * phi) / m for m in range(1, terms)]
        return k, v, a, v * v + 0.5 * a * a, v * a, 0.25 * a * a, sn

    def output_current(self, params: AmplifierParams, ss: SmallSignal, v: np.ndarray) -> np.ndarray:
        """Square law with cut-off, i_D = K·max(V_ov + v, 0)², K = I_D/V_ov² (as in
        :meth:`device_currents`)."""
        v_ov = self.overdrive(params, ss)
        return ss.i_dc / (v_ov * v_ov) * np.maximum(v_ov + np.asarray(v, dtype=float), 0.0) ** 2

    def diffusion_capacitance(self, params: AmplifierParams, ss: SmallSignal) -> float:
        """0: C_gs is taken as fixed."""
        return 0.0

    def headroom(self, params: AmplifierParams) -> float:
        """V_DS − u at the solved bias: the drain may swing down to the triode edge
        V_DS = V_GS − VTO (Sedra & Smith, MOSFET chapter); inf without a solved bias."""
        fb = self.fet_bias(params)
        return math.inf if fb is None else fb.vds - fb.u

    def bias_cautions(self, params: AmplifierParams) -> list[str]:
        """A bias in the fet's triode region (V_DS < V_GS − VTO), for every fet stage."""
        fb = self.fet_bias(params)
        if fb is not None and fb.triode:
            return ["the bias puts the fet in its triode region (V_DS < V_GS - VTO)"]
        return []

    def drive_limit(
        self, params: AmplifierParams, ss: SmallSignal, margin: np.ndarray, ok: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """V_gs,peak = margin·2·I_D/gm: the current limit of the large-drive bjt form
        (fundamental drain current 2·I_D; cruder than the bjt's describing function)."""
        return margin * 2.0 * ss.i_dc / ss.gm, np.zeros(margin.shape, dtype=bool)

    def netlist(
        self,
        topology: Topology,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        params: AmplifierParams,
    ) -> StageNetlist:
        """A square-law NMOS (SPICE level 1, no intrinsic capacitance) set to the stage's
        drain current and small-signal values, with C_gs and C_gd as explicit capacitors.

        The card is built from the operating point the model assumes (SPICE level-1
        MOSFET: I_D = KP/2·(W/L)·V_ov²·(1 + λ·V_DS); Massobrio & Antognetti,
        *Semiconductor Device Modeling with SPICE*, 2nd ed., MOS level 1): the gate
        sits at the divider's V_G (no gate current), the source at I_D·R_S, so
        VTO = V_G − I_D·R_S − V_ov with V_ov = 2·I_D/gm; λ = 1/(r_o·I_D − V_DS) makes
        g_ds = 1/r_o, and KP = 2·I_D/(V_ov²·(1 + λ·V_DS)) (W = L) gives back I_D and
        gm = 2·I_D/V_ov.
        """
        if params.fet is not None and params.gm is None and params.i_bias is None:
            return self.card_netlist(topology, values, stray, r_l, params)
        if params.r_b1 is None:
            raise ValueError("netlist export needs the gate bias network (r_b1, r_b2)")
        ss = self.small_signal(params)
        i_d = ss.i_dc
        if not (math.isfinite(i_d) and i_d > 0):
            raise ValueError("netlist export of a common-source stage needs the drain current")
        g = spice_number
        r_b1 = params.r_b1
        v_g = params.vcc if params.r_b2 is None else params.vcc * params.r_b2 / (r_b1 + params.r_b2)
        v_s = i_d * (params.r_e or 0.0)
        v_d = params.vcc - i_d * params.r_collector_dc
        v_ov = 2.0 * i_d / ss.gm
        v_ds = v_d - v_s
        lam = 0.0
        if math.isfinite(ss.r_o) and ss.r_o * i_d > v_ds:
            lam = 1.0 / (ss.r_o * i_d - v_ds)
        kp = 2.0 * i_d / (v_ov * v_ov * (1.0 + lam * v_ds))
        card = (
            f".model {NMOS_NAME} NMOS (LEVEL=1 VTO={g(v_g - v_s - v_ov)} KP={g(kp)} "
            f"LAMBDA={g(lam)} GAMMA=0)"
        )
        col = self.output if params.c_block is not None else self.top
        src = self.common if params.r_e is not None else "0"
        bleed = params.r_bleed if self.needs_bleed(topology, params) else None
        lines = [
            "* square-law NMOS set to the stage's bias and small-signal values, not a real part",
            *self.passive_lines(params, col),
            *topology.netlist_lines(
                values, stray, r_l, params.capacitor_esr, self.top, self.input, bleed
            ),
            *self.bias_lines(params, r_b1),
        ]
        stop, gate = stopper_lines(params, self.input)  # a gate stopper
        lines += [*stop, f"M1 {col} {gate} {src} {src} {NMOS_NAME} W=10u L=10u"]
        if ss.c_pi > 0:
            lines.append(f"CGS {gate} {src} {g(ss.c_pi)}")
        if ss.c_mu > 0:
            lines.append(f"CGD {gate} {col} {g(ss.c_mu)}")
        if params.r_e is not None:
            lines += self.emitter_lines(params)
        if params.c_block is None:
            top = v_d
        else:
            top = v_g if topology.bridge_passes_dc else 0.0
        return StageNetlist(elements=lines, models=[card], kick=KICK_FRACTION * i_d, top_dc=top)

    # ------------------------------------------------------------ with a device card

    def gate_lines(self, params: AmplifierParams) -> list[str]:
        """The gate's DC network: the divider (R_B1 from the supply), or a single gate
        resistor R_G (``r_b2``) to ground."""
        if params.r_b1 is not None:
            return self.bias_lines(params, params.r_b1)
        if params.r_b2 is not None:
            return [f"RG {self.input} 0 {spice_number(params.r_b2)}"]
        return []

    def device_lines(self, params: AmplifierParams, d: str, g: str, s: str) -> list[str]:
        """The fet (its card's element line) with C_gs and C_gd as explicit capacitors
        (the card has none: the model's constant capacitances at any bias); a gate
        stopper from ``g`` to the fet's own gate."""
        card = _card(params)
        ss = self.small_signal(params)
        stop, g = stopper_lines(params, g)  # a gate stopper: the fet's gate behind it
        lines = [*stop, card.instance(d, g, s)]
        if ss.c_pi > 0:
            lines.append(f"CGS {g} {s} {spice_number(ss.c_pi)}")
        if ss.c_mu > 0:
            lines.append(f"CGD {g} {d} {spice_number(ss.c_mu)}")
        return lines

    def card_netlist(
        self,
        topology: Topology,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        params: AmplifierParams,
    ) -> StageNetlist:
        """The fet from its own card (:meth:`picker.circuit.fet.FetCard.model_card`), the
        drain load and C_B, the tank, the gate network, R_S and C_S."""
        card = _card(params)
        bias = self.bias(params)
        if bias is None:
            raise ValueError("netlist export of a fet card needs its bias (no gm or i_bias)")
        col = self.output if params.c_block is not None else self.top
        src = self.common if params.r_e is not None else "0"
        bleed = params.r_bleed if self.needs_bleed(topology, params) else None
        lines = [
            f"* {card.label} fet: typical of its class (values from memory), not a real part",
            *self.passive_lines(params, col),
            *topology.netlist_lines(
                values, stray, r_l, params.capacitor_esr, self.top, self.input, bleed
            ),
            *self.gate_lines(params),
            *self.device_lines(params, col, self.input, src),
        ]
        if params.r_e is not None:
            lines += self.emitter_lines(params)
        return StageNetlist(
            elements=lines,
            models=[card.model_card()],
            kick=KICK_FRACTION * bias.ic,
            top_dc=self.top_dc(topology, params, bias),
        )
