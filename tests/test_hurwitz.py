"""The bursting verdict as Routh-Hurwitz conditions (picker.circuit.envelope.hurwitz_conditions)
and the pieces the loaded benchmark's speed rests on.

References, each computed independently of the code under test:
- numpy.poly (characteristic polynomial from numpy's eigenvalues) and numpy.linalg.eigvals;
- the Routh-Hurwitz conditions of a cubic s³ + a1·s² + a2·s + a3: a1 > 0, a1·a2 − a3 > 0,
  a3 > 0 (Ogata, *Modern Control Engineering*, Routh's stability criterion, worked cubic;
  from memory);
- scipy.special.iv for the mean collector current I_rest·e^(ΔV/V_T)·I0(a/V_T)
  (Abramowitz & Stegun 9.6.34).
"""

from __future__ import annotations

import numpy as np
import pytest
from amplifiers import BJT
from conftest import DEMO
from scipy.special import iv

from picker import api
from picker.circuit.device import thermal_voltage
from picker.circuit.envelope import HURWITZ, hurwitz_conditions
from picker.circuit.loaded import LoadedModel
from picker.circuit.stages import get_stage
from picker.circuit.steady import steady_state
from picker.core.montecarlo import sampled_values
from picker.core.sampling import head
from picker.tank.colpitts import COLPITTS

CE = get_stage("common-emitter")


def test_last_condition_is_the_constant_coefficient():
    # a_n of det(sI − m) is the last coefficient numpy.poly gives (from the eigenvalues).
    rng = np.random.default_rng(1)
    for n in range(1, HURWITZ + 1):
        m = rng.normal(size=(50, n, n))
        got = hurwitz_conditions(m)
        ref = np.array([np.poly(x)[-1] for x in m])
        np.testing.assert_allclose(got[:, n - 1], ref, rtol=1e-9, atol=1e-12)
        assert np.all(got[:, n:] == 1.0)  # the padding


def test_cubic_conditions_are_the_textbook_ones():
    # Companion matrix of s³ + a1·s² + a2·s + a3: Δ1 = a1, Δ2 = a1·a2 − a3, then a3.
    rng = np.random.default_rng(2)
    a = rng.uniform(-2.0, 3.0, size=(200, 3))
    m = np.zeros((200, 3, 3))
    m[:, 0, :] = -a
    m[:, 1, 0] = m[:, 2, 1] = 1.0
    got = hurwitz_conditions(m)
    np.testing.assert_allclose(got[:, 0], a[:, 0], rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(got[:, 1], a[:, 0] * a[:, 1] - a[:, 2], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(got[:, 2], a[:, 2], rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5])
def test_all_conditions_positive_exactly_when_every_eigenvalue_is_in_the_left_half_plane(n):
    # Stable and unstable matrices, many near the imaginary axis (a shift by the largest
    # real part and a little more or less), against numpy's eigenvalues.
    rng = np.random.default_rng(10 + n)
    m = rng.normal(size=(400, n, n))
    lam = np.linalg.eigvals(m).real.max(axis=1)
    shift = lam + rng.choice([-1.0, 1.0], 400) * 10 ** rng.uniform(-4, 0, 400)
    m = m - shift[:, None, None] * np.eye(n)
    lam = np.linalg.eigvals(m).real.max(axis=1)
    stable = np.all(hurwitz_conditions(m) > 0.0, axis=1)
    assert 50 < stable.sum() < 350
    np.testing.assert_array_equal(stable, lam < 0.0)


def test_steady_state_conditions_agree_with_its_bursting_verdict():
    # Random Colpitts boards (as tests/test_batch_independence.py) with the invented BJT:
    # where the device stays out of saturation, "bursts" (largest eigenvalue above
    # 1e-6·k) is "not every condition positive".
    rng = np.random.default_rng(4)
    n = 300
    vals = {
        "C1": 10 ** rng.uniform(-11.3, -8.3, n),
        "C2": 10 ** rng.uniform(-11.3, -8.3, n),
        "L": 10 ** rng.uniform(-6, -3, n),
    }
    with np.errstate(all="ignore"):
        st = steady_state(COLPITTS, vals, 3e-12, BJT)
    use = st.starts & ~st.overdriven & np.isfinite(st.amplitude_v)
    assert st.envelope_hurwitz.shape == (n, HURWITZ)
    assert use.sum() > 30 and st.bursting[use].any() and (~st.bursting[use]).any()
    steady = np.all(st.envelope_hurwitz[use] > 0.0, axis=1)
    np.testing.assert_array_equal(steady, ~st.bursting[use])


def test_mean_current_is_the_bessel_mean_and_the_device_law_bit_for_bit():
    params = BJT
    ss = CE.small_signal(params)
    vt = thermal_voltage(params.temperature_c)
    a = np.array([1e-4, 0.01, 0.05, 0.3, 1.0])
    dv = np.array([0.0, -0.002, -0.03, -0.2, -0.6])
    got = CE.mean_current(params, ss, a)(dv)
    np.testing.assert_allclose(got, ss.i_dc * np.exp(dv / vt) * iv(0, a / vt), rtol=1e-12)
    assert np.array_equal(got, CE.device_currents(params, ss, dv, a).mean)


def test_board_fit_is_identical_with_one_and_two_workers():
    spec = api.load_spec(DEMO / "colpitts_bjt.toml")
    pb = api.build_problem(spec)
    sim = api.simulation_of(spec, pb)
    model = sim.model
    assert isinstance(model, LoadedModel)
    from picker.circuit.loaded_search import loaded_search

    amp = spec.amplifier
    designs = loaded_search(pb, model.params, min_margin=amp.min_margin).designs
    vals = sampled_values(sim, designs, head(api.random_inputs(spec, sim, 300, 5), 300))
    out = []
    for w in (1, 2):
        m = LoadedModel(pb, model.params, "surrogate", model.max_margin, workers=w)
        fit = m.fit(vals, designs)
        out.append((m(vals, designs), fit))
    assert np.array_equal(out[0][0], out[1][0])
    assert np.array_equal(out[0][1].coef, out[1][1].coef)
    assert np.array_equal(out[0][1].band, out[1][1].band)
    assert len(designs) >= 2
