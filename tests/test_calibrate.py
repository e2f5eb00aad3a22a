"""Bench calibration: the board model, the fit, its intervals, identifiability,
outliers, the spec fragment and the measurements file.

Synthetic builds below are generated here from known parasitics plus seeded
noise; the checks compare the fit with those known values and with
scipy.optimize.curve_fit, never with numbers the fit itself produced.
"""

from __future__ import annotations

import tomllib

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import optimize, stats

from picker.calibration.fit import fit_parasitics
from picker.calibration.measurements import load_measurements, parse_measurements
from picker.errors import SpecError
from picker.report.calibration import fragment_toml
from picker.tank import board as topo_mod
from picker.tank.board import apply_parasitics, ideal_jacobian
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS


def board_frequency(topology, values, **parasitics):
    return topo_mod.board_frequency(topology, values, topo_mod.Parasitics(**parasitics))


TRUTH = {"stray": 12e-12, "c2_shunt": 35e-12, "l_scale": 0.98}


def design(n: int = 10) -> dict[str, np.ndarray]:
    """A fixed batch of Colpitts builds with varied values (invented, not a check value)."""
    c1 = np.array([1.0, 1.5, 2.2, 3.3, 4.7, 1.0, 2.2, 4.7, 1.5, 3.3, 6.8, 2.2])[:n] * 1e-9
    c2 = np.array([2.2, 4.7, 10, 3.3, 6.8, 10, 2.2, 4.7, 6.8, 10, 4.7, 3.3])[:n] * 1e-9
    lv = np.array([47, 33, 22, 47, 22, 33, 47, 22, 33, 47, 22, 33])[:n] * 1e-6
    return {"C1": c1, "C2": c2, "L": lv}


def closed_form_f(l_h, c1, c2, stray=0.0, c1_shunt=0.0, c2_shunt=0.0, l_scale=1.0):
    """Colpitts frequency written out by hand: f = 1/(2π√(L·(C1'C2'/(C1'+C2') + stray)))."""
    a, b = c1 + c1_shunt, c2 + c2_shunt
    return 1.0 / (2 * np.pi * np.sqrt(l_h * l_scale * (a * b / (a + b) + stray)))


# --------------------------------------------------------------------------- the model


def test_board_frequency_textbook_and_closed_form():
    # Boylestad & Nashelsky, FET Colpitts worked example (attribution from memory):
    # C1 = 750 pF, C2 = 2500 pF, L = 40 µH -> 1.047686 MHz (printed as about 1.05 MHz).
    v = {"C1": 750e-12, "C2": 2500e-12, "L": 40e-6}
    assert_allclose(board_frequency(COLPITTS, v), 1.047686e6, rtol=5e-7)  # 7 published digits
    # parasitics against the formula written out by hand (Thomson's formula)
    p = {"stray": 10e-12, "c1_shunt": 5e-12, "c2_shunt": 20e-12, "l_scale": 1.03}
    assert_allclose(
        board_frequency(COLPITTS, v, **p), closed_form_f(40e-6, 750e-12, 2500e-12, **p), rtol=1e-14
    )
    # Clapp example (REFERENCES.md, derived): L = 10 µH, C1 = C2 = 1 nF, C3 = 100 pF -> 5.513289 MHz
    vc = {"C1": 1e-9, "C2": 1e-9, "C3": 100e-12, "L": 10e-6}
    assert_allclose(board_frequency(CLAPP, vc), 5.513289e6, rtol=1e-7)
    eff = apply_parasitics(CLAPP, vc, {"c2_shunt": 1e-9})
    assert eff["C2"] == 2e-9 and eff["C3"] == 100e-12 and eff["stray"] == 0.0


@pytest.mark.parametrize("topo", [COLPITTS, CLAPP])
def test_analytic_jacobian_matches_central_differences(topo):
    v = design(6)
    if topo is CLAPP:
        v["C3"] = np.array([100, 150, 220, 330, 470, 680]) * 1e-12
    names = ("stray", "c1_shunt", "c2_shunt", "l_scale")
    at = {"stray": 8e-12, "c1_shunt": 3e-12, "c2_shunt": 20e-12, "l_scale": 1.02}
    j = ideal_jacobian(topo, v, at, names)
    for i, k in enumerate(names):
        h = 1e-13 if k != "l_scale" else 1e-6
        up = board_frequency(topo, v, **{**at, k: at[k] + h})
        dn = board_frequency(topo, v, **{**at, k: at[k] - h})
        # central difference error O(h²) plus rounding ~1e-16·f/h: well below 1e-6 relative
        assert_allclose(j[:, i], (up - dn) / (2 * h), rtol=1e-6)


