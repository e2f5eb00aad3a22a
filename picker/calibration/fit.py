"""Bench calibration: learn a board's parasitics from the frequencies of built units.

The board model (picker's ``[parasitics]`` convention)::

    f = 1 / (2π √(L·l_scale · (C_s(C1 + c1_shunt, C2 + c2_shunt[, C3]) + stray)))

(:func:`picker.tank.board.board_frequency`), where C_s is the series chain of
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
from dataclasses import replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, stats

from picker.calibration.diagnostics import (
    flag_outliers,
    loss_weights,
    normalised_singular_values,
    select_estimable,
)
from picker.calibration.result import CalibrationResult, format_parameter, parameter_estimates
from picker.calibration.selection import SELECT_ALPHA, NestedFit, choose_parasitics
from picker.errors import SpecError
from picker.tank.base import Topology, resonant_frequency
from picker.tank.board import (
    DEFAULTS,
    PARAMETERS,
    UNITS,
    apply_parasitics,
    ideal_jacobian,
    shunt_positions,
)
from picker.units import format_quantity

__all__ = ["fit_parasitics"]

LOSSES = ("linear", "soft_l1", "huber")

#: Below this smallest relative singular value of the column-normalised
#: Jacobian a parameter counts as not separable (the variance inflation would
#: exceed 1e6). Between this and WEAK_RCOND the fit runs but a note says the
#: parameters are strongly correlated.
RCOND = 1e-3
WEAK_RCOND = 3e-2
#: Huber's tuning constant, 95 % efficiency at the normal distribution
#: (Holland & Welsch 1977, Commun. Statist. A6).
HUBER_K = 1.345

Model = Callable[[Mapping[str, np.ndarray]], np.ndarray]


# --------------------------------------------------------------------------- helpers


def _spread(x: np.ndarray) -> float:
    """Relative spread max/min − 1 of a positive array."""
    x = np.asarray(x, dtype=float)
    return float(np.max(x) / np.min(x) - 1.0)


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


def _reason(topology: Topology, values: Mapping[str, np.ndarray], names: Sequence[str]) -> str:
    """A plain-words reason why the parameters in ``names`` cannot be separated."""
    positions = [p for p in topology.positions if p in values]
    if all(_spread(values[p]) < 1e-9 for p in positions):
        return "every unit has the same part values, so the data fix only the tank's L·C product"
    across = shunt_positions(topology)
    for name in (n for n in ("c1_shunt", "c2_shunt") if n in names):
        # a shunt across C_k moves f as (C_s/C_k)² times a stray does (ideal_jacobian), so
        # it is told from the stray only as far as C_s/C_k varies between units
        pos = across[name]
        others = [c for c in topology.capacitors if c != pos]
        if len(others) == 1:
            what = f"the {topology.feedback_pair[0]}/{topology.feedback_pair[1]} ratio"
        else:
            what = f"the ratio of the series chain {'–'.join(topology.capacitors)} to {pos}"
        r = _spread(topology.c_series(values) / values[pos])
        if r < 1e-9:
            return f"every unit has the same {what.removeprefix('the ')}"
        if r < 0.05:
            return f"{what} hardly varies between units (spread {100 * r:.2g} %)"
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


def _check_inputs(
    topology: Topology,
    values: Mapping[str, ArrayLike],
    f_measured: ArrayLike,
    sigma: ArrayLike | None,
    fit: Sequence[str],
    loss: str,
    unit_ids: Sequence[str] | None,
) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray | None, tuple[str, ...], tuple[str, ...]]:
    """The inputs of :func:`fit_parasitics` as arrays of shape (n_units,), checked."""
    f = np.asarray(f_measured, dtype=float).ravel()
    n = f.size
    if n == 0:
        raise SpecError("expected at least one measured unit; got none")
    vals: dict[str, np.ndarray] = {}
    for p in topology.positions:
        if p not in values:
            raise SpecError(f"a {topology.name} tank needs a value for {p}; none given")
        v = np.broadcast_to(np.asarray(values[p], dtype=float), (n,)).copy()
        if not np.all(np.isfinite(v) & (v > 0)):
            raise SpecError(f"expected positive finite values for {p}; got {v.tolist()}")
        vals[p] = v
    if not np.all(np.isfinite(f) & (f > 0)):
        raise SpecError("expected positive finite measured frequencies")
    sig = None
    if sigma is not None:
        sig = np.broadcast_to(np.asarray(sigma, dtype=float), (n,)).copy()
        if not np.all(np.isfinite(sig) & (sig > 0)):
            raise SpecError("expected positive finite frequency sigmas")
    names = tuple(fit)
    bad = [x for x in names if x not in PARAMETERS]
    if bad:
        raise SpecError(f"expected parasitics from {', '.join(PARAMETERS)}; got {', '.join(bad)}")
    no = [x for x in names if x in ("c1_shunt", "c2_shunt") and x not in shunt_positions(topology)]
    if no:
        raise SpecError(
            f"a {topology.name} tank has no {', '.join(no)}: its ends are not capacitors"
        )
    if len(set(names)) != len(names):
        raise SpecError(f"each parasitic may be fitted once; got {', '.join(names)}")
    if not names:
        raise SpecError("expected at least one parasitic to fit; got none")
    if loss not in LOSSES:
        raise SpecError(f"expected a loss from {', '.join(LOSSES)}; got {loss!r}")
    if unit_ids is None:
        unit_ids = tuple(f"#{i + 1}" for i in range(n))
    ids = tuple(str(u) for u in unit_ids)
    if len(ids) != n:
        raise SpecError(f"expected {n} unit ids; got {len(ids)}")
    return vals, f, sig, names, ids


def fit_parasitics(
    topology: Topology,
    values: Mapping[str, ArrayLike],
    f_measured: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    fit: Sequence[str] = ("stray", "l_scale", "c2_shunt"),
    fixed: Mapping[str, float] | None = None,
    loss: str = "linear",
    f_scale: float | None = None,
    absolute_sigma: bool = False,
    model: Model | None = None,
    unit_ids: Sequence[str] | None = None,
    confidence: float = 0.95,
    rcond: float = RCOND,
    select: bool = False,
    alpha: float = SELECT_ALPHA,
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
    select:
        False: fit every parasitic of ``fit`` the units can separate. True:
        fit only those the data support, chosen in ``fit``'s order by the
        extra-sum-of-squares test at level ``alpha``
        (:func:`picker.calibration.selection.choose_parasitics`, on the
        least-squares fit whatever ``loss``); ``selection`` and the notes say
        which were kept and why.
    alpha:
        Level of that test.

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
    if select:
        args = dict(
            sigma=sigma,
            fixed=fixed,
            absolute_sigma=absolute_sigma,
            model=model,
            unit_ids=unit_ids,
            confidence=confidence,
            rcond=rcond,
        )
        return _select_and_fit(topology, vals, f, fit, loss, f_scale, alpha, args)
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
        **{k: float(np.min(vals[p])) for k, p in shunt_positions(topology).items()},
    }

    def freq(params: Mapping[str, float]) -> np.ndarray:
        eff = apply_parasitics(topology, vals, params)
        ideal = resonant_frequency(topology.l_eff(eff), topology.c_series(eff) + eff["stray"])
        if model is None:
            return ideal
        # a board the model finds not oscillating on the optimiser's way: the ideal tank
        # stands in, so the residuals stay finite (the start and the solution are checked)
        out = np.asarray(model(eff), dtype=float)
        return np.where(np.isfinite(out), out, ideal)

    if model is not None:
        start = np.asarray(model(apply_parasitics(topology, vals, base)), dtype=float)
        if not np.all(np.isfinite(start)):
            bad = [u for u, ok in zip(unit_ids, np.isfinite(start), strict=True) if not ok]
            shown = ", ".join(bad[:5]) + (f" and {len(bad) - 5} more" if len(bad) > 5 else "")
            raise SpecError(
                f"the board model gives no oscillation for unit(s) {shown} with the starting "
                "parasitics; check the [amplifier] section against the boards measured"
            )

    def jac_natural(params: Mapping[str, float], names: Sequence[str]) -> np.ndarray:
        if model is None:
            return ideal_jacobian(topology, vals, params, names) / w_sigma[:, None]
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
                f"{format_parameter(name, base[name])}."
            )
        elif name in sel.aliased:
            before = [k for k in kept if fit.index(k) < fit.index(name)]
            why = _reason(topology, vals, before + [name])
            notes.append(
                f"{name} cannot be told apart from {' and '.join(before)} with these units: "
                f"{why}; it is held at {format_parameter(name, base[name])}."
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
            f"{name} is held at {format_parameter(name, base[name])}: {n} unit(s) can support "
            f"at most {n - min_dof} fitted parameter(s)."
        )
    if not kept:
        raise SpecError(f"cannot fit any of {', '.join(fit)} from {n} unit(s); measure more units")
    identifiable = not dropped

    # ---- the least-squares fit over internal variables
    def to_params(u: np.ndarray) -> dict[str, float]:
        return {**base, **{k: float(u[i]) * scale[k] for i, k in enumerate(kept)}}

    def resid(u: np.ndarray) -> np.ndarray:
        return (freq(to_params(u)) - f) / w_sigma

    def jac(u: np.ndarray) -> np.ndarray:
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

    def solve(loss_name: str, fs: float, start: np.ndarray) -> optimize.OptimizeResult:
        return optimize.least_squares(
            resid,
            start,
            jac=jac,
            bounds=(lo, hi),
            x_scale=np.ones(len(kept)),
            loss=loss_name,
            f_scale=fs,
            method="trf",
            xtol=1e-14,
            ftol=1e-14,
            gtol=1e-14,
            max_nfev=2000,
        )

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
        a, b = (int(x) for x in np.unravel_index(np.argmax(np.abs(corr - np.eye(p))), corr.shape))
        notes.append(
            f"{kept[a]} and {kept[b]} are only weakly separated by these units "
            f"(correlation {corr[a, b]:+.3f}); their intervals are wide."
        )

    at_bound = [
        bool(
            np.isclose(u[i], lo[i], rtol=0, atol=1e-7) or np.isclose(u[i], hi[i], rtol=0, atol=1e-7)
        )
        for i in range(p)
    ]
    estimates, estimate_notes = parameter_estimates(
        params, kept, cov, q, at_bound=at_bound, combinations=exprs, confidence=confidence
    )
    notes += estimate_notes

    # ---- residuals and outliers
    f_fit = freq(params)
    if model is not None:
        stops = ~np.isfinite(np.asarray(model(apply_parasitics(topology, vals, params)), float))
        if np.any(stops):
            notes.append(
                f"{int(np.sum(stops))} unit(s) do not oscillate in the board model at the "
                "fitted parasitics; the ideal tank stands in for them."
            )
    res_hz = f - f_fit
    res_ppm = 1e6 * res_hz / f_fit
    s = float(np.sqrt(s2)) if np.isfinite(s2) else float("nan")
    standardized = -r / s if s > 0 else np.zeros_like(r)
    outliers = flag_outliers(-r, j_u, dof, unit_ids, loss=loss)
    notes += outliers.notes

    return CalibrationResult(
        topology=topology.name,
        unit_ids=unit_ids,
        parameters=estimates,
        fitted=tuple(kept),
        covariance=cov,
        f_measured=f,
        f_fitted=f_fit,
        residual_hz=res_hz,
        residual_ppm=res_ppm,
        standardized=standardized,
        studentized=outliers.studentized,
        outliers=outliers.outliers,
        outlier_threshold=outliers.threshold,
        aliases=aliases,
        identifiable=identifiable,
        notes=tuple(notes),
        dof=dof,
        residual_scale=s,
        singular_values=svn,
        loss=loss,
        f_scale=None if loss == "linear" or f_scale is None else float(f_scale),
        confidence=confidence,
        absolute_sigma=absolute_sigma,
        sigma=sigma,
        weighted_sse=float(np.sum(r**2)),
    )


def _select_and_fit(
    topology: Topology,
    vals: Mapping[str, np.ndarray],
    f: np.ndarray,
    candidates: Sequence[str],
    loss: str,
    f_scale: float | None,
    alpha: float,
    args: Mapping[str, Any],
) -> CalibrationResult:
    """:func:`fit_parasitics` with ``select=True``: choose, then fit the kept ones."""
    fits: dict[tuple[str, ...], CalibrationResult] = {}

    def nested(names: Sequence[str]) -> NestedFit:
        key = tuple(names)
        if key not in fits:
            fits[key] = fit_parasitics(topology, vals, f, fit=key, loss="linear", **args)
        r = fits[key]
        est = {e.name: float(e.estimate) for e in r.parameters if e.fitted}
        return NestedFit(r.fitted, r.weighted_sse, int(f.size), est)

    # a capacitance a parasitic adds cannot be negative: tested one-sided (selection.py)
    caps = [k for k in candidates if UNITS[k] == "F"]
    kept, steps, _ = choose_parasitics(
        nested,
        candidates,
        alpha=alpha,
        known_sigma=bool(args["absolute_sigma"]),
        nonnegative=caps,
    )
    final = next(r for r in fits.values() if r.fitted == kept)
    if loss != "linear":
        final = fit_parasitics(topology, vals, f, fit=kept, loss=loss, f_scale=f_scale, **args)
    held = {**DEFAULTS, **(args["fixed"] or {})}
    notes = [
        f"kept {s.name}: {s.reason}."
        if s.kept
        else f"left out {s.name} (held at {format_parameter(s.name, held[s.name])}): {s.reason}."
        for s in steps
    ]
    return replace(final, notes=(*notes, *final.notes), selection=steps)
