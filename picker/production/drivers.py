"""Spread drivers from the Monte Carlo: each input's share of the variance of ln f.

The first-order shares (JCGM 100:2008, 5.1.2) are
:func:`picker.core.propagation.first_order_shares`; this module confirms them
from the simulated boards of one design (:func:`regression_fit`): regress the
sampled ln f on the sampled inputs by least squares; the share of input i is
its squared standardised regression coefficient b_i²·var(x_i)/var(ln f)
(Saltelli et al., *Global Sensitivity Analysis: The Primer*, 2008, 1.2.5),
normalised so that the shares sum to one; R² tells how linear the model is
(shares are only meaningful when R² is close to 1).

Boards that do not oscillate (NaN frequency under a circuit-aware board model)
carry no frequency and are left out of the fit.

The frequencies and sensitivities come from the simulation's board model when it
provides them (:class:`FrequencyModel`: the loaded model of
:mod:`picker.circuit.loaded`, steady frequency of each board), so the drivers, the
histogram and the yield describe the same boards; otherwise from the ideal tank
(:func:`board_frequencies`, :func:`model_sensitivities`).

Shapes: sampled inputs are (samples,) for one design.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

from picker.core.montecarlo import Simulation
from picker.core.search import Designs
from picker.tank.board import board_frequency, board_sensitivities


@runtime_checkable
class FrequencyModel(Protocol):
    """A board model that also gives each board's frequency and each design's sensitivities."""

    def frequencies(self, vals: Mapping[str, np.ndarray], designs: Designs) -> np.ndarray:
        """Frequency of every board, Hz, (samples, c); NaN where the board does not count
        for a reason other than its frequency (it does not start or runs unsteadily)."""
        ...

    def sensitivities(self, designs: Designs) -> dict[str, np.ndarray]:
        """d ln f / d ln x_i per position at the designs' marked values, (n,) each."""
        ...


def board_frequencies(
    sim: Simulation, designs: Designs, vals: Mapping[str, np.ndarray]
) -> np.ndarray:
    """Frequency (Hz) of the sampled boards ``vals`` (position -> (samples, c)) by the
    simulation's board model (a :class:`FrequencyModel`) or the ideal tank."""
    model = sim.model
    if isinstance(model, FrequencyModel):
        return np.asarray(model.frequencies(vals, designs), dtype=float)
    pb = sim.problem
    return np.asarray(board_frequency(pb.topology, vals, pb.parasitics), dtype=float)


def model_sensitivities(sim: Simulation, designs: Designs) -> dict[str, np.ndarray]:
    """Log-sensitivities of the designs' frequency, position -> (n,), by the simulation's
    board model (a :class:`FrequencyModel`) or the ideal tank
    (:func:`picker.tank.board.board_sensitivities`)."""
    model = sim.model
    if isinstance(model, FrequencyModel):
        return model.sensitivities(designs)
    pb = sim.problem
    return board_sensitivities(pb.topology, designs.values(pb), pb.parasitics)


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

    All three are NaN where fewer than two boards oscillate (no spread to apportion).
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
    rows = np.isfinite(y) & np.all(np.isfinite(x), axis=1)  # boards that oscillate
    if not rows.all():
        x, y = x[rows], y[rows]
    if y.size < 2:  # fewer than two boards oscillate: there is no spread to apportion
        none = {k: math.nan for k in names}
        return RegressionFit(none, dict(none), math.nan)
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
