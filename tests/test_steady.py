"""The large-signal steady state (picker.circuit.steady and its parts) against textbook limits.

- The exponential junction's describing function against its Bessel form (Clarke &
  Hess, *Communication Circuits: Analysis and Design*, 1971: G_m/gm = 2·I1(x)/(x·I0(x)),
  with I_n from the power series of Abramowitz & Stegun 9.6.10, summed here).
- The square law's fundamental without cut-off: exactly gm·a, and a mean that rises by
  K·a²/2 (Sedra & Smith, MOSFET chapter; the algebra of (V_ov + a·cos θ)²).
- The small-signal limit: just above the start-up edge the steady frequency is the
  linear model's and the amplitude follows from 2·I1(x)/(x·I0(x)) ≈ 1 − x²/8 (the same
  series to second order).
- A lightly overdriven board's amplitude against Toumazou, Moschytz & Gilbert's estimate
  V ≈ 2·I_C·R_L·C2/(C1 + C2) (*Trade-Offs in Analog Circuit Design*, 2002, as cited in
  /work/shared/REFERENCES.md): the tank voltage of a current-driven Colpitts whose
  fundamental collector current is 2·I_C, R_L the tank's parallel loss.
- Vectorisation: a batch gives what the boards give one by one.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from numpy.testing import assert_allclose

from picker.circuit.device import thermal_voltage
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import get_stage
from picker.circuit.stages.common_emitter import bessel_ratio
from picker.circuit.steady import steady_state
from picker.tank.colpitts import COLPITTS

CE = get_stage("common-emitter")
CS = get_stage("common-source")
VT = thermal_voltage(27.0)


def bessel_i(n: int, x: float) -> float:
    """I_n(x) by its power series Σ (x/2)^(2k+n)/(k!·(k+n)!) (Abramowitz & Stegun 9.6.10)."""
    return sum(
        (x / 2) ** (2 * k + n) / (math.factorial(k) * math.factorial(k + n)) for k in range(80)
    )


def test_exponential_junction_describing_function_is_the_bessel_form():
    params = CE.typical_params()
    ss = CE.small_signal(params)
    for x in (0.01, 0.3, 1.0, 3.0, 10.0, 25.0):
        cur = CE.device_currents(params, ss, np.array(0.0), np.array(x * VT))
        i0, i1, i2, i3 = (bessel_i(n, x) for n in range(4))
        # Clarke & Hess: fundamental over a·I_C/V_T, with the DC current held, is 2·I1/(x·I0)
        gm_ratio = float(cur.h1) / (x * VT) / (float(cur.mean) / VT)
        assert_allclose(gm_ratio, 2 * i1 / (x * i0), rtol=1e-9)  # series summed to 1e-15
        assert_allclose(float(bessel_ratio(x)), 2 * i1 / (x * i0), rtol=1e-9)
        # the harmonics of exp(x·cos θ): 2·I_n(x) per unit of I0(x) (A&S 9.6.34)
        assert_allclose(float(cur.h2) / float(cur.mean), 2 * i2 / i0, rtol=1e-8)
        assert_allclose(float(cur.h3) / float(cur.mean), 2 * i3 / i0, rtol=1e-8)
        assert_allclose(float(cur.peak) / float(cur.mean), math.exp(x) / i0, rtol=1e-9)


def test_square_law_fundamental_without_cut_off():
    params = CS.typical_params()
    ss = CS.small_signal(params)
    v_ov = 2 * ss.i_dc / ss.gm
    k = ss.i_dc / v_ov**2
    a = np.array([0.1, 0.5, 0.9]) * v_ov
    cur = CS.device_currents(params, ss, np.zeros(3), a)
    # (V_ov + a cos θ)²: mean V_ov² + a²/2, fundamental 2·V_ov·a, 2nd harmonic a²/2
    # (tolerance: the midpoint rule is exact for these trigonometric polynomials)
    assert_allclose(cur.h1, ss.gm * a, rtol=1e-12)
    assert_allclose(cur.mean, k * (v_ov**2 + a**2 / 2), rtol=1e-12)
    assert_allclose(cur.h2, k * a**2 / 2, rtol=1e-12)
    assert_allclose(cur.h3, 0.0, atol=1e-12 * ss.i_dc)


def test_small_signal_limit_equals_the_linear_model():
    """gm 0.1 % above the edge: steady frequency = the linear zero-phase frequency, and
    the drive x = V_be/V_T from 1 − x²/8 = 1/margin (series of 2·I1(x)/(x·I0(x)))."""
    vals = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}
    base = replace(CE.typical_params(), gm=20e-3, i_bias=None)  # current held fixed
    params = base
    for _ in range(8):  # r_pi = β/gm and C_pi = TF·gm move with gm: iterate to the edge
        m0 = float(loaded_response(COLPITTS, vals, 3e-12, params).margin)
        params = replace(params, gm=params.gm * 1.001 / m0)
    lin = loaded_response(COLPITTS, vals, 3e-12, params)
    st = steady_state(COLPITTS, vals, 3e-12, params)
    assert bool(st.starts) and not bool(st.bursting)
    assert_allclose(float(st.margin), 1.001, rtol=1e-6)
    # compression by 1/1.001 moves the frequency by O(1e-3) of the device's share only
    assert_allclose(float(st.f_hz), float(lin.f_hz), rtol=2e-5)
    x = math.sqrt(8 * (1 - 1 / 1.001))
    _, nodes = _nodes(vals, params)
    top_per_vbe = abs(nodes["t"] / (nodes["b"] - nodes["e"]))
    # tolerance: the x⁴ term of the series and the g_π/C_π compression, well under 1 %
    assert_allclose(float(st.amplitude_v), x * VT * top_per_vbe, rtol=1e-2)


def _nodes(vals, params):
    from picker.circuit.network import Network
    from picker.tank.base import TWO_PI

    net = Network.build(COLPITTS, vals, 3e-12, params)
    f = float(loaded_response(COLPITTS, vals, 3e-12, params).f_hz)
    t, x = net.return_ratio(np.array([1j * TWO_PI * f]), nodes=True)
    return t, {k: complex(v[0]) for k, v in x.items()}


def test_lightly_overdriven_amplitude_against_toumazou_moschytz_gilbert():
    """Idealised stage with its current held (gm = I_C/V_T), tank loss R_L = Q·ω0·L as
    the only load: the tank (inductor) voltage is 2·I_C·R_L·C2/(C1 + C2), and the tank
    top (across C1) carries C2/(C1 + C2) of it."""
    c1, c2, ind, q = 1e-9, 1e-9, 10e-6, 100.0
    vals = {"C1": c1, "C2": c2, "L": ind}
    w0 = 1 / math.sqrt(ind * c1 * c2 / (c1 + c2))
    r_l = q * w0 * ind  # parallel equivalent of the series loss ω0·L/Q (high Q)
    i_c = 0.5e-3
    params = replace(
        CE.ideal_params(i_c / VT, 1e12), inductor_q=q
    )  # no collector load but the tank
    st = steady_state(COLPITTS, vals, 0.0, params)
    assert bool(st.starts) and float(st.margin) > 10  # well overdriven, no saturation model
    v_tank = 2 * i_c * r_l * c2 / (c1 + c2)  # Toumazou, Moschytz & Gilbert
    # tolerance: I1(x)/I0(x) = 1 − 1/(2x) + … at x ≈ 2·margin, and Q's own 1/Q² terms
    assert_allclose(float(st.amplitude_v), v_tank * c2 / (c1 + c2), rtol=0.05)


def test_batch_equals_one_by_one():
    rng = np.random.default_rng(3)
    n = 7
    vals = {
        "C1": 1e-9 * np.exp(rng.uniform(-1, 1, n)),
        "C2": 2.2e-9 * np.exp(rng.uniform(-1, 1, n)),
        "L": 22e-6 * np.exp(rng.uniform(-1, 1, n)),
    }
    params = CE.typical_params()
    batch = steady_state(COLPITTS, vals, 3e-12, params)
    for i in range(n):
        one = steady_state(COLPITTS, {p: v[i] for p, v in vals.items()}, 3e-12, params)
        for f in ("starts", "bursting", "overdriven"):
            assert bool(getattr(one, f)) == bool(getattr(batch, f)[i]), f
        # tolerance: the iterative solvers stop on the batch's worst element
        for f in ("margin", "f_hz", "amplitude_v", "startup_time_s", "peak_current_a"):
            assert_allclose(float(getattr(one, f)), getattr(batch, f)[i], rtol=1e-5, err_msg=f)
        assert_allclose(one.harmonics_dbc, batch.harmonics_dbc[i], atol=1e-3)
    assert batch.harmonics_dbc.shape == (n, 2)


def test_shapes_follow_the_values():
    vals = {"C1": np.full((3, 2), 1e-9), "C2": 2.2e-9, "L": 22e-6}
    st = steady_state(COLPITTS, vals, 3e-12, CE.typical_params())
    assert st.f_hz.shape == (3, 2) and st.harmonics_dbc.shape == (3, 2, 2)
    assert st.runs.shape == (3, 2)
