"""Diagnostics of a linearised weighted least-squares fit: identifiability and outliers.

Core module, generic over the model: everything here takes the weighted
Jacobian J (shape (n_observations, n_parameters)) and weighted residuals.

* Identifiability: the singular values of J with its columns scaled to unit
  length (so parameter units do not matter). A smallest/largest ratio near 0
  means some combination of parameters leaves every prediction unchanged to
  first order (Seber & Wild, *Nonlinear Regression*, 1989, §3.4; Golub & Van
  Loan, *Matrix Computations*, §5.5 on rank deficiency).
* Outliers: externally studentised residuals (Belsley, Kuh & Welsch,
  *Regression Diagnostics*, 1980, eq. 2.26), each compared with the
  Bonferroni critical value t_{1−α/(2n)} of Student's t with n − p − 1 degrees
  of freedom (Cook & Weisberg, *Residuals and Influence in Regression*, 1982,
  §2.2), so a batch of good units raises a false alarm at most α of the time.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = [
    "OUTLIER_ALPHA",
    "OutlierTest",
    "Selection",
    "flag_outliers",
    "loss_weights",
    "normalised_singular_values",
    "relative_min_sv",
    "select_estimable",
    "studentized",
]

#: Family-wise false-alarm rate of the outlier test (Bonferroni over the units).
OUTLIER_ALPHA = 0.05


def _normalise(j: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    norms = np.linalg.norm(j, axis=0)
    safe = np.where(norms > 0, norms, 1.0)
    return j / safe, norms


def relative_min_sv(j: np.ndarray) -> float:
    """Smallest over largest singular value of ``j`` with unit-length columns.

    1 for orthogonal columns, 0 when a column is zero or the columns are
    linearly dependent. A matrix with no columns gives 1.

    Examples
    --------
    >>> relative_min_sv(np.array([[1.0, 2.0], [2.0, 4.0]]))  # proportional columns
    0.0
    >>> relative_min_sv(np.array([[1.0, 0.0], [0.0, 3.0]]))
    1.0
    """
    if j.shape[1] == 0:
        return 1.0
    jn, norms = _normalise(j)
    if np.any(norms == 0):
        return 0.0
    s = np.linalg.svd(jn, compute_uv=False)
    return float(np.round(s[-1] / s[0], 15))


def normalised_singular_values(j: np.ndarray) -> np.ndarray:
    """Singular values of ``j`` with unit-length columns, descending."""
    return np.linalg.svd(_normalise(j)[0], compute_uv=False)


@dataclass(frozen=True)
class Selection:
    """Which parameters a Jacobian can estimate.

    Attributes
    ----------
    kept:
        Parameters to fit, in the order of preference given.
    aliased:
        Parameters held because they cannot be separated from ``kept``.
    no_effect:
        Parameters held because they change no prediction at all.
    aliases:
        kept name -> {aliased name: a}: to first order, holding the aliased
        parameter q and fitting k estimates k + a·(q − q_held).
    """

    kept: tuple[str, ...]
    aliased: tuple[str, ...]
    no_effect: tuple[str, ...]
    aliases: dict[str, dict[str, float]]


def select_estimable(j: np.ndarray, names: Sequence[str], *, rcond: float) -> Selection:
    """Keep parameters in order of preference while they stay separable.

    Greedy: parameter i is kept when ``relative_min_sv`` of the columns kept
    so far plus column i is at least ``rcond``. For each held parameter q the
    least-squares projection J_q ≈ Σ a_k·J_k onto the kept columns gives the
    combination the kept estimates stand for; terms whose effect is below
    1e-3 of |J_q| are dropped.
    """
    names = list(names)
    kept: list[int] = []
    aliased: list[int] = []
    no_effect: list[int] = []
    for i in range(len(names)):
        if relative_min_sv(j[:, kept + [i]]) >= rcond:
            kept.append(i)
        elif not np.any(j[:, i]):
            no_effect.append(i)
        else:
            aliased.append(i)
    aliases: dict[str, dict[str, float]] = {}
    if kept and aliased:
        coef, *_ = np.linalg.lstsq(j[:, kept], j[:, aliased], rcond=None)
        norm_k = np.linalg.norm(j[:, kept], axis=0)
        norm_q = np.linalg.norm(j[:, aliased], axis=0)
        for a, k in enumerate(kept):
            terms = {
                names[q]: float(coef[a, b])
                for b, q in enumerate(aliased)
                if abs(coef[a, b]) * norm_k[a] > 1e-3 * norm_q[b]  # a visible effect only
            }
            if terms:
                aliases[names[k]] = terms
    return Selection(
        kept=tuple(names[i] for i in kept),
        aliased=tuple(names[i] for i in aliased),
        no_effect=tuple(names[i] for i in no_effect),
        aliases=aliases,
    )


def loss_weights(r: np.ndarray, loss: str, f_scale: float) -> np.ndarray:
    """IRLS weights ρ'(z), z = (r/f_scale)², for scipy.optimize.least_squares' losses.

    soft_l1: ρ(z) = 2((1+z)^½ − 1), ρ' = (1+z)^(−½); huber: ρ' = 1 for z ≤ 1,
    else z^(−½) (the scipy documentation of ``least_squares``).
    """
    if loss == "linear":
        return np.ones_like(r)
    z = (r / f_scale) ** 2
    if loss == "soft_l1":
        return 1.0 / np.sqrt(1.0 + z)
    if loss == "huber":
        return np.where(z <= 1.0, 1.0, 1.0 / np.sqrt(np.maximum(z, 1.0)))
    raise ValueError(f"unknown loss {loss!r}")


def studentized(e: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Externally studentised residuals t_i = e_i / (s_(i)·√(1 − h_ii)).

    ``e`` are weighted residuals (n,), ``j`` the weighted Jacobian (n, p),
    n ≥ p + 2. The leave-one-out variance uses
    (n−p−1)·s_(i)² = SSE − e_i²/(1−h_ii) (Belsley, Kuh & Welsch 1980,
    eq. 2.26); under normal errors t_i follows Student's t with n − p − 1
    degrees of freedom.
    """
    n, p = j.shape
    u, sv, _ = np.linalg.svd(j, full_matrices=False)
    h = np.sum(u[:, sv > sv[0] * 1e-12] ** 2, axis=1)  # leverages: diagonal of the hat matrix
    sse = float(np.sum(e**2))
    one_h = np.clip(1.0 - h, 1e-12, None)
    s2_i = np.clip(sse - e**2 / one_h, 0.0, None) / (n - p - 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = e / np.sqrt(s2_i * one_h)
    t[(s2_i == 0) & (e == 0)] = 0.0
    return t


@dataclass(frozen=True)
class OutlierTest:
    """Outcome of :func:`flag_outliers`.

    Attributes
    ----------
    studentized:
        Externally studentised residual of each unit, shape (n,) (NaN when
        too few units).
    threshold:
        The Bonferroni critical value (NaN when too few units).
    outliers:
        Ids of the units beyond it, in input order.
    notes:
        One sentence per outlier, or one saying the test could not be run.
    """

    studentized: np.ndarray
    threshold: float
    outliers: tuple[str, ...]
    notes: tuple[str, ...]


def flag_outliers(
    e: np.ndarray, j: np.ndarray, dof: int, unit_ids: Sequence[str], *, loss: str
) -> OutlierTest:
    """Flag the units whose studentised residual is beyond the Bonferroni limit.

    ``e`` are weighted residuals (measured minus fitted, shape (n,)), ``j``
    the weighted Jacobian at the solution (n, p), ``dof`` = n − p. Unit i is
    an outlier when |t_i| > t_{1−α/(2n)}(n − p − 1), α = :data:`OUTLIER_ALPHA`
    (:func:`studentized`; Cook & Weisberg 1982, §2.2). Needs dof ≥ 2 and a
    residual that is not all zero; otherwise nothing is flagged and a note says so.
    """
    n = e.size
    notes: list[str] = []
    if dof >= 2 and np.sum(e**2) > 0:
        z = studentized(e, j)
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
    return OutlierTest(z, t_crit, out, tuple(notes))
