"""Harmonic balance of the device's junction: the steady frequency with its harmonics.

The describing function of :mod:`picker.circuit.large_signal` drives the device with a
pure sine at its control terminals and treats its input (base current, stored charge)
as a linear admittance compressed with the drive. In a heavily loaded, low-Q loop the
device's harmonic currents come back to its input through the network, the control
voltage is no longer a sine, and the fundamentals of the output and input currents are
no longer in phase with the control voltage's fundamental: the loop's phase balance, and
so the frequency, moves. Harmonic balance (Kundert, White & Sangiovanni-Vincentelli,
*Steady-State Methods for Simulating Analog and Microwave Circuits*, Kluwer 1990,
ch. 3-4) evaluates the nonlinear device in the time domain over one period and the
linear network at each harmonic:

    v(θ) = V_rest + ΔV + a·cos θ + Re Σ_{n=2..N} V_n·e^{jnθ}                   (H1)
    i(θ) = I(v(θ));   I_n = (2/M)·Σ_m i(θ_m)·e^{−jnθ_m}   (discrete Fourier)    (H2)
    i_in(θ) = i(θ)/β + TF·di/dt  →  I_in,n = I_n·(1/β + jnω·TF)                (H3)
    V_n = B(jnω)·I_n + Z(jnω)·I_in,n,   n = 1..N (V_1 = a)                     (H4)

I is the device law (:meth:`picker.circuit.stages.base.Stage.output_current`), the base
current is i/β (β = gm·r_pi, so that (H1)-(H4) reduce to the linear loop at small
drive) and the stored charge TF·i (the charge-control model of the junction,
Gummel-Poon; TF = C_diff/gm, :meth:`picker.circuit.stages.base.Stage.diffusion_capacitance`),
B is the control voltage for a unit current of the controlled source and Z the control
port's own impedance, both of the network *without* the junction's nonlinear parts
(r_pi and the diffusion capacitance removed; the depletion capacitances, r_o and every
passive part kept), by a stacked nodal solve. ΔV and a are the describing-function
solution's (the mean current, held by the bias network, and the amplitude, set there
together with the saturation limiter); the harmonics n ≥ 2 of (H4) are solved by
Newton's method (harmonic Newton, Kundert et al. ch. 4). For the fundamental, with the
port's own fundamental admittance Y_in = I_in,1/a and transconductance G_1 = I_1/a
(complex: the harmonics turn them), (H4) at n = 1 is the loop condition of a return ratio

    T_1 = G_1·B_1/(1 − Z_1·Y_in) = 1                                          (H5)

(the linear loop's T = gm·B/(1 − Z·y_pi) at small drive); the describing function set
its magnitude, and its phase condition arg T_1 = 0 gives the frequency by the secant
method.
"""

from __future__ import annotations

import numpy as np

from picker.circuit.network import Network, junction_free_stamps, nodal_matrix

__all__ = ["HARMONICS", "harmonic_frequency", "port_responses"]

#: Harmonics 2..HARMONICS carried in (H1).
HARMONICS = 5
_POINTS = 64  # time points over one period for (H2)
_NEWTON = 30  # Newton iterations of (H4), n ≥ 2
_SECANT = 12  # secant iterations on ω
_STEP = 0.05  # largest secant step, relative to the describing function's ω
_TOL = 1e-9  # residual of (H4) relative to a


