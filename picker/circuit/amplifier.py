"""Loaded small-signal model of the oscillator: frequency, start-up margin, amplitude, stress.

The circuit (picker's convention, Sedra & Smith, *Microelectronic Circuits*,
Colpitts section): a common-emitter stage whose collector ``c`` drives the tank
top ``t`` through the DC-blocking capacitor C_B; C1 from ``t`` to ground, C2
from the base ``b`` to ground, the inductor L (Clapp: L in series with C3)
from ``t`` to ``b``. The emitter ``e`` goes to ground through R_E ∥ C_E. The
collector load (R_C, or an RF choke L_ch + winding resistance) and the base
divider R_B1 (to the supply), R_B2 (to ground) are at AC ground through the
supply. Stray capacitance sits across L, as in :mod:`picker.tank.base`.

Model and assumptions (stated here, repeated in the README):

1. Linear small-signal operation at the DC bias point (hybrid-pi device:
   r_pi ∥ C_pi base-emitter, C_mu base-collector, gm·v_be and r_o collector-
   emitter; :mod:`picker.circuit.device`). Base spreading resistance and package
   parasitics are neglected.
2. The loop is broken at the controlled source: the loop gain is Bode's
   return ratio T(jω) = −gm·(v_b − v_e)/1 A·V⁻¹ for a unit test source,
   T = −gm·uᵀ·Y⁻¹·u' with Y the passive nodal-admittance matrix; by the
   matrix-determinant lemma det(Y + gm·u'uᵀ) = det(Y)·(1 − T), so T = 1 is
   exactly the characteristic equation of the linear circuit.
3. The oscillation frequency is the frequency near the ideal tank frequency
   where the phase of T crosses zero; the start-up margin is |T| there (1.0 is
   the edge of starting; the board starts when the margin exceeds 1).
4. Losses: inductor ESR in series with L (constant, or from Q at a frequency:
   ESR = ω_Q·L/Q, evaluated at q_frequency or, if none, at the ideal tank
   frequency), optional capacitor ESR in series with each capacitor, the
   choke's winding resistance. Frequency-dependent loss (skin effect, core
   loss) is not modelled.
5. The amplitude estimate is a describing-function estimate (assumption 7 in
   :func:`amplitude_estimate`); harmonics and supply limits are flags, not
   modelled.

With r_pi → ∞, zero device capacitance, no bias network, grounded emitter and
a lossless inductor, T(jω0) = gm·R·C1/C2 at ω0² = (C1+C2)/(L·C1·C2): the ideal
formula and Sedra & Smith's start-up condition gm·R > C2/C1 (checked in
tests/test_circuit.py).

Axis convention: ``values`` arrays broadcast together; results have the
broadcast shape (typically samples on axis 0, candidates on axis 1).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.special import i0e, i1e

from picker.circuit.device import (
    GENERIC_NPN,
    BiasPoint,
    GenericNPN,
    SmallSignal,
    bias_point,
    npn_small_signal,
    thermal_voltage,
)
from picker.tank.base import TWO_PI, Topology

# A margin above this gives a clipped, harmonic-rich waveform. Common practice, no source:
# designers aim for a small-signal loop gain of about 2-3 for reliable starting.
OVERDRIVE_MARGIN = 5.0
# Peak working voltage at most this fraction of the rating for ceramic and film capacitors.
# Common practice, no source.
DERATING_FRACTION = 0.5
# Capacitance at or above which a part is likely electrolytic/tantalum (polarised).
# Common practice, no source.
POLARISED_LIKELY_ABOVE = 1e-6
CHUNK = 1 << 15  # elements per vectorised block (memory bound: ~30 complex arrays of this size)


@dataclass(frozen=True)
class AmplifierParams:
    """The active stage and its surroundings, SI floats. ``None`` means "absent" or "derive".

    Attributes
    ----------
    kind: "bjt" (common emitter) or "fet" (common source; emitter names mean source).
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
    l_choke, r_choke: RF choke to the supply (inductance H, winding resistance ohm).
    r_b1, r_b2: base divider, supply-to-base and base-to-ground, ohm (r_b2 None: single R_B).
    r_e, c_e: emitter resistor and its bypass capacitor (c_e None: unbypassed, degeneration).
    c_block: DC-blocking capacitor collector → tank (None: missing; flagged for Colpitts).
    inductor_esr: series loss resistance of L, ohm.
    inductor_q, q_frequency: L's Q at a frequency (Hz; None = at the ideal tank frequency).
    capacitor_esr: position → ESR (ohm) in series with that capacitor.
    r_bleed: DC return from the tank top to ground, used only for a Clapp tank with C_B
        (otherwise that node has no DC path), ohm.
    device: the NPN card for bias and device values (:data:`picker.circuit.device.GENERIC_NPN`).
    temperature_c: device temperature, °C (SPICE default 27).
    """

    kind: str = "bjt"
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
    inductor_esr: float = 0.0
    inductor_q: float | None = None
    q_frequency: float | None = None
    capacitor_esr: Mapping[str, float] = field(default_factory=dict)
    r_bleed: float = 1e6
    device: GenericNPN = GENERIC_NPN
    temperature_c: float = 27.0

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
        """DC resistance from the supply to the collector, ohm."""
        if self.l_choke is not None:
            return self.r_choke
        if self.r_c is None:
            raise ValueError("the amplifier needs a collector load: r_c or l_choke")
        return self.r_c

    def bias(self) -> BiasPoint | None:
        """DC bias point of a bjt stage from its bias network, or ``None`` (fet, no network)."""
        if self.kind != "bjt" or self.r_b1 is None:
            return None
        return bias_point(
            vcc=self.vcc,
            r_b1=self.r_b1,
            r_b2=self.r_b2,
            r_e=self.r_e,
            r_collector_dc=self.r_collector_dc,
            device=self.effective_device(),
            temperature_c=self.temperature_c,
        )

    def small_signal(self) -> SmallSignal:
        """Hybrid-pi values used by the loaded model (see :mod:`picker.circuit.device`)."""
        vt = thermal_voltage(self.temperature_c)
        dev = self.effective_device()
        if self.kind == "bjt":
            b = self.bias()
            if self.gm is None and self.i_bias is None and b is not None:
                ss = npn_small_signal(b, dev, vt=vt)
            else:
                gm = self.gm if self.gm is not None else _need(self.i_bias, "i_bias or gm") / vt
                ss = SmallSignal(gm, dev.bf / gm, dev.vaf / (gm * vt), 0.0, dev.cjc, gm * vt)
                ss = replace(ss, c_pi=dev.tf * gm + dev.cje)
            r_o = self.r_o if self.r_o is not None else ss.r_o
        elif self.kind == "fet":
            if self.gm is not None:
                gm = self.gm
                i_dc = self.i_bias if self.i_bias is not None else math.nan
            else:
                i_dc = _need(self.i_bias, "i_bias or gm")
                gm = 2.0 * i_dc / _need(self.overdrive_voltage, "overdrive_voltage")
            ev = self.early_voltage
            r_o = self.r_o if self.r_o is not None else (ev / i_dc if ev else math.inf)
            ss = SmallSignal(
                gm, math.inf, r_o, _need_c(self, "c_pi"), _need(self.c_mu, "c_mu"), i_dc
            )
        else:
            raise ValueError(f"amplifier kind must be 'bjt' or 'fet', got {self.kind!r}")
        c_mu = self.c_mu if self.c_mu is not None else ss.c_mu
        if self.c_pi is not None:
            c_pi = self.c_pi
        elif self.f_t is not None:
            c_pi = max(ss.gm / (TWO_PI * self.f_t) - c_mu, 0.0)
        else:
            c_pi = ss.c_pi
        return replace(ss, r_o=r_o, c_pi=c_pi, c_mu=c_mu)


def _need(x, what):
    if x is None:
        raise ValueError(f"the amplifier needs {what}")
    return x


def _need_c(p: AmplifierParams, what: str) -> float:
    if p.c_pi is None and p.f_t is None:
        raise ValueError("a fet amplifier needs c_pi (C_gs) or f_t")
    return p.c_pi if p.c_pi is not None else 0.0


def ideal_params(gm: float, r_load: float, *, r_in: float | None = None) -> AmplifierParams:
    """The textbook amplifier: gm, load R across C1, optional R_in across C2, nothing else.

    r_pi → ∞ (or ``r_in``), zero device capacitance, r_o → ∞, grounded emitter,
    no blocking capacitor, lossless inductor (Sedra & Smith's Colpitts analysis).
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


@dataclass(frozen=True)
class LoadedResponse:
    """Loaded-model result; arrays of the broadcast shape of ``values``.

    ``f_hz`` is NaN and ``margin`` 0 where no zero-phase crossing was found
    near the tank frequency (the board cannot oscillate there).
    Unpacks as ``f_hz, margin = loaded_response(...)``.
    """

    f_hz: np.ndarray
    margin: np.ndarray

    def __iter__(self):
        return iter((self.f_hz, self.margin))


# ----------------------------------------------------------------------------- network


def _elements(topology: Topology, values: Mapping[str, np.ndarray], stray, params, ss):
    """Flattened element arrays and scalars shared by every frequency evaluation."""
    names = list(topology.positions)
    arrays = np.broadcast_arrays(*(np.asarray(values[p], dtype=float) for p in names))
    shape = arrays[0].shape
    el = {p: a.reshape(-1) for p, a in zip(names, arrays, strict=True)}
    el["stray"] = np.broadcast_to(np.asarray(stray, dtype=float), shape).reshape(-1)
    if params.inductor_q is not None:
        if params.q_frequency is not None:
            wq = TWO_PI * params.q_frequency
        else:
            wq = TWO_PI * topology.frequency({p: el[p] for p in names}, el["stray"])
        el["r_l"] = wq * el["L"] / params.inductor_q
    else:
        el["r_l"] = np.full(el["L"].shape, float(params.inductor_esr))
    return shape, el


def _admittances(
    s, el, topology: Topology, params: AmplifierParams, ss: SmallSignal, sl=slice(None)
):
    """Branch admittances at complex frequency ``s`` (1-D) for the element slice ``sl``."""
    esr = params.capacitor_esr

    def ycap(c, pos):
        r = esr.get(pos, 0.0)
        return s * c / (1.0 + s * c * r) if r else s * c

    y1 = ycap(el["C1"][sl], "C1")
    y2 = ycap(el["C2"][sl], "C2")
    y_lpar = 1.0 / (el["r_l"][sl] + s * el["L"][sl]) + s * el["stray"][sl]
    if "C3" in topology.capacitors:
        z3 = 1.0 / ycap(el["C3"][sl], "C3")
        ytb = 1.0 / (1.0 / y_lpar + z3)
        if params.c_block is not None:
            y1 = y1 + 1.0 / params.r_bleed
    else:
        ytb = y_lpar
    if params.l_choke is not None:
        y_load = 1.0 / (params.r_choke + s * params.l_choke)
    else:
        y_load = 1.0 / params.r_c + 0.0 * s
    g_bias = 0.0
    for r in (params.r_b1, params.r_b2):
        if r is not None:
            g_bias += 1.0 / r
    g_pi = 0.0 if math.isinf(ss.r_pi) else 1.0 / ss.r_pi
    y_pi = g_pi + s * ss.c_pi
    y_mu = s * ss.c_mu
    g_o = 0.0 if math.isinf(ss.r_o) else 1.0 / ss.r_o
    if params.r_e is None:
        y_e = None
    else:
        y_e = 1.0 / params.r_e + (s * params.c_e if params.c_e is not None else 0.0)
    y_cb = None if params.c_block is None else s * params.c_block
    return y1, y2, ytb, y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb


def _solve(s, el, topology, params, ss, sl=slice(None), *, nodes=False):
    """Closed-form loop gain T (and optionally node responses) by Schur elimination.

    Node t (tank top) touches only c and b, so it is eliminated first; the
    remaining symmetric system over (c, b, e) is solved by cofactors
    (Cramer's rule). The test source injects −1 A at c and +1 A at e
    (vector u' = e_c − e_e); T = −gm·(x_b − x_e).
    """
    y1, y2, ytb, y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb = _admittances(
        s, el, topology, params, ss, sl
    )
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
    t = -ss.gm * (xb - xe)
    if not nodes:
        return t
    xt = xc if ytt is None else (y_cb * xc + ytb * xb) / ytt
    return t, {"c": xc, "t": xt, "b": xb, "e": xe}


def loop_gain(topology: Topology, values, stray, params: AmplifierParams, f_hz) -> np.ndarray:
    """Return ratio T(j·2πf) of the loaded oscillator (complex, broadcast shape of the inputs).

    T = 1 is the oscillation condition; see the module docstring (assumption 2).
    """
    ss = params.small_signal()
    vals = dict(values)
    probe = np.broadcast_arrays(
        np.asarray(f_hz, dtype=float), *(np.asarray(vals[p]) for p in topology.positions)
    )
    shape = probe[0].shape
    for p, a in zip(topology.positions, probe[1:], strict=True):
        vals[p] = a
    shape, el = _elements(topology, vals, np.broadcast_to(stray, shape), params, ss)
    s = 1j * TWO_PI * probe[0].reshape(-1)
    return _solve(s, el, topology, params, ss).reshape(shape)


def loop_gain_matrix(
    topology: Topology, values, stray, params: AmplifierParams, f_hz
) -> np.ndarray:
    """The same return ratio as :func:`loop_gain` from a stacked ``np.linalg.solve`` of the
    full 4-node system (c, t, b, e). A cross-check and a speed comparison; slower."""
    ss = params.small_signal()
    f = np.asarray(f_hz, dtype=float)
    vals = {p: np.asarray(values[p], dtype=float) for p in topology.positions}
    probe = np.broadcast_arrays(f, *vals.values())
    shape = probe[0].shape
    shape, el = _elements(
        topology, dict(zip(vals, probe[1:], strict=True)), np.broadcast_to(stray, shape), params, ss
    )
    s = 1j * TWO_PI * probe[0].reshape(-1)
    y1, y2, ytb, y_load, g_bias, y_pi, y_mu, g_o, y_e, y_cb = _admittances(
        s, el, topology, params, ss
    )
    n = s.shape[0]
    big = 1e6  # a missing part (a short) as 1 MS: error ~1e-6 relative, still well conditioned
    ycb = big + 0 * s if y_cb is None else y_cb
    ye = big + 0 * s if y_e is None else y_e
    y = np.zeros((n, 4, 4), dtype=complex)  # order c, t, b, e
    stamps = [
        (0, -1, y_load), (0, 1, ycb), (1, -1, y1), (1, 2, ytb), (2, -1, y2 + g_bias),
        (2, 3, y_pi), (2, 0, y_mu), (0, 3, g_o + 0 * s), (3, -1, ye),
    ]  # fmt: skip
    for i, j, yy in stamps:
        y[:, i, i] += yy
        if j >= 0:
            y[:, j, j] += yy
            y[:, i, j] -= yy
            y[:, j, i] -= yy
    u = np.zeros((n, 4, 1), dtype=complex)
    u[:, 0, 0], u[:, 3, 0] = 1.0, -1.0
    x = np.linalg.solve(y, u)[..., 0]
    return (-ss.gm * (x[:, 2] - x[:, 3])).reshape(shape)


# ----------------------------------------------------------------------------- root finder

_GRID = np.geomspace(0.3, 2.0, 25)  # fallback bracket search, multiples of the ideal frequency
_LOCAL = np.linspace(-4.0, 4.0, 9)  # bracket search around the tank pole, in units of its σ
_MAXIT = 60
_XTOL = 1e-11  # relative frequency tolerance of the root finder


def _t(s, el, topology, params, ss, idx):
    return _solve(s, el, topology, params, ss, idx)


def _tank_pole(w_est, el, topology, params, ss, idx):
    """Complex natural frequency s_p of the passive tank mode nearest j·w_est.

    T has a pole there, so 1/T is close to linear in s around it; a complex
    secant iteration on 1/T (analytic in s) converges from j·w_est in a few
    steps however high the tank's Q. Returns (s_p, ok).
    """
    s0 = 1j * w_est
    s1 = w_est * (-1e-3 + 1.01j)
    h0 = 1.0 / _t(s0, el, topology, params, ss, idx)
    h1 = 1.0 / _t(s1, el, topology, params, ss, idx)
    for _ in range(30):
        dh = h1 - h0
        step = np.where(dh != 0, h1 * (s1 - s0) / np.where(dh != 0, dh, 1.0), 0.0)
        s0, h0 = s1, h1
        s1 = s1 - step
        h1 = 1.0 / _t(s1, el, topology, params, ss, idx)
        if np.all(np.abs(step) <= 1e-12 * np.abs(s1)):
            break
    ok = (
        np.isfinite(s1)
        & (np.abs(s1 - s0) <= 1e-9 * np.abs(s1))
        & (s1.real < 0)
        & (np.abs(s1.imag - w_est) < 0.7 * w_est)
    )
    return s1, ok


def _bracket(w_grid, el, topology, params, ss, idx, w_ref):
    """On a grid (points × elements) of frequencies, the zero-phase crossing of T
    (sign change of the phase by less than π, i.e. through 0 and not through ±π)
    nearest ``w_ref``."""
    t = np.stack([_t(1j * w, el, topology, params, ss, idx) for w in w_grid])
    ph = np.angle(t)
    cross = (np.sign(ph[:-1]) != np.sign(ph[1:])) & (np.abs(ph[:-1] - ph[1:]) < np.pi)
    mid = 0.5 * (w_grid[:-1] + w_grid[1:])
    dist = np.where(cross, np.abs(np.log(mid / w_ref)), np.inf)
    k = np.argmin(dist, axis=0)
    cols = np.arange(w_ref.shape[0])
    found = np.isfinite(dist[k, cols])
    return found, w_grid[k, cols], w_grid[k + 1, cols], ph[k, cols], ph[k + 1, cols]


def _illinois(a, b, fa, fb, el, topology, params, ss, idx):
    """Illinois (modified regula falsi; Dowell & Jarratt, BIT 11, 1971) on the phase
    of T over brackets [a, b], all elements at once."""
    for _ in range(_MAXIT):
        denom = fb - fa
        safe = np.where(denom != 0, denom, 1.0)
        c = np.where(denom != 0, b - fb * (b - a) / safe, 0.5 * (a + b))
        c = np.clip(c, np.minimum(a, b), np.maximum(a, b))
        fc = np.angle(_t(1j * c, el, topology, params, ss, idx))
        flip = np.sign(fc) != np.sign(fb)
        a = np.where(flip, b, a)
        fa = np.where(flip, fb, 0.5 * fa)
        step = np.abs(c - b)
        b, fb = c, fc
        if np.all((step <= _XTOL * b) | (np.abs(b - a) <= _XTOL * b) | (fc == 0)):
            break
    return b


def _root_chunk(el, topology, params, ss, idx):
    """Zero-phase frequency (rad/s) and |T| there for the elements ``idx``; NaN/0 where none.

    1. Locate the tank's complex pole s_p = −σ + jω_p (:func:`_tank_pole`), starting
       from the ideal tank with the device capacitances added to C1 and C2.
    2. Bracket the zero-phase crossing on ω_p + σ·(−4 … 4); where none is found there,
       fall back to a grid of 0.3 … 2 times the ideal frequency.
    3. Refine every bracket with the Illinois method on the phase of T.
    """
    names = topology.positions
    vals = {p: el[p][idx] for p in names}
    w0 = TWO_PI * topology.frequency(vals, el["stray"][idx])
    loaded = {**vals, "C1": vals["C1"] + ss.c_mu, "C2": vals["C2"] + ss.c_pi}
    w_est = TWO_PI * topology.frequency(loaded, el["stray"][idx])
    sp, ok_pole = _tank_pole(w_est, el, topology, params, ss, idx)
    wp = np.where(ok_pole, sp.imag, w_est)
    sigma = np.where(ok_pole, np.maximum(-sp.real, 1e-9 * wp), 1e-3 * wp)
    grid = wp[None, :] + sigma[None, :] * _LOCAL[:, None]
    grid = np.maximum(grid, 1e-3 * wp[None, :])
    found, a, b, fa, fb = _bracket(grid, el, topology, params, ss, idx, wp)
    miss = np.nonzero(~found)[0]
    if miss.size:
        sub = idx[miss]
        g2 = w0[miss][None, :] * _GRID[:, None]
        f2, a2, b2, fa2, fb2 = _bracket(g2, el, topology, params, ss, sub, wp[miss])
        found[miss], a[miss], b[miss], fa[miss], fb[miss] = f2, a2, b2, fa2, fb2
    w = np.full(idx.shape[0], np.nan)
    m = np.zeros(idx.shape[0])
    hit = np.nonzero(found)[0]
    if hit.size:
        sub = idx[hit]
        wr = _illinois(a[hit], b[hit], fa[hit], fb[hit], el, topology, params, ss, sub)
        t = _t(1j * wr, el, topology, params, ss, sub)
        good = (t.real > 0) & (np.abs(t.imag) <= 1e-6 * np.abs(t))
        w[hit] = np.where(good, wr, np.nan)
        m[hit] = np.where(good, np.abs(t), 0.0)
    return w, m


def loaded_response(
    topology: Topology, values: Mapping[str, np.ndarray], stray, params: AmplifierParams
) -> LoadedResponse:
    """Oscillation frequency and start-up margin of the loaded oscillator.

    Parameters
    ----------
    topology:
        :data:`picker.tank.base.COLPITTS` or :data:`picker.tank.base.CLAPP`.
    values:
        Position → array of part values in SI units (F, H); any broadcastable shapes.
    stray:
        Stray capacitance across the inductor, F (scalar or broadcastable array).
    params:
        The amplifier (:class:`AmplifierParams`).

    Returns
    -------
    LoadedResponse
        ``f_hz`` (Hz) and ``margin`` (|T| at the zero-phase frequency), both of the
        broadcast shape of ``values``. Computed in chunks of ``CHUNK`` elements, so
        memory stays bounded for millions of boards.
    """
    ss = params.small_signal()
    shape, el = _elements(topology, values, stray, params, ss)
    n = el["L"].shape[0]
    f = np.empty(n)
    m = np.empty(n)
    for start in range(0, n, CHUNK):
        sl = slice(start, min(start + CHUNK, n))
        w, m[sl] = _root_chunk(el, topology, params, ss, np.arange(sl.start, sl.stop))
        f[sl] = w / TWO_PI
    return LoadedResponse(f.reshape(shape), m.reshape(shape))


# ----------------------------------------------------------------------------- amplitude


def _bessel_ratio(x):
    """2·I1(x)/(x·I0(x)): large-signal/small-signal transconductance of an exponential
    device with its DC current held fixed (Clarke & Hess, *Communication Circuits:
    Analysis and Design*, 1971, large-signal transconductance). 1 at x → 0."""
    x = np.asarray(x, dtype=float)
    safe = np.where(x > 1e-8, x, 1.0)
    return np.where(x > 1e-8, 2.0 * i1e(safe) / (safe * i0e(safe)), 1.0 - x * x / 8.0)


def _bias_shift(params: AmplifierParams, vt: float):
    """x ↦ G_m(x)/gm for a bjt driven with a base-emitter sine of peak x·V_T.

    Describing function 2·I1(x)/(x·I0(x)) (Clarke & Hess) times the rise of the DC
    collector current the drive causes: the mean of exp(v_be/V_T) grows by I0(x), so
    the DC base-emitter voltage falls by V_T·ln I0(x) and the bias network
    (V_th, R_th, R_E) lets the current rise. DC loop, with I_C the mean collector
    current: V_th − V_T·ln(I_C/(IS·I0(x))) = I_C·(R_th/β + R_E·(1 + 1/β)). Without a
    bias network (gm given directly), the DC current is taken as fixed.
    """
    b = params.bias()
    if b is None or params.gm is not None or params.i_bias is not None:
        return _bessel_ratio
    dev = params.effective_device()
    if params.r_b2 is None:
        v_th, r_th = params.vcc, params.r_b1
    else:
        v_th = params.vcc * params.r_b2 / (params.r_b1 + params.r_b2)
        r_th = params.r_b1 * params.r_b2 / (params.r_b1 + params.r_b2)
    r_dc = r_th / dev.bf + (params.r_e or 0.0) * (1.0 + 1.0 / dev.bf)
    ic0 = b.ic

    def gain(x):
        x = np.asarray(x, dtype=float)
        ln_i0 = np.log(i0e(x)) + x  # ln I0(x), overflow-free
        y = np.full(x.shape, math.log(ic0))  # ln I_C, Newton on f(y) = 0
        for _ in range(40):
            ic = np.exp(y)
            f = v_th - vt * (y - math.log(dev.is_) - ln_i0) - ic * r_dc
            y = y + f / (vt + ic * r_dc)
        return np.exp(y) / ic0 * _bessel_ratio(x)

    return gain


@dataclass(frozen=True)
class Amplitude:
    """Estimated steady-state peak AC voltages (V) at the nodes, and flags; broadcast shape.

    ``tank`` is the peak voltage at the tank top (across C1), ``collector``,
    ``base`` and ``emitter`` at those nodes, ``across[pos]`` across each tank
    part. ``overdriven`` marks margin > OVERDRIVE_MARGIN or a collector swing
    beyond the supply headroom; the estimate is not reliable there.
    """

    tank: np.ndarray
    collector: np.ndarray
    base: np.ndarray
    emitter: np.ndarray
    across: dict[str, np.ndarray]
    overdriven: np.ndarray


def amplitude_estimate(
    topology: Topology,
    values,
    stray,
    params: AmplifierParams,
    response: LoadedResponse | None = None,
) -> Amplitude:
    """Describing-function estimate of the oscillation amplitude.

    Assumption 7: in steady state the fundamental transconductance falls to
    G_m = gm/margin (T is proportional to gm, so the frequency is unchanged).
    For a bjt, G_m/gm = 2·I1(x)/(x·I0(x)) with x = V_be,peak/V_T (Clarke & Hess),
    times the rise of the DC current the bias network allows (:func:`_bias_shift`);
    with the DC current held fixed and large x this is the familiar limit of a
    fundamental collector current of 2·I_C (the 2·I_C·R_L of Toumazou, Moschytz &
    Gilbert's estimate). Where even a very large drive cannot bring G_m down to
    gm/margin, the swing is limited by saturation instead and the design is
    flagged overdriven. For a
    fet the same current limit is used: V_gs,peak = margin·2·I_D/gm (cruder).
    Node amplitudes follow from the linear node responses at the oscillation
    frequency. Margin ≤ 1 gives zero amplitude.
    """
    if response is None:
        response = loaded_response(topology, values, stray, params)
    ss = params.small_signal()
    shape, el = _elements(topology, values, stray, params, ss)
    f = response.f_hz.reshape(-1)
    margin = response.margin.reshape(-1)
    ok = np.isfinite(f) & (margin > 1.0)
    s = 1j * TWO_PI * np.where(ok, f, 1.0)
    t, x = _solve(s, el, topology, params, ss, nodes=True)
    vt = thermal_voltage(params.temperature_c)
    clipped = np.zeros(margin.shape, dtype=bool)
    if params.kind == "bjt":
        target = 1.0 / np.where(ok, margin, 2.0)
        gain = _bias_shift(params, vt)
        x_max = 400.0
        clipped = gain(np.array(x_max)) > target  # the bias shift cannot limit the swing
        lo, hi = np.zeros_like(target), np.full_like(target, x_max)
        for _ in range(50):  # bisection; gain(x) decreases monotonically
            mid = 0.5 * (lo + hi)
            big = gain(mid) > target
            lo, hi = np.where(big, mid, lo), np.where(big, hi, mid)
        v_be = 0.5 * (lo + hi) * vt
    else:
        v_be = margin * 2.0 * ss.i_dc / ss.gm
    v_be = np.where(ok, v_be, 0.0)
    vbe_resp = x["b"] - x["e"]
    node = {k: np.abs(v / vbe_resp) * v_be for k, v in x.items()}
    cplx = {k: v / vbe_resp * v_be for k, v in x.items()}
    across = {"C1": node["t"], "C2": node["b"]}
    if "C3" in topology.capacitors:
        # C3 in series with L∥stray between t and b: current i = (v_t − v_b)·y_tb
        y1, y2, ytb, *_ = _admittances(s, el, topology, params, ss)
        z3 = 1.0 / (s * el["C3"])
        across["C3"] = np.abs((cplx["t"] - cplx["b"]) * ytb * z3)
        across["L"] = np.abs((cplx["t"] - cplx["b"]) * (1 - ytb * z3))
    else:
        across["L"] = np.abs(cplx["t"] - cplx["b"])
    if params.c_block is not None:
        across["CB"] = np.abs(cplx["c"] - cplx["t"])
    b = params.bias()
    # the collector may swing down to about V_E + 0.3 V before saturating (V_CE,sat of a
    # small-signal bjt, common practice, no source)
    headroom = np.inf if b is None else b.vc - b.ve - 0.3
    over = (margin > OVERDRIVE_MARGIN) | (node["c"] > headroom) | (clipped & ok)
    rs = {k: v.reshape(shape) for k, v in node.items()}
    return Amplitude(
        tank=rs["t"],
        collector=rs["c"],
        base=rs["b"],
        emitter=rs["e"],
        across={k: v.reshape(shape) for k, v in across.items()},
        overdriven=over.reshape(shape),
    )


# ----------------------------------------------------------------------------- stress


def dc_voltages(topology: Topology, params: AmplifierParams) -> dict[str, float]:
    """DC voltage across each capacitor (V) at the bias point; NaN where unknown.

    Colpitts with C_B: the tank top sits at the base voltage through L, so C1 and
    C2 both carry V_B and C_B carries V_C − V_B. Clapp: C3 blocks, the tank top is
    at 0 V through the bleed (with C_B) or at V_C (without C_B).
    """
    b = params.bias()
    if b is None:
        return {p: math.nan for p in (*topology.capacitors, "CB")}
    out = {"C2": b.vb}
    if "C3" in topology.capacitors:
        vt_top = 0.0 if params.c_block is not None else b.vc
        out["C1"] = vt_top
        out["C3"] = vt_top - b.vb
    else:
        out["C1"] = b.vb if params.c_block is not None else b.vc
    if params.c_block is not None:
        out["CB"] = b.vc - (out["C1"])
    return out


def capacitor_stress(
    topology: Topology, values, stray, params: AmplifierParams, amplitude: Amplitude | None = None
) -> dict[str, np.ndarray]:
    """Peak voltage across each capacitor: |DC bias| + AC peak, V (broadcast shape).

    Keys: the topology's capacitors, plus "CB" when a blocking capacitor is present.
    """
    if amplitude is None:
        amplitude = amplitude_estimate(topology, values, stray, params)
    dc = dc_voltages(topology, params)
    return {k: abs(dc.get(k, math.nan)) + v for k, v in amplitude.across.items() if k != "L"}


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

    * A Colpitts tank with no blocking capacitor puts the collector's DC voltage
      on the base through L.
    * Peak voltage above DERATING_FRACTION of the rating (common practice, no source).
    * A part marked polarised, or a capacitance ≥ POLARISED_LIKELY_ABOVE (likely an
      electrolytic; common practice, no source), in the AC tank path.
    """
    out = []
    if params.c_block is None and "C3" not in topology.capacitors:
        out.append(
            "no DC-blocking capacitor between collector and tank: L puts the collector's DC "
            "voltage on the base and the bias point is lost"
        )
    b = params.bias()
    if b is not None and b.saturated:
        out.append("the bias network saturates the transistor (V_BC > 0.4 V)")
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
