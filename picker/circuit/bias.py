"""Bias networks of the bipolar stages: the DC loop around the junction and its solution.

Three networks set a bjt's base voltage (:attr:`picker.circuit.amplifier.AmplifierParams`):

* **divider** (``r_b1`` from the supply, ``r_b2`` to ground) and **base resistor**
  (``r_b1`` alone): the base sees the Thevenin source V_th = V_CC·R_B2/(R_B1 + R_B2)
  through R_th = R_B1 ∥ R_B2 (V_CC through R_B1 alone). Solved by
  :func:`picker.circuit.device.bias_point`.
* **collector feedback** (``r_feedback`` R_F from the collector to the base, optionally
  ``r_b2`` from the base to ground): the base is fed from the collector, whose voltage
  falls as the current rises, so the loop holds the current (Sedra & Smith,
  *Microelectronic Circuits*, 5th ed., section 5.7.3 "Biasing using a collector-to-base
  feedback resistor"; Boylestad & Nashelsky, *Electronic Devices and Circuit Theory*,
  10th ed., section 4.6 "Collector feedback configuration"; section numbers from memory).
  Solved by :func:`feedback_bias_point`.

The textbook closed forms with a fixed V_BE and β (the same books and sections; from
memory): base resistor with R_E, I_B = (V_CC − V_BE)/(R_B + (β + 1)·R_E) (Boylestad &
Nashelsky section 4.4, "emitter-bias configuration"); collector feedback,

    I_B = (V_CC − V_BE)/(R_F + (β + 1)·(R_C + R_E))                              (B1)

(the current through R_C is I_C + I_B = I_E). The project's solutions refine these as
the divider's does: the forward Gummel-Poon junction with the Early factor (equations
(D1), (D2) of :mod:`picker.circuit.device`), V_BE solved, not assumed.

The large-signal model (:class:`picker.circuit.stages.base.BiasLoop`) needs the loop
linearised in the mean collector current I at fixed β, no Early effect:

    V_BE = V_th' − r_dc·I                                                        (B2)

Divider: V_th' = V_th, r_dc = R_th/β + R_E·(1 + 1/β) (Sedra & Smith, bias-stability
analysis of the four-resistor network). Collector feedback, derived here from the two
node equations (base: V_B = k·V_C − R_p·I_B with k = R_B2/(R_F + R_B2), R_p = R_F ∥ R_B2;
collector: V_C = V_CC − R_C·(I + I_F), I_F = V_C/(R_F + R_B2) + k·I_B), with
m = (R_F + R_B2)/(R_F + R_B2 + R_C):

    V_th' = k·m·V_CC,   r_dc = k·m·R_C·(1 + k/β) + R_p/β + R_E·(1 + 1/β)          (B3)

which for R_B2 → ∞ (k = m = 1) is R_C·(1 + 1/β) + R_F/β + R_E·(1 + 1/β), the
denominator of (B1) over β. Checked against ngspice's operating point in
tests/test_bias_networks.py.
"""

from __future__ import annotations

import math

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import (
    GENERIC_NPN,
    SPICE_TNOM_C,
    BiasPoint,
    GenericNPN,
    thermal_voltage,
)

__all__ = ["BIAS_NETWORKS", "bias_network", "dc_loop", "feedback_bias_point", "r_emitter_dc"]

#: The bias networks of the bipolar stages by the spec's ``bias`` word.
BIAS_NETWORKS = ("divider", "base-resistor", "collector-feedback")


def bias_network(params: AmplifierParams) -> str:
    """The network ``params`` describes: one of :data:`BIAS_NETWORKS`."""
    if params.r_feedback is not None:
        return "collector-feedback"
    return "base-resistor" if params.r_b2 is None else "divider"


def r_emitter_dc(params: AmplifierParams) -> float:
    """The emitter's DC resistance to ground, ohm (``r_e`` includes the unbypassed part)."""
    return params.r_e or 0.0


def dc_loop(params: AmplifierParams, r_collector: float, beta: float) -> tuple[float, float, float]:
    """(V_th', r_dc, R_th) of the linearised DC loop (B2): V_BE = V_th' − r_dc·I_C.

    ``r_collector`` is the DC resistance from the supply to the collector. R_th is the
    DC resistance from the base to AC ground: R_B1 ∥ R_B2 for a divider; for collector
    feedback R_B2 ∥ (R_F + R_C) (the collector node taken through its load), the slow
    input node's resistance the envelope equations use. A base stopper R_S (in series with
    the base at the device) carries the base current too: R_th + R_S and r_dc + R_S/β.
    """
    v, r_dc, r_th = _dc_loop(params, r_collector, beta)
    r_s = params.r_stopper or 0.0
    return v, r_dc + r_s / beta, r_th + r_s


