"""Temperature drift classes against the EIA-198 / IEC 60384 definitions (REFERENCES.md)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker import units
from picker.errors import SpecError
from picker.parts.drift import (
    T_REF,
    check_range,
    class2,
    drift_factor,
    drift_moments,
    envelope,
    explicit_tempco,
    get_material,
    temperature_grid,
    turning_points,
)

U = np.random.default_rng(11).random(4000)


def _over_range(m, n=401):
    return np.linspace(m.t_min, m.t_max, n)


# EIA-198 / IEC 60384-9 class-2 examples, each as printed in REFERENCES.md [pub].
CLASS2_EXAMPLES = [
    ("X7R", -55.0, 125.0, 0.15, 0.15),  # EIA-198: X7R −55..125 °C, ±15 %
    ("X5R", -55.0, 85.0, 0.15, 0.15),  # EIA-198: X5R −55..85 °C, ±15 %
    ("Y5V", -30.0, 85.0, 0.82, 0.22),  # EIA-198: Y5V −30..85 °C, +22/−82 %
    ("Z5U", 10.0, 85.0, 0.56, 0.22),  # EIA-198: Z5U +10..85 °C, +22/−56 %
]


@pytest.mark.parametrize(("code", "t_min", "t_max", "minus", "plus"), CLASS2_EXAMPLES)
def test_class2_examples_and_envelope(code, t_min, t_max, minus, plus):
    m = get_material(code)
    assert (m.t_min, m.t_max) == (t_min, t_max)
    assert_allclose((m.change_minus, m.change_plus), (minus, plus), rtol=0, atol=1e-15)
    temps = _over_range(m)
    d = drift_factor(m, temps, U)
    assert d.shape == (temps.size, U.size)
    # every sampled curve stays inside the EIA envelope over the rated range
    assert d.min() >= -minus - 1e-12 and d.max() <= plus + 1e-12
    assert_allclose(drift_factor(m, [T_REF], U), 0.0, atol=1e-15)  # referred to 25 °C
    # the bounds are reached only by the extreme curves (u -> 0 or 1) of the draw
    lo, hi = envelope(m, temps)
    assert_allclose(lo.min(), -minus, rtol=1e-9)
    assert_allclose(hi.max(), plus, rtol=1e-9)
    inner = drift_factor(m, temps, [0.01, 0.99])
    assert inner.min() > -minus and inner.max() < plus


def test_class2_code_letters_follow_eia198():
    # EIA-198 class 2: X −55, Y −30, Z +10; 2 +45 ... 9 +200 °C; A ±1.0 ... V +22/−82 % [pub]
    lows = {"X": -55, "Y": -30, "Z": 10}
    highs = {"2": 45, "4": 65, "5": 85, "6": 105, "7": 125, "8": 150, "9": 200}
    # rows as the standard's table prints them (fmt: skip, else one entry a line)
    changes = {
        "A": (1.0, 1.0), "B": (1.5, 1.5), "C": (2.2, 2.2), "D": (3.3, 3.3), "E": (4.7, 4.7),
        "F": (7.5, 7.5), "P": (10, 10), "R": (15, 15), "S": (22, 22), "T": (33, 22),
        "U": (56, 22), "V": (82, 22),
    }  # fmt: skip
    for lo_c, lo in lows.items():
        for hi_c, hi in highs.items():
            for ch, (minus, plus) in changes.items():
                m = class2(lo_c + hi_c + ch)
                assert (m.t_min, m.t_max) == (lo, hi)
                assert_allclose((m.change_minus, m.change_plus), (minus / 100, plus / 100))
                d = drift_factor(m, _over_range(m, 101), U[:500])
                assert d.min() >= -minus / 100 - 1e-12 and d.max() <= plus / 100 + 1e-12


def test_c0g_is_0_pm_30_ppm():
    # C0G (NP0), class 1: 0 ± 30 ppm/°C, rated −55..125 °C, total change within
    # about ±0.3 % over the range (makers' C0G specifications, REFERENCES.md) [pub].
    m = get_material("C0G")
    assert get_material("NP0") == m
    assert (m.t_min, m.t_max) == (-55.0, 125.0)
    temps = _over_range(m)
    d = drift_factor(m, temps, U)
    dt = np.abs(temps - T_REF)[:, None]
    assert np.all(np.abs(d) <= 30e-6 * dt + 1e-15)
    assert np.abs(d).max() <= 0.003 + 1e-12
    assert_allclose(np.abs(d).max(), 0.003, rtol=0.01)  # the spread fills ±30 ppm/°C


def test_class1_tolerance_letters():
    # EIA-198 class 1: last letter is the ppm/°C tolerance, G 30, H 60, J 120, K 250 [pub]
    for letter, ppm in {"G": 30, "H": 60, "J": 120, "K": 250}.items():
        m = get_material("C0" + letter)
        assert_allclose(m.spread, ppm * 1e-6)
        assert m.tempco == 0.0


def test_film_capacitors_stay_within_maker_tables():
    # Makers' film dielectric tables [pub]: polypropylene about ±2.5 % over its
    # range, negative and linear; polyester about ±5 %, positive.
    pp, pet = get_material("polypropylene"), get_material("PET")
    d_pp = drift_factor(pp, _over_range(pp), U)
    d_pet = drift_factor(pet, _over_range(pet), U)
    assert np.abs(d_pp).max() <= 0.025
    assert np.abs(d_pet).max() <= 0.05 + 1e-12
    assert drift_factor(pp, [pp.t_max], U).max() < 0  # every PP part falls when hot
    assert drift_factor(pet, [pet.t_max], U).min() > 0  # every PET part rises when hot


def test_inductor_cores_are_labelled_assumptions():
    # Air core +25..+125 ppm/°C [memory]; ferrite several hundred ppm/°C [memory, assumption].
    air, fer = get_material("air"), get_material("ferrite")
    slope = drift_factor(air, [T_REF + 100.0], U) / 100.0
    assert slope.min() >= 25e-6 - 1e-12 and slope.max() <= 125e-6 + 1e-12
    assert "assumption" in fer.source and "[memory]" in air.source


def test_explicit_tempco_from_spec_text():
    # "+100 ppm/°C" with a spread "30 ppm/°C" (parsed by picker.units): α in [70, 130] ppm/°C.
    tc = units.parse_quantity("+100 ppm/°C", "ppm/°C")
    sp = units.parse_quantity("30 ppm/°C", "ppm/°C")
    m = explicit_tempco(tc, sp)
    d = drift_factor(m, [85.0, -40.0], U)
    assert_allclose(d[0].min(), 70e-6 * 60, rtol=1e-3)
    assert_allclose(d[0].max(), 130e-6 * 60, rtol=1e-3)
    assert np.all(d[1] < 0)
    assert check_range(m, -200, 300) == []
    with pytest.raises(SpecError):
        explicit_tempco(1e-4, -1e-5)


@pytest.mark.parametrize("code", ["X7R", "Y5V", "polyester", "C0G", "X2V"])
def test_moments_match_sampling(code):
    # The closed-form mean/std (uniform variate, GUM 4.3.7) against the sampled curves.
    m = get_material(code)
    temps = np.array([m.t_min, 0.0, m.t_max])
    mean, std = drift_moments(m, temps)
    d = drift_factor(m, temps, U)
    n = U.size
    assert np.all(np.abs(d.mean(axis=1) - mean) <= 4 * std / np.sqrt(n) + 1e-15)
    assert_allclose(d.std(axis=1), std, rtol=5 / np.sqrt(2 * n), atol=1e-15)


def test_range_checks_and_grid():
    y5v = get_material("Y5V")
    warn = check_range(y5v, -40.0, 85.0)
    assert len(warn) == 1 and "-30 °C" in warn[0] and "-40 °C" in warn[0]
    assert check_range(get_material("X7R"), -40.0, 85.0) == []
    g = temperature_grid(-40.0, 85.0, 5)
    assert g[0] == -40.0 and g[-1] == 85.0 and 25.0 in g and np.all(np.diff(g) > 0)
    # X2V (−55..45 °C) has an interior turning point of its curve near −50.6 °C
    x2v = get_material("X2V")
    (t_turn,) = [t for t in turning_points(x2v) if t != T_REF]
    grid = temperature_grid(-55.0, 45.0, 3, materials=[x2v])
    assert t_turn in grid
    # the extreme over a fine grid is at a grid point (range end, 25 °C or turning point)
    fine = np.linspace(-55.0, 45.0, 20001)
    d_fine = drift_factor(x2v, fine, [1.0])[:, 0]
    d_grid = drift_factor(x2v, grid, [1.0])[:, 0]
    assert_allclose(d_grid.min(), d_fine.min(), rtol=1e-6)
    with pytest.raises(SpecError):
        temperature_grid(85.0, -40.0)


@pytest.mark.parametrize("bad", ["X7Q", "Q7R", "", "teflon", 7])
def test_unknown_material(bad):
    with pytest.raises(SpecError):
        get_material(bad)