# --------------------------------------------------------------------------- intervals


def test_interval_coverage_over_repeated_builds():
    """The 95 % interval covers the true parasitic in 95 % of repeated batches.

    400 batches of 10 units, 200 ppm Gaussian frequency noise. The number of
    covering batches is Binomial(400, 0.95) if the intervals are right, so
    the observed coverage must lie within 0.95 ± 3·SE with
    SE = √(0.95·0.05/400) = 0.0109 (a two-sided check: too wide fails too).
    """
    rng = np.random.default_rng(20240601)
    v = design(10)
    f_true = board_frequency(COLPITTS, v, **TRUTH)
    trials = 400
    hits = dict.fromkeys(TRUTH, 0)
    for _ in range(trials):
        f = f_true * (1 + 200e-6 * rng.standard_normal(f_true.size))
        res = fit_parasitics(COLPITTS, v, f)
        assert res.identifiable and res.dof == 7
        for k, truth in TRUTH.items():
            p = res.parameter(k)
            hits[k] += p.ci_low <= truth <= p.ci_high
    se = np.sqrt(0.95 * 0.05 / trials)
    for k in TRUTH:
        coverage = hits[k] / trials
        assert 0.95 - 3 * se <= coverage <= 0.95 + 3 * se, (k, coverage)


def test_absolute_sigma_coverage_with_unequal_sigmas():
    """Known, unequal sigmas: normal-quantile intervals cover 95 % (same binomial bound)."""
    rng = np.random.default_rng(7)
    v = design(12)
    f_true = board_frequency(COLPITTS, v, **TRUTH)
    sigma = f_true * np.linspace(50e-6, 400e-6, f_true.size)
    trials = 400
    hits = dict.fromkeys(TRUTH, 0)
    for _ in range(trials):
        f = f_true + sigma * rng.standard_normal(f_true.size)
        res = fit_parasitics(COLPITTS, v, f, sigma=sigma, absolute_sigma=True)
        for k, truth in TRUTH.items():
            p = res.parameter(k)
            hits[k] += p.ci_low <= truth <= p.ci_high
    se = np.sqrt(0.95 * 0.05 / trials)
    for k in TRUTH:
        assert 0.95 - 3 * se <= hits[k] / trials <= 0.95 + 3 * se, (k, hits[k] / trials)


@pytest.mark.parametrize("absolute", [False, True])
def test_weighted_fit_agrees_with_curve_fit(absolute):
    """Estimates and covariance agree with scipy.optimize.curve_fit (trust region,
    its own finite-difference Jacobian), given the same sigma and absolute_sigma."""
    rng = np.random.default_rng(3)
    v = design(12)
    f_true = board_frequency(COLPITTS, v, **TRUTH)
    sigma = f_true * np.linspace(80e-6, 300e-6, f_true.size)
    f = f_true + sigma * rng.standard_normal(f_true.size)
    res = fit_parasitics(
        COLPITTS, v, f, sigma=sigma, absolute_sigma=absolute, fit=("stray", "l_scale", "c2_shunt")
    )

    def model(idx, stray_pf, l_scale, c2_pf):  # parameters in pF so curve_fit's steps are sane
        i = idx.astype(int)
        return closed_form_f(
            v["L"][i], v["C1"][i], v["C2"][i], stray_pf * 1e-12, 0.0, c2_pf * 1e-12, l_scale
        )

    popt, pcov = optimize.curve_fit(
        model,
        np.arange(f.size, dtype=float),
        f,
        p0=[10.0, 1.0, 30.0],
        sigma=sigma,
        absolute_sigma=absolute,
        method="trf",
        jac="3-point",
        xtol=1e-14,
        ftol=1e-14,
        gtol=1e-14,
    )
    to_si = np.array([1e-12, 1.0, 1e-12])
    ours = np.array([res.parameter(k).estimate for k in res.fitted])
    assert res.fitted == ("stray", "l_scale", "c2_shunt")
    se = np.sqrt(np.diag(pcov)) * to_si
    # both optimisers converge far closer than 1e-4 of a standard error
    assert np.all(np.abs(ours - popt * to_si) <= 1e-4 * se)
    # curve_fit's Jacobian here is a central difference (relative error ~1e-10 per entry,
    # amplified by the conditioning of JᵀJ); allow 1e-6
    assert_allclose(res.covariance, pcov * np.outer(to_si, to_si), rtol=1e-6)
    q = stats.norm.ppf(0.975) if absolute else stats.t.ppf(0.975, f.size - 3)
    p = res.parameter("stray")
    assert_allclose(
        [p.ci_low, p.ci_high], popt[0] * 1e-12 + np.array([-1, 1]) * q * se[0], rtol=1e-5
    )