def port_responses(net: Network, idx: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(B, Z) at complex frequencies ``s`` (one per element of ``idx``): the control
    voltage v_input − v_common for a unit current drawn through the controlled source
    (out of output into common) and for a unit current drawn through the control port
    (out of input into common); the return ratio is T = gm·B/(1 − Z·y_pi), of the network without the junction's r_pi and diffusion capacitance
    (modified nodal analysis; Ho, Ruehli & Brennan, IEEE Trans. Circuits Syst. 22, 1975)."""
    stage = net.stage
    nodes = stage.network_nodes(net.params)  # with a base stopper, its inner node
    ctrl = stage.control(net.params)  # the device's own base
    index = {node: i for i, node in enumerate(nodes)}
    n, k = s.shape[0], len(index)
    y = nodal_matrix(junction_free_stamps(net, idx, s), nodes, n)
    u = np.zeros((n, k, 2), dtype=complex)
    com = index.get(stage.common)
    u[:, index[stage.output], 0] -= 1.0  # the controlled source draws current out of output
    u[:, index[ctrl], 1] -= 1.0  # the port draws current out of the device's base
    if com is not None:
        u[:, com, :] += 1.0
    x = np.linalg.solve(y, u)
    v = x[:, index[ctrl], :] - (x[:, com, :] if com is not None else 0.0)
    return v[:, 0], v[:, 1]


def _harmonics(
    net: Network, idx: np.ndarray, w: np.ndarray, a: np.ndarray, dv: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The fundamental's phase residual arg T_1 of (H5) at ω = ``w``
    with the harmonics solved, and a mask of the elements where Newton converged."""
    stage, params, ss = net.stage, net.params, net.ss
    tf = stage.diffusion_capacitance(params, ss) / ss.gm
    beta = ss.r_pi * ss.gm  # the small-signal current gain g_m/g_pi (inf for a fet)
    theta = 2.0 * np.pi * np.arange(_POINTS) / _POINTS
    orders = np.arange(1, HARMONICS + 1)
    rot = np.exp(1j * orders[:, None] * theta[None, :])  # harmonics × points
    m = orders.size - 1
    resp = [port_responses(net, idx, 1j * o * w) for o in orders]
    b = np.stack([r[0] for r in resp], axis=1)
    z = np.stack([r[1] for r in resp], axis=1)
    y_in = 1.0 / beta + 1j * orders[None, :] * w[:, None] * tf  # (H3)
    kern = b + z * y_in  # V_n = kern_n·I_n
    base = dv[:, None] + a[:, None] * np.cos(theta)[None, :]
    v_h = np.zeros((w.size, m), dtype=complex)
    res = np.full(w.size, np.inf)
    h = 1e-6
    # Newton runs only on the elements that took a step in the last iteration: an element
    # that converged, or whose Jacobian failed, keeps its V_h (its step would be zero), so
    # leaving it out changes no figure, only the work (most elements converge in a few
    # iterations of the _NEWTON allowed).
    act = np.arange(w.size)
    for _ in range(_NEWTON):
        ka, aa = kern[act], a[act]
        # einsum, not a BLAS product: each element's sums independent of the batch's size
        v = base[act] + np.einsum("em,mt->et", v_h[act], rot[1:]).real  # (H1)
        i = stage.output_current(params, ss, v)
        g = (stage.output_current(params, ss, v + h) - stage.output_current(params, ss, v - h)) / (
            2 * h
        )
        i_n = 2.0 * np.einsum("et,mt->em", i, rot[1:].conj()) / _POINTS  # (H2)
        r = v_h[act] - ka[:, 1:] * i_n  # (H4), n ≥ 2
        res[act] = np.max(np.abs(r), axis=1) / aa
        live = (res[act] > _TOL) & np.isfinite(res[act])
        if not live.any():
            break
        # ∂I_n/∂Re V_k and ∂I_n/∂Im V_k: Re(V_k·e^{jkθ}) = Re V_k·cos kθ − Im V_k·sin kθ
        d_re = 2.0 * np.einsum("et,nt,kt->enk", g, rot[1:].conj(), rot[1:].real) / _POINTS
        d_im = -2.0 * np.einsum("et,nt,kt->enk", g, rot[1:].conj(), rot[1:].imag) / _POINTS
        jr = -ka[:, 1:, None] * d_re
        ji = -ka[:, 1:, None] * d_im
        jac = np.zeros((act.size, 2 * m, 2 * m))
        eye = np.eye(m)
        jac[:, :m, :m] = eye + jr.real
        jac[:, :m, m:] = ji.real
        jac[:, m:, :m] = jr.imag
        jac[:, m:, m:] = eye + ji.imag
        rhs = np.concatenate([r.real, r.imag], axis=1)
        live &= np.all(np.isfinite(jac), axis=(1, 2))
        step = np.zeros((act.size, 2 * m))
        with np.errstate(over="ignore"):  # a huge Jacobian's det overflows to inf: not singular
            det = np.linalg.det(np.where(live[:, None, None], jac, np.eye(2 * m)))
        ok_j = live & (np.abs(det) > 1e-12)
        if not ok_j.any():
            break
        step[ok_j] = np.linalg.solve(jac[ok_j], rhs[ok_j][..., None])[..., 0]
        dvh = step[:, :m] + 1j * step[:, m:]
        big = np.max(np.abs(dvh), axis=1)
        scale = np.minimum(1.0, 0.5 * aa / np.maximum(big, 1e-300))  # at most a/2 a step
        v_h[act] = v_h[act] - scale[:, None] * dvh
        act = act[ok_j]
    v = base + np.einsum("em,mt->et", v_h, rot[1:]).real
    i1 = 2.0 * np.einsum("et,t->e", stage.output_current(params, ss, v), rot[0].conj()) / _POINTS
    g1 = i1 / a  # the fundamental transconductance, complex
    phase = np.angle(b[:, 0] * g1 / (1.0 - z[:, 0] * y_in[:, 0] * g1))  # (H5)
    return phase, res <= 1e-6


def harmonic_frequency(
    net: Network, idx: np.ndarray, w: np.ndarray, a: np.ndarray, dv: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The steady frequency (rad/s) of harmonic balance (module docstring) from the
    describing function's ``w``, amplitude ``a`` and bias shift ``dv`` (1-D, one per
    element of ``idx`` of ``net``, the network at rest), and a mask of the elements where
    it converged (elsewhere ``w`` is returned)."""
    ok = np.isfinite(w) & np.isfinite(a) & np.isfinite(dv) & (a > 0)
    sel = np.nonzero(ok)[0]
    out = w.copy()
    if sel.size == 0:
        return out, ok
    x0, x1 = w[sel], w[sel] * (1.0 + 1e-3)
    f0, c0 = _harmonics(net, idx[sel], x0, a[sel], dv[sel])
    f1, c1 = _harmonics(net, idx[sel], x1, a[sel], dv[sel])
    good = c0 & c1
    act = np.nonzero(good & ~(np.abs(f1) < 1e-9))[0]  # each element stops on its own residual
    for _ in range(_SECANT):
        if act.size == 0:
            break
        xa0, xa1, fa0, fa1, wa = x0[act], x1[act], f0[act], f1[act], w[sel[act]]
        df = fa1 - fa0
        fine = (df != 0) & np.isfinite(df)
        x2 = np.where(fine, xa1 - fa1 * (xa1 - xa0) / np.where(fine, df, 1.0), xa1)
        x2 = np.clip(x2, xa1 - _STEP * wa, xa1 + _STEP * wa)
        x0[act], f0[act], x1[act] = xa1, fa1, x2
        f1[act], c = _harmonics(net, idx[sel[act]], x2, a[sel[act]], dv[sel[act]])
        good[act] &= c
        act = act[good[act] & ~(np.abs(f1[act]) < 1e-9)]
    conv = good & (np.abs(f1) < 1e-6)
    out[sel] = np.where(conv, x1, w[sel])
    ok[sel] = conv
    return out, ok
