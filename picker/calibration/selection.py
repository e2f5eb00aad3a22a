"""Which parasitics the measured units support: forward selection by nested-model tests.

Core module, generic over the model: it sees only a function that fits a
list of parasitics and returns the weighted residual sum of squares.

Candidates are tried in order of preference. The first is always fitted (a
calibration estimates at least one thing). Each later candidate q is added to
the kept set K when the fit of K + q explains significantly more than the fit
of K, by the extra-sum-of-squares F-test

    F = (SSE_K − SSE_{K+q}) / (p_{K+q} − p_K)  /  (SSE_{K+q} / (n − p_{K+q}))     (ES)

against F_{1−α}(p_{K+q} − p_K, n − p_{K+q}) (Draper & Smith, *Applied Regression
Analysis*, 3rd ed., 1998, ch. 6, "the extra sum of squares principle"; for a
non-linear model the test is the usual linearised approximation, Bates &
Watts, *Nonlinear Regression Analysis and Its Applications*, 1988, §3.10 —
the section number is from memory). With sigmas known in absolute terms
the residual variance needs no estimate and (ES) becomes the likelihood-ratio
test ΔSSE ~ χ²(p_{K+q} − p_K) (Wilks, Ann. Math. Statist. 9, 1938).

A candidate that cannot be negative (a shunt capacitance: a parasitic adds
capacitance, it cannot take it away) is tested one-sided, against the
alternative "it is positive": with one parameter added, F on (1, ν) degrees of
freedom is the square of Student's t on ν (Draper & Smith 1998, ch. 6), so the
one-sided p-value is p/2 when the estimate is positive and 1 − p/2 when it is
negative (the same with χ²(1) = z² for known sigmas). The level is the same α:
an unsupported shunt is still kept in at most α of calibrations, but never
with a negative value, which would only absorb scatter along a direction the
other parasitics nearly share (the likelihood-ratio test of a parameter on the
boundary of its range has the half-χ²(1) null behind this; Self & Liang,
JASA 82, 1987, from memory).

A candidate the fit cannot separate from the kept ones (the identifiability
check of :mod:`picker.calibration.diagnostics`), or that would leave no
degree of freedom, is not added either; each step says why.
"""

from __future__ import annotations

from collections.abc import Callable, Collection, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

__all__ = ["SELECT_ALPHA", "NestedFit", "SelectionStep", "choose_parasitics", "extra_ss_test"]

#: Significance level of the nested-model test: a parasitic the data do not
#: support is kept by chance in at most this share of calibrations.
SELECT_ALPHA = 0.05


