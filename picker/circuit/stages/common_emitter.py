"""The common-emitter stage: a bjt whose collector drives the tank, base fed back from it.

The circuit (Sedra & Smith, *Microelectronic Circuits*, Colpitts section): the
collector ``c`` drives the tank top ``t`` through the DC-blocking capacitor C_B
(without it, c and t are one node); the tank's input end is the base ``b``;
the emitter ``e`` goes to ground through R_E ∥ C_E. The collector load (R_C, or
an RF choke L_ch with its winding resistance) and the base divider R_B1 (to the
supply), R_B2 (to ground) are at AC ground through the supply.

Model (hybrid-pi device at the DC bias point, :mod:`picker.circuit.device`):
r_pi ∥ C_pi base-emitter, C_mu base-collector, gm·v_be and r_o collector-
emitter. Base spreading resistance and package parasitics are neglected. The
loop is broken at the controlled source (Bode's return ratio, see
:mod:`picker.circuit.network`).

With r_pi → ∞, zero device capacitance, no bias network, grounded emitter and a
lossless inductor, T(jω0) = gm·R·C1/C2 at ω0² = (C1+C2)/(L·C1·C2): Sedra &
Smith's start-up condition gm·R ≥ C2/C1 (:meth:`CommonEmitter.required_gain`,
checked in tests/test_stage_conformance.py).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import replace
from typing import Any

import numpy as np
from scipy.special import i0e, i1e

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.bias import dc_loop, feedback_bias_point
from picker.circuit.device import (
    GENERIC_PNP,
    BiasPoint,
    SmallSignal,
    bias_point,
    npn_small_signal,
    thermal_voltage,
)
from picker.circuit.loads import load_lines, output_admittance
from picker.circuit.stages.base import (
    KICK_FRACTION,
    BiasLoop,
    DeviceCurrents,
    Stage,
    StageNetlist,
    Stamp,
    need,
    spice_number,
)
from picker.circuit.stages.stopper import stopper_lines
from picker.tank.base import Topology

__all__ = ["CommonEmitter", "bessel_ratio", "solve_loop"]

#: Largest drive x = V_be,peak/V_T the amplitude bisection searches (a swing far beyond
#: any bias network: where even this cannot bring G_m down to gm/margin, the stage is
#: flagged overdriven).
X_MAX = 400.0
#: V_CE below which a small-signal bjt saturates, V (common practice, no source).
V_CE_SAT = 0.3
#: A missing part that is a short (no C_B, grounded emitter) in the nodal matrix, S: an
#: error of about 1e-6 relative, still well conditioned.
SHORT = 1e6


def bessel_ratio(x: Any) -> np.ndarray:
    """2·I1(x)/(x·I0(x)): large-signal/small-signal transconductance of an exponential
    device with its DC current held fixed (Clarke & Hess, *Communication Circuits:
    Analysis and Design*, 1971, large-signal transconductance). 1 at x → 0."""
    x = np.asarray(x, dtype=float)
    safe = np.where(x > 1e-8, x, 1.0)
    return np.where(x > 1e-8, 2.0 * i1e(safe) / (safe * i0e(safe)), 1.0 - x * x / 8.0)


def _bias_shift(
    params: AmplifierParams, bias: BiasPoint | None, vt: float
) -> Callable[[Any], np.ndarray]:
    """x ↦ G_m(x)/gm for a bjt driven with a base-emitter sine of peak x·V_T.

    Describing function 2·I1(x)/(x·I0(x)) (Clarke & Hess) times the rise of the DC
    collector current the drive causes: the mean of exp(v_be/V_T) grows by I0(x), so
    the DC base-emitter voltage falls by V_T·ln I0(x) and the bias network
    (V_th, R_th, R_E) lets the current rise. DC loop, with I_C the mean collector
    current: V_th − V_T·ln(I_C/(IS·I0(x))) = I_C·(R_th/β + R_E·(1 + 1/β)); any bias
    network in the linear form (B2) of :mod:`picker.circuit.bias`. Without a bias
    network (gm given directly), the DC current is taken as fixed.
    """
    if bias is None or params.gm is not None or params.i_bias is not None:
        return bessel_ratio
    dev = params.effective_device()
    r_col = params.r_collector_dc if params.r_feedback is not None else 0.0
    v_th, r_dc, _ = dc_loop(params, r_col, dev.bf)
    ic0 = bias.ic

    def gain(x: Any) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        ln_i0 = np.log(i0e(x)) + x  # ln I0(x), overflow-free
        y = np.full(x.shape, math.log(ic0))  # ln I_C, Newton on f(y) = 0
        for _ in range(40):
            ic = np.exp(y)
            f = v_th - vt * (y - math.log(dev.is_) - ln_i0) - ic * r_dc
            y = y + f / (vt + ic * r_dc)
        return np.exp(y) / ic0 * bessel_ratio(x)

    return gain


def solve_loop(
    s: np.ndarray,
    tank: tuple[Any, Any, Any],
    adm: tuple[Any, Any, Any, Any, Any, Any, Any],
    gm: Any,
    names: tuple[str, str, str, str] | None = None,
) -> Any:
    """Return ratio of the common-emitter network (and node voltages under ``names``).

    Nodes c (output), t (tank top), b (input), e (common) over ground "0": the tank's
    (Y_out t–0, Y_in b–0, Y_bridge t–b) and the branch admittances ``adm`` = (load c–0,
    bias b–0, y_pi b–e, y_mu b–c, g_o c–e, y_e e–0 or None for a grounded emitter, y_cb
    c–t or None for c and t one node); the controlled source gm·(v_b − v_e) from c to e.
    Node t touches only c and b, so it is eliminated first (Schur complement); the
    remaining symmetric system over (c, b, e) is solved by cofactors (Cramer's rule).
    The test source injects −1 A at c and +1 A at e (vector u' = e_c − e_e);
    T = −gm·(x_b − x_e) (Bode's return ratio, :mod:`picker.circuit.network`). Other
    stages whose network has this shape after relabelling its nodes call it too.
    """
    y1, y2, ytb = tank
    y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb = adm
    if y_cb is None:  # c and t are one node
        a = y_load + y_mu + g_o + y1 + ytb
        d = -y_mu - ytb
        bb = ytb + y2 + g_bias + y_pi + y_mu
        ytt = None
    else:
        ytt = y_cb + y1 + ytb
        a = y_load + y_cb + y_mu + g_o - y_cb * y_cb / ytt
        d = -y_mu - y_cb * ytb / ytt
        bb = ytb + y2 + g_bias + y_pi + y_mu - ytb * ytb / ytt
    if y_e is None:  # grounded emitter: 2x2 over (c, b), source at c only
        det = a * bb - d * d
        xc, xb, xe = bb / det, -d / det, 0.0 * det
    else:
        e, f = -g_o + 0.0 * s, -y_pi
        c = y_e + y_pi + g_o
        k_cc = bb * c - f * f
        k_cb = e * f - d * c
        k_ce = d * f - bb * e
        k_be = d * e - a * f
        k_ee = a * bb - d * d
        det = a * k_cc + d * k_cb + e * k_ce
        xc, xb, xe = (k_cc - k_ce) / det, (k_cb - k_be) / det, (k_ce - k_ee) / det
    t = -gm * (xb - xe)
    if names is None:
        return t
    xt = xc if ytt is None else (y_cb * xc + ytb * xb) / ytt
    c_, t_, b_, e_ = names
    return t, {c_: xc, t_: xt, b_: xb, e_: xe}


class CommonEmitter(Stage):
    """The common-emitter bjt stage (the project's generic NPN unless told otherwise)."""

    name = "common-emitter"
    has_device_law = True
    device = "bjt"
    coupling_parts = ("CB",)
    options = frozenset({"collector-feedback", "emitter-split", "stopper", "p-type"})

    # ------------------------------------------------------------ bias and device values

    def collector_dc(self, params: AmplifierParams) -> float:
        """DC resistance from the supply to the collector, ohm (the load resistor, or the
        choke's winding)."""
        return params.r_collector_dc

    def bias(self, params: AmplifierParams) -> BiasPoint | None:
        """DC bias point from the base divider or resistor
        (:func:`picker.circuit.device.bias_point`), from the collector-feedback network
        (:func:`picker.circuit.bias.feedback_bias_point`), or ``None`` without one."""
        if params.r_feedback is not None:
            return feedback_bias_point(
                vcc=params.vcc,
                r_f=params.r_feedback,
                r_b2=params.r_b2,
                r_e=params.r_e,
                r_collector_dc=self.collector_dc(params),
                device=params.effective_device(),
                temperature_c=params.temperature_c,
                r_base=params.r_stopper or 0.0,
            )
        if params.r_b1 is None:
            return None
        return bias_point(
            vcc=params.vcc,
            r_b1=params.r_b1,
            r_b2=params.r_b2,
            r_e=params.r_e,
            r_collector_dc=self.collector_dc(params),
            device=params.effective_device(),
            temperature_c=params.temperature_c,
            r_base=params.r_stopper or 0.0,
        )

    def device_small_signal(self, params: AmplifierParams) -> SmallSignal:
        """Hybrid-pi values at the solved bias (equations (D3), (D4) of
        :mod:`picker.circuit.device`), or from ``gm``/``i_bias`` given directly:
        r_pi = β/gm, r_o = VAF/I_C, C_pi = TF·gm + CJE."""
        vt = thermal_voltage(params.temperature_c)
        dev = params.effective_device()
        b = self.bias(params)
        if params.gm is None and params.i_bias is None and b is not None:
            ss = npn_small_signal(b, dev, vt=vt)
        else:
            gm = params.gm if params.gm is not None else need(params.i_bias, "i_bias or gm") / vt
            ss = SmallSignal(gm, dev.bf / gm, dev.vaf / (gm * vt), 0.0, dev.cjc, gm * vt)
            ss = replace(ss, c_pi=dev.tf * gm + dev.cje)
        r_o = params.r_o if params.r_o is not None else ss.r_o
        return replace(ss, r_o=r_o)

    def ideal_params(self, gm: float, r_load: float) -> AmplifierParams:
        """β → ∞ (so r_pi = β/gm → ∞), C_pi = C_mu = 0, r_o → ∞, no bias network."""
        return AmplifierParams(
            kind=self.device,
            stage=self.name,
            gm=gm,
            current_gain=math.inf,
            r_o=math.inf,
            c_pi=0.0,
            c_mu=0.0,
            r_c=r_load,
        )

    def typical_params(self) -> AmplifierParams:
        """A 9 V stage at about 0.25 mA (invented values, not a real circuit)."""
        return AmplifierParams(
            kind=self.device,
            stage=self.name,
            vcc=9.0,
            r_c=1500.0,
            r_b1=68e3,
            r_b2=10e3,
            r_e=2200.0,
            c_e=47e-9,
            c_block=10e-9,
            inductor_q=50.0,
        )

    def typical_variants(self) -> dict[str, AmplifierParams]:
        """A single base resistor; collector feedback (R_F alone, and with R_B2 to ground:
        about 2 mA and 1.6 mA); the emitter resistor split 22 Ω unbypassed + 2.18 kΩ
        bypassed; a 100 Ω base stopper (invented values, not real circuits). Only those of
        the stage's own
        :attr:`options` (a subclass inherits this method, not the options)."""
        if not self.options:
            return {}
        p = self.typical_params()
        fb = replace(p, r_b1=None, r_b2=None, r_feedback=220e3, r_c=2200.0, r_e=470.0)
        out = {"base-resistor": replace(p, r_b1=1.5e6, r_b2=None)}
        if "collector-feedback" in self.options:
            out["collector-feedback"] = fb
            out["collector-feedback-divider"] = replace(fb, r_b2=47e3, r_feedback=100e3)
        if "emitter-split" in self.options:
            out["emitter-split"] = replace(p, r_e_unbypassed=22.0)
        if "stopper" in self.options:  # 100 Ω in series with the base, at the device
            out["stopper"] = replace(p, r_stopper=100.0)
        if "p-type" in self.options:  # the generic PNP, the supply at −9 V
            out["p-type"] = replace(p, p_type=True, device=GENERIC_PNP)
        return out

    # ------------------------------------------------------------ start-up

    def required_gain(self, topology: Topology, values: Mapping[str, Any]) -> Any:
        """1/β, β = :meth:`picker.tank.base.Topology.beta` (C1/C2 for a Colpitts).

        The stage inverts (gain −gm·R) and the tank's capacitive divider returns
        β of the output to the input with a further 180°, so the loop starts when
        gm·R ≥ 1/β = C2/C1 (Sedra & Smith, Colpitts section: from the characteristic
        equation s³·L·C1·C2·R + s²·L·C2 + s·(C1 + C2)·R + (gm·R + 1) = 0, whose
        imaginary part gives ω0² = (C1 + C2)/(L·C1·C2) and whose real part then
        gives gm·R = C2/C1).
        """
        return 1.0 / np.asarray(topology.beta(values))

    # ------------------------------------------------------------ the small-signal network

    def _admittances(
        self, s: np.ndarray, params: AmplifierParams, ss: SmallSignal
    ) -> tuple[Any, float, Any, Any, float, Any, Any]:
        """The stage's branch admittances at ``s``: load, bias, y_pi, y_mu, g_o, y_e, y_cb."""
        y_load = output_admittance(params, s)  # the collector load and the next stage
        g_bias = 0.0
        for r in (params.r_b1, params.r_b2):
            if r is not None:
                g_bias += 1.0 / r
        g_pi = 1.0 / ss.r_pi  # 0 for r_pi = inf; arrays for a compressed device
        y_pi = g_pi + s * ss.c_pi
        y_mu = s * ss.c_mu
        if params.r_feedback is not None:  # the collector-feedback resistor, also base–collector
            y_mu = y_mu + 1.0 / params.r_feedback
        g_o = 1.0 / ss.r_o
        y_e: Any
        if params.r_e is None:
            y_e = None
        elif params.r_e_unbypassed is not None and params.c_e is not None:
            # R_E1 in series with R_E2 ∥ C_E, R_E2 = r_e − R_E1 (series and parallel
            # admittances; one branch, no inner node)
            y_2 = 1.0 / (params.r_e - params.r_e_unbypassed) + s * params.c_e
            y_e = y_2 / (1.0 + params.r_e_unbypassed * y_2)
        else:
            y_e = 1.0 / params.r_e + (s * params.c_e if params.c_e is not None else 0.0)
        y_cb = None if params.c_block is None else s * params.c_block
        return y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb

    def needs_bleed(self, topology: Topology, params: AmplifierParams) -> bool:
        """C_B on the collector side and a bridge that blocks DC (Clapp's C3) leave the
        tank top with no DC path: the bleed resistor gives it one."""
        return params.c_block is not None and not topology.bridge_passes_dc

    def blocking_joins_input(self, topology: Topology, params: AmplifierParams) -> bool:
        """C_B on the collector side and a bridge that passes DC (a Colpitts' or a
        Hartley's coil): the coil joins C_B to the base's DC node."""
        return params.c_block is not None and topology.bridge_passes_dc

    def stamps(
        self, s: np.ndarray, topology: Topology, params: AmplifierParams, ss: SmallSignal
    ) -> list[Stamp]:
        """Load (c–0), C_B (c–t; a 1 MS short without it), bleed (t–0), bias divider (b–0),
        y_pi (b–e), y_mu (b–c; with the collector-feedback resistor R_F beside C_mu), g_o
        (c–e), R_E ∥ C_E (e–0, with an unbypassed part R_E1 in series; a 1 MS short
        without R_E)."""
        y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb = self._admittances(s, params, ss)
        c, t, b, e = self.output, self.top, self.input, self.common
        out = [
            Stamp(c, "0", y_load),
            Stamp(c, t, SHORT + 0 * s if y_cb is None else y_cb),
            Stamp(b, "0", g_bias + 0 * s),
            Stamp(b, e, y_pi),
            Stamp(b, c, y_mu),
            Stamp(c, e, g_o + 0 * s),
            Stamp(e, "0", SHORT + 0 * s if y_e is None else y_e),
        ]
        if self.needs_bleed(topology, params):
            out.append(Stamp(t, "0", 1.0 / params.r_bleed + 0 * s))
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
        """Closed-form loop gain T (and optionally node responses): :func:`solve_loop`
        with the bleed resistor (if any) from the tank top to ground."""
        y1, y2, ytb = tank
        if self.needs_bleed(topology, params):
            y1 = y1 + 1.0 / params.r_bleed
        adm = self._admittances(s, params, ss)
        names = (self.output, self.top, self.input, self.common)
        return solve_loop(s, (y1, y2, ytb), adm, ss.gm, names if nodes else None)

    # ------------------------------------------------------------ large signal

    def drive_limit(
        self, params: AmplifierParams, ss: SmallSignal, margin: np.ndarray, ok: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """V_be,peak = x·V_T where G_m(x)/gm = 1/margin (:func:`_bias_shift`), by bisection
        (G_m(x) falls monotonically); overdriven where even x = :data:`X_MAX` cannot."""
        vt = thermal_voltage(params.temperature_c)
        target = 1.0 / np.where(ok, margin, 2.0)
        gain = _bias_shift(params, self.bias(params), vt)
        clipped = gain(np.array(X_MAX)) > target  # the bias shift cannot limit the swing
        lo, hi = np.zeros_like(target), np.full_like(target, X_MAX)
        for _ in range(50):  # bisection; gain(x) decreases monotonically
            mid = 0.5 * (lo + hi)
            big = gain(mid) > target
            lo, hi = np.where(big, mid, lo), np.where(big, hi, mid)
        return 0.5 * (lo + hi) * vt, clipped

    def bias_loop(self, params: AmplifierParams, ss: SmallSignal) -> BiasLoop | None:
        """The base divider's Thevenin resistance R_th = R_B1 ∥ R_B2 and R_E around the
        junction: r_dc = R_th/β + R_E·(1 + 1/β); a collector-feedback network by (B3) of
        :mod:`picker.circuit.bias`; with gm or the bias current given (no bias solved),
        the mean current is held fixed (r_dc = inf)."""
        dev = params.effective_device()
        b = self.bias(params)
        r_e = params.r_e or 0.0
        c_e = params.c_e or 0.0
        vt = thermal_voltage(params.temperature_c)
        if b is None or params.gm is not None or params.i_bias is not None:
            return BiasLoop(
                i_rest=ss.i_dc,
                gm_rest=ss.i_dc / vt,
                r_dc=math.inf,
                r_th=math.inf,
                r_e=r_e,
                c_e=c_e,
                beta=dev.bf,
                v_out=math.inf if b is None else b.vce,
                r_out=0.0,
                v_knee=V_CE_SAT,
            )
        r_col = self.collector_dc(params) if params.r_feedback is not None else 0.0
        _, r_dc, r_th = dc_loop(params, r_col, dev.bf)
        return BiasLoop(
            i_rest=b.ic,
            gm_rest=b.ic / vt,
            r_dc=r_dc,
            r_th=r_th,
            r_e=r_e,
            c_e=c_e,
            beta=dev.bf,
            v_out=b.vce,
            r_out=self.collector_dc(params),
            v_knee=V_CE_SAT,
        )

    def device_currents(
        self, params: AmplifierParams, ss: SmallSignal, dv: np.ndarray, a: np.ndarray
    ) -> DeviceCurrents:
        """Exponential junction i_C = I_rest·exp((ΔV + a·cos θ)/V_T) (equation (D1)
        without the Early factor): by the generating function of the modified Bessel
        functions, exp(x·cos θ) = I0(x) + 2·Σ I_n(x)·cos nθ (Abramowitz & Stegun 9.6.34),
        the mean is I_rest·e^{ΔV/V_T}·I0(x) and the n-th harmonic 2·I_rest·e^{ΔV/V_T}·I_n(x),
        x = a/V_T (Clarke & Hess, large-signal transconductance); the peak is
        I_rest·e^{ΔV/V_T + x}. Exponentially scaled Bessel functions avoid overflow."""
        vt = thermal_voltage(params.temperature_c)
        x = np.asarray(a, dtype=float) / vt
        scale = ss.i_dc * np.exp(np.asarray(dv, dtype=float) / vt + x)  # A&S 9.6.34
        b0, b1 = i0e(x), i1e(x)
        # I2, I3 by the recurrence I_{n+1} = I_{n-1} − (2n/x)·I_n (A&S 9.6.26), by their
        # series x²/8·(1 + x²/12), x³/48·(1 + x²/16) (A&S 9.6.10) where it would cancel
        small = x < 0.05
        xs = np.where(small, 1.0, x)
        b2 = np.where(small, x * x / 8 * (1 + x * x / 12) * np.exp(-x), b0 - 2 / xs * b1)
        b3 = np.where(small, x**3 / 48 * (1 + x * x / 16) * np.exp(-x), b1 - 4 / xs * b2)
        return DeviceCurrents(
            mean=scale * b0,
            h1=2.0 * scale * b1,
            h2=2.0 * scale * b2,
            h3=2.0 * scale * b3,
            peak=scale,
        )

    def mean_current(
        self, params: AmplifierParams, ss: SmallSignal, a: np.ndarray
    ) -> Callable[[np.ndarray], np.ndarray]:
        """The mean of :meth:`device_currents`, I_rest·e^{ΔV/V_T + x}·I0e(x) (A&S 9.6.34),
        with I0e(x) computed once for the drive; the same operations in the same order, so
        the same bits. A subclass with another device law falls back to the base class."""
        if type(self).device_currents is not CommonEmitter.device_currents:
            return super().mean_current(params, ss, a)
        vt = thermal_voltage(params.temperature_c)
        x = np.asarray(a, dtype=float) / vt
        b0 = i0e(x)

        def mean(dv: np.ndarray) -> np.ndarray:
            return ss.i_dc * np.exp(np.asarray(dv, dtype=float) / vt + x) * b0

        return mean

    def output_current(self, params: AmplifierParams, ss: SmallSignal, v: np.ndarray) -> np.ndarray:
        """i_C = I_rest·exp(v/V_T) (equation (D1) without the Early factor)."""
        vt = thermal_voltage(params.temperature_c)
        return ss.i_dc * np.exp(np.minimum(np.asarray(v, dtype=float) / vt, 700.0))

    def diffusion_capacitance(self, params: AmplifierParams, ss: SmallSignal) -> float:
        """TF·gm (equation (D4)) where C_pi comes from the card, gm/(2π·f_T) − C_mu less the
        card's CJE where it comes from f_T; 0 for a C_pi given directly (taken as fixed)."""
        if params.c_pi is not None:
            return 0.0
        return max(ss.c_pi - params.effective_device().cje, 0.0)

    def headroom(self, params: AmplifierParams) -> float:
        """V_C − V_E − 0.3 V: the collector may swing down to about V_E + 0.3 V before
        saturating (V_CE,sat of a small-signal bjt, common practice, no source)."""
        b = self.bias(params)
        return math.inf if b is None else b.vc - b.ve - 0.3

    # ------------------------------------------------------------ DC voltages, parts, cautions

    def top_dc(self, topology: Topology, params: AmplifierParams, bias: BiasPoint) -> float:
        """DC voltage of the tank top: V_C without C_B; with C_B, V_B through the inductor
        where the bridge passes DC (Colpitts), else 0 V through the bleed (Clapp)."""
        if params.c_block is None:
            return bias.vc
        return bias.vb if topology.bridge_passes_dc else 0.0

    def dc_voltages(self, topology: Topology, params: AmplifierParams) -> dict[str, float]:
        """The tank's parts between the tank top and the base (:meth:`top_dc`, V_B), and
        C_B between the collector and the tank top."""
        b = self.bias(params)
        if b is None:
            return super().dc_voltages(topology, params)
        top = self.top_dc(topology, params, b)
        out = topology.dc_across(top, b.vb)
        if params.c_block is not None:
            out["CB"] = b.vc - top
        return out

    def coupling_across(
        self, node: Mapping[str, np.ndarray], params: AmplifierParams
    ) -> dict[str, np.ndarray]:
        """C_B: |v_c − v_t|."""
        if params.c_block is None:
            return {}
        return {"CB": np.abs(node[self.output] - node[self.top])}

    def cautions(self, topology: Topology, params: AmplifierParams) -> list[str]:
        """A tank whose bridge passes DC (Colpitts) with no blocking capacitor puts the
        collector's DC voltage on the base; a bias network that saturates the transistor."""
        out = []
        if params.c_block is None and topology.bridge_passes_dc:
            out.append(
                "no DC-blocking capacitor between collector and tank: L puts the collector's DC "
                "voltage on the base and the bias point is lost"
            )
        return out + self.bias_cautions(params)

    def bias_cautions(self, params: AmplifierParams) -> list[str]:
        """The solved bias's caution, shared by the stages built on this one: a bias
        network that saturates the transistor."""
        b = self.bias(params)
        if b is not None and b.saturated:
            return ["the bias network saturates the transistor (V_BC > 0.4 V)"]
        return []

    # ------------------------------------------------------------ netlist

    def settling_time(self, params: AmplifierParams) -> float:
        """Five emitter time constants R_E·C_E for the bias shift to settle."""
        if params.r_e is not None and params.c_e is not None:
            return 5.0 * params.r_e * params.c_e
        return 0.0

    def passive_lines(self, params: AmplifierParams, col: str) -> list[str]:
        """Supply, collector load (:func:`picker.circuit.loads.load_lines`) and C_B, in
        netlist order."""
        g = spice_number
        lines = [f"VCC vcc 0 DC {g(params.vcc)}"]
        lines += load_lines(params, col)  # the collector load and the next stage
        if params.c_block is not None:
            lines.append(f"CB {self.output} {self.top} {g(params.c_block)}")
        return lines

    def bias_lines(self, params: AmplifierParams, r_b1: float | None) -> list[str]:
        """The base (gate) divider, or the collector-feedback resistor RF (from the
        collector, ``output``; the tank top without C_B) with R_B2."""
        g = spice_number
        if params.r_feedback is not None:
            col = self.output if params.c_block is not None else self.top
            lines = [f"RF {col} {self.input} {g(params.r_feedback)}"]
        else:
            lines = [f"RB1 vcc {self.input} {g(need(r_b1, 'r_b1'))}"]
        if params.r_b2 is not None:
            lines.append(f"RB2 {self.input} 0 {g(params.r_b2)}")
        return lines

    def emitter_lines(self, params: AmplifierParams) -> list[str]:
        """R_E and C_E from the emitter (source) to ground; with an unbypassed part, RE1
        from the emitter to the inner node ``es`` and RE (the rest) ∥ CE from there."""
        g = spice_number
        r_e, e = need(params.r_e, "r_e"), self.common
        if params.r_e_unbypassed is not None and params.c_e is not None:
            return [
                f"RE1 {e} es {g(params.r_e_unbypassed)}",
                f"RE es 0 {g(r_e - params.r_e_unbypassed)}",
                f"CE es 0 {g(params.c_e)}",
            ]
        lines = [f"RE {e} 0 {g(r_e)}"]
        if params.c_e is not None:
            lines.append(f"CE {e} 0 {g(params.c_e)}")
        return lines

    def model_card(self, params: AmplifierParams, bias: BiasPoint) -> str:
        """The ``.model`` line of the device, made to reproduce the small-signal
        capacitances the model uses: CJE = C_pi − TF·I_C/V_T (equation (D4)), TF reduced
        where C_pi is smaller than the diffusion part, CJC = C_mu."""
        dev = params.effective_device()
        ss = self.small_signal(params)
        vt = thermal_voltage(params.temperature_c)
        cje = max(ss.c_pi - dev.tf * bias.ic / vt, 0.0)
        tf = dev.tf if ss.c_pi >= dev.tf * bias.ic / vt else ss.c_pi * vt / bias.ic
        return replace(dev, cje=cje, tf=tf, cjc=ss.c_mu).model_card()

    def netlist(
        self,
        topology: Topology,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        params: AmplifierParams,
    ) -> StageNetlist:
        """The generic NPN (:data:`picker.circuit.device.GENERIC_NPN`, typical of the class,
        [memory]; not a real part) with its card made to reproduce the small-signal
        capacitances the model uses, the bias divider, R_E and C_E."""
        bias = self.bias(params)
        if bias is None:
            raise ValueError("netlist export needs the base bias network (r_b1, r_b2)")
        card = self.model_card(params, bias)
        col = self.output if params.c_block is not None else self.top
        bleed = params.r_bleed if self.needs_bleed(topology, params) else None
        lines = [
            "* generic small-signal NPN: typical of the class (values from memory), not a real part",
            *self.passive_lines(params, col),
            *topology.netlist_lines(
                values, stray, r_l, params.capacitor_esr, self.top, self.input, bleed
            ),
            *self.bias_lines(params, params.r_b1),
        ]
        model = card.split()[1]
        stop, base = stopper_lines(params, self.input)  # a base stopper: the base behind it
        lines += stop
        if params.r_e is not None:
            lines.append(f"Q1 {col} {base} {self.common} {model}")
            lines += self.emitter_lines(params)
        else:
            lines.append(f"Q1 {col} {base} 0 {model}")
        return StageNetlist(
            elements=lines,
            models=[card],
            kick=KICK_FRACTION * bias.ic,
            top_dc=self.top_dc(topology, params, bias),
        )
