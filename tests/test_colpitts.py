"""The Colpitts tank against its own textbook formulas and worked examples.

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
from picker.tank.colpitts import COLPITTS


@pytest.mark.parametrize("seed", range(5))
def test_colpitts_textbook_formula(seed):
    # Sedra & Smith, Microelectronic Circuits, Colpitts section:
    # f = 1 / (2π √(L · C1·C2/(C1 + C2))), beta = C1/C2
    rng = np.random.default_rng(seed)
    c1, c2 = 10 ** rng.uniform(-11, -7, 2)
    l = 10 ** rng.uniform(-7, -2)
    v = {"C1": c1, "C2": c2, "L": l}
    f = 1 / (2 * math.pi * math.sqrt(l * c1 * c2 / (c1 + c2)))
    assert_allclose(COLPITTS.frequency(v), f, rtol=1e-14)  # the same formula: rounding only
    assert_allclose(COLPITTS.beta(v), c1 / c2, rtol=1e-15)


def test_colpitts_worked_example():
    # Boylestad & Nashelsky, Electronic Devices and Circuit Theory, FET Colpitts
    # example (attribution from memory, REFERENCES.md): C_eq = 576.923 pF, f = 1.047686 MHz.
    v = {"C1": 750e-12, "C2": 2500e-12, "L": 40e-6}
    assert_allclose(COLPITTS.c_eff(v), 576.923e-12, rtol=1e-6)  # 6 printed digits
    assert_allclose(COLPITTS.frequency(v), 1.047686e6, rtol=1e-6)


def test_colpitts_sensitivity_closed_form():
    # REFERENCES.md: S_C1 = -1/2·C2/(C1+C2), S_C2 = -1/2·C1/(C1+C2).
    c1, c2 = 1e-9, 4e-9
    s = COLPITTS.sensitivities({"C1": c1, "C2": c2, "L": 1e-5})
    assert_allclose(s["C1"], -0.5 * c2 / (c1 + c2))
    assert_allclose(s["C2"], -0.5 * c1 / (c1 + c2))


def test_colpitts_solves_for_the_inductor():
    tabs = {p: uniform_table(np.arange(1.0, 40.0), 0.05, "list") for p in ("C1", "C2")}
    tabs["L"] = uniform_table(np.arange(1.0, 3.0), 0.05, "list")
    assert solved_position(Problem(COLPITTS, tabs, 1.0, 2.0, 0.1, 10.0)) == "L"


def test_colpitts_capacitor_sensitivities_sum_to_minus_half_without_stray():
    # REFERENCES.md [derived]: the capacitor terms sum to -1/2 with no stray; S_L = -1/2.
    s = COLPITTS.sensitivities({"C1": 2.2e-9, "C2": 6.8e-9, "L": 22e-6})
    assert_allclose(s["C1"] + s["C2"], -0.5, rtol=1e-12)
    assert_allclose(s["L"], -0.5)


def test_vectorised_shapes():
    c1 = np.full((4, 3), 1e-9)
    v = {"C1": c1, "C2": np.full(3, 2e-9), "L": 1e-5}
    assert COLPITTS.frequency(v).shape == (4, 3)
    assert COLPITTS.sensitivities(v)["L"].shape == (4, 3)
