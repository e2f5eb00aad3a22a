"""Field-effect transistors for the transient reader: SPICE's JFET and level-1 MOSFET.

:mod:`picker.circuit.transient` reads a netlist's one transistor into the circuit
(T1) through two junction voltages gathered from the state and two terminal currents
scattered into its rows; for the bjt these are (V_BE, V_BC) and (I_C, I_B). A fet
(terminals drain, gate, source in the places of collector, base, emitter) uses the
same incidence: the controlling voltages are

    v = (V_GS, V_GD),   V_DS = V_GS − V_GD                                         (D0)

and the currents (I_D, I_G) into the drain and the gate, the source taking their
negative sum. This module is that plug-in: :func:`fet_law` reads the ``.model`` card
(``NJF``/``PJF``, ``NMOS``/``PMOS``) and the element line, and :class:`FetLaw` gives the
currents and their Jacobian, and the Newton step's limit. The equations are ngspice's
(the ngspice manual's JFET and MOSFET chapters; Massobrio & Antognetti, *Semiconductor
Device Modeling with SPICE*, 2nd ed., ch. 3 (JFET) and ch. 4 (MOS level 1)), for the
parameters picker's cards write (:meth:`picker.circuit.fet.FetCard.model_card`, the
common-source stage's fitted NMOS card):

* channel (Shichman & Hodges, IEEE J. Solid-State Circuits 3, 1968; the JFET with
  ngspice's doping-tail parameter B at its default 1), u = V_GS − VTO, F = 1 + λ·V_DS:

      I_ch = 0                          for u ≤ 0                                   (D1)
      I_ch = k·F·V_DS·(2u − V_DS)       for 0 < V_DS < u  (linear region)
      I_ch = k·F·u²                     for V_DS ≥ u      (saturation)

  with k = BETA (JFET) or KP·(W/L)/2 (MOSFET; L less 2·LD, LD = 0 here); for
  V_DS < 0 drain and source swap roles: I_ch = −I_ch(V_GD − VTO, −V_DS) (SPICE's
  inverse mode);
* JFET gate junctions (diodes gate-source and gate-drain, N = 1):
  I_GS = IS·(e^{V_GS/V_T} − 1) + GMIN·V_GS, I_GD likewise;
  I_D = I_ch − I_GD,  I_G = I_GS + I_GD                                              (D2)
* MOSFET bulk junctions with the bulk on the source (the cards write GAMMA = 0, so the
  body does not move the threshold): the bulk-drain diode
  I_BD = IS·(e^{V_BD/V_T} − 1) + GMIN·V_BD, V_BD = −V_DS; I_D = I_ch − I_BD, I_G = 0   (D3)
* capacitances: a JFET card's CGS and CGD as constant capacitances (picker's cards
  write 0 and put C_gs, C_gd in the netlist as capacitors); a MOSFET card without
  TOX has no gate capacitance in level 1 (Meyer's capacitances need C_ox).

p-channel devices (PJF, PMOS) are the n-channel ones with every controlling voltage
and terminal current negated (SPICE's type sign; :mod:`picker.circuit.polarity`); a
PMOS card's VTO is written negated, so its n-channel threshold is −VTO.

Newton's step is limited as SPICE limits junctions (Nagel, *SPICE2*, UCB/ERL M520,
1975): a forward-biased diode's rise beyond V_crit = V_T·ln(V_T/(√2·IS)) is cut to
V_T·ln(1 + ΔV/V_T), and no controlling voltage moves more than a set step.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["FET_TYPES", "GMIN", "V_STEP", "FetLaw", "fet_law", "spice_value"]

#: ngspice's default GMIN, S: the conductance across every junction.
GMIN = 1e-12
#: The ``.model`` types read here: (device letter, sign of the type).
FET_TYPES = {"NJF": ("J", 1.0), "PJF": ("J", -1.0), "NMOS": ("M", 1.0), "PMOS": ("M", -1.0)}
#: The largest change of a fet's controlling voltage in one Newton iteration, V: the
#: channel's square law needs no limiting (Newton converges on it from anywhere), the
#: cap only keeps a wild step off the junctions' exponentials (the bjt's is 0.2 V; a
#: MOSFET swinging 15 V took twice the time with it).
V_STEP = 2.0
_EXP_CAP = 80.0  # exponent beyond which e^u continues linearly (no overflow in Newton)
_SUFFIX = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "m": 1e-3, "u": 1e-6, "n": 1e-9, "p": 1e-12}


_ARRAYS = ("sign", "vto", "k", "lam", "i_s", "cgs", "cgd")


def spice_value(text: str) -> float:
    """A SPICE number with an optional scale suffix (``10u``, ``4.7k``, ``1meg``)."""
    t = text.strip().lower()
    for suf in ("meg", "t", "g", "k", "m", "u", "n", "p"):
        if t.endswith(suf):
            return float(t[: -len(suf)]) * _SUFFIX[suf]
    return float(t)


def _exp(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """e^u and its derivative, continued linearly beyond :data:`_EXP_CAP`."""
    e = np.exp(np.minimum(u, _EXP_CAP))
    return e * (1.0 + np.maximum(u - _EXP_CAP, 0.0)), e


@dataclass(frozen=True)
class FetLaw:
    """The equations (D1)-(D3) of a batch of fets of one kind, ``letter`` "J" or "M";
    the rest arrays over the batch (B,): ``sign`` +1 (n-channel) or −1 (p-channel),
    ``vto`` the n-channel threshold (pinch-off) voltage, ``k`` the square-law
    coefficient, ``lam`` λ, ``i_s`` the junctions' saturation current, ``cgs``, ``cgd``
    constant gate capacitances (F). Each circuit of a batch has its own card."""

    letter: str
    sign: np.ndarray
    vto: np.ndarray
    k: np.ndarray
    lam: np.ndarray
    i_s: np.ndarray
    cgs: np.ndarray
    cgd: np.ndarray

    def take(self, rows: np.ndarray) -> FetLaw:
        """The fets ``rows`` of the batch."""
        return FetLaw(
            self.letter,
            *(np.asarray(getattr(self, f))[rows] for f in _ARRAYS),  # type: ignore[arg-type]
        )

    @staticmethod
    def stack(laws: list[FetLaw]) -> FetLaw:
        """One batch of the fets of ``laws`` (all of one kind), in order."""
        if any(law.letter != laws[0].letter for law in laws):
            raise ValueError("expected fets of one kind (JFET or MOSFET) in a batch")
        return FetLaw(
            laws[0].letter,
            *(np.concatenate([getattr(law, f) for law in laws]) for f in _ARRAYS),  # type: ignore[arg-type]
        )

    def channel(self, vgs: np.ndarray, vds: np.ndarray) -> tuple[np.ndarray, ...]:
        """(D1) in normal mode (V_DS ≥ 0 assumed): I_ch and ∂I_ch/∂u, ∂I_ch/∂V_DS."""
        u = vgs - self.vto
        on = u > 0.0
        f = 1.0 + self.lam * vds
        lin = vds < u
        sq = np.where(lin, vds * (2.0 * u - vds), u * u)
        i = np.where(on, self.k * f * sq, 0.0)
        di_du = np.where(on, self.k * f * np.where(lin, 2.0 * vds, 2.0 * u), 0.0)
        dsq_dv = np.where(lin, 2.0 * (u - vds), 0.0)
        di_dv = np.where(on, self.k * (self.lam * sq + f * dsq_dv), 0.0)
        return i, di_du, di_dv

    def _diode(self, v: np.ndarray, vt: float) -> tuple[np.ndarray, np.ndarray]:
        """A junction's current and conductance ((D2), (D3))."""
        e, de = _exp(v / vt)
        return self.i_s * (e - 1.0) + GMIN * v, self.i_s * de / vt + GMIN

    def terms(self, vt: float, v1: np.ndarray, v2: np.ndarray) -> dict[str, np.ndarray]:
        """The currents at controlling voltages (V_GS, V_GD) = (``v1``, ``v2``) as
        gathered from the state (D0), in the keys the bjt uses (:func:`picker.circuit.
        transient.device`): ``vbe`` = V_GS, ``vbc`` = V_GD, ``ic`` = I_D, ``ib`` = I_G,
        ``qd`` = 0; and ``dcur`` (..., 2, 2) = ∂(I_D, I_G)/∂(V_GS, V_GD)."""
        s = self.sign
        vgs, vgd = s * v1, s * v2  # the n-channel device's voltages
        vds = vgs - vgd
        fwd = vds >= 0.0
        # normal mode, or the inverse mode with drain and source swapped (D1)
        i_n, du_n, dv_n = self.channel(np.where(fwd, vgs, vgd), np.abs(vds))
        i_ch = np.where(fwd, i_n, -i_n)
        # ∂I_ch/∂V_GS, ∂I_ch/∂V_GD: V_DS = V_GS − V_GD (D0)
        d_gs = np.where(fwd, du_n + dv_n, dv_n)
        d_gd = np.where(fwd, -dv_n, -(du_n + dv_n))
        dcur = np.zeros((*np.shape(vgs), 2, 2))
        if self.letter == "J":
            i_gs, g_gs = self._diode(vgs, vt)
            i_gd, g_gd = self._diode(vgd, vt)
            i_d = i_ch - i_gd  # (D2)
            i_g = i_gs + i_gd
            dcur[..., 0, 0] = d_gs
            dcur[..., 0, 1] = d_gd - g_gd
            dcur[..., 1, 0] = g_gs
            dcur[..., 1, 1] = g_gd
        else:
            i_bd, g_bd = self._diode(-vds, vt)  # V_BD = V_S − V_D (D3)
            i_d = i_ch - i_bd
            i_g = np.zeros_like(i_d)
            dcur[..., 0, 0] = d_gs + g_bd
            dcur[..., 0, 1] = d_gd - g_bd
        return {
            "vbe": v1,
            "vbc": v2,
            "ic": s * i_d,
            "ib": s * i_g,
            "qd": np.zeros_like(i_d),
            "dcur": dcur,
        }

    def limit(self, vt: float, v: np.ndarray, d: np.ndarray) -> np.ndarray:
        """The fraction (B,) of a Newton step to take from controlling voltages ``v``
        (B, 2) by ``d`` (B, 2): SPICE's junction limiting on the forward-biased diodes
        (the JFET's gate junctions, the MOSFET's bulk-drain junction; module docstring),
        and at most :data:`V_STEP` on either controlling voltage."""
        s = self.sign[:, None]
        v_crit = (vt * np.log(vt / (np.sqrt(2.0) * self.i_s)))[:, None]
        if self.letter == "J":
            jv, jd = s * v, s * d
        else:  # V_BD = V_GD − V_GS
            jv = s * (v[:, 1:] - v[:, :1])
            jd = s * (d[:, 1:] - d[:, :1])
        rise = (jv + jd > v_crit) & (jd > 2.0 * vt)
        ajd = np.abs(jd)
        cut = np.where(rise, vt * np.log1p(np.maximum(jd, 0.0) / vt), ajd)
        ad = np.abs(d)
        with np.errstate(invalid="ignore", divide="ignore"):
            f_j = np.where(ajd > cut, cut / np.maximum(ajd, 1e-300), 1.0).min(axis=1)
            f_v = np.where(ad > V_STEP, V_STEP / np.maximum(ad, 1e-300), 1.0).min(axis=1)
        return np.minimum(1.0, np.minimum(f_j, f_v))  # type: ignore[no-any-return]


