"""Steadiness and start-up time: averaged envelope equations with the bias network.

Averaged (slowly varying amplitude) equations, in the manner of Krylov-Bogoliubov
averaging (Bogoliubov & Mitropolsky, *Asymptotic Methods in the Theory of
Non-linear Oscillations*, 1961): a high-Q oscillator's amplitude a(t) (at the
device's control terminals) grows at the real part σ of the closed-loop natural
frequency of the device compressed at that amplitude, da/dt = σ·a. Near the steady
compression c*, σ ≈ k·(c/c* − 1) with k = dσ/d ln c at c* (from the pole itself,
:func:`picker.circuit.large_signal.loop_compression`; for a single tank mode
k ≈ ω/(2·Q_L), so the envelope time constant of a board with margin m is
about 2·Q_L/(ω·(m − 1))). The bias network adds two slow states: the emitter
(source) bypass C_E charged by the mean emitter current through R_E, and the base
node's DC capacitance C_b (the tank's capacitors as seen from the base at low
frequency, plus the blocking capacitor) charged by the mean base current through
the divider's R_th:

    d ln a/dt = k·(c(a, V_B − V_E)·N(a)/c* − 1)                            (E1)
    C_E·dV_E/dt = (1 + 1/β)·(I(a, V_B − V_E) − I_rest) − V_E/R_E           (E2)
    C_b·dV_B/dt = −V_B/R_th − (I(a, V_B − V_E) − I_rest)/β                 (E3)

(V_E, V_B the shifts from rest; I, c, N as in :mod:`picker.circuit.large_signal`,
with the bias frozen at the state's V_B − V_E). Its equilibrium is the steady state
of :mod:`picker.circuit.large_signal`; the steady state is **bursting** (squegging)
when the Jacobian of (E1)-(E3) there has an eigenvalue with a positive real part
(Lyapunov's indirect method). An emitter without C_E follows at once (a fast state).

**Start-up time**: from the disturbance to 90 % of the steady amplitude. While the
amplitude is small it grows at the linear pole's rate σ0; where the bias network
is faster than that growth (R_E·C_E·σ0 < 1 and R_th·C_b·σ0 < 1) the bias follows
the amplitude and t = ∫ d ln a/σ(a) with σ(a) = σ0·(c(a) − c*)/(1 − c*) (c(a) at
the settled bias); where it is slower the amplitude grows at σ0 up to the limit
and t = ln(0.9·a*/a0)/σ0. The disturbance is the netlist's start-up kick (a current
pulse of :data:`picker.circuit.stages.base.KICK_FRACTION` of the bias current for
half a period into the tank top), taken as the charge 2·I_kick/ω at the tank top
exciting the closed-loop pole through its residue.
"""

from __future__ import annotations

import math

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import SmallSignal
from picker.circuit.large_signal import compression
from picker.circuit.stages.base import BiasLoop, Stage

__all__ = ["bursting", "startup_time"]

_FAST = 1e3  # rate of a state that follows at once, in units of the envelope rate k
_POINTS = 48  # quadrature points of the start-up integral


def _rhs(
    stage: Stage,
    params: AmplifierParams,
    ss: SmallSignal,
    loop: BiasLoop,
    y: np.ndarray,
    k: np.ndarray,
    c_star: np.ndarray,
    ratio: np.ndarray,
    c_b: np.ndarray,
) -> np.ndarray:
    """Right-hand side of (E1)-(E3); ``y`` is (elements, 3): ln a, V_E shift, V_B shift."""
    u, ve, vb = y[:, 0], y[:, 1], y[:, 2]
    cn, _, cur = compression(stage, params, ss, loop, np.exp(u), ratio, vb - ve)
    di = cur.mean - loop.i_rest
    du = k * (cn / c_star - 1.0)  # (E1)
    if loop.r_e > 0 and loop.c_e > 0:
        de = ((1.0 + 1.0 / loop.beta) * di - ve / loop.r_e) / loop.c_e  # (E2)
    elif loop.r_e > 0:  # unbypassed: V_E follows the current at once
        de = _FAST * k * ((1.0 + 1.0 / loop.beta) * di * loop.r_e - ve)
    else:
        de = -_FAST * k * ve
    if math.isfinite(loop.r_th):
        db = (-vb / loop.r_th - di / loop.beta) / c_b  # (E3)
    else:
        db = -_FAST * k * vb
    return np.stack([du, de, db], axis=1)


