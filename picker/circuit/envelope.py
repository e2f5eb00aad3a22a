"""Steadiness and start-up time: averaged envelope equations with the bias network.

Averaged (slowly varying amplitude) equations, in the manner of Krylov-Bogoliubov
averaging (Bogoliubov & Mitropolsky, *Asymptotic Methods in the Theory of
Non-linear Oscillations*, 1961): a high-Q oscillator's amplitude a(t) (at the
device's control terminals) grows at the real part σ of the closed-loop natural
frequency of the device compressed at that amplitude, da/dt = σ·a. Near the steady
compression c*, σ ≈ k·(c/c* − 1) with k = dσ/d ln c at c* (from the pole itself,
:func:`picker.circuit.large_signal.loop_compression`; for a single tank mode
k ≈ ω/(2·Q_L), so the envelope time constant of a board with margin m is
about 2·Q_L/(ω·(m − 1))). The bias network adds slow states: the DC voltages of
the stage's DC nodes, joined by the capacitors that hold them (the emitter bypass C_E,
the blocking capacitor C_B, a base bypass, the tank's capacitors at low frequency, the
inductor a short) and the resistors that set them (R_E, the divider's R_th, the
output's DC load, the bleed), and driven by the device's mean currents (output −I,
input −I/β, common +I·(1 + 1/β)). Each stage lays out its own
(:meth:`picker.circuit.stages.base.Stage.slow_network`, :mod:`picker.circuit.stages.slow`):
a grounded-emitter stage has the emitter bypass, the emitter follower the tank's end
through C_B and R_E against the divider's capacitors, the common-base stage its base
bypass through R_th:

    d ln a/dt = k·(c(a, ΔV)·N(a)/c* − 1),      ΔV = V_input − V_common        (E1)
    C·dV/dt = −G·V + j·(I(a, ΔV) − I_rest)                                      (E2)

(V the node voltages' shifts from rest; I, c, N as in
:mod:`picker.circuit.large_signal`, with the bias frozen at the state's ΔV; a JFET's
gate junction adds its mean current I_G(a, ΔV) from the input node to the common node,
:meth:`picker.circuit.stages.base.Stage.gate_current`). Its
equilibrium is the steady state of :mod:`picker.circuit.large_signal`; the steady
state is **bursting** (squegging) when the Jacobian of (E1)-(E2) there has an
eigenvalue with a positive real part (Lyapunov's indirect method). The output node's
drop through its DC load, carried to the input by the blocking capacitor, is what
keeps most boards with a large emitter bypass steady.

Where the device saturates, the averaged equations leave out what drives the
bursts (the base-collector junction conducts and pulls the input node down, which
then recovers through the divider), so a saturated board is called bursting when its
emitter time constant R_E·C_E exceeds :data:`SATURATED_BURST` start-up times (an
empirical criterion, see its note; the time constant is the stage's,
:meth:`picker.circuit.stages.base.Stage.relaxation_time`).

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
from picker.circuit.network import Network
from picker.circuit.stages.base import BiasLoop, Stage
from picker.circuit.stages.slow import SlowNetwork

__all__ = [
    "HURWITZ",
    "SATURATED_BURST",
    "bursting",
    "hurwitz_conditions",
    "slow_network",
    "startup_time",
]

#: A saturated board bursts when its emitter time constant R_E·C_E exceeds this many
#: start-up times. An empirical threshold, fitted on a development set of 24 random
#: designs simulated in ngspice (bursting ones had ratios 180-1700, steady saturated ones
#: at most 80); the averaged equations leave out the base-collector conduction that
#: drives these boards (see the module docstring).
SATURATED_BURST = 120.0

_POINTS = 48  # quadrature points of the start-up integral
#: Routh-Hurwitz conditions kept per board (:func:`hurwitz_conditions`): the Jacobian of
#: (E1)-(E2) is at most 5 × 5 (the amplitude and four DC nodes).
HURWITZ = 5
#: A board bursts when an eigenvalue's real part exceeds this many times k (:func:`bursting`).
_BURST_RATE = 1e-6


def hurwitz_conditions(m: np.ndarray) -> np.ndarray:
    """Routh-Hurwitz conditions of stacked real matrices ``m`` (N, n, n), n ≤
    :data:`HURWITZ`: an (N, :data:`HURWITZ`) array whose entries are all positive exactly
    when every eigenvalue of the matrix has a negative real part.

    The characteristic polynomial det(sI − m) = Π (s − λ_i) = s^n + a_1·s^(n−1) + … + a_n,
    its coefficients the elementary symmetric functions of the eigenvalues λ_i (Vieta;
    multiplied out factor by factor from ``numpy.linalg.eigvals``). The Leverrier-Faddeev
    recursion (Gantmacher, *The Theory of Matrices*, vol. 1, 1959, ch. IV §4), used at
    first, loses every digit of a_n on stiff Jacobians (eigenvalues 10⁸ apart: the
    emitter follower's bias nodes), giving a_n of either sign where every eigenvalue lies
    well inside the left half-plane. The coefficients are symmetric polynomials in the
    eigenvalues, so they stay smooth where two eigenvalues meet. The Routh-Hurwitz
    criterion (Gantmacher, vol. 2, ch. XV §6): every root lies in the open left
    half-plane if and only if the leading principal minors Δ_1 … Δ_n of the Hurwitz
    matrix H_ij = a_(2j−i) (a_0 = 1, a_k = 0 outside 0 … n) are positive. As
    Δ_n = a_n·Δ_(n−1), the conditions returned are Δ_1 … Δ_(n−1) and a_n, padded
    with 1. Unlike the largest real part of the eigenvalues (which bends sharply where
    two eigenvalues meet), these are polynomials in the matrix's entries, so smooth
    functions of the board's part values. Products per element by einsum.
    """
    count, n, _ = m.shape
    lam = np.linalg.eigvals(m) if count else np.zeros((0, n), dtype=complex)
    coef = np.zeros((count, n + 1), dtype=complex)
    coef[:, 0] = 1.0
    for i in range(n):  # multiply by (s − λ_i): a_k ← a_k − λ_i·a_(k−1)
        coef[:, 1 : i + 2] = coef[:, 1 : i + 2] - lam[:, i, None] * coef[:, : i + 1]
    a = coef.real  # the eigenvalues of a real matrix come in conjugate pairs
    hur = np.zeros((count, n, n))
    for i in range(n):
        for j in range(n):
            e = 2 * (j + 1) - (i + 1)
            if 0 <= e <= n:
                hur[:, i, j] = a[:, e]
    out = np.ones((count, HURWITZ))
    with np.errstate(over="ignore", invalid="ignore"):
        # a stiff Jacobian (eigenvalues 10⁸ apart) can take a minor past the float range:
        # its sign stays (±inf), and the board fit treats a non-finite point as unfitted
        for i in range(1, n):
            out[:, i - 1] = np.linalg.det(hur[:, :i, :i])
    out[:, n - 1] = a[:, n]
    return out


def slow_network(net: Network, idx: np.ndarray, loop: BiasLoop, w: np.ndarray) -> SlowNetwork:
    """The bias network's DC nodes of the elements ``idx`` (:class:`SlowNetwork`), from the
    stage (:meth:`picker.circuit.stages.base.Stage.slow_network`: each stage has its own
    layout). The tank's parts at low frequency are capacitors (the inductor a short): each
    capacitance is Im Y(jω_s)/ω_s at ω_s = ω/1000 of its π admittances
    (:meth:`picker.tank.base.Topology.pi_admittances`)."""
    s_lo = 1e-3j * w
    tank = net.tank_admittances(s_lo, idx)
    return net.stage.slow_network(net.topology, net.params, net.ss, loop, tank, s_lo)


def bursting(
    net: Network,
    idx: np.ndarray,
    loop: BiasLoop,
    a: np.ndarray,
    dv: np.ndarray,
    k: np.ndarray,
    c_star: np.ndarray,
    ratio: np.ndarray,
    w: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(bursting, largest real part of the eigenvalues, 1/s, Routh-Hurwitz conditions) of
    the envelope equation (E1) coupled with the bias network's DC nodes (E2) at the steady
    state (drive ``a``, bias shift ``dv``); partial derivatives of the device by central
    differences, the eigenvalues by ``numpy.linalg.eigvals`` over the stack of Jacobians.
    A board bursts where the largest real part exceeds 10⁻⁶·k; the conditions
    (:func:`hurwitz_conditions` of (J − 10⁻⁶·k·I)/|k|, shape (n, :data:`HURWITZ`)) are all
    positive exactly where it does not."""
    stage, params, ss = net.stage, net.params, net.ss
    n = a.size
    if n == 0 or math.isinf(loop.r_dc):  # the mean current is held: no slow bias state
        return np.zeros(n, dtype=bool), np.full(n, -np.inf), np.ones((n, HURWITZ))
    h_u, h_v = 1e-4, 1e-6

    def at(du: float, ddv: float) -> tuple[np.ndarray, np.ndarray]:
        cn, _, cur = compression(stage, params, ss, loop, a * math.exp(du), ratio, dv + ddv)
        return cn, cur.mean

    cp, ip = at(h_u, 0.0)
    cm, im = at(-h_u, 0.0)
    c_u, i_u = (cp - cm) / (2 * h_u), (ip - im) / (2 * h_u)
    cp, ip = at(0.0, h_v)
    cm, im = at(0.0, -h_v)
    c_v, i_v = (cp - cm) / (2 * h_v), (ip - im) / (2 * h_v)
    slow = slow_network(net, idx, loop, w)
    cap, cond, proj = slow.cap, slow.cond, slow.proj
    r = proj.shape[1]
    g_u, g_v = _junction_rates(stage, params, ss, a, dv, h_u, h_v)
    # current into each node per unit ΔI (output: −1, input: −1/β, common: +1 + 1/β) and
    # ΔV = V_input − V_common, on the stage's own DC nodes
    inj, sense = slow.inj, slow.sense
    cr = np.einsum("ia,nij,jb->nab", proj, cap, proj)
    gr = np.einsum("ia,nij,jb->nab", proj, cond, proj)
    inj_r = proj.T @ inj
    sense_r = proj.T @ sense
    jac = np.zeros((n, r + 1, r + 1))
    jac[:, 0, 0] = k * c_u / c_star  # (E1)
    jac[:, 0, 1:] = (k * c_v / c_star)[:, None] * sense_r[None, :]
    rhs = np.zeros((n, r, r + 1))
    rhs[:, :, 0] = i_u[:, None] * inj_r[None, :]  # (E2)
    rhs[:, :, 1:] = -gr + (i_v[:, None, None] * inj_r[None, :, None]) * sense_r[None, None, :]
    if g_u is not None and g_v is not None:  # an input junction: from input to common
        gate_r = -sense_r  # the junction's current leaves the input for the common node
        rhs[:, :, 0] += g_u[:, None] * gate_r[None, :]
        rhs[:, :, 1:] += (g_v[:, None, None] * gate_r[None, :, None]) * sense_r[None, None, :]
    jac[:, 1:, :] = np.linalg.solve(cr, rhs)
    ok = np.all(np.isfinite(jac), axis=(1, 2))
    lam = np.full(n, np.nan)
    hur = np.full((n, HURWITZ), np.nan)
    if ok.any():
        lam[ok] = np.linalg.eigvals(jac[ok]).real.max(axis=1)
        kk = k[ok][:, None, None]
        shifted = (jac[ok] - _BURST_RATE * kk * np.eye(r + 1)) / np.abs(kk)
        hur[ok] = hurwitz_conditions(shifted)
    return ok & (lam > _BURST_RATE * k), lam, hur


def _junction_rates(
    stage: Stage,
    params: AmplifierParams,
    ss: SmallSignal,
    a: np.ndarray,
    dv: np.ndarray,
    h_u: float,
    h_v: float,
) -> tuple[np.ndarray | None, np.ndarray | None]:
    """∂I_G/∂ln a and ∂I_G/∂ΔV of the stage's input junction (a JFET's gate junction,
    :meth:`picker.circuit.stages.base.Stage.gate_current`) at the steady state, by
    central differences; (None, None) where the stage has none. Its current leaves the
    input node and enters the common node in (E2), as the bias shift has it."""
    at_u = [stage.gate_current(params, ss, a * math.exp(d)) for d in (h_u, -h_u)]
    if at_u[0] is None or at_u[1] is None:
        return None, None
    junction = stage.gate_current(params, ss, a)
    assert junction is not None
    g_u = (at_u[0](dv) - at_u[1](dv)) / (2 * h_u)
    g_v = (junction(dv + h_v) - junction(dv - h_v)) / (2 * h_v)
    return g_u, g_v


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
