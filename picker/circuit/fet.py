"""Field-effect transistors with their own parameters: the square law, its bias and its card.

A fet is given by its SPICE-style parameters (:class:`FetCard`): an n-channel JFET
by IDSS and the pinch-off voltage V_P (SPICE's JFET ``VTO``), an n-channel
enhancement MOSFET by the threshold V_T (SPICE level-1 ``VTO``) and the
transconductance parameter KP (W/L folded in: the card is written with W = L), both
with the channel-length modulation LAMBDA and constant gate capacitances. The same
values feed the loaded model (gm, g_ds, bias point) and the netlist's ``.model`` line.

Equations (saturation region; Massobrio & Antognetti, *Semiconductor Device Modeling
with SPICE*, 2nd ed., JFET (Shichman-Hodges form) and MOS level 1):

* JFET:   I_D = BETA·(V_GS − VTO)²·(1 + λ·V_DS),  BETA = IDSS/VTO²
  (Shockley's I_D = IDSS·(1 − V_GS/V_P)²; Sedra & Smith, *Microelectronic Circuits*,
  JFET section)                                                          (F1)
* MOSFET: I_D = KP/2·(W/L)·(V_GS − VTO)²·(1 + λ·V_DS)                   (F2)
* both:   I_D = k·u²·(1 + λ·V_DS), u = V_GS − VTO the overdrive, k = BETA or KP/2;
  gm = ∂I_D/∂V_GS = 2·I_D/u, g_ds = ∂I_D/∂V_DS = λ·k·u²                 (F3)

Bias (gate at V_G through a resistor network that draws no current, source resistor
R_S, drain resistance R_D to the supply V_DD): V_GS = V_G − I_D·R_S with (F1)/(F2)
gives k·f·R_S·u² + u − (V_G − VTO) = 0, f = 1 + λ·V_DS. Its root with u > 0 (the
one with |V_GS| < |V_P| for a self-biased JFET, V_G = 0; the other root lies beyond
pinch-off) is u = 2w/(1 + √(1 + 4·k·f·R_S·w)), w = V_G − VTO (the quadratic formula
written to stay exact at R_S = 0; Boylestad & Nashelsky, *Electronic Devices and
Circuit Theory*, JFET self-bias, "mathematical approach", from memory). With λ the
factor f depends on V_DS = V_DD − I_D·(R_D + R_S); a fixed-point iteration on f
converges because λ·I_D·(R_D + R_S) ≪ 1 for any working bias.

All values are SI floats; functions are pure.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.special import i0e

__all__ = [
    "FET_CLASSES",
    "FetBias",
    "FetCard",
    "GENERIC_NJFET",
    "GENERIC_NMOS",
    "fet_class",
    "gate_junction_mean",
    "square_law_bias",
]

#: The JFET card's gate junction saturation current IS, A (written into its ``.model``
#: line; SPICE's emission coefficient N = 1).
JFET_IS = 1e-14
#: Thermal voltage kT/q at 27 °C, V (SPICE's nominal temperature).
VT_NOMINAL = 1.380649e-23 * 300.15 / 1.602176634e-19

#: Device kinds of a card: SPICE's n-channel JFET and n-channel MOSFET.
FET_KINDS = ("njf", "nmos")


@dataclass(frozen=True)
class FetCard:
    """A square-law fet by its SPICE-style parameters (SI units).

    ``kind``: "njf" (n-channel JFET) or "nmos" (n-channel enhancement MOSFET); ``vto``:
    the pinch-off voltage V_P of a JFET (negative) or the threshold of a MOSFET
    (positive), V; ``k``: the square-law coefficient I_D/(V_GS − VTO)², A/V² (a JFET's
    BETA = IDSS/V_P², a MOSFET's KP/2 with W/L folded in); ``lam``: LAMBDA, 1/V;
    ``cgs``, ``cgd``: constant gate-source and gate-drain capacitances, F.
    """

    kind: str
    vto: float
    k: float
    lam: float = 0.0
    cgs: float = 0.0
    cgd: float = 0.0
    label: str = "custom"

    @property
    def idss(self) -> float:
        """A JFET's I_DSS = BETA·V_P² (the drain current at V_GS = 0), A."""
        return self.k * self.vto * self.vto

    @property
    def name(self) -> str:
        """The ``.model`` name in a netlist."""
        return "PICKER_NJF" if self.kind == "njf" else "PICKER_NMOS"

    def model_card(self) -> str:
        """The ``.model`` line (no intrinsic capacitance: the netlist writes C_gs and C_gd
        as explicit capacitors, so the linear model and the simulator agree at any bias).
        JFET: BETA = k (F1); MOSFET level 1: KP = 2·k with W = L (F2), no body effect."""
        g = f"{self.vto:.6g}"
        if self.kind == "njf":
            return (
                f".model {self.name} NJF (VTO={g} BETA={self.k:.6g} LAMBDA={self.lam:.6g} "
                f"CGS=0 CGD=0 IS={JFET_IS:g})"
            )
        return (
            f".model {self.name} NMOS (LEVEL=1 VTO={g} KP={2 * self.k:.6g} "
            f"LAMBDA={self.lam:.6g} GAMMA=0)"
        )

    def instance(self, d: str, g: str, s: str) -> str:
        """The element line (J1 or M1, body tied to the source)."""
        if self.kind == "njf":
            return f"J1 {d} {g} {s} {self.name}"
        return f"M1 {d} {g} {s} {s} {self.name} W=10u L=10u"


# Generic device classes: typical of the class in makers' data sheets (orders of magnitude
# of the general-purpose small-signal n-channel JFET and the small-signal enhancement
# MOSFET, from memory), not any particular part.
#: The project's generic n-channel JFET: IDSS = 10 mA, V_P = −2.5 V (from memory).
GENERIC_NJFET = FetCard(
    kind="njf", vto=-2.5, k=10e-3 / 2.5**2, lam=0.005, cgs=4e-12, cgd=1.5e-12, label="generic-njfet"
)
#: The project's generic small-signal n-channel enhancement MOSFET: V_T = 2 V, KP = 0.1 A/V²
#: (W/L folded in; from memory).
GENERIC_NMOS = FetCard(
    kind="nmos", vto=2.0, k=0.05, lam=0.02, cgs=20e-12, cgd=4e-12, label="generic-nmos"
)
#: The generic classes by the spec's ``device`` word.
FET_CLASSES = {c.label: c for c in (GENERIC_NJFET, GENERIC_NMOS)}


def fet_class(
    name: str,
    *,
    idss: float | None = None,
    vto: float | None = None,
    kp: float | None = None,
    lam: float | None = None,
    cgs: float | None = None,
    cgd: float | None = None,
) -> FetCard:
    """The generic class ``name`` with the given parameters in place of its own.

    ``idss`` (a JFET's, A) sets k = IDSS/V_P² with the card's or the given V_P; ``kp``
    (a MOSFET's, A/V²) sets k = KP/2. A ValueError names what does not fit the class.
    """
    if name not in FET_CLASSES:
        raise ValueError(f"expected a fet class, one of {', '.join(FET_CLASSES)}; got {name!r}")
    card = FET_CLASSES[name]
    v = card.vto if vto is None else vto
    if card.kind == "njf":
        if kp is not None:
            raise ValueError("a JFET class takes idss, not kp")
        if v >= 0:
            raise ValueError(f"expected a negative pinch-off voltage vto for a JFET; got {v:g} V")
        i = card.idss if idss is None else idss
        card = replace(card, vto=v, k=i / (v * v))
    else:
        if idss is not None:
            raise ValueError("a MOSFET class takes kp, not idss")
        if v <= 0:
            raise ValueError(
                f"expected a positive threshold vto for an enhancement MOSFET; got {v:g} V"
            )
        card = replace(card, vto=v, k=card.k if kp is None else kp / 2.0)
    if lam is not None:
        card = replace(card, lam=lam)
    if cgs is not None:
        card = replace(card, cgs=cgs)
    if cgd is not None:
        card = replace(card, cgd=cgd)
    return card


@dataclass(frozen=True)
class FetBias:
    """The fet's DC operating point: drain current (A), overdrive u = V_GS − VTO and node
    voltages to ground (V); ``triode``: V_DS < u (the square law of saturation no longer
    holds, not an amplifier)."""

    i_d: float
    u: float
    vg: float
    vs: float
    vd: float

    @property
    def vgs(self) -> float:
        return self.vg - self.vs

    @property
    def vds(self) -> float:
        return self.vd - self.vs

    @property
    def triode(self) -> bool:
        return self.vds < self.u


def square_law_bias(card: FetCard, *, v_g: float, r_s: float, v_dd: float, r_d: float) -> FetBias:
    """The bias point of the square-law fet (module docstring): gate at ``v_g``, source
    resistor ``r_s`` to ground, drain through ``r_d`` to ``v_dd``. A ValueError where the
    gate voltage leaves the device cut off (V_G ≤ VTO)."""
    w = v_g - card.vto
    if w <= 0:
        raise ValueError(
            f"the gate bias ({v_g:.3g} V) is at or below the fet's VTO ({card.vto:.3g} V): "
            "the device is cut off"
        )
    f = 1.0
    u = i_d = 0.0
    for _ in range(100):
        a = card.k * f * r_s
        u = 2.0 * w / (1.0 + math.sqrt(1.0 + 4.0 * a * w))
        i_d = card.k * f * u * u
        f_new = 1.0 + card.lam * (v_dd - i_d * (r_d + r_s))
        if abs(f_new - f) <= 1e-15:
            break
        f = max(f_new, 1e-3)
    return FetBias(i_d=i_d, u=u, vg=v_g, vs=i_d * r_s, vd=v_dd - i_d * r_d)


def gate_junction_mean(v_gs: np.ndarray, a: np.ndarray, i_s: float = JFET_IS) -> np.ndarray:
    """Mean forward current of a JFET's gate-source junction driven by v_gs + a·cos θ, A.

    The junction is SPICE's gate diode, I_G = IS·(exp(v/V_T) − 1) (Massobrio &
    Antognetti, *Semiconductor Device Modeling with SPICE*, 2nd ed., JFET gate
    junctions; N = 1), and the mean of exp(x·cos θ) over a period is I0(x) (Abramowitz
    & Stegun 9.6.19), so the mean is IS·(exp(v_gs/V_T)·I0(a/V_T) − 1): the rectified
    gate current of grid-leak (gate-leak) bias (Clarke & Hess, *Communication
    Circuits: Analysis and Design*, 1971, the exponential junction driven by a cosine,
    mean current I_S·e^{V/V_T}·I0(x); attribution from memory). I0 is taken as
    e^x·i0e(x) in the exponent, which is clipped at 200 (far beyond any bias the
    bisection keeps) so that no value overflows.
    """
    x = np.abs(np.asarray(a, dtype=float)) / VT_NOMINAL
    expo = np.asarray(v_gs, dtype=float) / VT_NOMINAL + x + np.log(i0e(x))
    return i_s * (np.exp(np.minimum(expo, 200.0)) - 1.0)
