"""First-order propagation of part spreads to ln f: variance shares and temperature drift.

First order (JCGM 100:2008, 5.1.2, law of propagation of uncertainty, for
uncorrelated inputs): ln f varies as Σ S_i·δ_i with S_i = ∂ln f/∂ln x_i and
δ_i the relative deviation of part i, so

    var(ln f) ≈ Σ (S_i·σ_i)² + σ_T²,   share_i = (S_i·σ_i)² / var(ln f),

where σ_i is the relative standard deviation of part i
(:func:`picker.parts.distributions.std_of`) and σ_T the standard deviation of the
temperature-induced change of ln f at the temperature where it is largest
(:func:`temperature_std`). A systematic drift (the mean of a tempco) moves
every board alike; it is not variance and is reported by
:func:`temperature_shift` instead. The Monte Carlo confirmation of the shares
is :func:`picker.production.drivers.regression_fit`.

Shapes: sensitivities and standard deviations are scalars or (candidates,).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike

from picker.parts.drift import Material, drift_moments

#: Name of temperature's share beside the part positions.
TEMPERATURE = "temperature"


def _normalise(var: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Shares of the total: 0 where there is no spread, NaN where the total is not finite."""
    total = sum(var.values())
    with np.errstate(invalid="ignore", divide="ignore"):
        return {
            k: np.where(
                np.isfinite(total),
                np.where(total > 0, v / np.where(total > 0, total, 1.0), 0.0),
                np.nan,
            )
            for k, v in var.items()
        }


def first_order_variances(
    sens: Mapping[str, ArrayLike],
    rel_std: Mapping[str, ArrayLike],
    temperature_std: ArrayLike | None = None,
) -> dict[str, np.ndarray]:
    """Contributions (S_i·σ_i)² to var(ln f), and σ_T² under ``"temperature"``.

    Parameters
    ----------
    sens : mapping position -> array, shape (candidates,) or scalar
        S_i = ∂ln f/∂ln x_i (``picker.tank.base.Topology.sensitivities``).
    rel_std : mapping position -> array, shape (candidates,) or scalar
        Relative standard deviation of each position (``distributions.std_of``).
        A position missing here contributes nothing (an exact part).
    temperature_std : array, optional
        σ_T from :func:`temperature_std`; omitted when ``None``.

    Returns
    -------
    dict name -> numpy.ndarray, shape (candidates,) (or () for scalar input)
    """
    out = {}
    for p, s in sens.items():
        sig = np.asarray(rel_std.get(p, 0.0), dtype=float)
        out[p] = (np.asarray(s, dtype=float) * sig) ** 2
    if temperature_std is not None:
        out[TEMPERATURE] = np.asarray(temperature_std, dtype=float) ** 2
    shape = np.broadcast_shapes(*(np.shape(v) for v in out.values()))
    return {k: np.broadcast_to(v, shape).astype(float) for k, v in out.items()}


def first_order_shares(
    sens: Mapping[str, ArrayLike],
    rel_std: Mapping[str, ArrayLike],
    temperature_std: ArrayLike | None = None,
) -> dict[str, np.ndarray]:
    """Each position's (and temperature's) share of var(ln f), first order.

    Same parameters as :func:`first_order_variances`. The shares sum to one
    for every candidate (all zero for a candidate with no spread at all; all NaN
    where a sensitivity is NaN, as the loaded model's is for a design with no
    steady frequency).

    Returns
    -------
    dict name -> numpy.ndarray, shape (candidates,)

    Examples
    --------
    >>> sh = first_order_shares({"L": -0.5, "C": -0.5}, {"L": 0.02, "C": 0.01})
    >>> {k: round(float(v), 3) for k, v in sh.items()}
    {'L': 0.8, 'C': 0.2}
    """
    return _normalise(first_order_variances(sens, rel_std, temperature_std))


def temperature_shift(
    sens: Mapping[str, ArrayLike], materials: Mapping[str, Material], temps: ArrayLike
) -> np.ndarray:
    """Systematic change of ln f from the mean drift of every part, first order.

    Δln f(T) ≈ Σ S_i·E[Δ_i(T)] with Δ_i(T) = x_i(T)/x_i(25 °C) − 1
    (:func:`picker.parts.drift.drift_moments`).

    Returns
    -------
    numpy.ndarray, shape (n_temps, candidates), or (n_temps,) for scalar sensitivities
    """
    t = np.atleast_1d(np.asarray(temps, dtype=float))
    total = 0.0
    for p, m in materials.items():
        mean, _ = drift_moments(m, t)
        total = total + mean[:, None] * np.atleast_1d(np.asarray(sens[p], dtype=float))[None, :]
    return np.broadcast_to(total, (t.size, _n(sens))).astype(float).reshape((t.size, *_shape(sens)))


def temperature_variance(
    sens: Mapping[str, ArrayLike], materials: Mapping[str, Material], temps: ArrayLike
) -> np.ndarray:
    """σ_T(T)²: variance of the drift-induced change of ln f at each temperature.

    σ_T(T)² = Σ S_i²·std(Δ_i(T))² for parts drifting independently (first order,
    JCGM 100:2008, 5.1.2), with std(Δ_i(T)) from :func:`picker.parts.drift.drift_moments`.

    Returns
    -------
    numpy.ndarray, shape (n_temps, candidates), or (n_temps,) for scalar sensitivities
    """
    t = np.atleast_1d(np.asarray(temps, dtype=float))
    var = np.zeros((t.size, _n(sens)))
    for p, m in materials.items():
        _, std = drift_moments(m, t)
        s = np.atleast_1d(np.asarray(sens[p], dtype=float))[None, :]
        var = var + (s * std[:, None]) ** 2
    return var.reshape((t.size, *_shape(sens)))


def temperature_std(
    sens: Mapping[str, ArrayLike], materials: Mapping[str, Material], temps: ArrayLike
) -> np.ndarray:
    """σ_T: largest standard deviation over ``temps`` of the drift-induced change of ln f.

    The square root of the largest :func:`temperature_variance` over ``temps``
    (pass the range ends, or the whole check grid).

    Returns
    -------
    numpy.ndarray, shape (candidates,), or () for scalar sensitivities
    """
    var = temperature_variance(sens, materials, temps)
    return np.asarray(np.sqrt(var.max(axis=0))).reshape(_shape(sens))


def _shape(sens: Mapping[str, ArrayLike]) -> tuple[int, ...]:
    return np.broadcast_shapes(*(np.shape(v) for v in sens.values()))


def _n(sens: Mapping[str, ArrayLike]) -> int:
    return int(np.prod(_shape(sens)))
