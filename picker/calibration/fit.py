"""Bench calibration: learn a board's parasitics from the frequencies of built units.

The board model (picker's ``[parasitics]`` convention)::

    f = 1 / (2π √(L·l_scale · (C_s(C1 + c1_shunt, C2 + c2_shunt[, C3]) + stray)))

(:func:`picker.tank.base.board_frequency`), where C_s is the series chain of
:mod:`picker.tank.base` (Thomson's formula f = 1/(2π√(LC)) with capacitors in
series, 1/C_s = Σ 1/Ci). ``stray`` sits
across the whole tank, ``c1_shunt`` across C1 (amplifier output), ``c2_shunt``
across C2 (amplifier input), and ``l_scale`` is the ratio of true to marked
inductance.

:func:`fit_parasitics` estimates a chosen subset of the four by weighted
non-linear least squares (``scipy.optimize.least_squares``) and reports, for
each, a standard error from the Gauss-Newton covariance s²·(JᵀJ)⁻¹ and a 95 %
interval from Student's t with n − p degrees of freedom (the usual
linearised-regression result; Seber & Wild, *Nonlinear Regression*, 1989,
§2.1, eq. 2.10 and §5.1). The identifiability check looks at the singular
values of the column-normalised Jacobian; parameters the data cannot separate
are held at their fixed values and the estimable combination is reported in
words. Outliers are flagged by the externally studentised residual
t_i = e_i / (s_(i)·√(1 − h_ii)), which follows Student's t with n − p − 1
degrees of freedom for a unit that fits the model (Belsley, Kuh & Welsch,
*Regression Diagnostics*, 1980, eq. 2.26; Cook & Weisberg, *Residuals and
Influence in Regression*, 1982, §2.2), compared with the Bonferroni critical
value t_{1−α/(2n)} at family-wise α = 0.05, so a batch of good units raises a
false alarm at most 5 % of the time. The MAD-based modified z-score
(Iglewicz & Hoaglin 1993) was tried and rejected: with eight to twelve units it
flags ordinary normal scatter far too often.

Bounds: the capacitances are **not** constrained to be ≥ 0. An active bound
would make the standard error and interval meaningless, and a negative
estimate is informative (the marked values are biased, or the parameter is not
supported by the data); it is flagged in the notes. The only bounds keep the
model defined: each capacitance above −½ of the smallest capacitance it adds
to, and ``l_scale`` within (0.2, 5), the range the spec accepts.

This is a core module: pure functions over numpy arrays in SI units.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, stats

from picker.calibration.diagnostics import (
    loss_weights,
    normalised_singular_values,
    select_estimable,
    studentized,
)
from picker.errors import SpecError
from picker.tank.base import Parasitics, Topology, board_values, resonant_frequency
from picker.units import format_quantity

__all__ = [
    "DEFAULTS",
    "PARAMETERS",
    "CalibrationResult",
    "ParameterEstimate",
    "apply_parasitics",
    "fit_parasitics",
    "fragment_toml",
]

#: Every parasitic the board model knows, in a fixed order.
PARAMETERS: tuple[str, ...] = ("stray", "c1_shunt", "c2_shunt", "l_scale")
#: Value of each parasitic on an ideal board.
DEFAULTS: Mapping[str, float] = {"stray": 0.0, "c1_shunt": 0.0, "c2_shunt": 0.0, "l_scale": 1.0}
#: SI unit of each parasitic ("1" = dimensionless).
UNITS: Mapping[str, str] = {"stray": "F", "c1_shunt": "F", "c2_shunt": "F", "l_scale": "1"}
LOSSES = ("linear", "soft_l1", "huber")

#: Below this smallest relative singular value of the column-normalised
#: Jacobian a parameter counts as not separable (the variance inflation would
#: exceed 1e6). Between this and WEAK_RCOND the fit runs but a note says the
#: parameters are strongly correlated.
RCOND = 1e-3
WEAK_RCOND = 3e-2
#: Family-wise false-alarm rate of the outlier test (Bonferroni over the units).
OUTLIER_ALPHA = 0.05
#: Huber's tuning constant, 95 % efficiency at the normal distribution
#: (Holland & Welsch 1977, Commun. Statist. A6).
HUBER_K = 1.345

Model = Callable[[Mapping[str, np.ndarray]], np.ndarray]


# --------------------------------------------------------------------------- model


def apply_parasitics(values: Mapping[str, np.ndarray], parasitics: Mapping[str, float]):
    """Part values as the board sees them, plus the stray capacitance.

    Returns a new dict from :func:`picker.tank.base.board_values` (``C1 +
    c1_shunt``, ``C2 + c2_shunt``, ``L·l_scale``, other positions unchanged)
    with the key ``"stray"`` added. Missing parasitics take their ideal values.
    This is what a ``model`` passed to :func:`fit_parasitics` receives.
    """
    par = Parasitics(**{**DEFAULTS, **parasitics})
    out = board_values({k: np.asarray(v, dtype=float) for k, v in values.items()}, par)
    out["stray"] = np.asarray(par.stray, dtype=float)
    return out


def _ideal_jacobian(topology: Topology, values, parasitics, names) -> np.ndarray:
    """∂f/∂p for each parasitic in ``names`` (natural units), shape (n_units, len(names)).

    With C_t = C_s + stray and f ∝ (L·l_scale·C_t)^(-1/2):
    ∂f/∂stray = −f/(2C_t); ∂f/∂c_k,shunt = −f/(2C_t)·(C_s/C_k')², because
    ∂C_s/∂C_k = (C_s/C_k)² for a series chain; ∂f/∂l_scale = −f/(2·l_scale).
    (Derived here; checked against finite differences in the tests.)
    """
    eff = apply_parasitics(values, parasitics)
    cs = topology.c_series(eff)
    ct = cs + eff["stray"]
    f = resonant_frequency(eff["L"], ct)
    cols = []
    for name in names:
        if name == "stray":
            d = -f / (2.0 * ct)
        elif name == "c1_shunt":
            d = -f / (2.0 * ct) * (cs / eff["C1"]) ** 2
        elif name == "c2_shunt":
            d = -f / (2.0 * ct) * (cs / eff["C2"]) ** 2
        else:  # l_scale
            d = -f / (2.0 * float({**DEFAULTS, **parasitics}["l_scale"]))
        cols.append(np.broadcast_to(d, np.shape(f)))
    return np.stack(cols, axis=1) if cols else np.zeros((np.size(f), 0))


# --------------------------------------------------------------------------- results


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
    """Outcome of :func:`fit_parasitics`. Arrays have shape (n_units,).

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


# --------------------------------------------------------------------------- helpers


def _spread(x: np.ndarray) -> float:
    """Relative spread max/min − 1 of a positive array."""
    x = np.asarray(x, dtype=float)
    return float(np.max(x) / np.min(x) - 1.0)


def _fmt_value(name: str, x: float) -> str:
    if UNITS[name] == "F":
        return format_quantity(x, "F", digits=4)
    return f"{x:.6g}"


def _combination(kept: str, terms: Sequence[tuple[str, float]]) -> str:
    """Words for 'the estimate of ``kept`` stands for kept + Σ a·(q − held)'."""
    out = kept
    for q, a in terms:
        if UNITS[q] == "1" and UNITS[kept] == "F":  # farads per unit of l_scale
            term = f"{format_quantity(abs(a), 'F', digits=3)}·({q} − 1)"
        elif UNITS[q] == "F" and UNITS[kept] == "1":  # per farad
            term = f"{q} / {format_quantity(abs(1.0 / a), 'F', digits=3)}"
        else:
            term = f"{abs(a):.3g}·{q}"
        out += (" − " if a < 0 else " + ") + term
    return out


def _reason(topology: Topology, values, names: Sequence[str]) -> str:
    """A plain-words reason why the parameters in ``names`` cannot be separated."""
    positions = [p for p in topology.positions if p in values]
    if all(_spread(values[p]) < 1e-9 for p in positions):
        return "every unit has the same part values, so the data fix only the tank's L·C product"
    shunts = {"c1_shunt", "c2_shunt"} & set(names)
    if shunts and topology.name == "colpitts":
        r = _spread(values["C1"] / values["C2"])
        if r < 1e-9:
            return "every unit has the same C1/C2 ratio"
        if r < 0.05:
            return f"the C1/C2 ratio hardly varies between units (spread {100 * r:.2g} %)"
    if "l_scale" in names:
        r = _spread(topology.c_series(values))
        if r < 1e-9:
            return (
                "every unit has the same capacitors, so an inductance scale looks like a "
                "change of capacitance"
            )
        if r < 0.05:
            return f"the capacitor chain hardly varies between units (spread {100 * r:.2g} %)"
    return "these units' part values do not vary in a way that separates them"


# --------------------------------------------------------------------------- the fit


def _check_inputs(topology, values, f_measured, sigma, fit, loss, unit_ids):
    f = np.asarray(f_measured, dtype=float).ravel()
    n = f.size
    if n == 0:
        raise SpecError("expected at least one measured unit; got none")
    vals = {}
    for p in topology.positions:
        if p not in values:
            raise SpecError(f"a {topology.name} tank needs a value for {p}; none given")
        v = np.broadcast_to(np.asarray(values[p], dtype=float), (n,)).copy()
        if not np.all(np.isfinite(v) & (v > 0)):
            raise SpecError(f"expected positive finite values for {p}; got {v.tolist()}")
        vals[p] = v
    if not np.all(np.isfinite(f) & (f > 0)):
        raise SpecError("expected positive finite measured frequencies")
    if sigma is not None:
        sigma = np.broadcast_to(np.asarray(sigma, dtype=float), (n,)).copy()
        if not np.all(np.isfinite(sigma) & (sigma > 0)):
            raise SpecError("expected positive finite frequency sigmas")
    fit = tuple(fit)
    bad = [x for x in fit if x not in PARAMETERS]
    if bad:
        raise SpecError(f"expected parasitics from {', '.join(PARAMETERS)}; got {', '.join(bad)}")
    if len(set(fit)) != len(fit):
        raise SpecError(f"each parasitic may be fitted once; got {', '.join(fit)}")
    if not fit:
        raise SpecError("expected at least one parasitic to fit; got none")
    if loss not in LOSSES:
        raise SpecError(f"expected a loss from {', '.join(LOSSES)}; got {loss!r}")
    if unit_ids is None:
        unit_ids = tuple(f"#{i + 1}" for i in range(n))
    unit_ids = tuple(str(u) for u in unit_ids)
    if len(unit_ids) != n:
        raise SpecError(f"expected {n} unit ids; got {len(unit_ids)}")
    return vals, f, sigma, fit, unit_ids


def fit_parasitics(
    topology: Topology,
    values: Mapping[str, np.ndarray],
    f_measured,
    *,
    sigma=None,
    fit: Sequence[str] = ("stray", "l_scale", "c2_shunt"),
    fixed: Mapping[str, float] | None = None,
    loss: str = "linear",
    f_scale: float | None = None,
    absolute_sigma: bool = False,
    model: Model | None = None,
    unit_ids: Sequence[str] | None = None,
    confidence: float = 0.95,
    rcond: float = RCOND,
) -> CalibrationResult:
    """Estimate board parasitics from the measured frequencies of built units.

    Parameters
    ----------
    topology:
        The tank (``picker.tank.base.COLPITTS`` or ``CLAPP``).
    values:
        Position name -> array of shape (n_units,): each unit's part values (F, H).
    f_measured:
        Measured frequency of each unit, Hz, shape (n_units,).
    sigma:
        Standard deviation of each measured frequency, Hz (known only up to a
        common factor when ``absolute_sigma`` is False). None: equal relative
        weights, i.e. sigma proportional to each unit's frequency, since the
        unmodelled part deviations shift frequencies by a fraction.
    fit:
        Parasitics to estimate, in order of preference: when the data cannot
        separate them, the later ones are held at their ``fixed`` values.
    fixed:
        Values for the parasitics not fitted, and the starting point of the
        fitted ones (default: the ideal board, :data:`DEFAULTS`).
    loss:
        "linear" (least squares), or the robust "soft_l1" / "huber" of
        ``scipy.optimize.least_squares``.
    f_scale:
        Residual size (in sigma units) where the robust loss bends. Default:
        Huber's 1.345 times a robust scale (1.4826·MAD) of a first linear fit.
    absolute_sigma:
        True: ``sigma`` are true standard deviations; the covariance is
        (JᵀJ)⁻¹ and intervals use the normal distribution. False: the
        residual scale s² is estimated and intervals use Student's t with
        n − p degrees of freedom.
    model:
        Frequency of each unit from the board's effective values (the mapping
        of :func:`apply_parasitics`, which has a ``"stray"`` key) -> Hz.
        Default: the ideal tank, :func:`board_frequency`. A custom model is
        differentiated numerically.
    unit_ids:
        Names of the units, for notes and outliers (default "#1", "#2", ...).
    confidence:
        Level of the reported intervals.
    rcond:
        Identifiability threshold on the column-normalised Jacobian.

    Returns
    -------
    CalibrationResult
        Per-unit arrays have shape (n_units,).

    Raises
    ------
    SpecError
        Bad values, unknown parasitic names, or too few units to fit anything.
    """
    vals, f, sigma, fit, unit_ids = _check_inputs(
        topology, values, f_measured, sigma, fit, loss, unit_ids
    )
    n = f.size
    base = {**DEFAULTS, **(fixed or {})}
    notes: list[str] = []

    if sigma is None:
        # equal relative weights: each residual in ppm of its own measured frequency
        w_sigma = 1e-6 * f
        if absolute_sigma:
            raise SpecError("absolute_sigma needs the frequency sigmas")
    else:
        w_sigma = sigma

    # internal variables u = p / scale, so every variable is of order 0.01 .. 1
    c_ref = float(np.median(topology.c_series(vals)))
    scale = {k: (c_ref if UNITS[k] == "F" else 1.0) for k in PARAMETERS}
    min_cap = {
        "stray": float(np.min(topology.c_series(vals))),
        "c1_shunt": float(np.min(vals["C1"])),
        "c2_shunt": float(np.min(vals["C2"])),
    }

    def freq(params: Mapping[str, float]) -> np.ndarray:
        eff = apply_parasitics(vals, params)
        if model is None:
            return resonant_frequency(eff["L"], topology.c_series(eff) + eff["stray"])
        return np.asarray(model(eff), dtype=float)

    def jac_natural(params, names) -> np.ndarray:
        if model is None:
            return _ideal_jacobian(topology, vals, params, names) / w_sigma[:, None]
        cols = []
        for k in names:  # central differences, step relative to the internal scale
            h = 1e-5 * scale[k]
            up = freq({**params, k: params[k] + h})
            dn = freq({**params, k: params[k] - h})
            cols.append((up - dn) / (2 * h))
        return np.stack(cols, axis=1) / w_sigma[:, None]

    # ---- identifiability at the starting point: keep parameters in order of preference
    sel = select_estimable(jac_natural(base, fit), fit, rcond=rcond)
    kept, dropped = list(sel.kept), [*sel.aliased, *sel.no_effect]
    for name in fit:
        if name in sel.no_effect:
            notes.append(
                f"{name} has no effect on any unit's frequency; held at "
                f"{_fmt_value(name, base[name])}."
            )
        elif name in sel.aliased:
            before = [k for k in kept if fit.index(k) < fit.index(name)]
            why = _reason(topology, vals, before + [name])
            notes.append(
                f"{name} cannot be told apart from {' and '.join(before)} with these units: "
                f"{why}; it is held at {_fmt_value(name, base[name])}."
            )
    aliases = sel.aliases
    exprs = {k: _combination(k, list(t.items())) for k, t in aliases.items()}
    if exprs:
        notes.append("Only these combinations can be estimated: " + "; ".join(exprs.values()) + ".")
    min_dof = 0 if absolute_sigma else 1
    while kept and len(kept) > n - min_dof:
        name = kept.pop()
        dropped.append(name)
        notes.append(
            f"{name} is held at {_fmt_value(name, base[name])}: {n} unit(s) can support "
            f"at most {n - min_dof} fitted parameter(s)."
        )
    if not kept:
        raise SpecError(f"cannot fit any of {', '.join(fit)} from {n} unit(s); measure more units")
    identifiable = not dropped

    # ---- the least-squares fit over internal variables
    def to_params(u: np.ndarray) -> dict[str, float]:
        return {**base, **{k: float(u[i]) * scale[k] for i, k in enumerate(kept)}}

    def resid(u):
        return (freq(to_params(u)) - f) / w_sigma

    def jac(u):
        return jac_natural(to_params(u), kept) * np.array([scale[k] for k in kept])

    lo, hi = [], []
    for k in kept:
        if k == "l_scale":
            lo.append(0.2)
            hi.append(5.0)
        else:
            lo.append(-0.5 * min_cap[k] / scale[k])
            hi.append(np.inf)
    u0 = np.array([base[k] / scale[k] for k in kept])
    u0 = np.clip(u0, np.array(lo) + 1e-9, np.array(hi) - 1e-9)

    def solve(loss_name: str, fs: float, start: np.ndarray):
        return optimize.least_squares(
            resid, start, jac=jac, bounds=(lo, hi), x_scale=np.ones(len(kept)),
            loss=loss_name, f_scale=fs, method="trf", xtol=1e-14, ftol=1e-14, gtol=1e-14,
            max_nfev=2000,
        )  # fmt: skip

    sol = solve("linear", 1.0, u0)
    if loss != "linear":
        if f_scale is None:
            r0 = sol.fun
            mad = float(np.median(np.abs(r0 - np.median(r0))))
            f_scale = HUBER_K * 1.4826 * mad if mad > 0 else 1.0
        sol = solve(loss, float(f_scale), sol.x)
    if not sol.success:  # pragma: no cover - trf with finite bounds reports success
        notes.append(f"the optimiser stopped early: {sol.message}")
    u = sol.x
    params = to_params(u)
    r = resid(u)
    j_u = jac(u)

    # ---- covariance (Gauss-Newton / IRLS), Seber & Wild eq. 2.10
    w = loss_weights(r, loss, float(f_scale or 1.0))
    p = len(kept)
    dof = n - p
    jw = j_u * np.sqrt(w)[:, None]
    if absolute_sigma:
        s2 = 1.0
    else:
        s2 = float(np.sum(w * r**2) / dof) if dof > 0 else np.nan
    _, sv, vt = np.linalg.svd(jw, full_matrices=False)
    inv = (vt.T / sv**2) @ vt  # (JᵀJ)⁻¹ via the SVD
    d = np.array([scale[k] for k in kept])
    cov = s2 * inv * np.outer(d, d)
    q = (
        stats.norm.ppf(0.5 + confidence / 2)
        if absolute_sigma
        else stats.t.ppf(0.5 + confidence / 2, dof)
    )

    # conditioning at the solution
    svn = normalised_singular_values(j_u)
    if p > 1 and svn[-1] / svn[0] < WEAK_RCOND:
        corr = cov / np.sqrt(np.outer(np.diag(cov), np.diag(cov)))
        i, k = np.unravel_index(np.argmax(np.abs(corr - np.eye(p))), corr.shape)
        notes.append(
            f"{kept[i]} and {kept[k]} are only weakly separated by these units "
            f"(correlation {corr[i, k]:+.3f}); their intervals are wide."
        )

    estimates = []
    for name in PARAMETERS:
        if name in kept:
            i = kept.index(name)
            se = float(np.sqrt(cov[i, i]))
            est = params[name]
            estimates.append(
                ParameterEstimate(name, est, se, est - q * se, est + q * se, UNITS[name], True)
            )
            at_bound = np.isclose(u[i], lo[i], rtol=0, atol=1e-7) or np.isclose(
                u[i], hi[i], rtol=0, atol=1e-7
            )
            if at_bound:
                notes.append(
                    f"{name} stopped at the limit of its range; its interval is not valid."
                )
            elif UNITS[name] == "F" and est < 0 and name in exprs:
                notes.append(
                    f"the combination {exprs[name]} came out negative ({_fmt_value(name, est)})."
                )
            elif UNITS[name] == "F" and est < 0:
                notes.append(
                    f"{name} came out negative ({_fmt_value(name, est)}): not physical; the "
                    "marked values may be biased, or the data do not support this parameter."
                )
            if UNITS[name] == "F" and est - q * se < 0 < est + q * se and not at_bound:
                notes.append(
                    f"{name} cannot be told from 0 at {100 * confidence:g} % with these units; "
                    f"leave it out of the fit, or build units that vary more."
                )
        else:
            nan = float("nan")
            estimates.append(ParameterEstimate(name, base[name], nan, nan, nan, UNITS[name], False))

    # ---- residuals and outliers
    f_fit = freq(params)
    res_hz = f - f_fit
    res_ppm = 1e6 * res_hz / f_fit
    s = float(np.sqrt(s2)) if np.isfinite(s2) else float("nan")
    standardized = -r / s if s > 0 else np.zeros_like(r)
    if dof >= 2 and np.sum(r**2) > 0:
        z = studentized(-r, j_u)
        t_crit = float(stats.t.ppf(1.0 - OUTLIER_ALPHA / (2 * n), dof - 1))
        out = tuple(uid for uid, zi in zip(unit_ids, z, strict=True) if abs(zi) > t_crit)
    else:
        z = np.full(n, np.nan)
        t_crit = float("nan")
        out = ()
        notes.append("too few units beyond the fitted parameters to look for outliers.")
    for uid, zi in zip(unit_ids, z, strict=True):
        if uid in out:
            tail = (
                "check it, or refit with a robust loss."
                if loss == "linear"
                else "the robust loss down-weights it."
            )
            notes.append(
                f"unit {uid} is an outlier (studentised residual {zi:+.1f}, limit "
                f"±{t_crit:.2f}); {tail}"
            )

    return CalibrationResult(
        topology=topology.name,
        unit_ids=unit_ids,
        parameters=tuple(estimates),
        fitted=tuple(kept),
        covariance=cov,
        f_measured=f,
        f_fitted=f_fit,
        residual_hz=res_hz,
        residual_ppm=res_ppm,
        standardized=standardized,
        studentized=z,
        outliers=out,
        outlier_threshold=t_crit,
        aliases=aliases,
        identifiable=identifiable,
        notes=tuple(notes),
        dof=dof,
        residual_scale=s,
        singular_values=svn,
        loss=loss,
        f_scale=None if loss == "linear" else float(f_scale),
        confidence=confidence,
        absolute_sigma=absolute_sigma,
        sigma=sigma,
    )


# --------------------------------------------------------------------------- spec fragment


def fragment_toml(result: CalibrationResult, *, source: str | None = None) -> str:
    """A ``[parasitics]`` TOML section holding the fitted board, for a spec file.

    Capacitances are written as engineering strings ("12.34 pF", four
    significant digits), ``l_scale`` as a number. The spec requires
    capacitances ≥ 0, so a negative estimate is written as "0 F" with a
    comment. The header says where the values came from; it carries no date,
    so the same fit gives the same text.
    """
    n = len(result.unit_ids)
    head = [
        "# Board parasitics learnt by `picker calibrate`" + (f" from {source}" if source else ""),
        f"# ({n} units, {result.topology} tank, {result.loss} loss). Fitted: "
        f"{', '.join(result.fitted)}; residual scale s = {result.residual_scale:.3g}"
        f"{' (sigma units)' if result.sigma is not None else ' ppm'}.",
    ]
    lines = ["[parasitics]"]
    for p in result.parameters:
        level = f"{100 * result.confidence:g} %"
        if p.fitted:
            head.append(
                f"# {p.name} = {_fmt_value(p.name, p.estimate)} ± {_fmt_value(p.name, p.std_error)}"
                f" (1 s.e.; {level} interval {_fmt_value(p.name, p.ci_low)} .. "
                f"{_fmt_value(p.name, p.ci_high)})"
            )
        else:
            head.append(f"# {p.name} held, not fitted")
        value = p.estimate
        if p.unit == "F":
            if value < 0:
                head.append(f"# {p.name}: the fit gave a negative value; written as 0")
                value = 0.0
            lines.append(f'{p.name} = "{format_quantity(value, "F", digits=4)}"')
        else:
            lines.append(f"{p.name} = {float(f'{value:.6g}')!r}")
    for uid in result.outliers:
        head.append(f"# outlier: unit {uid}")
    head = [h.replace("\n", " ") for h in head]
    return "\n".join(head + lines) + "\n"
