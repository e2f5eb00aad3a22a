"""Tolerance distributions and measured lots.

Reference statistics come from outside the module: scipy.stats distributions
(uniform, norm, truncnorm), scipy.integrate.quad for second moments, and the
GUM (JCGM 100:2008) conventions t/√3 and t/3 (99.73 % coverage).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, stats

from picker.errors import SpecError
from picker.parts.distributions import KINDS, deviation, mean_of, std_of
from picker.spec.lots import MIN_LOT_SIZE, load_lot_csv, lot_deviations

N = 200_000
TOLS = np.array([0.01, 0.05, 0.2])


def _u(seed=1, n=N):
    return np.random.default_rng(seed).random(n)


def _se_std(n):
    # relative standard error of a sample standard deviation is about 1/√(2n)
    # for a distribution close to normal; 5 of them is a generous bound.
    return 5.0 / np.sqrt(2 * n)


def test_shapes_and_monotone_in_u():
    # Every kind is an inverse CDF: non-decreasing in u, so common random
    # numbers and Sobol points keep their meaning (JCGM 101:2008, 6.4 / C.2).
    u = np.linspace(0.001, 0.999, 500)
    lot = np.random.default_rng(3).normal(0, 0.02, 40)
    for kind in KINDS:
        d = deviation(u[:, None], TOLS, kind, grade=TOLS / 2, lot=lot)
        assert d.shape == (500, 3)
        assert np.all(np.diff(d, axis=0) >= 0), kind


def test_uniform_std_is_t_over_sqrt3():
    # GUM JCGM 100:2008, 4.3.7: rectangular over ±t has sigma = t/√3.
    d = deviation(_u(), TOLS, "uniform")
    assert_allclose(std_of("uniform", TOLS), TOLS / np.sqrt(3), rtol=1e-12)
    assert_allclose(d.std(axis=0), TOLS / np.sqrt(3), rtol=_se_std(N))
    assert np.all(np.abs(d) <= TOLS)


def test_normal_coverage_is_99_73_percent():
    # GUM JCGM 100:2008, G.1: k = 3 gives 99.73 % coverage (2Φ(3) - 1 from scipy).
    p = 2 * stats.norm.cdf(3.0) - 1
    d = deviation(_u(2), TOLS, "normal")
    inside = np.mean(np.abs(d) <= TOLS, axis=0)
    se = np.sqrt(p * (1 - p) / N)
    assert np.all(np.abs(inside - p) < 4 * se)
    assert_allclose(std_of("normal", TOLS), TOLS / 3, rtol=1e-12)
    assert_allclose(d.std(axis=0), TOLS / 3, rtol=_se_std(N))


def test_normal_clips_u_at_u_min():
    # Inside the clip the deviation is (t/3)·Φ⁻¹(u) with Φ⁻¹ from scipy.stats.norm.ppf;
    # a variate below u_min (or at 1) is moved to the clip bound (2^-53 by default,
    # 1 - 2^-53 at the top), so Φ⁻¹ stays finite.
    u = np.array([0.0, 1e-200, 0.3, 1.0])
    t = 0.06
    top = stats.norm.ppf(1 - 2.0**-53)
    want = t / 3 * np.array([stats.norm.ppf(2.0**-53)] * 2 + [stats.norm.ppf(0.3), top])
    assert_allclose(deviation(u, t, "normal")[:, 0], want, rtol=1e-14)
    low = t / 3 * np.array([stats.norm.ppf(1e-250), stats.norm.ppf(1e-200)])
    assert_allclose(deviation(u, t, "normal", u_min=1e-250)[:2, 0], low, rtol=1e-14)
    assert np.all(np.isfinite(deviation(u, t, "normal", u_min=1e-300)))


def test_truncated_normal_matches_scipy_truncnorm():
    # scipy.stats.truncnorm(-3, 3) is the reference for the cut-at-±tol variant.
    ref = stats.truncnorm(-3, 3)
    assert_allclose(std_of("normal", TOLS, truncate=True), TOLS / 3 * ref.std(), rtol=1e-10)
    d = deviation(_u(4), TOLS, "normal", truncate=True)
    assert np.all(np.abs(d) <= TOLS * (1 + 1e-12))
    ks = stats.kstest(d[:, 1] / (TOLS[1] / 3), ref.cdf)
    assert ks.pvalue > 1e-3


def test_graded_uniform_reproduces_its_definition():
    # Graded parts: |d| uniform on [g, t], sign fair (definition; common practice).
    t, g = 0.10, 0.05
    d = deviation(_u(5), t, "graded", grade=g)[:, 0]
    assert np.all((np.abs(d) >= g) & (np.abs(d) <= t))
    frac_neg = np.mean(d < 0)
    assert abs(frac_neg - 0.5) < 4 * np.sqrt(0.25 / N)
    ks = stats.kstest(np.abs(d), stats.uniform(loc=g, scale=t - g).cdf)
    assert ks.pvalue > 1e-3
    # closed form against a numerical second moment (scipy.integrate.quad) of the density
    m2, _ = integrate.quad(lambda x: x * x / (t - g), g, t)
    assert_allclose(std_of("graded", t, grade=g), np.sqrt(m2), rtol=1e-10)
    assert_allclose(d.std(), np.sqrt(m2), rtol=_se_std(N))
    assert_allclose(std_of("graded", t, grade=0.0), t / np.sqrt(3), rtol=1e-12)


def test_graded_normal_matches_truncnorm_band():
    # |d|/sigma follows a normal restricted to [g/sigma, 3]: scipy truncnorm(a, 3).
    t, g = 0.10, 0.02
    sigma = t / 3
    ref = stats.truncnorm(g / sigma, 3.0)
    d = deviation(_u(6), t, "graded-normal", grade=g)[:, 0]
    assert np.all((np.abs(d) >= g * (1 - 1e-12)) & (np.abs(d) <= t * (1 + 1e-12)))
    ks = stats.kstest(np.abs(d) / sigma, ref.cdf)
    assert ks.pvalue > 1e-3
    assert_allclose(std_of("graded-normal", t, grade=g), sigma * np.sqrt(ref.moment(2)), rtol=1e-9)


def test_empirical_reproduces_lot_statistics():
    # Resampling a lot (Efron's bootstrap) gives each value weight 1/n, so with
    # stratified u (n·m equally spaced points) mean and population std are exact.
    rng = np.random.default_rng(7)
    lot = rng.normal(0.012, 0.015, 37)
    m = 50
    u = (np.arange(lot.size * m) + 0.5) / (lot.size * m)
    d = deviation(u, [0.05, 0.1], "empirical", lot=lot)
    assert_allclose(d.mean(axis=0), lot.mean(), rtol=1e-12)
    assert_allclose(d.std(axis=0), lot.std(), rtol=1e-12)
    assert_allclose(np.sort(np.unique(d[:, 0])), np.sort(lot), rtol=0)
    assert_allclose(std_of("empirical", 0.05, lot=lot), lot.std(), rtol=1e-12)
    assert_allclose(mean_of("empirical", 0.05, lot=lot), lot.mean(), rtol=1e-12)
    # random u: each lot value drawn with probability 1/n (chi-square, scipy)
    idx = np.searchsorted(np.sort(lot), deviation(_u(8), 0.05, "empirical", lot=lot)[:, 0])
    counts = np.bincount(idx, minlength=lot.size)
    assert stats.chisquare(counts).pvalue > 1e-3


@pytest.mark.parametrize(
    "kwargs",
    [
        {"kind": "triangle"},
        {"kind": "graded"},
        {"kind": "graded", "grade": 0.05},  # grade equal to the tolerance
        {"kind": "empirical"},
    ],
)
def test_bad_parameters_are_spec_errors(kwargs):
    with pytest.raises(SpecError):
        deviation(_u(n=10), 0.05, **kwargs)


# --- measured lots -------------------------------------------------------------------


def _write(tmp_path, text, name="lot.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_load_lot_csv_reads_values_with_prefixes(tmp_path):
    vals = np.round(np.linspace(4.6, 4.8, 25), 4) * 1e-9
    lines = ["# incoming inspection, invented lot", "serial,value,note"]
    lines += [f"{i},{v * 1e9:.4f} nF,ok" for i, v in enumerate(vals)]
    p = _write(tmp_path, "\n".join(lines) + "\n")
    d = load_lot_csv(p, 4.7e-9, "F", tol=0.05)
    assert_allclose(d, vals / 4.7e-9 - 1, rtol=0, atol=1e-12)  # parse round-off only


def test_single_column_without_header(tmp_path):
    p = _write(tmp_path, "\n".join(f"{100 + i % 5}u" for i in range(30)), "l.csv")
    d = load_lot_csv(p, 102e-6, "H", tol=0.1)
    assert d.shape == (30,)


def test_lot_errors_name_file_row_and_column(tmp_path):
    lines = ["value"] + ["4.7n"] * 24 + ["4.7uH"]
    p = _write(tmp_path, "\n".join(lines))
    with pytest.raises(SpecError) as exc:
        load_lot_csv(p, 4.7e-9, "F", tol=0.05)
    msg = str(exc.value)
    assert "lot.csv" in msg and "row 26, column 1" in msg and "\n" not in msg

    p = _write(tmp_path, "serial,reading\n1,4.7n\n", "nohdr.csv")
    with pytest.raises(SpecError, match="'value' column"):
        load_lot_csv(p, 4.7e-9, "F", tol=0.05)


def test_lot_plausibility():
    good = np.full(MIN_LOT_SIZE, 1.02e-9)
    assert_allclose(lot_deviations(good, 1e-9, 0.05), 0.02, rtol=1e-12)
    with pytest.raises(SpecError, match="at least"):
        lot_deviations(good[:-1], 1e-9, 0.05)
    with pytest.raises(SpecError, match="median"):
        lot_deviations(good * 10, 1e-9, 0.05)  # a lot of 10 nF parts for a 1 nF position
    bad = good.copy()
    bad[3] = -1e-9
    with pytest.raises(SpecError, match="positive"):
        lot_deviations(bad, 1e-9, 0.05)


# ---------------------------------------------------------------- distribution functions


def _scipy_cdf(kind, x, t, g=None, lot=None):
    """F(x) of each kind from scipy.stats (the references, independent of picker)."""
    from scipy import stats as st

    if kind == "uniform":
        return st.uniform(loc=-t, scale=2 * t).cdf(x)
    if kind == "normal":
        return st.norm(scale=t / 3).cdf(x)  # sigma = tol/3 (GUM G.1)
    if kind == "normal-truncated":
        return st.truncnorm(-3, 3, scale=t / 3).cdf(x)
    if kind == "graded":  # half the mass uniform on each band [-t, -g], [g, t]
        return 0.5 * st.uniform(loc=-t, scale=t - g).cdf(x) + 0.5 * st.uniform(
            loc=g, scale=t - g
        ).cdf(x)
    if kind == "graded-normal":  # half the mass on each band of the normal, sigma = t/3
        s = t / 3
        upper = st.truncnorm(g / s, 3, scale=s)
        lower = st.truncnorm(-3, -g / s, scale=s)
        return 0.5 * lower.cdf(x) + 0.5 * upper.cdf(x)
    if kind == "empirical":
        return np.array([np.mean(lot <= v) for v in np.atleast_1d(x)])
    raise AssertionError(kind)


@pytest.mark.parametrize(
    "kind", ["uniform", "normal", "normal-truncated", "graded", "graded-normal", "empirical"]
)
def test_cdf_and_interval_probability_match_scipy_stats(kind):
    from picker.parts.distributions import cdf, probability

    t, g = 0.05, 0.02
    lot = np.random.default_rng(4).normal(0.01, 0.02, 37)
    x = np.linspace(-0.07, 0.07, 57)
    name = "normal" if kind == "normal-truncated" else kind
    kw = dict(grade=g if "graded" in kind else None, lot=lot, truncate=kind == "normal-truncated")
    got = cdf(x, t, name, **kw).ravel()
    want = _scipy_cdf(kind, x, t, g, lot)
    assert_allclose(got, want, atol=1e-12)  # closed forms: rounding only
    lo, hi = x[:-5], x[5:]
    p = probability(lo, hi, t, name, **kw)
    if kind == "empirical":  # a closed interval: lot values on an edge count
        want_p = np.array([np.mean((lot >= a) & (lot <= b)) for a, b in zip(lo, hi, strict=True)])
    else:
        want_p = _scipy_cdf(kind, hi, t, g, lot) - _scipy_cdf(kind, lo, t, g, lot)
    assert_allclose(p.ravel(), want_p, atol=1e-12)
    assert np.all(probability(hi, lo, t, name, **kw) == 0)  # an empty interval


@pytest.mark.parametrize("kind", ["uniform", "normal", "graded", "graded-normal", "empirical"])
def test_cdf_is_what_deviation_draws(kind):
    # the share of deviations drawn at or below x, over a fine grid of u, is F(x)
    from picker.parts.distributions import cdf

    u = (np.arange(200_000) + 0.5) / 200_000
    lot = np.random.default_rng(4).normal(0.0, 0.02, 25)
    kw = dict(grade=0.02 if "graded" in kind else None, lot=lot)
    d = deviation(u, 0.05, kind, **kw)[:, 0]
    for x in (-0.045, -0.01, 0.0, 0.013, 0.03):
        assert abs(np.mean(d <= x) - float(cdf(x, 0.05, kind, **kw))) < 2e-5


def test_zero_tolerance_is_a_point_mass():
    from picker.parts.distributions import probability

    assert probability(-0.01, 0.01, 0.0, "uniform") == 1.0
    assert probability(0.001, 0.01, 0.0, "normal") == 0.0