def test_custom_model_hook_gives_the_same_fit():
    rng = np.random.default_rng(11)
    v = design(10)
    f = board_frequency(COLPITTS, v, **TRUTH) * (1 + 100e-6 * rng.standard_normal(10))
    a = fit_parasitics(COLPITTS, v, f)

    def model(eff):  # the ideal tank, written out independently of picker.tank.base
        return closed_form_f(eff["L"], eff["C1"], eff["C2"], eff["stray"])

    b = fit_parasitics(COLPITTS, v, f, model=model)
    se = np.sqrt(np.diag(a.covariance))
    ea = np.array([a.parameter(k).estimate for k in a.fitted])
    eb = np.array([b.parameter(k).estimate for k in b.fitted])
    assert np.all(np.abs(ea - eb) < 1e-4 * se)  # same optimum to a small fraction of an SE
    assert_allclose(b.covariance, a.covariance, rtol=1e-4)  # central differences, h = 1e-5


# --------------------------------------------------------------------------- identifiability


def test_identical_units_report_the_estimable_combination():
    n = 8
    c1, c2, lv = 1e-9, 4.7e-9, 47e-6
    v = {"C1": np.full(n, c1), "C2": np.full(n, c2), "L": np.full(n, lv)}
    rng = np.random.default_rng(5)
    f = board_frequency(COLPITTS, v, **TRUTH) * (1 + 50e-6 * rng.standard_normal(n))
    res = fit_parasitics(COLPITTS, v, f)
    assert not res.identifiable
    assert res.fitted == ("stray",)
    assert not res.parameter("l_scale").fitted and res.parameter("l_scale").estimate == 1.0
    text = " ".join(res.notes)
    assert "every unit has the same part values" in text and "stray + " in text
    # derived: f fixes L·l_scale·(C_s + stray), so ∂stray/∂l_scale = C_s + stray at the
    # held point (stray 0), i.e. C_s = C1C2/(C1+C2); ∂C_s/∂C2 = (C_s/C2)² = (C1/(C1+C2))².
    cs = c1 * c2 / (c1 + c2)
    assert_allclose(res.aliases["stray"]["l_scale"], cs, rtol=1e-9)
    assert_allclose(res.aliases["stray"]["c2_shunt"], (c1 / (c1 + c2)) ** 2, rtol=1e-9)
    # the estimate is the exact equivalent stray: L·(C_s + s') = L·l_scale·(C_s(C2 + c2s) + stray)
    c2s = c2 + TRUTH["c2_shunt"]
    equivalent = TRUTH["l_scale"] * (c1 * c2s / (c1 + c2s) + TRUTH["stray"]) - cs
    p = res.parameter("stray")
    assert p.ci_low <= equivalent <= p.ci_high


def test_same_ratio_separates_l_scale_but_not_c2_shunt():
    v = design(10)
    v["C2"] = 3.0 * v["C1"]
    rng = np.random.default_rng(9)
    f = board_frequency(COLPITTS, v, **TRUTH) * (1 + 100e-6 * rng.standard_normal(10))
    res = fit_parasitics(COLPITTS, v, f)
    assert not res.identifiable
    assert res.fitted == ("stray", "l_scale")
    assert any("same C1/C2 ratio" in n and "c2_shunt" in n for n in res.notes)
    # derived: ∂C_s/∂C2 = (C1/(C1+C2))² = 1/16 for C2 = 3·C1
    assert_allclose(res.aliases["stray"]["c2_shunt"], 1 / 16, rtol=1e-9)
    assert "l_scale" not in res.aliases  # l_scale's estimate absorbs none of c2_shunt