def _dc_loop(
    params: AmplifierParams, r_collector: float, beta: float
) -> tuple[float, float, float]:
    """:func:`dc_loop` without a base stopper."""
    r_e = r_emitter_dc(params) * (1.0 + 1.0 / beta)
    if params.r_feedback is not None:  # (B3)
        r_f = params.r_feedback
        r_b2 = params.r_b2 if params.r_b2 is not None else math.inf
        if math.isinf(r_b2):
            k, r_p, m = 1.0, r_f, 1.0
            r_th = r_f + r_collector
        else:
            k, r_p = r_b2 / (r_f + r_b2), r_f * r_b2 / (r_f + r_b2)
            m = (r_f + r_b2) / (r_f + r_b2 + r_collector)
            r_th = r_b2 * (r_f + r_collector) / (r_b2 + r_f + r_collector)
        r_dc = k * m * r_collector * (1.0 + k / beta) + r_p / beta + r_e
        return k * m * params.vcc, r_dc, r_th
    if params.r_b1 is None:
        raise ValueError("the amplifier needs r_b1")
    r_b1 = params.r_b1
    if params.r_b2 is None:
        return params.vcc, r_b1 / beta + r_e, r_b1
    r_th = r_b1 * params.r_b2 / (r_b1 + params.r_b2)
    return params.vcc * params.r_b2 / (r_b1 + params.r_b2), r_th / beta + r_e, r_th


def feedback_bias_point(
    *,
    vcc: float,
    r_f: float,
    r_b2: float | None,
    r_e: float | None,
    r_collector_dc: float,
    device: GenericNPN = GENERIC_NPN,
    temperature_c: float = SPICE_TNOM_C,
    r_base: float = 0.0,
) -> BiasPoint:
    """Solve the DC bias of a collector-feedback stage with equations (D1), (D2).

    R_F from the collector to the base, R_B2 (``None``: absent) from the base to ground,
    R_E from the emitter to ground, ``r_collector_dc`` from the supply to the collector.
    For a trial V_BE: I_C (Early factor by fixed point, as
    :func:`picker.circuit.device.bias_point`), I_B = I_C·/BF, V_E = (I_C + I_B)·R_E,
    V_B = V_BE + V_E, the feedback current I_F = I_B + V_B/R_B2 and
    V_C = V_CC − (I_C + I_F)·R_C; V_BE is the root of V_C − I_F·R_F − V_B = 0, which
    falls monotonically with V_BE (brentq on [0.2, 1.2] V). ``r_base``: a resistor in
    series with the base at the device (a base stopper): the node where R_F and R_B2 meet
    sits I_B·r_base above the device's base V_B.
    """
    vt = thermal_voltage(temperature_c)
    re = r_e or 0.0
    g2 = 0.0 if r_b2 is None else 1.0 / r_b2

    def currents(vbe: float) -> tuple[float, float, float, float, float]:
        icc = device.is_ * math.exp(vbe / vt)
        ib = icc / device.bf  # (D2)
        ic = icc
        for _ in range(30):  # fixed point on the Early factor
            vb = vbe + (ib + ic) * re
            vc = vcc - (ic + ib + (vb + ib * r_base) * g2) * r_collector_dc
            ic_new = icc * (1.0 - (vb - vc) / device.vaf)  # (D1)
            if abs(ic_new - ic) <= 1e-12 * abs(ic):
                ic = ic_new
                break
            ic = ic_new
        vb = vbe + (ib + ic) * re
        i_f = ib + (vb + ib * r_base) * g2
        vc = vcc - (ic + i_f) * r_collector_dc
        return ic, ib, vb, vc, i_f

    def residual(vbe: float) -> float:
        _, ib, vb, vc, i_f = currents(vbe)
        return vc - i_f * r_f - vb - ib * r_base

    lo, hi = 0.2, 1.2
    if residual(lo) <= 0.0:
        raise ValueError(
            "the collector-feedback bias cannot turn the transistor on: R_B2 takes the base "
            "below 0.2 V"
        )
    from scipy.optimize import brentq  # heavy import (~0.5 s): only when a bias is solved

    vbe = brentq(residual, lo, hi, xtol=1e-12, rtol=1e-14)
    ic, ib, vb, vc, _ = currents(vbe)
    return BiasPoint(ic=ic, ib=ib, vbe=vbe, vb=vb, vc=vc, ve=vb - vbe, saturated=(vb - vc) > 0.4)
