"""Amplitude, voltage stress and cautions of the loaded oscillator.

The amplitude is a describing-function estimate (:func:`amplitude_estimate`):
the stage's large-signal limit (:meth:`picker.circuit.stages.base.Stage.drive_limit`)
sets the drive, the linear node responses at the oscillation frequency
(:mod:`picker.circuit.network`) carry it to every node and part. The stress on
each capacitor is its DC bias plus that peak; the cautions turn stress,
ratings and the stage's own concerns into plain language.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import LoadedResponse, Network
from picker.circuit.oscillation import loaded_response
from picker.circuit.polarity import P_TYPE_CAUTION, mirror_voltages
from picker.circuit.stages import stage_of
from picker.circuit.stages.stopper import STOPPER_CAUTION
from picker.tank.base import TWO_PI, Topology

__all__ = [
    "DERATING_FRACTION",
    "OVERDRIVE_MARGIN",
    "POLARISED_LIKELY_ABOVE",
    "Amplitude",
    "amplitude_estimate",
    "capacitor_stress",
    "cautions",
    "dc_voltages",
]

# A margin above this gives a clipped, harmonic-rich waveform. Common practice, no source:
# designers aim for a small-signal loop gain of about 2-3 for reliable starting.
OVERDRIVE_MARGIN = 5.0
# Peak working voltage at most this fraction of the rating for ceramic and film capacitors.
# Common practice, no source.
DERATING_FRACTION = 0.5
# Capacitance at or above which a part is likely electrolytic/tantalum (polarised).
# Common practice, no source.
POLARISED_LIKELY_ABOVE = 1e-6


@dataclass(frozen=True)
class Amplitude:
    """Estimated steady-state peak AC voltages (V) at the nodes, and flags; broadcast shape.

    ``tank`` is the peak voltage at the tank top (across C1), ``collector``,
    ``base`` and ``emitter`` at the stage's output, input and common nodes
    (drain, gate and source for a fet), ``across[pos]`` across each tank part and
    each coupling part of the stage. ``overdriven`` marks margin > OVERDRIVE_MARGIN
    or an output swing beyond the supply headroom; the estimate is not reliable there.
    """

    tank: np.ndarray
    collector: np.ndarray
    base: np.ndarray
    emitter: np.ndarray
    across: dict[str, np.ndarray]
    overdriven: np.ndarray


def amplitude_estimate(
    topology: Topology,
    values: Mapping[str, Any],
    stray: Any,
    params: AmplifierParams,
    response: LoadedResponse | None = None,
) -> Amplitude:
    """Describing-function estimate of the oscillation amplitude.

    Assumption 7: in steady state the fundamental transconductance falls to
    G_m = gm/margin (T is proportional to gm, so the frequency is unchanged).
    The stage says which control voltage gives that G_m
    (:meth:`picker.circuit.stages.base.Stage.drive_limit`): for a bjt,
    G_m/gm = 2·I1(x)/(x·I0(x)) with x = V_be,peak/V_T (Clarke & Hess), times the
    rise of the DC current the bias network allows; with the DC current held
    fixed and large x this is the familiar limit of a fundamental collector
    current of 2·I_C (the 2·I_C·R_L of Toumazou, Moschytz & Gilbert's estimate).
    Where even a very large drive cannot bring G_m down to gm/margin, the swing
    is limited by saturation instead and the design is flagged overdriven. For a
    fet the same current limit is used: V_gs,peak = margin·2·I_D/gm (cruder).
    Node amplitudes follow from the linear node responses at the oscillation
    frequency. Margin ≤ 1 gives zero amplitude.
    """
    if response is None:
        response = loaded_response(topology, values, stray, params)
    net = Network.build(topology, values, stray, params)
    stage, ss, shape = net.stage, net.ss, net.shape
    f = response.f_hz.reshape(-1)
    margin = response.margin.reshape(-1)
    ok = np.isfinite(f) & (margin > 1.0)
    s = 1j * TWO_PI * np.where(ok, f, 1.0)
    t, x = net.return_ratio(s, nodes=True)
    v_be, clipped = stage.drive_limit(params, ss, margin, ok)
    v_be = np.where(ok, v_be, 0.0)
    vbe_resp = x[stage.control(params)] - x[stage.common]
    node = {k: np.abs(v / vbe_resp) * v_be for k, v in x.items()}
    cplx = {k: v / vbe_resp * v_be for k, v in x.items()}
    _, _, y_bridge = net.tank_admittances(s)
    across = topology.peak_across(
        node[stage.top],
        node[stage.input],
        cplx[stage.top],
        cplx[stage.input],
        y_bridge,
        s,
        net.el,
    )
    across.update(stage.coupling_across(cplx, params))
    over = (
        (margin > OVERDRIVE_MARGIN) | (node[stage.output] > stage.headroom(params)) | (clipped & ok)
    )
    rs = {k: v.reshape(shape) for k, v in node.items()}
    return Amplitude(
        tank=rs[stage.top],
        collector=rs[stage.output],
        base=rs[stage.input],
        emitter=rs[stage.common],
        across={k: v.reshape(shape) for k, v in across.items()},
        overdriven=over.reshape(shape),
    )


def dc_voltages(topology: Topology, params: AmplifierParams) -> dict[str, float]:
    """DC voltage across each capacitor (V) at the bias point; NaN where unknown.

    The stage's (:meth:`picker.circuit.stages.base.Stage.dc_voltages`). For the
    common-emitter stage: Colpitts with C_B, the tank top sits at the base voltage
    through L, so C1 and C2 both carry V_B and C_B carries V_C − V_B. Clapp: C3
    blocks, the tank top is at 0 V through the bleed (with C_B) or at V_C (without C_B).
    """
    out = stage_of(params).dc_voltages(topology, params)
    return mirror_voltages(out) if params.p_type else out  # picker.circuit.polarity


def capacitor_stress(
    topology: Topology,
    values: Mapping[str, Any],
    stray: Any,
    params: AmplifierParams,
    amplitude: Amplitude | None = None,
) -> dict[str, np.ndarray]:
    """Peak voltage across each capacitor: |DC bias| + AC peak, V (broadcast shape).

    Keys: the topology's capacitors, plus the stage's coupling parts present
    (``"CB"`` for a blocking capacitor).
    """
    if amplitude is None:
        amplitude = amplitude_estimate(topology, values, stray, params)
    dc = dc_voltages(topology, params)
    return {
        k: abs(dc.get(k, math.nan)) + v
        for k, v in amplitude.across.items()
        if k not in topology.inductors
    }


def cautions(
    topology: Topology,
    values: Mapping[str, float],
    params: AmplifierParams,
    stress: Mapping[str, float],
    *,
    voltage_rating: Mapping[str, float | None] | None = None,
    polarised: Mapping[str, bool] | None = None,
) -> list[str]:
    """Plain-language warnings for one design (scalars).

    * The stage's own (:meth:`picker.circuit.stages.base.Stage.cautions`): e.g. a
      Colpitts tank with no blocking capacitor puts the collector's DC voltage on
      the base through L.
    * The tank's, where its model's validation found it wanting
      (:attr:`picker.tank.base.Topology.model_caution`).
    * A p-type device: the supply's polarity (:data:`picker.circuit.polarity.P_TYPE_CAUTION`).
    * A base stopper: what the large-signal model leaves out
      (:data:`picker.circuit.stages.stopper.STOPPER_CAUTION`).
    * Peak voltage above DERATING_FRACTION of the rating (common practice, no source).
    * A part marked polarised, or a capacitance ≥ POLARISED_LIKELY_ABOVE (likely an
      electrolytic; common practice, no source), in the AC tank path.
    """
    out = stage_of(params).cautions(topology, params)
    if topology.model_caution:  # the tank's (picker.tank.base.Topology.model_caution)
        out.append(topology.model_caution)
    if params.p_type:  # every stage's (picker.circuit.polarity)
        out.append(P_TYPE_CAUTION)
    if params.r_stopper is not None:  # every stage's (picker.circuit.stages.stopper)
        out.append(STOPPER_CAUTION)
    for pos, v in stress.items():
        rating = (voltage_rating or {}).get(pos)
        if rating and v > DERATING_FRACTION * rating:
            out.append(
                f"{pos}: peak {v:.3g} V exceeds {DERATING_FRACTION:.0%} of its {rating:.3g} V "
                "rating (derating rule, common practice)"
            )
    for pos in topology.capacitors:
        if (polarised or {}).get(pos):
            out.append(f"{pos} is marked polarised but carries the tank's AC voltage")
        elif float(values[pos]) >= POLARISED_LIKELY_ABOVE:
            out.append(
                f"{pos} = {float(values[pos]):.3g} F is in the electrolytic range; a polarised "
                "part in the AC tank path is reverse biased every half cycle"
            )
    return out