def test_too_few_units():
    v = design(2)
    f = board_frequency(COLPITTS, v, **TRUTH)
    res = fit_parasitics(COLPITTS, v, f, fit=("stray", "l_scale"))
    assert res.fitted == ("stray",) and any("at most 1" in n for n in res.notes)
    with pytest.raises(SpecError, match="measure more units"):
        fit_parasitics(COLPITTS, {k: x[:1] for k, x in v.items()}, f[:1])
    with pytest.raises(SpecError, match="expected parasitics from"):
        fit_parasitics(COLPITTS, v, f, fit=("strays",))


# --------------------------------------------------------------------------- outliers


def test_outlier_is_named_and_robust_loss_resists_it():
    rng = np.random.default_rng(2)
    v = design(12)
    ids = [f"U{i + 1}" for i in range(12)]
    f = board_frequency(COLPITTS, v, **TRUTH) * (1 + 100e-6 * rng.standard_normal(12))
    f[6] *= 1 + 3000e-6  # U7 was mis-read by 3000 ppm
    lin = fit_parasitics(COLPITTS, v, f, unit_ids=ids)
    assert lin.outliers == ("U7",)
    assert any("U7" in n and "robust loss" in n for n in lin.notes)
    for loss in ("soft_l1", "huber"):
        rob = fit_parasitics(COLPITTS, v, f, unit_ids=ids, loss=loss)
        assert rob.outliers == ("U7",)
        for k, truth in TRUTH.items():
            # the robust fit lands nearer the truth than the fit the outlier pulled
            assert abs(rob.parameter(k).estimate - truth) < abs(lin.parameter(k).estimate - truth)
            assert rob.parameter(k).ci_low <= truth <= rob.parameter(k).ci_high


def test_outlier_false_alarm_rate():
    """With clean batches the Bonferroni test (family-wise α = 0.05) flags at most
    5 % of batches; 300 batches, bound 0.05 + 3·√(0.05·0.95/300) = 0.088."""
    rng = np.random.default_rng(13)
    v = design(10)
    f_true = board_frequency(COLPITTS, v, **TRUTH)
    trials, alarms = 300, 0
    for _ in range(trials):
        f = f_true * (1 + 150e-6 * rng.standard_normal(10))
        alarms += bool(fit_parasitics(COLPITTS, v, f).outliers)
    assert alarms / trials <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / trials)


# --------------------------------------------------------------------------- the fragment


def test_fragment_is_accepted_by_the_spec_and_deterministic():
    from picker.spec.model import ParasiticsSpec

    rng = np.random.default_rng(4)
    v = design(10)
    f = board_frequency(COLPITTS, v, **TRUTH) * (1 + 100e-6 * rng.standard_normal(10))
    res = fit_parasitics(COLPITTS, v, f)
    text = fragment_toml(res, source="bench.csv")
    assert text == fragment_toml(fit_parasitics(COLPITTS, v, f), source="bench.csv")
    assert "bench.csv" in text and "20" not in text.split("\n")[0][-12:]  # no date in the header
    section = tomllib.loads(text)["parasitics"]
    spec = ParasiticsSpec(**section)
    for k in ("stray", "c2_shunt", "l_scale"):
        # four significant digits for capacitances, six for l_scale
        assert_allclose(getattr(spec, k), res.parameter(k).estimate, rtol=5e-4)
    assert spec.c1_shunt == 0.0


def test_fragment_writes_a_negative_estimate_as_zero():
    v = design(10)
    f = board_frequency(COLPITTS, v, stray=0.0, l_scale=1.0) * 1.001  # board runs fast
    res = fit_parasitics(COLPITTS, v, f, fit=("stray",))
    assert res.parameter("stray").estimate < 0
    text = fragment_toml(res)
    assert tomllib.loads(text)["parasitics"]["stray"] == "0 F"
    assert "negative" in text


# --------------------------------------------------------------------------- the CSV file

GOOD = """# invented units
unit,C1,C2,L,frequency,measured,frequency_sigma
A1,4n7,10n,100u,251.3 kHz,C1 C2,20
A2,4.7e-9,2.2 nF,100 uH,300.0kHz,all,20 Hz
"""


