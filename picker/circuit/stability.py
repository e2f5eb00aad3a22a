"""Start-up as a stability test: the natural frequencies of the linearised closed loop.

The linearised oscillator is a linear circuit; it starts when one of its natural
frequencies (a root of det(Y(s) + gm stamp) = det(Y(s))·(1 − T(s)), assumption 2
of :mod:`picker.circuit.network`) lies in the right half-plane. The passive network
Y alone is stable (it is built of resistors, capacitors and inductors), so by the
Nyquist criterion (Nyquist, "Regeneration theory", Bell Syst. Tech. J. 11, 1932;
in the form Z = N + P with P = 0 open-loop poles in the right half-plane) the
number of right-half-plane roots of 1 − T equals the number of clockwise
encirclements of the point +1 by T(jω), ω from −∞ to ∞. By the symmetry
T(−jω) = conj T(jω) this is twice the net number of crossings of the ray (1, ∞)
on the positive real axis for ω > 0, each counted +1 where Im T goes from
positive to negative (a pole pair moving into the right half-plane as gm grows)
and −1 the other way:

    pole pairs in the right half-plane = Σ_k d_k·[T_k > 1]                  (N1)

with T_k the (real) value of T at the k-th zero-phase crossing and d_k its
direction. Scaling gm by g moves the crossings' values to g·T_k, so (N1) with
g·T_k tells for every g how many pole pairs are unstable; the **margin** is the
factor gm may fall by before the count drops to zero (the |T_k| of the crossing
where the last pole pair leaves), which equals the loaded model's |T| at its
zero-phase crossing wherever that crossing is the only one.

"|T| > 1 at a zero-phase crossing" is not this test: with two crossings beyond +1
in opposite directions there is no net encirclement and the circuit is stable
(tests/test_stability.py builds one and checks it against the eigenvalues of a
state matrix).

**Which mode the oscillator runs in.** Where more than one pole pair lies in the
right half-plane (a collector choke's resonance or a low mode beside the tank's), each
pair is followed from its own crossing k (T_k > 1, d_k = +1) to the actual gm, and the
mode is chosen by the two-mode theory of an oscillator whose modes share one saturating
device (van der Pol, "The nonlinear theory of electric oscillations", Proc. IRE 22,
1934, oscillations of a system with two degrees of freedom [memory for the section];
the same mode competition as in Lamb's theory of the multimode laser, Phys. Rev. 134,
A1429, 1964 [memory]). With the device's current compressing as i(v) = g1·(v − c·v³) (the
leading terms of any smooth odd compression) and its input v = A_i·cos ω_i t +
A_j·cos ω_j t (incommensurate ω_i, ω_j), the component of i at ω_i is
g1·A_i·(1 − c·(3/4·A_i² + 3/2·A_j²)): the other mode compresses a mode's gain twice as
much as the mode itself does (the cross-saturation factor 2, derived here and checked
by a discrete Fourier transform in tests/test_mode_competition.py). Mode i alone settles
where 3/4·c·A_i² = 1 − 1/m_i = e_i (its *excess gain*; m_i = T_k of its crossing, the
factor gm may fall by before that mode stops growing); a small mode j then sees the gain
g1·(1 − 2·e_i) and grows on it iff m_j·(1 − 2·e_i) > 1, i.e.

    mode j invades mode i's steady state  ⇔  e_j > 2·e_i                      (M1)

A mode whose steady state no other mode invades is a stable single-mode state; at
least one exists (the mode of the largest e). Among the stable states the oscillator
reaches the one whose mode grows fastest from the start-up disturbance (the largest
real part of the pole at the actual gm): it takes the device's gain first and, once its
amplitude compresses the gain, the other modes no longer grow (M1). So

    the running mode = the fastest-growing (largest Re s) of the modes that no
                       other mode invades by (M1)                              (M2)

(M2) is the cubic approximation: a bipolar junction's exponential law with its bias
current held by R_E compresses a second mode less (the mean of the incremental
transconductance i_C(t)/V_T stays I_C/V_T, derived here), and two modes may then run
together (ngspice shows both on the common-base Clapp cb003 of tests/validation/; the
fastest-growing one is the tank's, as (M2) says; the record reads the choke's). A study of
91 random designs with two growing modes run in ngspice (tests/validation/mode_study*.md,
scripts/mode_study.py) found (M2) right on 67 and "the largest margin wins" on 65
(bipolar 40 and 40 of 55, fet 27 and 25 of 36; common-base 20 and 20 of 35): neither
rule is the better, and (M2) is kept. The margin keeps its
meaning (the gm factor at which the last pole pair leaves the right half-plane); the
start-up pole and its crossing are those of the mode (M2) picks.

The crossings are found on a grid of frequencies: a geometric grid over
0.05 … 20 times the ideal tank frequency, refined around each open-loop pole
(the tank's, and the strongest peak of |T| on the coarse grid, e.g. a collector
choke's resonance) over ±12 half-bandwidths; each bracket is refined by the
Illinois method (:func:`picker.circuit.oscillation.refine_zero_phase`). The
closed-loop pole itself (its frequency at start-up and its growth rate) is then
found by a complex secant iteration on 1/T(s) − 1 = 0 from the crossing.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import Network
from picker.circuit.oscillation import CHUNK, refine_zero_phase, tank_pole
from picker.tank.base import TWO_PI, Topology

__all__ = [
    "CROSS_SATURATION",
    "Startup",
    "closed_loop_pole",
    "pole_from_crossing",
    "running_mode",
    "startup",
    "startup_chunk",
]

_COARSE = np.geomspace(0.05, 20.0, 121)  # multiples of the ideal tank frequency
_LOCAL = np.linspace(-12.0, 12.0, 33)  # around an open-loop pole, in its half-bandwidths
_SECANT_IT = 40
_TURN = 0.5  # largest turn of the phase of T over a grid interval, rad
_SPLITS = 10
#: How much more a mode's gain is compressed by another mode's amplitude than by its own
#: (the cubic's cross- over self-saturation, (M1) of the module docstring).
CROSS_SATURATION = 2.0


@dataclass(frozen=True)
class Startup:
    """The linearised closed loop of boards (1-D arrays, one per element).

    ``starts``: a pole pair lies in the right half-plane (N1). ``margin``: see the module
    docstring (for a board that does not start: the largest T_k ≤ 1 whose crossing
    would start it, 0 where none). ``w_cross``: the zero-phase frequency (rad/s) of the
    crossing of the mode the board runs in ((M2); where one mode grows, the crossing
    that sets the margin; for a board that does not start, the crossing that would
    start it; NaN where none). ``pole``: that mode's closed-loop natural frequency at
    the actual gm (complex, rad/s; NaN where not found); its real part is the start-up
    growth rate. ``pairs``: the number of pole pairs in the right half-plane.
    """

    starts: np.ndarray
    margin: np.ndarray
    w_cross: np.ndarray
    pole: np.ndarray
    pairs: np.ndarray


def _t(s: np.ndarray, net: Network, idx: np.ndarray) -> np.ndarray:
    return net.return_ratio(s, idx)  # type: ignore[no-any-return]


def closed_loop_pole(
    net: Network,
    idx: np.ndarray,
    s0: np.ndarray,
    s1: np.ndarray,
    gain: np.ndarray | float = 1.0,
) -> tuple[np.ndarray, np.ndarray]:
    """A root of 1/(g·T(s)) − 1 (a natural frequency of the closed loop with the controlled
    source scaled by ``gain`` g) by the complex secant method from ``s0``, ``s1`` (one per
    element of ``idx``); returns (s, ok).

    Near a tank mode 1/T is close to linear in s (T has a simple pole there), so the
    secant method converges in a few steps from a point near the mode.
    """
    g = np.broadcast_to(np.asarray(gain, dtype=float), s0.shape)
    h0 = 1.0 / (g * _t(s0, net, idx)) - 1.0
    h1 = 1.0 / (g * _t(s1, net, idx)) - 1.0
    done = np.zeros(s0.shape, dtype=bool)
    for _ in range(_SECANT_IT):
        dh = h1 - h0
        good = (dh != 0) & np.isfinite(dh) & ~done
        step = np.where(good, h1 * (s1 - s0) / np.where(good, dh, 1.0), 0.0)
        s0, h0 = np.where(good, s1, s0), np.where(good, h1, h0)
        s1 = s1 - step
        done |= np.abs(step) <= 1e-13 * np.abs(s1)
        live = np.nonzero(good)[0]
        if live.size == 0:
            break
        h1 = h1.copy()
        h1[live] = 1.0 / (g[live] * _t(s1[live], net, idx[live])) - 1.0
    ok = np.isfinite(s1) & (np.abs(h1) <= 1e-8) & (s1.imag > 0)
    return s1, ok


def pole_from_crossing(
    net: Network, idx: np.ndarray, w_cross: np.ndarray, margin: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The closed-loop pole at the actual gm, followed from the crossing: at g = 1/margin
    it sits at j·w_cross; g is raised to 1 in steps of at most a factor 1.5, each a
    secant solve from the pole of the step before (continuation). Returns (s, ok)."""
    # each element's own number of steps (a result independent of the other elements)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = np.log(np.maximum(np.where(np.isfinite(margin), margin, 1.0), 1.0))
    steps = np.maximum(np.ceil(lm / np.log(1.5)), 1.0)
    s = np.array(1j * w_cross, dtype=complex)
    ok = np.ones(idx.shape, dtype=bool)
    for i in range(1, int(steps.max(initial=1.0)) + 1):
        e = np.nonzero(steps >= i)[0]
        g = margin[e] ** (i / steps[e] - 1.0)
        se = s[e]
        s_new, ok_i = closed_loop_pole(net, idx[e], se, se * (1.0 + 1e-4) + 1e-4 * se.imag, g)
        ok[e] &= ok_i
        s[e] = np.where(ok_i, s_new, se)
    return s, ok


