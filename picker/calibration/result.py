"""What a bench calibration found: the estimate of each parasitic and the fit's facts.

:func:`picker.calibration.fit.fit_parasitics` returns a :class:`CalibrationResult`;
:func:`parameter_estimates` turns the fitted values and their covariance into
one :class:`ParameterEstimate` per parasitic, with an interval
``estimate ± q·s.e.`` (q from Student's t or the normal distribution: Seber &
Wild, *Nonlinear Regression*, 1989, §5.1) and the notes a reader needs about it.

Core module: plain data over numpy arrays in SI units.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from picker.calibration.selection import SelectionStep
from picker.tank.board import PARAMETERS, UNITS
from picker.units import format_quantity

__all__ = ["CalibrationResult", "ParameterEstimate", "format_parameter", "parameter_estimates"]


@dataclass(frozen=True)
class ParameterEstimate:
    """One parasitic: its value and, when it was fitted, its uncertainty.

    ``std_error``, ``ci_low`` and ``ci_high`` are NaN for a held parameter.
    """

    name: str
    estimate: float
    std_error: float
    ci_low: float
    ci_high: float
    unit: str
    fitted: bool


@dataclass(frozen=True)
class CalibrationResult:
    """Outcome of :func:`picker.calibration.fit.fit_parasitics`. Arrays have shape (n_units,).

    Attributes
    ----------
    parameters:
        One :class:`ParameterEstimate` per name in :data:`PARAMETERS` order.
    fitted:
        Names actually estimated (a subset of those asked for).
    covariance:
        Covariance of the fitted parameters, natural SI units, in ``fitted`` order.
    residual_hz, residual_ppm:
        Measured minus fitted frequency, in Hz and in ppm of the fitted value.
    standardized:
        Weighted residual divided by the residual scale ``s``.
    studentized:
        Externally studentised residual of each unit (NaN when too few units).
    outlier_threshold:
        The Bonferroni critical value the ``studentized`` are compared with.
    residual_scale:
        s = √(Σ w r² / dof) of the weighted residuals (1 means the stated
        sigmas were right, when sigmas were given).
    aliases:
        For a fitted parameter that absorbed held ones: held name -> a, meaning
        its estimate stands for ``name + Σ a·(held − held value)`` (first order).
    singular_values:
        Of the column-normalised weighted Jacobian at the solution, descending.
    weighted_sse:
        Σ (residual / sigma)² at the solution (sigma: the weights' scale).
    selection:
        When the parasitics were chosen by the data
        (:func:`picker.calibration.selection.choose_parasitics`), one step per
        candidate saying whether it was kept and why; else empty.
    """

    topology: str
    unit_ids: tuple[str, ...]
    parameters: tuple[ParameterEstimate, ...]
    fitted: tuple[str, ...]
    covariance: np.ndarray
    f_measured: np.ndarray
    f_fitted: np.ndarray
    residual_hz: np.ndarray
    residual_ppm: np.ndarray
    standardized: np.ndarray
    studentized: np.ndarray
    outliers: tuple[str, ...]
    outlier_threshold: float
    identifiable: bool
    aliases: Mapping[str, Mapping[str, float]]
    notes: tuple[str, ...]
    dof: int
    residual_scale: float
    singular_values: np.ndarray
    loss: str
    f_scale: float | None
    confidence: float
    absolute_sigma: bool
    sigma: np.ndarray | None = field(default=None)
    weighted_sse: float = field(default=float("nan"))
    selection: tuple[SelectionStep, ...] = field(default=())

    @property
    def parasitics(self) -> dict[str, float]:
        """Every parasitic's value (fitted or held), by name."""
        return {p.name: p.estimate for p in self.parameters}

    def parameter(self, name: str) -> ParameterEstimate:
        """The estimate for one parasitic by name."""
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(name)

    @property
    def correlation(self) -> np.ndarray:
        """Correlation matrix of the fitted parameters (``fitted`` order)."""
        d = np.sqrt(np.diag(self.covariance))
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.covariance / np.outer(d, d)


def format_parameter(name: str, x: float) -> str:
    """A parasitic's value for a note: farads with a prefix (4 digits), else ``%.6g``."""
    if UNITS[name] == "F":
        return format_quantity(x, "F", digits=4)
    return f"{x:.6g}"


def parameter_estimates(
    params: Mapping[str, float],
    kept: Sequence[str],
    cov: np.ndarray,
    q: float,
    *,
    at_bound: Sequence[bool],
    combinations: Mapping[str, str],
    confidence: float,
) -> tuple[tuple[ParameterEstimate, ...], list[str]]:
    """One estimate per parasitic in :data:`PARAMETERS` order, and the notes on them.

    Parameters
    ----------
    params:
        Every parasitic's value at the solution (the held ones at their fixed values).
    kept:
        The fitted parasitics, in the order of ``cov``'s rows.
    cov:
        Covariance of the fitted parasitics, natural SI units, shape (p, p).
    q:
        Quantile of the interval: ``estimate ± q·s.e.``.
    at_bound:
        Per fitted parasitic: did the optimiser stop at the limit of its range?
    combinations:
        Fitted name -> the words for the combination its estimate stands for
        (when it absorbed held parasitics).
    confidence:
        Level of the interval, for the notes.
    """
    estimates = []
    notes: list[str] = []
    for name in PARAMETERS:
        if name in kept:
            i = kept.index(name)
            se = float(np.sqrt(cov[i, i]))
            est = params[name]
            estimates.append(
                ParameterEstimate(name, est, se, est - q * se, est + q * se, UNITS[name], True)
            )
            if at_bound[i]:
                notes.append(
                    f"{name} stopped at the limit of its range; its interval is not valid."
                )
            elif UNITS[name] == "F" and est < 0 and name in combinations:
                notes.append(
                    f"the combination {combinations[name]} came out negative "
                    f"({format_parameter(name, est)})."
                )
            elif UNITS[name] == "F" and est < 0:
                notes.append(
                    f"{name} came out negative ({format_parameter(name, est)}): not physical; the "
                    "marked values may be biased, or the data do not support this parameter."
                )
            if UNITS[name] == "F" and est - q * se < 0 < est + q * se and not at_bound[i]:
                notes.append(
                    f"{name} cannot be told from 0 at {100 * confidence:g} % with these units; "
                    f"leave it out of the fit, or build units that vary more."
                )
        else:
            nan = float("nan")
            estimates.append(
                ParameterEstimate(name, params[name], nan, nan, nan, UNITS[name], False)
            )
    return tuple(estimates), notes
