"""Tank formulas against textbook values and an independent eigenvalue computation."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.linalg import eigvals

from picker.tank.base import CLAPP, COLPITTS, Parasitics, board_frequency, board_sensitivities


def tank_frequency_by_eigenvalues(c1, c2, l, c3=None, stray=0.0):
    """ω of the lossless tank from the eigenvalues of its state matrix (scipy.linalg).

    Nodes: a (C1 to ground), b (C2 to ground), c (inductor's far end). C3,
    when present, joins a to c; without it a and c are one node. L joins c to
    b, the stray capacitance sits across L. State x = [v, i_L]:
    C·dv/dt = -e·i_L, L·di/dt = eᵀ·v (Kirchhoff's current and voltage laws).
    """
    if c3 is None:
        cm = np.array([[c1 + stray, -stray], [-stray, c2 + stray]])
        e = np.array([1.0, -1.0])  # i_L leaves a, enters b
    else:
        cm = np.array([[c1 + c3, 0.0, -c3], [0.0, c2 + stray, -stray], [-c3, -stray, c3 + stray]])
        e = np.array([0.0, -1.0, 1.0])  # i_L leaves c, enters b
    n = len(e)
    a = np.zeros((n + 1, n + 1))
    a[:n, n] = -np.linalg.solve(cm, e)
    a[n, :n] = e / l
    lam = eigvals(a)
    return np.max(np.abs(lam.imag)) / (2 * np.pi)


def test_colpitts_worked_example():
    # Boylestad & Nashelsky, Electronic Devices and Circuit Theory, FET Colpitts
    # example (attribution from memory, REFERENCES.md): C_eq = 576.923 pF, f = 1.047686 MHz.
    v = {"C1": 750e-12, "C2": 2500e-12, "L": 40e-6}
    assert_allclose(COLPITTS.c_eff(v), 576.923e-12, rtol=1e-6)  # 6 printed digits
    assert_allclose(COLPITTS.frequency(v), 1.047686e6, rtol=1e-6)


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


@pytest.mark.parametrize("seed", range(20))
def test_frequency_equals_state_matrix_eigenvalues(seed):
    rng = np.random.default_rng(seed)
    c1, c2, c3 = 10 ** rng.uniform(-11, -7, 3)
    l = 10 ** rng.uniform(-7, -2)
    stray = rng.choice([0.0, 10 ** rng.uniform(-12, -10)])
    f_col = board_frequency(COLPITTS, {"C1": c1, "C2": c2, "L": l}, Parasitics(stray=stray))
    assert_allclose(f_col, tank_frequency_by_eigenvalues(c1, c2, l, stray=stray), rtol=1e-9)
    f_cl = board_frequency(CLAPP, {"C1": c1, "C2": c2, "C3": c3, "L": l}, Parasitics(stray=stray))
    assert_allclose(f_cl, tank_frequency_by_eigenvalues(c1, c2, l, c3, stray), rtol=1e-9)


@pytest.mark.parametrize("topo", [COLPITTS, CLAPP])
def test_sensitivities_match_central_differences(topo):
    rng = np.random.default_rng(5)
    par = Parasitics(stray=3e-12, c1_shunt=5e-12, c2_shunt=8e-12, l_scale=1.07)
    for _ in range(10):
        v = {p: float(10 ** rng.uniform(-11, -8)) for p in topo.capacitors}
        v["L"] = float(10 ** rng.uniform(-6, -3))
        s = board_sensitivities(topo, v, par)
        h = 1e-6
        for p in topo.positions:
            up = dict(v, **{p: v[p] * np.exp(h)})
            dn = dict(v, **{p: v[p] * np.exp(-h)})
            num = (
                np.log(board_frequency(topo, up, par)) - np.log(board_frequency(topo, dn, par))
            ) / (2 * h)
            # central difference error O(h²) plus round-off ~1e-10/h
            assert_allclose(s[p], num, atol=1e-8)


def test_capacitor_sensitivities_sum_to_minus_half_without_stray():
    # REFERENCES.md [derived]: in both topologies the capacitor terms sum to -1/2.
    v = {"C1": 2.2e-9, "C2": 6.8e-9, "C3": 330e-12, "L": 22e-6}
    for topo in (COLPITTS, CLAPP):
        s = topo.sensitivities(v)
        assert_allclose(sum(s[p] for p in topo.capacitors), -0.5, rtol=1e-12)
        assert_allclose(s["L"], -0.5)


def test_colpitts_sensitivity_closed_form():
    # REFERENCES.md: S_C1 = -1/2·C2/(C1+C2), S_C2 = -1/2·C1/(C1+C2).
    c1, c2 = 1e-9, 4e-9
    s = COLPITTS.sensitivities({"C1": c1, "C2": c2, "L": 1e-5})
    assert_allclose(s["C1"], -0.5 * c2 / (c1 + c2))
    assert_allclose(s["C2"], -0.5 * c1 / (c1 + c2))


def test_vectorised_shapes():
    c1 = np.full((4, 3), 1e-9)
    v = {"C1": c1, "C2": np.full(3, 2e-9), "L": 1e-5}
    assert COLPITTS.frequency(v).shape == (4, 3)
    assert COLPITTS.sensitivities(v)["L"].shape == (4, 3)
