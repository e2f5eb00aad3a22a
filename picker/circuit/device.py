"""Active-device description: the generic NPN card, the DC bias point and the hybrid-pi values.

The loaded oscillator model (:mod:`picker.circuit.stages`) needs the small-signal
parameters of the transistor at its bias point: transconductance ``gm``, input
resistance ``r_pi``, output resistance ``r_o`` and the capacitances ``c_pi``
(base-emitter) and ``c_mu`` (base-collector). They come either straight from
the user or from a *generic small-signal NPN* defined here, whose parameters
are the project's own, chosen to be typical of the general-purpose small-signal
NPN class (values of the order found in such parts' SPICE models; [memory],
not any particular part). The same card is written into exported SPICE
netlists (:mod:`picker.circuit.netlist`), so the linear model and the simulator see
the same device.

Equations (Gummel-Poon model reduced to forward-active operation with no
high-injection or leakage terms, as in SPICE's BJT model; Massobrio &
Antognetti, *Semiconductor Device Modeling with SPICE*, 2nd ed., ch. 2):

* collector current  I_C = IS·exp(V_BE/V_T)·(1 − V_BC/VAF)          (D1)
* base current       I_B = IS·exp(V_BE/V_T)/BF                       (D2)
* gm = ∂I_C/∂V_BE = I_C/V_T − I_cc/VAF,  g_o = I_cc/VAF,
  g_pi = I_cc/(BF·V_T), with I_cc = IS·exp(V_BE/V_T)                 (D3)
* C_pi = TF·I_C/V_T + CJE, C_mu = CJC (the card takes MJE = MJC = 0, i.e.
  voltage-independent junction capacitances, so the netlist and the linear
  model agree at any bias)                                           (D4)
* thermal voltage V_T = k·T/q at SPICE's default temperature 27 °C     (D5)

With the base-collector junction forward biased (saturation) the transport model of
both junctions (Ebers & Moll, Proc. IRE 42, 1954; SPICE's Gummel-Poon model with
qb = 1, Massobrio & Antognetti ch. 2) adds the reverse transport current
i_R = IS·exp(V_BC/V_T):

* I_C = i_F − i_R·(1 + 1/BR),  I_B = i_F/BF + i_R/BR,  i_F = IS·exp(V_BE/V_T)   (D6)

All quantities are SI floats; functions are pure.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

BOLTZMANN = 1.380649e-23  # J/K, SI 2019 exact
ELEMENTARY_CHARGE = 1.602176634e-19  # C, SI 2019 exact
SPICE_TNOM_C = 27.0  # SPICE's default nominal temperature, °C


def thermal_voltage(temperature_c: float = SPICE_TNOM_C) -> float:
    """V_T = k·T/q in volts (D5). 27 °C gives 25.852 mV."""
    return BOLTZMANN * (temperature_c + 273.15) / ELEMENTARY_CHARGE


@dataclass(frozen=True)
class GenericNPN:
    """The project's generic small-signal NPN (typical of the class, [memory]; not a real part).

    Attributes are SPICE Gummel-Poon parameter values in SI units.
    """

    is_: float = 1e-14  # saturation current, A
    bf: float = 150.0  # forward current gain
    vaf: float = 100.0  # forward Early voltage, V
    tf: float = 0.3e-9  # forward transit time, s
    cje: float = 5e-12  # base-emitter junction capacitance (constant, MJE = 0), F
    cjc: float = 3e-12  # base-collector junction capacitance (constant, MJC = 0), F
    br: float = 1.0  # reverse current gain (SPICE's default)
    name: str = "PICKER_NPN"

    def model_card(self) -> str:
        """The ``.model`` line for a SPICE netlist."""
        return (
            f".model {self.name} NPN (IS={self.is_:.6g} BF={self.bf:.6g} VAF={self.vaf:.6g} "
            f"TF={self.tf:.6g} CJE={self.cje:.6g} MJE=0 CJC={self.cjc:.6g} MJC=0 "
            f"BR={self.br:.6g} RB=0 RE=0 RC=0)"
        )


GENERIC_NPN = GenericNPN()

#: The generic small-signal PNP (the card of the mirrored NPN, :mod:`picker.circuit.polarity`):
#: typical of the class of general-purpose small-signal PNPs in makers' data sheets and
#: their SPICE models (from memory; not a real part): a lower Early voltage and somewhat
#: larger junction capacitances than the NPN class.
GENERIC_PNP = GenericNPN(
    is_=1e-14, bf=150.0, vaf=50.0, tf=0.5e-9, cje=8e-12, cjc=5e-12, name="PICKER_PNP"
)


#: A generic small-signal RF NPN: typical of the class of VHF/UHF small-signal NPNs in makers'
#: data sheets and their SPICE models (transition frequency of several GHz at a few mA;
#: values from memory, not a real part).
GENERIC_RF_NPN = GenericNPN(
    is_=2e-16, bf=100.0, vaf=40.0, tf=15e-12, cje=1.0e-12, cjc=0.6e-12, name="PICKER_RFNPN"
)

#: The generic bipolar classes by the spec's ``device`` word, with the polarity each is
#: written as (a PNP class's card is the mirrored NPN's: :mod:`picker.circuit.polarity`).
BJT_CLASSES: dict[str, tuple[GenericNPN, str]] = {
    "generic-npn": (GENERIC_NPN, "npn"),
    "generic-pnp": (GENERIC_PNP, "pnp"),
    "generic-rf-npn": (GENERIC_RF_NPN, "npn"),
}

#: The card parameters a spec may give for a bjt (SPICE Gummel-Poon names, lower case;
#: ``is_`` for IS), with the range each is accepted in and its unit.
BJT_CARD_KEYS: dict[str, tuple[float, float, str]] = {
    "is_": (1e-19, 1e-9, "A"),
    "bf": (1.0, 10_000.0, ""),
    "br": (0.01, 1_000.0, ""),
    "vaf": (1.0, 10_000.0, "V"),
    "tf": (0.0, 1e-6, "s"),
    "cje": (0.0, 1e-9, "F"),
    "cjc": (0.0, 1e-9, "F"),
}


def bjt_card(name: str, **given: float | None) -> GenericNPN:
    """The bipolar class ``name`` with the given card parameters (``BJT_CARD_KEYS``) in
    place of its own; a ValueError names an unknown class or key."""
    if name not in BJT_CLASSES:
        raise ValueError(f"expected a bjt class, one of {', '.join(BJT_CLASSES)}; got {name!r}")
    unknown = sorted(set(given) - set(BJT_CARD_KEYS))
    if unknown:
        raise ValueError(f"expected bjt card keys {', '.join(BJT_CARD_KEYS)}; got {unknown[0]}")
    card = BJT_CLASSES[name][0]
    for key, value in given.items():
        if value is not None:
            card = replace(card, **{key: float(value)})  # type: ignore[arg-type]
    return card


@dataclass(frozen=True)
class BiasPoint:
    """DC operating point of the stage (node voltages to ground, currents), SI units."""

    ic: float
    ib: float
    vbe: float
    vb: float
    vc: float
    ve: float
    saturated: bool  # base-collector junction forward biased (V_BC > 0.4 V): not an amplifier

    @property
    def vce(self) -> float:
        return self.vc - self.ve


def bias_point(
    *,
    vcc: float,
    r_b1: float | None,
    r_b2: float | None,
    r_e: float | None,
    r_collector_dc: float,
    device: GenericNPN = GENERIC_NPN,
    temperature_c: float = SPICE_TNOM_C,
    r_base: float = 0.0,
) -> BiasPoint:
    """Solve the DC bias of a divider-biased common-emitter stage with equations (D1), (D2).

    Parameters
    ----------
    vcc:
        Supply voltage, V.
    r_b1, r_b2:
        Base divider: ``r_b1`` from the supply to the base, ``r_b2`` from the base to ground
        (``None`` = absent). Thevenin: V_th = V_CC·R_B2/(R_B1+R_B2), R_th = R_B1 ∥ R_B2.
    r_e:
        Emitter resistor to ground (``None`` = emitter grounded), ohm.
    r_collector_dc:
        DC resistance from the supply to the collector (the load resistor, or the winding
        resistance of an RF choke), ohm.
    r_base:
        A resistor in series with the base at the device (a base stopper), ohm: the base
        current's drop across it adds to R_th's. ``vb`` is then the device's own base.

    Returns
    -------
    BiasPoint
    """
    if r_b1 is None:
        raise ValueError("the base bias needs a resistor from the supply to the base (r_b1)")
    vt = thermal_voltage(temperature_c)
    if r_b2 is None:
        v_th, r_th = vcc, r_b1
    else:
        v_th, r_th = vcc * r_b2 / (r_b1 + r_b2), r_b1 * r_b2 / (r_b1 + r_b2)
    re = r_e or 0.0

    def currents(vbe: float) -> tuple[float, float, float, float]:
        icc = device.is_ * math.exp(vbe / vt)
        ib = icc / device.bf  # (D2)
        ic = icc
        for _ in range(30):  # fixed point on the Early factor (converges: VAF ≫ swings)
            ve = (ib + ic) * re
            vb = vbe + ve
            vc = vcc - ic * r_collector_dc
            ic_new = icc * (1.0 - (vb - vc) / device.vaf)  # (D1)
            if abs(ic_new - ic) <= 1e-12 * abs(ic):
                ic = ic_new
                break
            ic = ic_new
        ve = (ib + ic) * re
        return ic, ib, vbe + ve, vcc - ic * r_collector_dc

    def residual(vbe: float) -> float:
        _, ib, vb, _ = currents(vbe)
        return v_th - ib * (r_th + r_base) - vb

    lo, hi = 0.2, 1.2
    if residual(lo) <= 0.0:
        raise ValueError(f"the base divider gives {v_th:.3g} V: too low to turn the transistor on")
    from scipy.optimize import brentq  # heavy import (~0.5 s): only when a bias is solved

    vbe = brentq(residual, lo, hi, xtol=1e-12, rtol=1e-14)
    ic, ib, vb, vc = currents(vbe)
    ve = vb - vbe
    return BiasPoint(ic=ic, ib=ib, vbe=vbe, vb=vb, vc=vc, ve=ve, saturated=(vb - vc) > 0.4)


@dataclass(frozen=True)
class SmallSignal:
    """Hybrid-pi values at the bias point, SI units (``r_pi`` may be ``inf`` for a FET)."""

    gm: float
    r_pi: float
    r_o: float
    c_pi: float
    c_mu: float
    i_dc: float  # collector (drain) DC current, A


def npn_small_signal(
    bias: BiasPoint, device: GenericNPN = GENERIC_NPN, *, vt: float
) -> SmallSignal:
    """Hybrid-pi values of the generic NPN at ``bias``, equations (D3), (D4)."""
    icc = device.is_ * math.exp(bias.vbe / vt)
    go = icc / device.vaf
    gm = bias.ic / vt - go
    return SmallSignal(
        gm=gm,
        r_pi=device.bf * vt / icc,
        r_o=1.0 / go,
        c_pi=device.tf * bias.ic / vt + device.cje,
        c_mu=device.cjc,
        i_dc=bias.ic,
    )


def npn_transport(
    i_f0: float, is_: float, br: float, beta: float, vt: float, u: np.ndarray, v_bc: np.ndarray
) -> tuple[np.ndarray, ...]:
    """Collector and base currents of the transport model (D6), vectorised.

    ``u`` is V_BE's shift from the rest point, where the forward transport current is
    ``i_f0`` (the Early factor at rest included, as in (D1)); ``v_bc`` is V_BC itself.
    Returns (I_C, I_B, i_F, ∂I_C/∂u, ∂I_C/∂V_BC, ∂I_B/∂u, ∂I_B/∂V_BC, ∂i_F/∂u), A and S.
    The exponents are capped at 700 (no overflow; far beyond any steady drive).
    """
    i_f = i_f0 * np.exp(np.minimum(u / vt, 700.0))
    i_r = is_ * np.exp(np.minimum(v_bc / vt, 700.0))
    k = 1.0 + 1.0 / br
    g_f, g_r = i_f / vt, i_r / vt
    return (
        i_f - k * i_r,  # (D6)
        i_f / beta + i_r / br,  # (D6)
        i_f,
        g_f,
        -k * g_r,
        g_f / beta,
        g_r / br,
        g_f,
    )
