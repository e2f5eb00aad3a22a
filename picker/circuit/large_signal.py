"""The steady state of a running oscillator by describing functions, with the bias shift.

Method (the describing-function, or first-harmonic, method: Gelb & Vander Velde,
*Multiple-Input Describing Functions and Nonlinear System Design*, 1968, ch. 1-2;
applied to the exponential junction by Clarke & Hess, *Communication Circuits:
Analysis and Design*, 1971):

1. The device is driven by V_rest + ΔV + a·cos θ at its control terminals
   (base-emitter, gate-source). Its output current has a mean I, harmonics h_n and a
   peak (:meth:`picker.circuit.stages.base.Stage.device_currents`; for a bjt the
   Bessel series of exp(x·cos θ), fundamental transconductance
   G_m = gm·2·I1(x)/(x·I0(x)) with the current held fixed).
2. **Bias shift**: the coupling and bypass capacitors settle at new DC averages.
   The mean emitter current is held by R_E and the base by its divider, so the DC
   control voltage falls by ΔV = −r_dc·(I − I_rest) (:class:`BiasLoop`); solved for I
   and ΔV at each drive a (the self-biasing of class-C oscillators; Clarke & Hess).
   A JFET's gate junction adds its rectified current, returned through the gate and
   source resistors (grid-leak bias: the stage's ``mean_current``,
   :meth:`picker.circuit.stages.common_source.CommonSource.gate_leak`).
3. The device seen by the fundamental is compressed: gm, g_pi and the diffusion
   capacitance by c = h1/(a·gm_rest), r_o by the mean current
   (:meth:`picker.circuit.stages.base.Stage.compressed`).
4. **Saturation**: the output-to-common swing cannot go below the knee voltage. Its
   first harmonic is that of an ideal limiter at the headroom H (describing function
   N(r) = (2/π)·(asin(1/r) + (1/r)·√(1 − 1/r²)) for a sine of r·H, Gelb & Vander
   Velde, ch. 2, saturation), so the fundamental at the output is at most 4H/π.
   H = V_out,rest − (I − I_rest)·R_E·(1 + 1/β) − V_knee: the emitter rises with the
   mean emitter current; the output's own DC drop through its load is left out,
   because in saturation the output current pulse is cut short and its mean no
   longer follows the device law (a modelling choice, checked against ngspice on
   a development set of random designs; see the README).
5. **Steady state**: the closed loop with the compressed device has a natural
   frequency on the imaginary axis. Solved as c* (the compression where the pole
   found by :func:`picker.circuit.stability.closed_loop_pole` has zero real part;
   Illinois on ln c) and then the drive a with c(a)·N(a) = c* (bisection; both fall
   monotonically with a). The steady frequency is that pole's, the node amplitudes
   follow from the linear node responses at it, the harmonics at the tank's output
   node from the harmonic currents through the network's transfer impedance at 2ω
   and 3ω (the device's own feedback at the harmonics is neglected).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import SmallSignal
from picker.circuit.network import Network
from picker.circuit.stability import closed_loop_pole
from picker.circuit.stages.base import BiasLoop, DeviceCurrents, Stage

__all__ = [
    "Drive",
    "bias_shift",
    "compression",
    "limiter_gain",
    "loop_compression",
    "solve_drive",
]

_A_MIN, _A_MAX = 1e-7, 100.0  # control amplitudes searched, V
_BISECT = 48
_BIAS_STEPS = 40  # bisection steps of the bias shift: (a + 0.1 V)/2^40 < 1e-11 V
_STEP = 0.02  # ln c step for the envelope rate dσ/d ln c
_DU = 0.1  # ln c step of the continuation from the linear pole
_MARCH = 90  # most continuation steps (c down to e^-9)


def _limiter_table() -> tuple[np.ndarray, np.ndarray]:
    """q = r·N(r) (fundamental of a sine of r·H clipped at ±H, over H) against N(r)."""
    r = np.concatenate([[1.0], np.geomspace(1.0 + 1e-9, 1e6, 4000)])
    n = (2.0 / np.pi) * (np.arcsin(1.0 / r) + (1.0 / r) * np.sqrt(1.0 - 1.0 / r**2))
    return r * n, n


_Q, _N = _limiter_table()


def limiter_gain(q: np.ndarray) -> np.ndarray:
    """The gain N of an ideal limiter whose output fundamental is q times its limit H.

    Ideal saturation's describing function N(r) = (2/π)·(asin(1/r) + (1/r)·√(1 − 1/r²))
    for an input sine of r·H, r ≥ 1 (Gelb & Vander Velde 1968, ch. 2); its output
    fundamental r·N(r)·H rises from H to 4H/π, so q ≤ 1 gives 1 and q ≥ 4/π gives 0.
    """
    q = np.asarray(q, dtype=float)
    out = np.interp(q, _Q, _N)  # _Q rises from 1 to 4/π
    return np.where(q <= 1.0, 1.0, np.where(q >= 4.0 / np.pi, 0.0, out))


def bias_shift(
    stage: Stage, params: AmplifierParams, ss: SmallSignal, loop: BiasLoop, a: np.ndarray
) -> tuple[np.ndarray, DeviceCurrents]:
    """ΔV of the DC control voltage and the device currents under drive ``a`` (step 2).

    Solves ΔV + r_dc·(I(ΔV, a) − I_rest) = 0 by bisection on ΔV ∈ [−a − 0.1 V, 0] (the
    left side rises with ΔV; the mean current grows with the drive, so ΔV ≤ 0); with
    r_dc = inf, I(ΔV, a) = I_rest.
    """
    a = np.asarray(a, dtype=float)
    lo, hi = -a - 0.1, np.zeros_like(a)
    mean = stage.mean_current(params, ss, a)
    for _ in range(_BIAS_STEPS):
        mid = 0.5 * (lo + hi)
        i = mean(mid) - loop.i_rest
        f = i if math.isinf(loop.r_dc) else mid + loop.r_dc * i
        up = f > 0
        lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
    dv = 0.5 * (lo + hi)
    return dv, stage.device_currents(params, ss, dv, a)


def compression(
    stage: Stage,
    params: AmplifierParams,
    ss: SmallSignal,
    loop: BiasLoop,
    a: np.ndarray,
    ratio: np.ndarray,
    dv: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, DeviceCurrents]:
    """(c·N, ΔV, currents) at drive ``a``: the fundamental compression c = h1/(a·gm_rest)
    (step 3) times the limiter gain N of the output swing a·``ratio`` against the
    headroom (step 4). With ``dv`` given the bias is held there (frozen), else it
    settles (:func:`bias_shift`)."""
    a = np.asarray(a, dtype=float)
    if dv is None:
        dv, cur = bias_shift(stage, params, ss, loop, a)
    else:
        cur = stage.device_currents(params, ss, dv, a)
    c = cur.h1 / (np.maximum(a, 1e-300) * loop.gm_rest)
    c = np.where(a > 0, c, 1.0)
    r_e_dc = loop.r_e * (1.0 + 1.0 / loop.beta)
    head = loop.v_out - (cur.mean - loop.i_rest) * r_e_dc - loop.v_knee
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(head > 0, a * ratio / head, np.inf)
    return c * limiter_gain(q), dv, cur


@dataclass(frozen=True)
class Drive:
    """The steady drive of the elements solved (1-D arrays).

    ``a``: control amplitude (V peak); ``dv``: the DC control-voltage shift (V);
    ``currents``: the device currents there; ``saturated``: the output swing reaches
    the knee (the limiter acts); ``ok``: a drive was found.
    """

    a: np.ndarray
    dv: np.ndarray
    currents: DeviceCurrents
    saturated: np.ndarray
    ok: np.ndarray


def solve_drive(
    stage: Stage,
    params: AmplifierParams,
    ss: SmallSignal,
    loop: BiasLoop,
    c_star: np.ndarray,
    ratio: np.ndarray,
) -> Drive:
    """The drive a with c(a)·N(a) = ``c_star`` (step 5), by bisection on ln a."""
    lo = np.full(c_star.shape, math.log(_A_MIN))
    hi = np.full(c_star.shape, math.log(_A_MAX))
    for _ in range(_BISECT):
        mid = 0.5 * (lo + hi)
        c, _, _ = compression(stage, params, ss, loop, np.exp(mid), ratio)
        big = c > c_star
        lo, hi = np.where(big, mid, lo), np.where(big, hi, mid)
    a = np.exp(0.5 * (lo + hi))
    c, dv, cur = compression(stage, params, ss, loop, a, ratio)
    c_free, _, _ = compression(stage, params, ss, loop, a, np.zeros_like(a), dv)
    ok = np.abs(c - c_star) <= 1e-3 * c_star
    return Drive(a, dv, cur, c < 0.999 * c_free, ok)


def loop_compression(
    net: Network, idx: np.ndarray, pole0: np.ndarray, w_cross: np.ndarray, margin: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """c* (the device compression that puts the closed-loop pole on the imaginary axis),
    the steady frequency ω* (rad/s), the envelope rate k = dσ/d ln c at c* (1/s) and a
    mask of the elements solved; for starting elements ``idx`` with linear pole
    ``pole0`` (σ > 0 at c = 1) and zero-phase crossing ``w_cross`` at c = 1/``margin``.

    The pole is followed from c = 1 down in steps of :data:`_DU` in ln c (continuation,
    each step a complex secant solve from the pole before) to the first compression
    where it is stable; then Illinois (Dowell & Jarratt, BIT 11, 1971) on σ(ln c)/ω in
    that last step.
    """
    stage, params, ss = net.stage, net.params, net.ss
    n = net.size

    def pole_at(u: np.ndarray, s_from: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        c = np.ones(n)
        c[idx] = np.exp(u)
        dev = net.with_device(stage.compressed(params, ss, c, np.ones(n)))
        return closed_loop_pole(dev, idx, s_from, s_from * (1.0 + 1e-4) + 1e-4 * s_from.imag)

    def pole_at_some(
        sel: np.ndarray, u: np.ndarray, s_from: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        c = np.ones(n)
        c[idx[sel]] = np.exp(u)
        dev = net.with_device(stage.compressed(params, ss, c, np.ones(n)))
        return closed_loop_pole(dev, idx[sel], s_from, s_from * (1.0 + 1e-4) + 1e-4 * s_from.imag)

    # march down from c = 1 (the linear pole) until the pole is stable: the first
    # compression that stops the growth is the one the amplitude reaches first
    u_hi = np.zeros(idx.size)
    s_hi = pole0.copy()
    u_lo = np.full(idx.size, np.nan)
    s_lo = np.full(idx.size, np.nan + 0j)
    live = np.isfinite(pole0) & (pole0.real > 0)
    for _ in range(_MARCH):
        act = np.nonzero(live)[0]
        if act.size == 0:
            break
        u_new = u_hi[act] - _DU
        s_new, ok_new = pole_at_some(act, u_new, s_hi[act])
        stable = ok_new & (s_new.real < 0)
        moved = ok_new & ~stable
        done = act[stable]
        u_lo[done], s_lo[done] = u_new[stable], s_new[stable]
        step = act[moved]
        u_hi[step], s_hi[step] = u_new[moved], s_new[moved]
        live[act[stable | ~ok_new]] = False
    valid = np.isfinite(u_lo) & np.isfinite(s_hi)
    f_lo, f_hi = s_lo.real / s_lo.imag, s_hi.real / s_hi.imag
    u, s = u_lo.copy(), s_lo.copy()
    fu = f_lo.copy()
    last = np.zeros(idx.size)  # +1: the high end moved last, −1: the low end
    # each element stops on its own tolerance (a result independent of the other elements)
    act = np.nonzero(valid)[0]
    for _ in range(40):
        if act.size == 0:
            break
        ul, uh, fl, fh = u_lo[act], u_hi[act], f_lo[act], f_hi[act]
        denom = fh - fl
        ua = np.where(denom != 0, uh - fh * (uh - ul) / np.where(denom != 0, denom, 1), u[act])
        ua = np.clip(ua, np.minimum(ul, uh), np.maximum(ul, uh))
        near = np.where(np.abs(ua - ul) < np.abs(ua - uh), s_lo[act], s_hi[act])
        sa, ok_s = pole_at_some(act, ua, np.where(np.isfinite(near), near, 1j * w_cross[act]))
        valid[act] &= ok_s | (np.abs(uh - ul) < 1e-9)
        fa = sa.real / sa.imag
        u[act], s[act], fu[act] = ua, sa, fa
        side = fa > 0  # the new point replaces the high end
        # Illinois: halve the value of the end kept twice in a row
        la = last[act]
        f_lo[act] = np.where(side, np.where(la > 0, 0.5 * fl, fl), fa)
        f_hi[act] = np.where(side, fa, np.where(la < 0, 0.5 * fh, fh))
        u_lo[act], s_lo[act] = np.where(side, ul, ua), np.where(side, s_lo[act], sa)
        u_hi[act], s_hi[act] = np.where(side, ua, uh), np.where(side, sa, s_hi[act])
        last[act] = np.where(side, 1.0, -1.0)
        act = act[(np.abs(fa) >= 1e-10) & valid[act]]
    s_k, ok_k = pole_at(u + _STEP, s)
    k = s_k.real / _STEP
    valid &= ok_k & (k > 0) & (np.abs(fu) < 1e-6)
    return np.exp(u), s.imag, k, valid