@dataclass(frozen=True)
class NestedFit:
    """What the selection needs from one least-squares fit.

    ``fitted`` are the parasitics actually estimated (the identifiability
    check may hold some of those asked for), ``sse`` the weighted residual sum
    of squares, ``n`` the number of units, ``estimates`` the fitted values
    (needed for the one-sided test of a candidate that cannot be negative).
    """

    fitted: tuple[str, ...]
    sse: float
    n: int
    estimates: Mapping[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class SelectionStep:
    """One candidate's outcome.

    ``test`` is "F" or "chi2" (NaN statistic and p-value when no test was
    run: the first candidate, or one that could not be fitted), ``df`` the
    test's degrees of freedom, ``reason`` a plain-words sentence.
    """

    name: str
    kept: bool
    test: str
    statistic: float
    df: tuple[int, ...]
    p_value: float
    reason: str


def extra_ss_test(
    sse_reduced: float, sse_full: float, p_reduced: int, p_full: int, n: int, *, known_sigma: bool
) -> tuple[float, float, tuple[int, ...]]:
    """Statistic, p-value and degrees of freedom of the nested-model test (ES).

    Unknown sigma: F = ((SSE_r − SSE_f)/(p_f − p_r)) / (SSE_f/(n − p_f)) on
    (p_f − p_r, n − p_f) degrees of freedom (Draper & Smith 1998, ch. 6).
    Known sigma (weighted residuals in sigma units): ΔSSE on p_f − p_r degrees
    of freedom of χ² (Wilks 1938). A fit that gets worse counts as no gain.

    Examples
    --------
    >>> f, p, df = extra_ss_test(20.0, 10.0, 1, 2, 12, known_sigma=False)
    >>> round(f, 6), df
    (10.0, (1, 10))
    """
    dp = p_full - p_reduced
    gain = max(sse_reduced - sse_full, 0.0)
    if known_sigma:
        return gain, float(stats.chi2.sf(gain, dp)), (dp,)
    dof = n - p_full
    if sse_full <= 0.0:
        f = float("inf") if gain > 0 else 0.0
    else:
        f = (gain / dp) / (sse_full / dof)  # (ES)
    return f, float(stats.f.sf(f, dp, dof)), (dp, dof)


def _fmt_p(p: float) -> str:
    return f"= {p:.2g}" if p >= 1e-4 else "< 1e-4"


def choose_parasitics(
    fit: Callable[[Sequence[str]], NestedFit],
    candidates: Sequence[str],
    *,
    alpha: float = SELECT_ALPHA,
    known_sigma: bool = False,
    nonnegative: Collection[str] = (),
) -> tuple[tuple[str, ...], tuple[SelectionStep, ...], NestedFit]:
    """Forward selection of ``candidates`` in order (see the module docstring); those in
    ``nonnegative`` are tested one-sided.

    Returns the kept names (in order), one :class:`SelectionStep` per
    candidate, and the fit of the kept set.
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie in (0, 1); got {alpha}")
    first = candidates[0]
    current = fit([first])
    kept = list(current.fitted)
    nan = float("nan")
    steps = [
        SelectionStep(
            first,
            first in kept,
            "",
            nan,
            (),
            nan,
            "first in order of preference, always fitted"
            if first in kept
            else "it has no effect on any unit's frequency",
        )
    ]
    for name in candidates[1:]:
        trial = kept + [name]
        if len(trial) > current.n - (0 if known_sigma else 1):
            steps.append(
                SelectionStep(
                    name,
                    False,
                    "",
                    nan,
                    (),
                    nan,
                    f"{current.n} unit(s) leave no degree of freedom to test it",
                )
            )
            continue
        bigger = fit(trial)
        if name not in bigger.fitted or len(bigger.fitted) <= len(kept):
            steps.append(
                SelectionStep(
                    name,
                    False,
                    "",
                    nan,
                    (),
                    nan,
                    f"these units cannot tell it apart from {' and '.join(kept)}",
                )
            )
            continue
        stat, p, df = extra_ss_test(
            current.sse,
            bigger.sse,
            len(kept),
            len(bigger.fitted),
            bigger.n,
            known_sigma=known_sigma,
        )
        test = "chi2" if known_sigma else "F"
        label = (
            f"χ² = {stat:.3g} on {df[0]} d.f."
            if known_sigma
            else f"F = {stat:.3g} on ({df[0]}, {df[1]}) d.f."
        )
        est = bigger.estimates.get(name, float("nan"))
        if name in nonnegative and df[0] == 1 and np.isfinite(est):
            p = 0.5 * p if est > 0 else 1.0 - 0.5 * p  # one-sided: F(1, ν) = t², χ²(1) = z²
            label += ", one-sided"
            if est <= 0:
                reason = (
                    "it came out negative when fitted, and it cannot be: no evidence for "
                    f"it ({label}, p {_fmt_p(p)}; extra-sum-of-squares test)"
                )
                steps.append(SelectionStep(name, False, test, stat, df, p, reason))
                continue
        if np.isfinite(p) and p < alpha:
            kept = list(bigger.fitted)
            current = bigger
            reason = (
                f"it explains significantly more ({label}, p {_fmt_p(p)}, below the "
                f"{alpha:g} level; extra-sum-of-squares test)"
            )
            steps.append(SelectionStep(name, True, test, stat, df, p, reason))
        else:
            reason = (
                f"the data do not support it ({label}, p {_fmt_p(p)}, not below the "
                f"{alpha:g} level; extra-sum-of-squares test)"
            )
            steps.append(SelectionStep(name, False, test, stat, df, p, reason))
    return tuple(kept), tuple(steps), current