def _grid(net: Network, idx: np.ndarray, w0: np.ndarray) -> np.ndarray:
    """Frequencies (points × elements, sorted per element) to look for crossings on."""
    coarse = w0[None, :] * _COARSE[:, None]
    t = np.stack([_t(1j * w, net, idx) for w in coarse])
    vals = {p: net.el[p][idx] for p in net.topology.positions}
    loaded = net.stage.loaded_tank(net.topology, vals, net.ss)
    w_est = TWO_PI * net.topology.frequency(loaded, net.el["stray"][idx])
    peak = coarse[np.argmax(np.abs(t), axis=0), np.arange(idx.size)]
    parts = [coarse]
    for start in (w_est, peak):
        sp, ok = tank_pole(start, net, idx)
        wp = np.where(ok, sp.imag, start)
        sig = np.where(ok, np.maximum(-sp.real, 1e-6 * wp), 2e-3 * wp)
        parts.append(np.maximum(wp[None, :] + sig[None, :] * _LOCAL[:, None], 1e-3 * wp))
    return np.sort(np.concatenate(parts), axis=0)


def _crossings(
    net: Network, idx: np.ndarray, grid: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Every zero-phase crossing of T on ``grid``, refined: (element, ω, T_k, d_k), flat.

    Intervals where the phase of T turns by more than :data:`_TURN` are halved (up to
    :data:`_SPLITS` times), so that a crossing through 0 is told from one through ±π
    however fast the phase turns.
    """
    t = np.stack([_t(1j * w, net, idx) for w in grid])
    npts = grid.shape[0]
    col = np.repeat(np.arange(idx.size)[None, :], npts - 1, axis=0).ravel()
    wa, wb = grid[:-1].ravel(), grid[1:].ravel()
    ta, tb = t[:-1].ravel(), t[1:].ravel()
    for _ in range(_SPLITS):
        turn = np.abs(np.angle(tb / ta))
        wide = np.nonzero((turn > _TURN) & np.isfinite(turn) & (wb > wa))[0]
        if wide.size == 0:
            break
        wm = 0.5 * (wa[wide] + wb[wide])
        tm = _t(1j * wm, net, idx[col[wide]])
        col = np.concatenate([col, col[wide]])
        wa = np.concatenate([wa, wm])
        wb = np.concatenate([wb, wb[wide]])
        ta = np.concatenate([ta, tm])
        tb = np.concatenate([tb, tb[wide]])
        wb[wide], tb[wide] = wm, tm
    pa, pb = np.angle(ta), np.angle(tb)
    cross = (np.sign(pa) != np.sign(pb)) & (np.abs(pa - pb) < np.pi)
    cross &= np.isfinite(pa) & np.isfinite(pb)
    k = np.nonzero(cross)[0]
    if k.size == 0:
        empty = np.zeros(0)
        return np.zeros(0, dtype=int), empty, empty, empty
    sub = idx[col[k]]
    w = refine_zero_phase(wa[k], wb[k], pa[k], pb[k], net, sub)
    tk = _t(1j * w, net, sub).real
    d = np.where(pa[k] > pb[k], 1.0, -1.0)  # Im T from + to −: a pole pair moves right (N1)
    return col[k], w, tk, d


def running_mode(col: np.ndarray, growth: np.ndarray, excess: np.ndarray, n: int) -> np.ndarray:
    """The index of the mode each of ``n`` elements runs in by (M2) of the module
    docstring, -1 where it has none.

    The modes are flat arrays: ``col`` the element each belongs to, ``growth`` its
    growth rate (Re s at the actual gm; NaN for a mode not found, which is left out)
    and ``excess`` its excess gain e = 1 − 1/m. Mode i is a stable single-mode state
    unless another mode j of its element has e_j > 2·e_i (M1); of the stable states
    the fastest-growing is chosen (ties: the first)."""
    good = np.isfinite(growth) & np.isfinite(excess)
    e_max = np.full(n, -np.inf)
    np.maximum.at(e_max, col[good], excess[good])
    # the largest e of the element's *other* modes is e_max unless the mode holds it;
    # a mode holding e_max is never invaded (e_max > 2·e_max is false for e > 0)
    stable = good & ~(e_max[col] > CROSS_SATURATION * excess)
    best = np.full(n, -np.inf)
    np.maximum.at(best, col[stable], growth[stable])
    pick = np.full(n, -1)
    hit = np.nonzero(stable & (growth == best[col]))[0][::-1]  # the first of equals wins
    pick[col[hit]] = hit
    return pick


def startup_chunk(net: Network, idx: np.ndarray) -> Startup:
    """:class:`Startup` of the elements ``idx`` of ``net`` (see the module docstring)."""
    n = idx.size
    el, topology = net.el, net.topology
    w0 = TWO_PI * topology.frequency({p: el[p][idx] for p in topology.positions}, el["stray"][idx])
    col, w, tk, d = _crossings(net, idx, _grid(net, idx, w0))
    count = np.bincount(col, minlength=n)
    kmax = max(int(count.max()) if n else 0, 1)
    order = np.lexsort((tk, col))
    col, w, tk, d = col[order], w[order], tk[order], d[order]
    first = np.concatenate(([0], np.cumsum(count)[:-1]))
    pos = np.arange(col.size) - first[col]
    tpad = np.full((n, kmax), np.inf)
    dpad = np.zeros((n, kmax))
    wpad = np.full((n, kmax), np.nan)
    tpad[col, pos], dpad[col, pos], wpad[col, pos] = tk, d, w
    # suffix[j] = Σ_{k ≥ j} d_k: the pole pairs in the right half-plane when 1/g ∈ (T_{j−1}, T_j)
    suffix = np.concatenate([np.cumsum(dpad[:, ::-1], axis=1)[:, ::-1], np.zeros((n, 1))], axis=1)
    j0 = np.sum(tpad <= 1.0, axis=1)
    rows = np.arange(n)
    pairs = suffix[rows, j0]
    starts = pairs > 0
    ks = np.arange(kmax)[None, :]
    # starting: the first crossing at or above j0 below which no pole pair is left
    stop = (ks >= j0[:, None]) & (suffix[:, 1:] <= 0) & np.isfinite(tpad)
    j_up = np.where(stop.any(axis=1), np.argmax(stop, axis=1), 0)
    # not starting: the nearest crossing below j0 that would start it as gm grows
    would = (ks < j0[:, None]) & (suffix[:, :-1] > 0)
    j_dn = np.where(would.any(axis=1), kmax - 1 - np.argmax(would[:, ::-1], axis=1), -1)
    j = np.where(starts, j_up, j_dn)
    has = np.where(starts, stop.any(axis=1), j_dn >= 0)
    jj = np.maximum(j, 0)
    margin = np.where(has, tpad[rows, jj], 0.0)
    w_cross = np.where(has, wpad[rows, jj], np.nan)
    pole = np.full(n, np.nan + 0j)
    # the growing modes: each crossing into the right half-plane below gm (T_k > 1,
    # d_k = +1) followed to the actual gm; the board runs in the mode (M2) picks
    cand = np.nonzero((starts & has)[col] & (d > 0) & (tk > 1.0) & np.isfinite(w))[0]
    if cand.size:
        cc = col[cand]
        s, ok = pole_from_crossing(net, idx[cc], w[cand], tk[cand])
        s = np.where(ok & (s.real > 0), s, np.nan)
        pick = running_mode(cc, s.real, 1.0 - 1.0 / tk[cand], n)
        mine = pick >= 0
        pole[mine] = s[pick[mine]]
        w_cross = np.where(mine, w[cand][np.maximum(pick, 0)], w_cross)
    return Startup(starts & has, margin, w_cross, pole, pairs)


def startup(
    topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams
) -> tuple[Network, Startup]:
    """The network of boards ``values`` (flattened) and its :class:`Startup`, in chunks of
    :data:`picker.circuit.oscillation.CHUNK` elements."""
    net = Network.build(topology, values, stray, params)
    parts = [
        startup_chunk(net, np.arange(a, min(a + CHUNK, net.size)))
        for a in range(0, net.size, CHUNK)
    ]
    if not parts:
        z = np.zeros(0)
        return net, Startup(z.astype(bool), z, z, z.astype(complex), z)
    return net, Startup(
        *(np.concatenate([getattr(p, f) for p in parts]) for f in Startup.__dataclass_fields__)
    )