def bursting(
    stage: Stage,
    params: AmplifierParams,
    ss: SmallSignal,
    loop: BiasLoop,
    a: np.ndarray,
    dv: np.ndarray,
    mean: np.ndarray,
    k: np.ndarray,
    c_star: np.ndarray,
    ratio: np.ndarray,
    c_b: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """(bursting, largest real part of the eigenvalues, 1/s) of (E1)-(E3) at the steady
    state (drive ``a``, bias shift ``dv``, mean current ``mean``); the Jacobian by
    central differences, its eigenvalues by ``numpy.linalg.eigvals`` over the stack."""
    n = a.size
    if n == 0 or math.isinf(loop.r_dc):  # the mean current is held: no slow bias state
        return np.zeros(n, dtype=bool), np.full(n, -np.inf)
    di = mean - loop.i_rest
    ve = loop.r_e * (1.0 + 1.0 / loop.beta) * di
    vb = ve + dv  # ΔV = V_B − V_E at the equilibrium
    y0 = np.stack([np.log(a), ve, vb], axis=1)
    steps = np.array([1e-4, 1e-6, 1e-6])
    jac = np.empty((n, 3, 3))
    for j in range(3):
        yp, ym = y0.copy(), y0.copy()
        yp[:, j] += steps[j]
        ym[:, j] -= steps[j]
        fp = _rhs(stage, params, ss, loop, yp, k, c_star, ratio, c_b)
        fm = _rhs(stage, params, ss, loop, ym, k, c_star, ratio, c_b)
        jac[:, :, j] = (fp - fm) / (2.0 * steps[j])
    ok = np.all(np.isfinite(jac), axis=(1, 2))
    lam = np.full(n, np.nan)
    if ok.any():
        lam[ok] = np.linalg.eigvals(jac[ok]).real.max(axis=1)
    return ok & (lam > 1e-6 * k), lam


def startup_time(
    stage: Stage,
    params: AmplifierParams,
    ss: SmallSignal,
    loop: BiasLoop,
    a0: np.ndarray,
    a_star: np.ndarray,
    sigma0: np.ndarray,
    c_star: np.ndarray,
    ratio: np.ndarray,
    c_b: np.ndarray,
) -> np.ndarray:
    """Time from the control amplitude ``a0`` to 90 % of ``a_star``, s (module docstring)."""
    end = 0.9 * a_star
    t_lin = np.log(np.maximum(end / a0, 1.0)) / sigma0
    tau = np.maximum(loop.r_e * loop.c_e, loop.r_th * c_b if math.isfinite(loop.r_th) else 0.0)
    fast = tau * sigma0 < 1.0
    out = t_lin.copy()
    sel = np.nonzero(fast & (end > a0))[0]
    if sel.size:
        w = np.linspace(0.0, 1.0, _POINTS)[:, None]
        u = np.log(a0[sel])[None, :] * (1 - w) + np.log(end[sel])[None, :] * w
        shape = u.shape
        cn, _, _ = compression(
            stage, params, ss, loop, np.exp(u).ravel(), np.broadcast_to(ratio[sel], shape).ravel()
        )
        cs = c_star[sel][None, :]
        sig = sigma0[sel][None, :] * (cn.reshape(shape) - cs) / (1.0 - cs)
        inv = np.where(sig > 0, 1.0 / np.maximum(sig, 1e-300), np.inf)
        du = np.diff(u, axis=0)
        out[sel] = np.sum(0.5 * (inv[1:] + inv[:-1]) * du, axis=0)
    return out
