"""The periodic steady state of the oscillator's own netlist by shooting, and its stability.

An autonomous oscillator's steady state is a periodic orbit x(t + T) = x(t) of the
circuit's equations (:mod:`picker.circuit.transient`, (T1)) whose period T is itself
unknown. Shooting (Aprille & Trick, "Steady-state analysis of nonlinear circuits with
periodic inputs", Proc. IEEE 60, 1972; for autonomous circuits Kundert, White &
Sangiovanni-Vincentelli, *Steady-State Methods for Simulating Analog and Microwave
Circuits*, Kluwer 1990, ch. 7) solves

    φ(x_0, T) − x_0 = 0,   x_0[k] = x_k*                                             (S1)

by Newton's method on (x_0, T): φ is one period of the integrator
(:func:`picker.circuit.transient.integrate`), its Jacobian ∂φ/∂x_0 (the monodromy
matrix M) and ∂φ/∂T come from the discrete variational equations, and the phase
condition fixes one component (the tank top's voltage, taken where it crosses its mean
rising, so that the orbit crosses it transversally):

    [M − I   ∂φ/∂T] [Δx_0]     [φ − x_0]
    [ e_kᵀ     0  ] [ ΔT ] = − [   0   ]                                              (S2)

The start is the circuit's own oscillating mode at its DC point (the eigenvector of the
linearised circuit with the fastest-growing complex pole; Ho, Ruehli & Brennan's
matrices), scaled to the describing function's amplitude, then integrated for a few
periods so that the fast transients die out and the slow ones (the bias network) are
left to Newton.

**Stability** (Floquet theory: Coddington & Levinson, *Theory of Ordinary Differential
Equations*, 1955, ch. 3; for oscillators Kundert et al. ch. 7): the eigenvalues of M
are the Floquet multipliers of the orbit. One is 1 (a shift along the orbit); the orbit
is stable when every other lies inside the unit circle. A pair or a real multiplier
outside it means the orbit is unstable: a complex pair makes the envelope modulate
(squegging, bursting), a real one lets the oscillation relax away from the orbit. The
multipliers of the algebraic unknowns (nodes without capacitance) are 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.transient import Circuit, evaluate, integrate

__all__ = [
    "Orbit",
    "RETRY_WARM",
    "STEPS",
    "WARM",
    "UNSTABLE_MARGIN",
    "periodic_orbit",
    "oscillating_mode",
]

#: Time steps per period (BDF2; the frequency's discretisation error is about
#: 0.1·(2π/N)², 6e-5 at N = 128, and is removed by Richardson extrapolation).
STEPS = 128
#: Periods integrated from the start before Newton: the start (the describing
#: function's bias point, amplitude and period) is near the orbit, so a few periods
#: let the fast transients die and Newton takes the slow ones (the bias network).
WARM = 5
#: Periods integrated from the start before Newton again where Newton failed after
#: :data:`WARM` (a start too far from the orbit for Newton).
RETRY_WARM = 40
#: Newton steps on (S1) at most.
ITERATIONS = 30
#: How far outside the unit circle a multiplier must lie to call the orbit unstable:
#: twice the integration's error on the multipliers at the refined 512 steps a period
#: (the trivial multiplier, exactly 1 in the limit, comes out about 1 % off there, and
#: which eigenvalue is the trivial one is decided from the eigenvectors, so an error of
#: that size can land on the largest non-trivial one).
UNSTABLE_MARGIN = 0.02
#: A multiplier this close to 1 (a mode slower than ~1/FROZEN periods) is frozen.
FROZEN = 1e-4
_T_STEP = 0.05
_BACKTRACK = 4  # step halvings tried  # largest relative change of T in one Newton step
_X_STEP = 5.0  # largest change of a node voltage in one Newton step, V


@dataclass(frozen=True)
class Orbit:
    """The periodic orbit of each circuit of a batch (arrays over the batch on axis 0).

    ``period`` (s), ``x`` the states over one period (N + 1, B, n), ``multipliers`` the
    Floquet multipliers but the trivial one (B, n − 1; sorted by modulus, largest
    first), ``ok`` where Newton converged to an oscillating orbit."""

    period: np.ndarray
    x: np.ndarray
    multipliers: np.ndarray
    ok: np.ndarray

    @property
    def unstable(self) -> np.ndarray:
        """A Floquet multiplier outside the unit circle by more than
        :data:`UNSTABLE_MARGIN` (the integration's error on the multipliers: with fixed
        steps the trivial one, 1 in the limit, comes out 1-5 % off at 128 steps a
        period on a saturated orbit and about 1 % off at 512)."""
        return np.abs(self.multipliers[:, 0]) > 1.0 + UNSTABLE_MARGIN


def oscillating_mode(
    circ: Circuit, x_dc: np.ndarray, w_guess: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The complex pole s and its eigenvector (B, n) of the circuit linearised at
    ``x_dc``: the generalised eigenproblem (G + s·C)·v = 0 by the shifted form
    (G + σC)⁻¹·C·v = v/(σ − s), σ = ``w_guess`` (B,); the eigenvalue nearest to
    j·w_guess with the largest real part among those with Im s > 0.3·w_guess."""
    _, _, jg, jc = evaluate(circ, x_dc)
    sig = w_guess[:, None, None]
    a = np.linalg.solve(jg + sig * jc, jc)
    mu, vec = np.linalg.eig(a)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = w_guess[:, None] - 1.0 / mu
    fit = (s.imag > 0.3 * w_guess[:, None]) & (s.imag < 3.0 * w_guess[:, None])
    score = np.where(fit, s.real - 1e-3 * np.abs(s.imag - w_guess[:, None]), -np.inf)
    best = np.argmax(score, axis=1)
    ar = np.arange(circ.b.shape[0])
    return s[ar, best], vec[ar, :, best]


