"""Spread drivers: each part's share of the frequency variance, and temperature's.

First order (JCGM 100:2008, 5.1.2, law of propagation of uncertainty, for
uncorrelated inputs): ln f varies as Σ S_i·δ_i with S_i = ∂ln f/∂ln x_i and
δ_i the relative deviation of part i, so

    var(ln f) ≈ Σ (S_i·σ_i)² + σ_T²,   share_i = (S_i·σ_i)² / var(ln f),

where σ_i is the relative standard deviation of part i
(:func:`picker.parts.distributions.std_of`) and σ_T the standard deviation of the
temperature-induced change of ln f at the temperature where it is largest
(:func:`temperature_std`). A systematic drift (the mean of a tempco) moves
every board alike; it is not variance and is reported by
:func:`temperature_shift` instead.

Monte Carlo confirmation (:func:`regression_fit`): regress the sampled ln f on
the sampled inputs by least squares; the share of input i is its squared
standardised regression coefficient b_i²·var(x_i)/var(ln f) (Saltelli et al.,
*Global Sensitivity Analysis: The Primer*, 2008, 1.2.5), normalised so that
the shares sum to one; R² tells how linear the model is (shares are only
meaningful when R² is close to 1).

Shapes: sensitivities and standard deviations are scalars or (candidates,);
sampled inputs are (samples,) for one design.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from picker.parts.drift import Material, drift_moments

TEMPERATURE = "temperature"


def _normalise(var: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    total = sum(var.values())
    with np.errstate(invalid="ignore", divide="ignore"):
        return {
            k: np.where(total > 0, v / np.where(total > 0, total, 1.0), 0.0) for k, v in var.items()
        }


def first_order_variances(
    sens: Mapping[str, np.ndarray],
    rel_std: Mapping[str, np.ndarray],
    temperature_std=None,
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
    sens: Mapping[str, np.ndarray],
    rel_std: Mapping[str, np.ndarray],
    temperature_std=None,
) -> dict[str, np.ndarray]:
    """Each position's (and temperature's) share of var(ln f), first order.

    Same parameters as :func:`first_order_variances`. The shares sum to one
    for every candidate (all zero for a candidate with no spread at all).

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
    sens: Mapping[str, np.ndarray], materials: Mapping[str, Material], temps
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


def temperature_std(
    sens: Mapping[str, np.ndarray], materials: Mapping[str, Material], temps
) -> np.ndarray:
    """σ_T: largest standard deviation over ``temps`` of the drift-induced change of ln f.

    σ_T(T)² = Σ S_i²·std(Δ_i(T))² for parts drifting independently (first order,
    JCGM 100:2008, 5.1.2); the result is the maximum over ``temps`` (pass the
    range ends, or the whole check grid).

    Returns
    -------
    numpy.ndarray, shape (candidates,), or () for scalar sensitivities
    """
    t = np.atleast_1d(np.asarray(temps, dtype=float))
    var = np.zeros((t.size, _n(sens)))
    for p, m in materials.items():
        _, std = drift_moments(m, t)
        s = np.atleast_1d(np.asarray(sens[p], dtype=float))[None, :]
        var = var + (s * std[:, None]) ** 2
    return np.sqrt(var.max(axis=0)).reshape(_shape(sens))


def _shape(sens: Mapping[str, np.ndarray]) -> tuple[int, ...]:
    return np.broadcast_shapes(*(np.shape(v) for v in sens.values()))


def _n(sens: Mapping[str, np.ndarray]) -> int:
    return int(np.prod(_shape(sens)))


@dataclass(frozen=True)
class RegressionFit:
    """Least-squares fit of ln f on the sampled inputs of one design.

    Attributes
    ----------
    coef : dict name -> float
        Regression coefficient b_i (≈ S_i for x_i = ln(1 + δ_i)).
    shares : dict name -> float
        Normalised squared standardised coefficients; they sum to one.
    r2 : float
        Coefficient of determination of the linear fit.
    """

    coef: dict[str, float]
    shares: dict[str, float]
    r2: float


def regression_fit(inputs: Mapping[str, np.ndarray], ln_f: np.ndarray) -> RegressionFit:
    """Variance shares of one design from its Monte Carlo samples.

    Parameters
    ----------
    inputs : mapping name -> array, shape (samples,)
        Per position x_i = ln(1 + δ_i) of each simulated board; for temperature,
        the board's drift-induced change of ln f at the temperature of interest.
    ln_f : array, shape (samples,)
        ln f of each board (at that temperature).

    Returns
    -------
    RegressionFit
    """
    names = list(inputs)
    y = np.asarray(ln_f, dtype=float)
    x = np.column_stack([np.asarray(inputs[k], dtype=float) for k in names])
    xc = x - x.mean(axis=0)
    yc = y - y.mean()
    keep = xc.std(axis=0) > 0  # a constant input explains nothing
    b = np.zeros(len(names))
    if np.any(keep):
        b[keep] = np.linalg.lstsq(xc[:, keep], yc, rcond=None)[0]
    contrib = b * b * xc.var(axis=0)
    var_y = yc.var()
    r2 = float(1.0 - np.var(yc - xc @ b) / var_y) if var_y > 0 else 1.0
    tot = contrib.sum()
    shares = contrib / tot if tot > 0 else np.zeros_like(contrib)
    return RegressionFit(
        {k: float(v) for k, v in zip(names, b, strict=True)},
        {k: float(v) for k, v in zip(names, shares, strict=True)},
        r2,
    )


def monte_carlo_shares(inputs: Mapping[str, np.ndarray], ln_f: np.ndarray) -> dict[str, float]:
    """Shorthand for ``regression_fit(inputs, ln_f).shares`` (they sum to one)."""
    return regression_fit(inputs, ln_f).shares
