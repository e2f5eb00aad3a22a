"""The Clapp tank against its own textbook formulas and worked examples.

The checks every registered topology must pass (search = brute force,
sensitivities = finite differences, frequency = eigenvalues of the LC state
matrix) are in tests/test_tank_conformance.py; here the topology keeps the
formulas of its own sources.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker.core.search import Problem, solved_position
from picker.parts.table import uniform_table
from picker.tank.clapp import CLAPP


@pytest.mark.parametrize("seed", range(5))
def test_clapp_textbook_formula(seed):
    # Clapp, Proc. IRE 36 (1948); Sedra & Smith, LC oscillators: C3 in series with the
    # Colpitts divider, f = 1 / (2π √(L·C_s)) with 1/C_s = 1/C1 + 1/C2 + 1/C3
    rng = np.random.default_rng(seed)
    c1, c2, c3 = 10 ** rng.uniform(-11, -7, 3)
    l = 10 ** rng.uniform(-7, -2)
    v = {"C1": c1, "C2": c2, "C3": c3, "L": l}
    cs = 1 / (1 / c1 + 1 / c2 + 1 / c3)
    assert_allclose(CLAPP.frequency(v), 1 / (2 * math.pi * math.sqrt(l * cs)), rtol=1e-14)
    assert_allclose(CLAPP.beta(v), c1 / c2, rtol=1e-15)


def test_clapp_reference_example():
    # REFERENCES.md [derived]: L = 10 µH, C1 = C2 = 1 nF, C3 = 100 pF:
    # C_eff = 83.333 pF, f = 5.513289 MHz, S = (-0.5, -0.041667, -0.041667, -0.416667).
    v = {"C1": 1e-9, "C2": 1e-9, "C3": 100e-12, "L": 10e-6}
    assert_allclose(CLAPP.c_eff(v), 83.333e-12, rtol=1e-5)
    assert_allclose(CLAPP.frequency(v), 5.513289e6, rtol=1e-7)
    s = CLAPP.sensitivities(v)
    assert_allclose(
        [s["L"], s["C1"], s["C2"], s["C3"]], [-0.5, -0.041667, -0.041667, -0.416667], atol=1e-6
    )


def test_clapp_solves_for_the_larger_table():
    # the search enumerates every position but one: solving the largest table is cheapest
    tabs = {p: uniform_table(np.arange(1.0, 5.0), 0.05, "list") for p in ("C1", "C2")}
    tabs["L"] = uniform_table(np.arange(1.0, 10.0), 0.05, "list")
    tabs["C3"] = uniform_table(np.arange(1.0, 30.0), 0.05, "list")
    assert solved_position(Problem(CLAPP, tabs, 1.0, 2.0, 0.1, 10.0)) == "C3"
    tabs["C3"] = uniform_table(np.arange(1.0, 10.0), 0.05, "list")  # a tie goes to L
    assert solved_position(Problem(CLAPP, tabs, 1.0, 2.0, 0.1, 10.0)) == "L"


def test_clapp_capacitor_sensitivities_sum_to_minus_half_without_stray():
    # REFERENCES.md [derived]: the capacitor terms sum to -1/2 with no stray; S_L = -1/2.
    s = CLAPP.sensitivities({"C1": 2.2e-9, "C2": 6.8e-9, "C3": 330e-12, "L": 22e-6})
    assert_allclose(s["C1"] + s["C2"] + s["C3"], -0.5, rtol=1e-12)
    assert_allclose(s["L"], -0.5)
