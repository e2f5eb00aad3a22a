"""The linear model's surrogate for the Monte Carlo: (S1)-(S3) of :mod:`picker.circuit.loaded`.

Per design, at its nominal point, the ratio r = f_loaded/f_ideal and the start-up margin
m of the linear model (:func:`loaded_nominal`) expanded in the log deviations of the
parts by finite differences; the module docstring of :mod:`picker.circuit.loaded` states
the expansions (S1)-(S3) and how the Monte Carlo uses them.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import LoadedResponse
from picker.circuit.oscillation import loaded_response
from picker.tank.base import Topology
from picker.tank.board import Parasitics, board_frequency, board_values

#: Central-difference step in ln x for the surrogate's sensitivities.
SURROGATE_STEP = 0.01

__all__ = [
    "SURROGATE_STEP",
    "Surrogate",
    "fit_surrogate",
    "loaded_nominal",
    "surrogate_logs",
    "surrogate_response",
]


def loaded_nominal(
    topology: Topology,
    values: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
) -> LoadedResponse:
    """Loaded frequency (Hz) and start-up margin of boards with *marked* values ``values``.

    The parasitics are applied first (:func:`picker.tank.board.board_values`:
    shunts across C1 and C2, inductance scale), the stray goes across L.
    Unpacks as ``f_loaded, margin``; shapes follow ``values``.
    """
    bv = board_values(
        topology, {p: np.asarray(values[p], dtype=float) for p in topology.positions}, parasitics
    )
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return loaded_response(topology, bv, parasitics.stray, params)


# ----------------------------------------------------------------------------- surrogate


@dataclass(frozen=True)
class Surrogate:
    """Per-design coefficients of (S1), (S2) and (S3); every array has shape (n,).

    ``nominal`` holds the marked values the expansion is taken at, ``k`` and
    ``m`` the log-sensitivities of the ratio and the margin per position, ``q``
    the second-order coefficients of ln r per monomial (p, q) with p <= q in
    position order (½·∂²ln r/∂ln x_p² on the diagonal, ∂²ln r/∂ln x_p∂ln x_q off
    it), ``valid`` marks designs the surrogate may be used for.
    """

    nominal: dict[str, np.ndarray]
    ln_r0: np.ndarray
    k: dict[str, np.ndarray]
    ln_m0: np.ndarray
    m: dict[str, np.ndarray]
    q: dict[tuple[str, str], np.ndarray]
    valid: np.ndarray

    def take(self, sel: Any) -> Surrogate:
        return Surrogate(
            {p: a[sel] for p, a in self.nominal.items()},
            self.ln_r0[sel],
            {p: a[sel] for p, a in self.k.items()},
            self.ln_m0[sel],
            {p: a[sel] for p, a in self.m.items()},
            {pq: a[sel] for pq, a in self.q.items()},
            self.valid[sel],
        )

    def row(self, j: int) -> np.ndarray:
        """All coefficients of design ``j`` as one vector (see :meth:`from_rows`)."""
        head = [self.ln_r0[j], self.ln_m0[j], float(self.valid[j])]
        k = [self.k[p][j] for p in self.k]
        m = [self.m[p][j] for p in self.m]
        return np.array(head + k + m + [v[j] for v in self.q.values()])

    @classmethod
    def from_rows(
        cls, positions: Sequence[str], nominal: dict[str, np.ndarray], rows: np.ndarray
    ) -> Surrogate:
        k = len(positions)
        pairs = _pairs(positions)
        return cls(
            nominal,
            rows[:, 0],
            {p: rows[:, 3 + i] for i, p in enumerate(positions)},
            rows[:, 1],
            {p: rows[:, 3 + k + i] for i, p in enumerate(positions)},
            {pq: rows[:, 3 + 2 * k + i] for i, pq in enumerate(pairs)},
            rows[:, 2] > 0.5,
        )


def _pairs(positions: Sequence[str]) -> list[tuple[str, str]]:
    return [(p, q) for i, p in enumerate(positions) for q in positions[i:]]


def fit_surrogate(
    topology: Topology,
    nominal: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
    *,
    step: float = SURROGATE_STEP,
) -> Surrogate:
    """Coefficients of (S1)-(S3) by finite differences of the full model.

    One call of :func:`loaded_nominal` on n·(2k + 1 + k(k−1)/2) boards (k
    positions): the nominal point, x_i·exp(±h) for each position (central
    differences for K_i, M_i and the diagonal second derivatives) and
    (x_i·exp(h), x_j·exp(h)) for each pair (the mixed derivative
    [g(+i,+j) − g(+i) − g(+j) + g(0)]/h², first order in h).
    """
    pos = topology.positions
    nom = {p: np.asarray(nominal[p], dtype=float).reshape(-1) for p in pos}
    k = len(pos)
    cross = [(i, j) for i in range(k) for j in range(i + 1, k)]
    scale = np.ones((2 * k + 1 + len(cross), 1, k))
    for i in range(k):
        scale[1 + 2 * i, 0, i] = math.exp(step)
        scale[2 + 2 * i, 0, i] = math.exp(-step)
    for c, (i, j) in enumerate(cross):
        scale[2 * k + 1 + c, 0, i] = scale[2 * k + 1 + c, 0, j] = math.exp(step)
    probe = {p: (nom[p][None, :] * scale[:, :, i]) for i, p in enumerate(pos)}
    f_l, marg = loaded_nominal(topology, probe, parasitics, params)
    f_i = board_frequency(topology, probe, parasitics)
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_r = np.log(f_l / f_i)
        ln_m = np.log(marg)
    ok = np.all(np.isfinite(ln_r) & np.isfinite(ln_m), axis=0)
    ln_r = np.where(ok, ln_r, 0.0)
    ln_m = np.where(ok, ln_m, 0.0)
    kk = {p: (ln_r[1 + 2 * i] - ln_r[2 + 2 * i]) / (2 * step) for i, p in enumerate(pos)}
    mm = {p: (ln_m[1 + 2 * i] - ln_m[2 + 2 * i]) / (2 * step) for i, p in enumerate(pos)}
    qq = {}
    for i, p in enumerate(pos):
        qq[(p, p)] = 0.5 * (ln_r[1 + 2 * i] + ln_r[2 + 2 * i] - 2 * ln_r[0]) / step**2
    for c, (i, j) in enumerate(cross):
        g = ln_r[2 * k + 1 + c] - ln_r[1 + 2 * i] - ln_r[1 + 2 * j] + ln_r[0]
        qq[(pos[i], pos[j])] = g / step**2
    return Surrogate(nom, ln_r[0], kk, ln_m[0], mm, {pq: qq[pq] for pq in _pairs(pos)}, ok)


def _ln_ideal(topology: Topology, vals: Mapping[str, np.ndarray], par: Parasitics) -> Any:
    """ln f of the ideal tank on board values: −ln 2π − ½·ln(L·C_eff) (Thomson's formula);
    a board's own stray (key ``"stray"``, ``[parasitics] stray_tolerance``) where ``vals``
    holds one."""
    bv = board_values(topology, vals, par)
    lc = topology.l_eff(bv) * topology.c_eff(bv, vals.get("stray", par.stray))
    return -math.log(2 * math.pi) - 0.5 * np.log(lc)


def surrogate_logs(
    topology: Topology,
    sur: Surrogate,
    vals: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    *,
    second_order: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """ln f_loaded by (S1) (or (S3) with ``second_order``) and ln margin by (S2).

    ``vals``: position -> marked values (with tolerance and drift) whose last axis
    runs over the designs of ``sur`` (e.g. (samples, c)). Only meaningful where
    ``sur.valid``.
    """
    pos = topology.positions
    ln_f = _ln_ideal(topology, vals, parasitics)
    ln_f += sur.ln_r0
    ln_m = np.broadcast_to(sur.ln_m0, ln_f.shape).copy()
    x = {}
    for p in pos:
        lnd = np.log(vals[p] / sur.nominal[p])
        ln_f += sur.k[p] * lnd
        ln_m += sur.m[p] * lnd
        x[p] = lnd
    if second_order:
        for (p, q), c in sur.q.items():
            ln_f += c * x[p] * x[q]
    return ln_f, ln_m


def surrogate_response(
    topology: Topology,
    sur: Surrogate,
    vals: Mapping[str, np.ndarray],
    parasitics: Parasitics,
) -> tuple[np.ndarray, np.ndarray]:
    """Loaded frequency (Hz) and margin of sampled boards by (S1)/(S2), each (samples, c)."""
    ln_f, ln_m = surrogate_logs(topology, sur, vals, parasitics)
    return np.exp(ln_f), np.exp(ln_m)
