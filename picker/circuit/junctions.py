"""Harmonic balance of both junctions of a bjt: the steady state with the collector knee.

:mod:`picker.circuit.harmonic` balances the base-emitter junction alone, with the
amplitude and the bias shift taken from the describing function. When the collector
swings down to the base, the base-collector junction conducts: the transistor
saturates, the collector is tied to the base (and through the blocking capacitor the
tank top to the inductor's far end) for part of each cycle, and the tank's effective
reactances, and so the frequency, change. Here the device is the Ebers-Moll transport
model with both junctions (:func:`picker.circuit.device.npn_transport`; Ebers & Moll,
Proc. IRE 42, 1954; the Gummel-Poon model reduced to the card's parameters, Massobrio &
Antognetti, *Semiconductor Device Modeling with SPICE*, 2nd ed., ch. 2), with the
forward diffusion charge TF·i_F, and every Fourier coefficient of both control
voltages, their DC parts (the bias shift) and the frequency are solved together by
Newton's method (harmonic Newton: Kundert, White & Sangiovanni-Vincentelli,
*Steady-State Methods for Simulating Analog and Microwave Circuits*, Kluwer 1990, ch. 4):

    u(θ) = Σ_k c_u,k·φ_k(θ),  w(θ) = Σ_k c_w,k·φ_k(θ)   (φ: 1, cos nθ, sin nθ; n ≤ N)   (J1)
    p_C(θ) = i_C(u, w),  p_B(θ) = i_B(u, w) + ω·dq(u)/dθ,  q = TF·i_F               (J2)
    [U_n; W_n] = Z(jnω)·[P_C,n; P_B,n] − (the rest point, n = 0)                     (J3)

u and w are the shifts of v_BE and v_BC from the rest point, p_C the collector current
(drawn from the collector into the emitter), p_B the base current with the charging
current of the stored charge (from the base into the emitter), Z the 2×2 transfer
impedance from those two port currents to (v_BE, v_BC) of the network *without* the
junctions' nonlinear parts (r_pi and the diffusion capacitance removed; the depletion
capacitances, r_o and every passive part kept), by a stacked nodal solve; at n = 0 it
is the DC network (the emitter bypass and the coupling capacitors open, the inductors
shorts), so (J3) also carries the bias network's settled shift. The phase is fixed by
the fundamental's sine coefficient of u (0), and ω takes its place among the unknowns.
The start is the describing function's solution (:mod:`picker.circuit.large_signal`).

Where it is used: :func:`picker.circuit.steady.steady_state` solves it on every board
that starts, the ones the describing function finds saturated included, and takes it
where Newton converges. Where the collector is driven hard into the knee (drives of a
hundred thermal voltages and more), Newton from the describing function's start mostly
does not converge, even with 12-24 harmonics and a continuation in the knee voltage
(the current pulses are a few hundredths of a period wide): not solved yet; the
describing function's frequency stands there. Where it does converge on a board the
describing function calls saturated, it is the better answer: on the saturated
designs of the main and held-out validation sets whose balance converges (d013, d020,
d023, d026, d050, d051, d059, h000, h004; steady in ngspice) the frequency came within
0.52 % of ngspice's (the describing function's 0.02-7.1 % off) and the amplitude within
9 % (the describing function's up to 2×).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import ive

from picker.circuit.device import npn_transport, thermal_voltage
from picker.circuit.network import Network, junction_free_stamps, nodal_matrix

__all__ = [
    "HARMONICS",
    "NEWTON",
    "TRUNCATION",
    "harmonics_for_drive",
    "junction_balance",
    "port_matrix",
]

#: Harmonics 1..HARMONICS carried in (J1) at a light drive; twice as many where the
#: drive's current pulses need them (:func:`harmonics_for_drive`).
HARMONICS = 6
#: The first harmonic left out of (J1) may carry at most this fraction of the current
#: pulses' mean (:func:`harmonics_for_drive`; common practice, no source).
TRUNCATION = 0.1
_POINTS = 64  # time points over one period
#: Newton steps (a board near its start-up edge converges slowly).
NEWTON = 150
_LIMIT = 2.0  # largest change of u or w at any instant in one Newton step, V
_W_STEP = 0.03  # largest relative change of ω in one Newton step
_BACK = 0.5 ** np.arange(12)  # the step fractions tried
_START_VBC = 0.45  # the start's v_BC is clipped here, V
_DC = 1e-7  # the DC network is solved at s = j·_DC·ω (capacitors open, inductors shorts)


def port_matrix(net: Network, idx: np.ndarray, s: np.ndarray) -> np.ndarray:
    """Z at complex frequencies ``s`` (one per element of ``idx``), shape (n, 3, 2):
    rows v_input − v_common, v_input − v_output and v_top, columns a unit current drawn
    from the output into the common node and from the input into the common node, of
    the network without the junction's r_pi and diffusion capacitance (modified nodal
    analysis; Ho, Ruehli & Brennan, IEEE Trans. Circuits Syst. 22, 1975)."""
    stage = net.stage
    nodes = stage.network_nodes(net.params)  # with a base stopper, its inner node
    ctrl = stage.control(net.params)  # the device's own base
    index = {node: i for i, node in enumerate(nodes)}
    n, k = s.shape[0], len(index)
    y = nodal_matrix(junction_free_stamps(net, idx, s), nodes, n)
    u = np.zeros((n, k, 2), dtype=complex)
    com = index.get(stage.common)  # None: the common node is the reference "0"
    u[:, index[stage.output], 0] -= 1.0
    u[:, index[ctrl], 1] -= 1.0
    if com is not None:
        u[:, com, :] += 1.0
    x = np.linalg.solve(y, u)
    b, c = x[:, index[ctrl], :], x[:, index[stage.output], :]
    t = stage.probe({node: x[:, i, :] for node, i in index.items()})  # as the netlist measures
    return np.stack([b - (x[:, com, :] if com is not None else 0.0), b - c, t], axis=1)


def harmonics_for_drive(x: np.ndarray) -> np.ndarray:
    """The harmonics to carry in (J1) at a base-emitter drive of ``x`` thermal voltages
    (the describing function's amplitude over V_T): :data:`HARMONICS`, or twice as many
    where the first one left out would carry more than :data:`TRUNCATION` of the
    current's mean. Under a drive x·cos θ the exponential junction's current is
    e^{x·cos θ}, whose Fourier coefficients are 2·I_n(x) over the mean I_0(x) (the
    modified Bessel functions: Clarke & Hess, *Communication Circuits*, the
    describing function of the exponential junction): the pulses narrow as x grows
    (I_n/I_0 ≈ e^{−n²/2x}), and a balance truncated where the pulse still has half its
    content converges to a wrong frequency (cb009 of the common-base set, x ≈ 26:
    +6.9 % against ngspice with 6 harmonics). Beyond twice as many the balance rarely
    converges (module docstring)."""
    x = np.abs(np.asarray(x, dtype=float))
    left_out = 2.0 * ive(HARMONICS + 1, x) / ive(0, x)  # e^{-x} scaling cancels
    return np.where(left_out > TRUNCATION, 2 * HARMONICS, HARMONICS)


def _basis(n_harm: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    points = max(_POINTS, 8 * n_harm)
    """E (K × M) of φ_k(θ_m), its projection P (K × M, coefficients from samples) and the
    derivative d/dθ on coefficients D (K × K); K = 2N + 1, order 1, cos θ, sin θ, cos 2θ, …"""
    theta = 2.0 * np.pi * np.arange(points) / points
    rows = [np.ones(points)]
    for n in range(1, n_harm + 1):
        rows += [np.cos(n * theta), np.sin(n * theta)]
    e = np.array(rows)
    scale = np.full(e.shape[0], 2.0 / points)
    scale[0] = 1.0 / points
    d = np.zeros((e.shape[0], e.shape[0]))
    for n in range(1, n_harm + 1):
        c, s = 2 * n - 1, 2 * n
        d[c, s] = n  # d/dθ (a cos + b sin) = n·b cos − n·a sin
        d[s, c] = -n
    return e, e * scale[:, None], d


def _block(z: np.ndarray, n_harm: int) -> np.ndarray:
    """The real form of phasor products V_n = Z_n·I_n on cosine/sine coefficients
    (V = a − j·b for a·cos + b·sin): for z (n, N+1, 2, 2) over the two ports, the matrix
    (n, 2K, 2K) ordered [u coefficients, w coefficients] × [p_C, p_B]."""
    n = z.shape[0]
    k = 2 * n_harm + 1
    out = np.zeros((n, 2 * k, 2 * k))
    for r in range(2):
        for c in range(2):
            zz = z[:, :, r, c]
            blk = out[:, r * k : (r + 1) * k, c * k : (c + 1) * k]
            blk[:, 0, 0] = zz[:, 0].real
            for h in range(1, n_harm + 1):
                i, j = 2 * h - 1, 2 * h
                zr, zi = zz[:, h].real, zz[:, h].imag
                blk[:, i, i] = zr  # a_v = Zr·a_i + Zi·b_i
                blk[:, i, j] = zi
                blk[:, j, i] = -zi  # b_v = −Zi·a_i + Zr·b_i
                blk[:, j, j] = zr
    return out


def _rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``a @ b`` row by row, with each row's rounding independent of the batch: BLAS
    picks its kernel (and so its summation order) by the matrix's size, so a board's
    figures would move in the last bit with the boards beside it; einsum's own loop
    does not (common practice, no source)."""
    return np.einsum("nk,km->nm", a, b)


@dataclass(frozen=True)
class _Balance:
    """One batch of (J1)-(J3): the network, the elements, the basis and the device."""

    net: Network
    ids: np.ndarray  # elements of the network
    e: np.ndarray  # basis at the time points (K × M)
    proj: np.ndarray  # coefficients from samples (K × M)
    dmat: np.ndarray  # d/dθ on coefficients (K × K)
    n_harm: int
    i_f0: float
    is_: float
    br: float
    beta: float
    vt: float
    tf: float
    v_bc0: float
    rest: tuple[float, float]  # p_C and p_B at rest

    def law(self, cu: np.ndarray, cw: np.ndarray, knee: np.ndarray) -> tuple[np.ndarray, ...]:
        """The device currents (:func:`picker.circuit.device.npn_transport`) at the time
        points; ``knee`` (per element, V) moves the base-collector junction's turn-on up
        (the start leaves that junction out with it)."""
        return npn_transport(
            self.i_f0,
            self.is_,
            self.br,
            self.beta,
            self.vt,
            _rows(cu, self.e),
            self.v_bc0 - knee[:, None] + _rows(cw, self.e),
        )

    def z(self, om: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """Z (rows, N + 1, 3, 2) at the harmonics of ``om`` (n = 0: the DC network)."""
        orders = np.arange(self.n_harm + 1)
        s = 1j * om[:, None] * np.maximum(orders, _DC)[None, :]
        zz = port_matrix(self.net, np.repeat(self.ids[rows], orders.size), s.reshape(-1))
        return zz.reshape(rows.size, orders.size, 3, 2)

    def ports(self, cur: tuple[np.ndarray, ...], om: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Coefficients of p_C and p_B (J2), less their rest values."""
        pc = _rows(cur[0], self.proj.T)
        pb = _rows(cur[1], self.proj.T) + om[:, None] * _rows(
            _rows(self.tf * cur[2], self.proj.T), self.dmat.T
        )
        pc[:, 0] -= self.rest[0]
        pb[:, 0] -= self.rest[1]
        return pc, pb

    def residual(
        self, cu: np.ndarray, cw: np.ndarray, om: np.ndarray, z: np.ndarray, knee: np.ndarray
    ) -> tuple[np.ndarray, tuple[np.ndarray, ...]]:
        """(J3) as coefficients: x − Z·p, and the device currents."""
        cur = self.law(cu, cw, knee)
        pc, pb = self.ports(cur, om)
        lin = _block(z[:, :, :2, :], self.n_harm)
        x = np.concatenate([cu, cw], axis=1)
        p = np.concatenate([pc, pb], axis=1)
        return x - np.einsum("nij,nj->ni", lin, p), cur

    def jacobian(self, cur: tuple[np.ndarray, ...], om: np.ndarray, z: np.ndarray) -> np.ndarray:
        """∂(x − Z·p)/∂x = I − Z·G, G from the time-domain conductances (Kundert et al.
        ch. 4: the conversion matrices)."""
        k = self.e.shape[0]

        def conv(g: np.ndarray) -> np.ndarray:
            return (self.proj[None, :, :] * g[:, None, :]) @ self.e.T

        gg = np.zeros((om.size, 2 * k, 2 * k))
        gg[:, :k, :k], gg[:, :k, k:] = conv(cur[3]), conv(cur[4])
        gg[:, k:, :k] = conv(cur[5]) + om[:, None, None] * (self.dmat @ conv(self.tf * cur[7]))
        gg[:, k:, k:] = conv(cur[6])
        return np.eye(2 * k)[None] - _block(z[:, :, :2, :], self.n_harm) @ gg


def _newton(
    bal: _Balance,
    cu: np.ndarray,
    cw: np.ndarray,
    om: np.ndarray,
    knee: np.ndarray,
    live: np.ndarray,
    iterations: int,
) -> np.ndarray:
    """Damped Newton on (J3) with ω in place of u's fundamental sine coefficient, in place
    on ``cu``, ``cw``, ``om`` over the ``live`` elements; returns the mask converged."""
    k = bal.e.shape[0]
    done = np.zeros(om.size, dtype=bool)
    scale_v = np.maximum(np.abs(cu[:, 1]), 1e-3)
    h = 1e-6
    for _ in range(iterations):
        act = np.nonzero(live & ~done)[0]
        if act.size == 0:
            break
        z = bal.z(om[act], act)
        kn = knee[act]
        r, cur = bal.residual(cu[act], cw[act], om[act], z, kn)
        res = np.max(np.abs(r), axis=1) / scale_v[act]
        jac = bal.jacobian(cur, om[act], z)
        # ∂r/∂ω: the network's and the charge term's dependence on ω
        z_h = bal.z(om[act] * (1 + h), act)
        r_h, _ = bal.residual(cu[act], cw[act], om[act] * (1 + h), z_h, kn)
        jac[:, :, 2] = (r_h - r) / (h * om[act, None])  # u's fundamental sine is fixed at 0
        good = np.all(np.isfinite(jac), axis=(1, 2)) & np.all(np.isfinite(r), axis=1)
        step = np.zeros((act.size, 2 * k))
        if good.any():
            step[good] = np.linalg.solve(jac[good], -r[good][..., None])[..., 0]
        live[act[~good]] = False
        d_om = step[:, 2].copy()
        step[:, 2] = 0.0
        dv = np.maximum(
            np.max(np.abs(_rows(step[:, :k], bal.e)), axis=1),
            np.max(np.abs(_rows(step[:, k:], bal.e)), axis=1),
        )
        lim = np.minimum(1.0, _LIMIT / np.maximum(dv, 1e-300))
        lim = np.minimum(lim, _W_STEP * om[act] / np.maximum(np.abs(d_om), 1e-300))
        # backtracking on the residual's norm (Dennis & Schnabel, *Numerical Methods for
        # Unconstrained Optimization and Nonlinear Equations*, 1983, sec. 6.3); Z at the
        # trial ω by its linear change over the step
        dz = (z_h - z) / (h * om[act])[:, None, None, None]
        n0 = np.linalg.norm(r, axis=1)
        base = (cu[act], cw[act], om[act])

        def trial(t: np.ndarray, rows: np.ndarray, st: np.ndarray = step) -> np.ndarray:
            z_t = z[rows] + dz[rows] * (t * d_om[rows])[:, None, None, None]  # noqa: B023
            r_t, _ = bal.residual(
                base[0][rows] + t[:, None] * st[rows, :k],  # noqa: B023
                base[1][rows] + t[:, None] * st[rows, k:],  # noqa: B023
                base[2][rows] + t * d_om[rows],  # noqa: B023
                z_t,
                kn[rows],  # noqa: B023
            )
            n_t = np.linalg.norm(r_t, axis=1)
            return np.where(np.isfinite(n_t), n_t, np.inf)

        full = trial(lim, np.arange(act.size)) < (1.0 - 1e-4) * n0
        back = np.nonzero(~full)[0]
        if back.size:
            trials = lim[back][None, :] * _BACK[1:, None]  # trials × rows backtracked
            nt = trials.shape[0]
            n_t = trial(trials.reshape(-1), np.tile(back, nt)).reshape(nt, back.size)
            fine = n_t < (1.0 - 1e-4 * _BACK[1:, None]) * n0[back][None, :]
            first = np.where(fine.any(axis=0), np.argmax(fine, axis=0), np.argmin(n_t, axis=0))
            lim[back] = trials[first, np.arange(back.size)]
        cu[act] += lim[:, None] * step[:, :k]
        cw[act] += lim[:, None] * step[:, k:]
        om[act] += lim * d_om
        small = (np.abs(lim * d_om) < 1e-9 * om[act]) & (lim * dv < 1e-7)
        done[act[(res < 1e-7) & small & good]] = True
    return done


def junction_balance(
    net: Network,
    idx: np.ndarray,
    w: np.ndarray,
    a: np.ndarray,
    dv: np.ndarray,
    n_harm: int = HARMONICS,
    iterations: int = NEWTON,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The steady frequency (rad/s) and the peak voltage at the tank top (V, half its
    peak-to-peak, harmonics included) of the two-junction harmonic balance (module docstring), from the describing function's
    ``w``, control amplitude ``a`` and bias shift ``dv`` (1-D, one per element of
    ``idx`` of ``net``, the network at rest), and a mask of the elements where Newton
    converged within ``iterations`` Newton steps (elsewhere ``w`` and NaN are returned)."""
    stage, params, ss = net.stage, net.params, net.ss
    bias = stage.bias(params)
    out_w, out_top = w.astype(float).copy(), np.full(w.shape, np.nan)
    ok = np.isfinite(w) & np.isfinite(a) & np.isfinite(dv) & (a > 0)
    if bias is None or not ok.any():
        return out_w, out_top, np.zeros(w.shape, dtype=bool)
    dev = params.effective_device()
    vt = thermal_voltage(params.temperature_c)
    beta = ss.r_pi * ss.gm
    v_bc0 = bias.vb - bias.vc
    rest = npn_transport(ss.i_dc, dev.is_, dev.br, beta, vt, np.zeros(1), np.array([v_bc0]))
    e, proj, dmat = _basis(n_harm)
    sel = np.nonzero(ok)[0]
    m = sel.size
    bal = _Balance(
        net=net,
        ids=idx[sel],
        e=e,
        proj=proj,
        dmat=dmat,
        n_harm=n_harm,
        i_f0=ss.i_dc,
        is_=dev.is_,
        br=dev.br,
        beta=beta,
        vt=vt,
        tf=stage.diffusion_capacitance(params, ss) / ss.gm,
        v_bc0=v_bc0,
        rest=(float(rest[0][0]), float(rest[1][0])),
    )
    k = e.shape[0]
    # the start: the describing function's drive; v_BC from the DC and linear network's
    # responses to the currents of that drive, clipped below the base-collector
    # junction's turn-on (Newton brings the knee in)
    everyone = np.arange(m)
    knee = np.zeros(m)
    z0 = bal.z(w[sel], everyone)
    cu = np.zeros((m, k))
    cu[:, 0], cu[:, 1] = dv[sel], a[sel]
    pc0, pb0 = bal.ports(bal.law(cu, np.zeros((m, k)), knee + 10.0), w[sel])
    both = np.einsum("nij,nj->ni", _block(z0[:, :, :2, :], n_harm), np.concatenate([pc0, pb0], 1))
    cw = _rows(np.minimum(_rows(both[:, k:], e), _START_VBC + knee[:, None] - v_bc0), proj.T)
    om = w[sel].astype(float).copy()
    live = np.ones(m, dtype=bool)
    done = _newton(bal, cu, cw, om, knee, live, iterations)
    good = done & (np.abs(cu[:, 1]) > 0.1 * a[sel])  # not the trivial (resting) solution
    zt = bal.z(om, everyone)
    pc, pb = bal.ports(bal.law(cu, cw, knee), om)
    # the tank top's waveform: Σ_n Re((Z_t,C·P_C,n + Z_t,B·P_B,n)·e^{jnθ}), n ≥ 1
    ph_c = pc[:, 1::2] - 1j * pc[:, 2::2]  # phasors of n = 1..N
    ph_b = pb[:, 1::2] - 1j * pb[:, 2::2]
    v_t = zt[:, 1:, 2, 0] * ph_c + zt[:, 1:, 2, 1] * ph_b
    theta = 2.0 * np.pi * np.arange(256) / 256
    wave = _rows(v_t, np.exp(1j * np.outer(np.arange(1, n_harm + 1), theta))).real
    top = 0.5 * (wave.max(axis=1) - wave.min(axis=1))
    out_w[sel] = np.where(good, om, w[sel])
    out_top[sel] = np.where(good, np.abs(top), np.nan)
    conv_all = np.zeros(w.shape, dtype=bool)
    conv_all[sel] = good
    return out_w, out_top, conv_all