def _params(model: str) -> tuple[str, dict[str, float]]:
    """The type word and the parameters of a ``.model NAME TYPE (K=V ...)`` line."""
    head, _, body = model.partition("(")
    words = head.split()
    if len(words) < 3:
        raise ValueError(f"expected '.model NAME TYPE (...)'; got {model!r}")
    par = {}
    for item in body.rstrip(") ").split():
        key, _, val = item.partition("=")
        par[key.upper()] = spice_value(val)
    return words[2].upper(), par


def fet_law(model: str, element: list[str]) -> FetLaw:
    """The :class:`FetLaw` of a JFET or MOSFET card ``model`` and its element line
    ``element`` (split in words: ``J1 d g s NAME`` or ``M1 d g s b NAME W=.. L=..``).
    A ValueError names what is not simulated here (a MOSFET's bulk off its source, a
    body effect GAMMA, an oxide capacitance TOX, series resistances)."""
    kind, par = _params(model)
    if kind not in FET_TYPES:
        raise ValueError(f"expected a JFET or MOSFET card (NJF, PJF, NMOS, PMOS); got {kind}")
    letter, sign = FET_TYPES[kind]
    one = np.ones(1)
    if element[0][0].upper() != letter:
        raise ValueError(f"element {element[0]} does not take a {kind} card")
    for key in ("RD", "RS", "GAMMA", "TOX", "CGSO", "CGDO", "CBD", "CBS", "CJ", "LD"):
        if par.get(key, 0.0) != 0.0:
            raise ValueError(f"the fet card's {key} is not simulated here")
    lam = par.get("LAMBDA", 0.0)
    if letter == "J":
        # ngspice JFET defaults: VTO −2 V, BETA 1e-4 A/V², IS 1e-14 A
        return FetLaw(
            "J",
            sign * one,
            par.get("VTO", -2.0) * one,
            par.get("BETA", 1e-4) * one,
            lam * one,
            par.get("IS", 1e-14) * one,
            par.get("CGS", 0.0) * one,
            par.get("CGD", 0.0) * one,
        )
    if par.get("LEVEL", 1.0) != 1.0:
        raise ValueError("only the level-1 MOSFET is simulated here")
    if element[4] != element[3]:
        raise ValueError(f"{element[0]}: a bulk off the source is not simulated here")
    size = {k.upper(): spice_value(v) for k, _, v in (w.partition("=") for w in element[6:])}
    # ngspice MOS1 defaults: VTO 0, KP 2e-5 A/V², IS 1e-14 A, W = L = 100 µm
    ratio = size.get("W", 1e-4) / size.get("L", 1e-4)
    return FetLaw(
        "M",
        sign * one,
        sign * par.get("VTO", 0.0) * one,  # a PMOS card writes its threshold negated
        0.5 * par.get("KP", 2e-5) * ratio * one,
        lam * one,
        par.get("IS", 1e-14) * one,
        0.0 * one,
        0.0 * one,
    )