def _without_frozen(mono: np.ndarray, vel: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """M with its *frozen* modes' multipliers set to 0: the modes other than the shift
    along the orbit (the eigenvector nearest to the velocity ``vel``) whose multiplier
    lies within :data:`FROZEN` of 1. Such a mode (the charge of a capacitor island
    behind a megohm bleed, decaying over ~1e5 periods) does not settle in any transient
    either; Newton's step along it is its residual over 1 − μ, which the orbit's other,
    unsettled modes make huge. With μ = 0 the step along it is the residual itself
    (one period of plain integration), which leaves it where the start put it. Also
    the projector off the frozen modes (the residual that must vanish)."""
    fin = np.all(np.isfinite(mono), axis=(1, 2)) & np.all(np.isfinite(vel), axis=1)
    mono = np.where(fin[:, None, None], mono, 0.0)
    vel = np.where(fin[:, None], vel, 1.0)
    mu, vec = np.linalg.eig(mono)
    inv = np.linalg.pinv(vec)
    coef = np.abs(np.einsum("bij,bj->bi", inv, vel.astype(complex)))
    norm = np.linalg.norm(vec, axis=1) * coef  # each mode's share of the velocity
    trivial = np.argmax(norm, axis=1)
    slow = np.abs(mu - 1.0) < FROZEN
    slow[np.arange(mono.shape[0]), trivial] = False
    eye = np.broadcast_to(np.eye(mono.shape[1]), mono.shape)
    if not slow.any():
        return mono, eye
    out = np.einsum("bij,bj,bjk->bik", vec, np.where(slow, 0.0, mu), inv).real
    proj = np.einsum("bij,bj,bjk->bik", vec, (~slow).astype(float), inv).real
    some = np.asarray(slow.any(axis=1))[:, None, None]
    return np.where(some, out, mono), np.where(some, proj, eye)


def _start_at_crossing(circ: Circuit, xs: np.ndarray) -> np.ndarray:
    """The state of the last period ``xs`` (N + 1, B, n) where the tank top crosses its
    mean rising (the last sample if it never does)."""
    ar = np.arange(xs.shape[1])
    v = xs[:, ar, circ.top]  # (N + 1, B)
    mid = 0.5 * (v.max(axis=0) + v.min(axis=0))
    up = (v[:-1] < mid) & (v[1:] >= mid)
    k = np.where(up.any(axis=0), np.argmax(up, axis=0) + 1, xs.shape[0] - 1)
    return xs[k, ar]  # type: ignore[no-any-return]


def periodic_orbit(
    circ: Circuit,
    x_start: np.ndarray,
    period: np.ndarray,
    *,
    steps: int = STEPS,
    warm: int = WARM,
    iterations: int = ITERATIONS,
    retry: int = RETRY_WARM,
) -> Orbit:
    """Newton on (S1)-(S2) for each circuit from ``x_start`` (B, n) and ``period`` (B,),
    after ``warm`` periods of plain integration; each element stops on its own. Where
    Newton fails, once more from ``x_start`` after ``retry`` periods (if more than
    ``warm``)."""
    orb = _orbit(circ, x_start, period, steps, warm, iterations)
    bad = np.nonzero(~orb.ok)[0]
    if bad.size == 0 or retry <= warm:
        return orb
    again = _orbit(circ.take(bad), x_start[bad], period[bad], steps, retry, iterations)
    fix = bad[again.ok]
    if fix.size == 0:
        return orb
    period, x, mult, ok = orb.period.copy(), orb.x.copy(), orb.multipliers.copy(), orb.ok.copy()
    period[fix] = again.period[again.ok]
    x[:, fix] = again.x[:, again.ok]
    mult[fix] = again.multipliers[again.ok]
    ok[fix] = True
    return Orbit(period, x, mult, ok)


def _orbit(
    circ: Circuit, x_start: np.ndarray, period: np.ndarray, steps: int, warm: int, iterations: int
) -> Orbit:
    """:func:`periodic_orbit` with one warm-up."""
    bsz, n = x_start.shape
    x0 = x_start.copy()
    t = period.astype(float).copy()
    for _ in range(warm):
        x0 = integrate(circ, x0, t, steps).x[-1]
    last = integrate(circ, x0, t, steps)
    x0 = _start_at_crossing(circ, last.x)
    ar = np.arange(bsz)
    done = np.zeros(bsz, dtype=bool)
    live = np.all(np.isfinite(x0), axis=1)
    mono = np.full((bsz, n, n), np.nan)
    for _ in range(iterations):
        act = np.nonzero(live & ~done)[0]
        if act.size == 0:
            break
        sub = circ.take(act)
        run = integrate(sub, x0[act], t[act], steps, sens=True)
        assert run.s is not None
        live[act[~run.ok]] = False
        r = run.x[-1] - x0[act]
        jac = np.zeros((act.size, n + 1, n + 1))
        vel = run.x[-1] - run.x[-2]  # along the orbit: the trivial multiplier's vector
        m_eff, proj = _without_frozen(run.s[:, :, :n], vel)
        jac[:, :n, :n] = m_eff - np.eye(n)[None]
        r_live = np.einsum("bij,bj->bi", proj, r)
        jac[:, :n, n] = run.s[:, :, n]
        jac[np.arange(act.size), n, sub.top] = 1.0
        rhs = np.concatenate([-r, np.zeros((act.size, 1))], axis=1)
        good = np.all(np.isfinite(jac), axis=(1, 2)) & run.ok
        step = np.zeros((act.size, n + 1))
        if good.any():
            step[good] = np.linalg.solve(jac[good], rhs[good][..., None])[..., 0]
        live[act[~good]] = False
        mono[act] = run.s[:, :, :n]
        dv = np.max(np.abs(step[:, :n]), axis=1)
        lim = np.minimum(1.0, _X_STEP / np.maximum(dv, 1e-300))
        lim = np.minimum(lim, _T_STEP * t[act] / np.maximum(np.abs(step[:, n]), 1e-300))
        # backtracking on the residual's norm (Dennis & Schnabel, *Numerical Methods for
        # Unconstrained Optimization and Nonlinear Equations*, 1983, sec. 6.3), off the
        # frozen modes
        n0 = np.linalg.norm(r_live, axis=1)
        frac = lim.copy()
        todo = np.nonzero(good & (n0 > 1e-7))[0]
        for _ in range(_BACKTRACK):
            if todo.size == 0:
                break
            xt = x0[act[todo]] + frac[todo, None] * step[todo, :n]
            tt = t[act[todo]] + frac[todo] * step[todo, n]
            trial = integrate(sub.take(todo), xt, tt, steps)
            rt = np.einsum("bij,bj->bi", proj[todo], trial.x[-1] - xt)
            nt = np.where(trial.ok, np.linalg.norm(rt, axis=1), np.inf)
            worse = ~(nt < n0[todo])
            frac[todo[worse]] *= 0.5
            todo = todo[worse]
        x0[act] += frac[:, None] * step[:, :n]
        t[act] += frac * step[:, n]
        lim = frac
        small = (np.max(np.abs(r_live), axis=1) < 1e-7) & (np.abs(lim * step[:, n]) < 1e-9 * t[act])
        done[act[small & good]] = True
    final = integrate(circ, x0, t, steps)
    v = final.x[:, ar, circ.top]
    swing = v.max(axis=0) - v.min(axis=0)
    ok = done & live & final.ok & (swing > 1e-3)
    mu = np.full((bsz, n - 1), np.nan, dtype=complex)
    fin = np.nonzero(np.all(np.isfinite(mono), axis=(1, 2)))[0]
    if fin.size:
        # the trivial multiplier: the mode along the orbit (its eigenvector carries the
        # velocity); with fixed steps it is 1 only up to the integration's error
        ev, vec = np.linalg.eig(mono[fin])
        vel = (final.x[-1] - final.x[-2])[fin].astype(complex)
        share = np.abs(np.einsum("bij,bj->bi", np.linalg.pinv(vec), vel))
        share *= np.linalg.norm(vec, axis=1)
        trivial = np.argmax(share, axis=1)
        keep = np.ones(ev.shape, dtype=bool)
        keep[np.arange(fin.size), trivial] = False
        rest = ev[keep].reshape(fin.size, n - 1)
        order = np.argsort(-np.abs(rest), axis=1, kind="stable")
        mu[fin] = np.take_along_axis(rest, order, axis=1)
    return Orbit(t, final.x, mu, ok)