def test_csv_parses_values_and_columns(tmp_path):
    p = tmp_path / "units.csv"
    p.write_text(GOOD, encoding="utf-8")
    m = load_measurements(p, COLPITTS)
    assert m.unit_ids == ("A1", "A2") and m.rows == (3, 4)
    assert_allclose(m.values["C1"], [4.7e-9, 4.7e-9], rtol=1e-15)
    assert_allclose(m.values["C2"], [10e-9, 2.2e-9], rtol=1e-15)
    assert_allclose(m.frequency, [251.3e3, 300e3], rtol=1e-15)
    assert m.measured["L"].tolist() == [False, True] and m.measured["C2"].tolist() == [True, True]
    assert_allclose(m.sigma(), [20.0, 20.0])


@pytest.mark.parametrize(
    ("text", "where", "what"),
    [
        ("", None, "empty"),
        ("unit,C1,C2,L,frequency\n", None, "no units"),
        ("unit,C1,C2,L,freq\n", "row 1, column 5", "unknown column 'freq'"),
        ("unit,C1,C2,L,C3,frequency\n", "row 1, column 5", "Clapp"),
        ("C1,C2,frequency\n1n,1n,1k\n", "row 1", "missing column(s) L"),
        ("C1,C2,L,frequency\n1n,1n,1u,1k\n1n,10uH,1u,1k\n", "row 3, column C2", "inductance"),
        ("C1,C2,L,frequency\n1n,1n,1u,1k\n\n#x\n1n,1n,1u,-5k\n", "row 5, column frequency", "> 0"),
        ("C1,C2,L,frequency\n1n,,1u,1k\n", "row 2, column C2", "empty cell"),
        ("C1,C2,L,frequency\n1n,1n,1u\n", "row 2", "expected 4 fields"),
        ("unit,C1,C2,L,frequency\nU1,1n,1n,1u,1k\nU1,1n,1n,1u,1k\n", "row 3, column unit", "row 2"),
        ("C1,C2,L,frequency,measured\n1n,1n,1u,1k,C3\n", "row 2, column measured", "'C3'"),
        ("C1,C2,L,frequency,weight\n1n,1n,1u,1k,heavy\n", "row 2, column weight", "number"),
        ("C1,C2,L,frequency,weight,frequency_sigma\n", "row 1", "not both"),
    ],
)
def test_csv_errors_name_row_and_column(text, where, what):
    with pytest.raises(SpecError) as err:
        parse_measurements(text, COLPITTS, file="units.csv")
    assert err.value.file == "units.csv"
    assert err.value.key == where
    assert what in err.value.message
    assert "\n" not in str(err.value)


def test_csv_missing_file(tmp_path):
    with pytest.raises(SpecError, match="no such file"):
        load_measurements(tmp_path / "nope.csv", COLPITTS)


# --------------------------------------------------------------------------- diagnostics


def test_studentized_residuals_match_leave_one_out_refits():
    """t_i from the closed form equals the definition: refit without unit i, then
    t_i = e_i / (s_(i)·√(1 − h_ii)) (Belsley, Kuh & Welsch 1980, §2.1)."""
    from picker.calibration.diagnostics import studentized

    rng = np.random.default_rng(21)
    x = rng.standard_normal((15, 3))
    y = x @ np.array([1.0, -2.0, 0.5]) + 0.1 * rng.standard_normal(15)
    beta, *_ = np.linalg.lstsq(x, y, rcond=None)
    e = y - x @ beta
    h = np.diag(x @ np.linalg.inv(x.T @ x) @ x.T)
    expected = []
    for i in range(15):
        keep = np.arange(15) != i
        b_i, *_ = np.linalg.lstsq(x[keep], y[keep], rcond=None)
        s_i = np.sqrt(np.sum((y[keep] - x[keep] @ b_i) ** 2) / (15 - 3 - 1))
        expected.append(e[i] / (s_i * np.sqrt(1 - h[i])))
    assert_allclose(studentized(e, x), expected, rtol=1e-10)  # exact algebra, rounding only


def test_select_estimable_on_a_dependent_column():
    from picker.calibration.diagnostics import select_estimable

    a = np.array([1.0, 2.0, 3.0, 4.0])
    b = np.array([1.0, -1.0, 1.0, -1.0])
    j = np.column_stack([a, 2.5 * a, b, np.zeros(4)])
    sel = select_estimable(j, ["p", "q", "r", "s"], rcond=1e-3)
    assert sel.kept == ("p", "r") and sel.aliased == ("q",) and sel.no_effect == ("s",)
    assert_allclose(sel.aliases["p"]["q"], 2.5, rtol=1e-12)  # J_q = 2.5·J_p exactly
    assert "r" not in sel.aliases
