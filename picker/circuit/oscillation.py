"""Oscillation frequency and start-up margin: the zero-phase crossing of the loop gain.

The loop gain T(jω) of the loaded oscillator (:mod:`picker.circuit.network`)
crosses zero phase near the tank frequency; the board oscillates there when
|T| > 1 (assumption 3 of :mod:`picker.circuit.network`). This module finds that
crossing for millions of boards at once: it locates the tank's complex pole,
brackets the crossing around it and refines each bracket with the Illinois
method, all vectorised over the boards, in chunks of :data:`CHUNK`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import LoadedResponse, Network
from picker.tank.base import TWO_PI, Topology

__all__ = ["CHUNK", "bracket_zero_phase", "loaded_response", "refine_zero_phase", "tank_pole"]

CHUNK = 1 << 15  # elements per vectorised block (memory bound: ~30 complex arrays of this size)

_GRID = np.geomspace(0.3, 2.0, 25)  # fallback bracket search, multiples of the ideal frequency
_LOCAL = np.linspace(-4.0, 4.0, 9)  # bracket search around the tank pole, in units of its σ
_MAXIT = 60
_XTOL = 1e-11  # relative frequency tolerance of the root finder


def _t(s: np.ndarray, net: Network, idx: np.ndarray) -> np.ndarray:
    """T at ``s`` for the elements ``idx`` (the stage's closed form)."""
    return net.return_ratio(s, idx)  # type: ignore[no-any-return]


def tank_pole(w_est: np.ndarray, net: Network, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Complex natural frequency s_p of the passive tank mode nearest j·w_est.

    T has a pole there, so 1/T is close to linear in s around it; a complex
    secant iteration on 1/T (analytic in s) converges from j·w_est in a few
    steps however high the tank's Q. Returns (s_p, ok).
    """
    s0 = 1j * w_est
    s1 = w_est * (-1e-3 + 1.01j)
    h0 = 1.0 / _t(s0, net, idx)
    h1 = 1.0 / _t(s1, net, idx)
    # each element stops on its own step (a result independent of the other elements)
    done = np.zeros(s0.shape, dtype=bool)
    for _ in range(30):
        live = np.nonzero(~done)[0]
        if live.size == 0:
            break
        dh = h1[live] - h0[live]
        step = np.where(dh != 0, h1[live] * (s1[live] - s0[live]) / np.where(dh != 0, dh, 1.0), 0)
        s0[live], h0[live] = s1[live], h1[live]
        s1[live] = s1[live] - step
        h1[live] = 1.0 / _t(s1[live], net, idx[live])
        done[live] = np.abs(step) <= 1e-12 * np.abs(s1[live])
    ok = (
        np.isfinite(s1)
        & (np.abs(s1 - s0) <= 1e-9 * np.abs(s1))
        & (s1.real < 0)
        & (np.abs(s1.imag - w_est) < 0.7 * w_est)
    )
    return s1, ok


def bracket_zero_phase(
    w_grid: np.ndarray, net: Network, idx: np.ndarray, w_ref: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """On a grid (points × elements) of frequencies, the zero-phase crossing of T
    (sign change of the phase by less than π, i.e. through 0 and not through ±π)
    nearest ``w_ref``."""
    t = np.stack([_t(1j * w, net, idx) for w in w_grid])
    ph = np.angle(t)
    cross = (np.sign(ph[:-1]) != np.sign(ph[1:])) & (np.abs(ph[:-1] - ph[1:]) < np.pi)
    mid = 0.5 * (w_grid[:-1] + w_grid[1:])
    dist = np.where(cross, np.abs(np.log(mid / w_ref)), np.inf)
    k = np.argmin(dist, axis=0)
    cols = np.arange(w_ref.shape[0])
    found = np.isfinite(dist[k, cols])
    return found, w_grid[k, cols], w_grid[k + 1, cols], ph[k, cols], ph[k + 1, cols]


def refine_zero_phase(
    a: np.ndarray, b: np.ndarray, fa: np.ndarray, fb: np.ndarray, net: Network, idx: np.ndarray
) -> np.ndarray:
    """Illinois (modified regula falsi; Dowell & Jarratt, BIT 11, 1971) on the phase
    of T over brackets [a, b], all elements at once."""
    a, b, fa, fb = (np.array(x, dtype=float) for x in (a, b, fa, fb))
    # each element stops on its own tolerance (a result independent of the other elements)
    live = np.arange(b.shape[0])
    for _ in range(_MAXIT):
        if live.size == 0:
            break
        la, lb, lfa, lfb = a[live], b[live], fa[live], fb[live]
        denom = lfb - lfa
        safe = np.where(denom != 0, denom, 1.0)
        c = np.where(denom != 0, lb - lfb * (lb - la) / safe, 0.5 * (la + lb))
        c = np.clip(c, np.minimum(la, lb), np.maximum(la, lb))
        fc = np.angle(_t(1j * c, net, idx[live]))
        flip = np.sign(fc) != np.sign(lfb)
        a[live] = np.where(flip, lb, la)
        fa[live] = np.where(flip, lfb, 0.5 * lfa)
        step = np.abs(c - lb)
        b[live], fb[live] = c, fc
        done = (step <= _XTOL * c) | (np.abs(c - a[live]) <= _XTOL * c) | (fc == 0)
        live = live[~done]
    return b


def _root_chunk(net: Network, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Zero-phase frequency (rad/s) and |T| there for the elements ``idx``; NaN/0 where none.

    1. Locate the tank's complex pole s_p = −σ + jω_p (:func:`tank_pole`), starting
       from the ideal tank loaded by the device capacitances
       (:meth:`picker.circuit.stages.base.Stage.loaded_tank`).
    2. Bracket the zero-phase crossing on ω_p + σ·(−4 … 4); where none is found there,
       fall back to a grid of 0.3 … 2 times the ideal frequency.
    3. Refine every bracket with the Illinois method on the phase of T.
    """
    el, topology = net.el, net.topology
    vals = {p: el[p][idx] for p in topology.positions}
    w0 = TWO_PI * topology.frequency(vals, el["stray"][idx])
    loaded = net.stage.loaded_tank(topology, vals, net.ss)
    w_est = TWO_PI * topology.frequency(loaded, el["stray"][idx])
    sp, ok_pole = tank_pole(w_est, net, idx)
    wp = np.where(ok_pole, sp.imag, w_est)
    sigma = np.where(ok_pole, np.maximum(-sp.real, 1e-9 * wp), 1e-3 * wp)
    grid = wp[None, :] + sigma[None, :] * _LOCAL[:, None]
    grid = np.maximum(grid, 1e-3 * wp[None, :])
    found, a, b, fa, fb = bracket_zero_phase(grid, net, idx, wp)
    miss = np.nonzero(~found)[0]
    if miss.size:
        sub = idx[miss]
        g2 = w0[miss][None, :] * _GRID[:, None]
        f2, a2, b2, fa2, fb2 = bracket_zero_phase(g2, net, sub, wp[miss])
        found[miss], a[miss], b[miss], fa[miss], fb[miss] = f2, a2, b2, fa2, fb2
    w = np.full(idx.shape[0], np.nan)
    m = np.zeros(idx.shape[0])
    hit = np.nonzero(found)[0]
    if hit.size:
        sub = idx[hit]
        wr = refine_zero_phase(a[hit], b[hit], fa[hit], fb[hit], net, sub)
        t = _t(1j * wr, net, sub)
        good = (t.real > 0) & (np.abs(t.imag) <= 1e-6 * np.abs(t))
        w[hit] = np.where(good, wr, np.nan)
        m[hit] = np.where(good, np.abs(t), 0.0)
    return w, m


def loaded_response(
    topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams
) -> LoadedResponse:
    """Oscillation frequency and start-up margin of the loaded oscillator.

    Parameters
    ----------
    topology:
        A registered tank topology (:data:`picker.tank.TOPOLOGIES`).
    values:
        Position → array of part values in SI units (F, H); any broadcastable shapes.
    stray:
        Stray capacitance across the inductor, F (scalar or broadcastable array).
    params:
        The amplifier (:class:`picker.circuit.amplifier.AmplifierParams`); its stage
        comes from :func:`picker.circuit.stages.stage_of`.

    Returns
    -------
    LoadedResponse
        ``f_hz`` (Hz) and ``margin`` (|T| at the zero-phase frequency), both of the
        broadcast shape of ``values``. Computed in chunks of ``CHUNK`` elements, so
        memory stays bounded for millions of boards.
    """
    net = Network.build(topology, values, stray, params)
    n = net.size
    f = np.empty(n)
    m = np.empty(n)
    for start in range(0, n, CHUNK):
        sl = slice(start, min(start + CHUNK, n))
        w, m[sl] = _root_chunk(net, np.arange(sl.start, sl.stop))
        f[sl] = w / TWO_PI
    return LoadedResponse(f.reshape(net.shape), m.reshape(net.shape))
