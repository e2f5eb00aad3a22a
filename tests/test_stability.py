"""Start-up as a stability test (picker.circuit.stability) against independent references.

- Sedra & Smith, *Microelectronic Circuits*, Colpitts section: the characteristic
  polynomial s³·L·C1·C2·R + s²·L·C2 + s·(C1+C2)·R + (gm·R + 1) of the idealised
  common-emitter Colpitts, written out here and solved by ``numpy.roots``: the board
  starts exactly when a root lies in the right half-plane (gm·R > C2/C1).
- The whole linearised common-emitter Colpitts (hybrid-pi device, bias divider, R_E ∥
  C_E, blocking capacitor, collector resistor or choke, lossy inductor, stray), written
  out below as a state-space pencil E·x' = A·x from Kirchhoff's current law and solved
  by ``scipy.linalg.eig``: its right-half-plane eigenvalues decide start-up, and the
  eigenvalue itself is the start-up pole.
- Mutation check: a board with a collector choke whose first zero-phase crossing of the
  loop gain (lowest frequency, at the choke's resonance) has |T| < 1 while the tank
  mode has |T| ≫ 1. The eigenvalues say it starts; the rule "|T| > 1 at the first
  zero-phase crossing" says it does not, so replacing the Nyquist count by that rule
  fails this test.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
import scipy.linalg
from numpy.testing import assert_allclose

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.network import loop_gain
from picker.circuit.stages import get_stage
from picker.circuit.steady import steady_state
from picker.tank.colpitts import COLPITTS

CE = get_stage("common-emitter")
TWO_PI = 2 * math.pi


def pencil_poles(
    values: dict[str, float], stray: float, params: AmplifierParams, gm_scale: float = 1.0
) -> np.ndarray:
    """Natural frequencies (rad/s) of the linearised common-emitter Colpitts, from its
    state-space pencil written out here (KCL at c, t, b, e; the inductor and choke
    currents). The inductor's ESR is ω0·L/Q at the ideal frequency with the stray across
    L (the convention the README states); the device's small-signal values are inputs."""
    ss = CE.small_signal(params)
    c1, c2, ind = values["C1"], values["C2"], values["L"]
    w0 = 1.0 / math.sqrt(ind * (c1 * c2 / (c1 + c2) + stray))
    r_l = w0 * ind / params.inductor_q
    gm = ss.gm * gm_scale
    g_pi, g_o = 1.0 / ss.r_pi, 1.0 / ss.r_o
    g_th = 1.0 / params.r_b1 + 1.0 / params.r_b2
    cb, ce = params.c_block, params.c_e or 0.0
    c, t, b, e, il, ich = range(6)
    n = 6
    E = np.zeros((n, n))  # noqa: N806 - the pencil's usual names
    A = np.zeros((n, n))  # noqa: N806

    def cap(i: int, j: int | None, cv: float) -> None:
        E[i, i] += cv
        if j is not None:
            E[j, j] += cv
            E[i, j] -= cv
            E[j, i] -= cv

    def cond(i: int, j: int | None, g: float) -> None:  # KCL rows: E·x' = A·x
        A[i, i] -= g
        if j is not None:
            A[j, j] -= g
            A[i, j] += g
            A[j, i] += g

    cap(c, t, cb)
    cap(t, None, c1)
    cap(t, b, stray)
    cap(b, None, c2)
    cap(b, c, ss.c_mu)
    cap(b, e, ss.c_pi)
    cap(e, None, ce)
    cond(b, e, g_pi)
    cond(c, e, g_o)
    cond(b, None, g_th)
    cond(e, None, 1.0 / params.r_e)
    # controlled source gm·(v_b − v_e) from c to e
    A[c, b] -= gm
    A[c, e] += gm
    A[e, b] += gm
    A[e, e] -= gm
    # inductor t → b: L·i' = v_t − v_b − r_L·i; its current leaves t, enters b
    E[il, il] = ind
    A[il, t], A[il, b], A[il, il] = 1.0, -1.0, -r_l
    A[t, il] -= 1.0
    A[b, il] += 1.0
    if params.l_choke is not None:  # choke c → supply (AC ground)
        E[ich, ich] = params.l_choke
        A[ich, c], A[ich, ich] = 1.0, -params.r_choke
        A[c, ich] -= 1.0
    else:
        cond(c, None, 1.0 / params.r_c)
        E[ich, ich], A[ich, ich] = 1.0, -1.0  # an unused state, decaying
    lam = scipy.linalg.eig(A, E, right=False)
    return lam[np.isfinite(lam)]


def rhp_pairs(lam: np.ndarray) -> np.ndarray:
    """The right-half-plane eigenvalues with positive imaginary part (oscillatory modes)."""
    return lam[(lam.real > 1e-9 * np.abs(lam)) & (lam.imag > 0)]


# invented boards (not real circuits): the common-emitter stage's typical design, and
# variants with a choke, a small bypass, a big collector resistor
TYPICAL = CE.typical_params()
TANK = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}
BOARDS = [
    pytest.param(TANK, TYPICAL, id="typical"),
    pytest.param(TANK, replace(TYPICAL, c_e=1e-9), id="small-bypass"),
    pytest.param(TANK, replace(TYPICAL, r_c=220.0), id="light-load"),
    pytest.param(
        TANK, replace(TYPICAL, r_c=None, l_choke=220e-6, r_choke=3.0, c_e=4.7e-9), id="choke"
    ),
    pytest.param({"C1": 4.7e-9, "C2": 1e-9, "L": 10e-6}, TYPICAL, id="c1-large"),
]
# a choke board whose choke resonance (near 120 Hz) comes before the tank's (51 kHz)
CHOKE_FIRST = (
    {"C1": 22e-9, "C2": 120e-9, "L": 470e-6},
    AmplifierParams(
        kind="bjt",
        vcc=7.0,
        l_choke=30e-3,
        r_choke=4.7,
        r_b1=15e3,
        r_b2=4.7e3,
        r_e=180.0,
        c_e=100e-6,
        c_block=150e-9,
        inductor_q=150.0,
    ),
)
STRAY = 2e-12


def test_sedra_smith_characteristic_polynomial_is_the_stability_boundary():
    """Idealised stage: starts ⇔ a root of Sedra & Smith's cubic in the right half-plane;
    margin = gm·R·C1/C2; the start-up pole is that root."""
    c1, c2, ind, r = 1e-9, 4e-9, 10e-6, 1e3
    vals = {"C1": c1, "C2": c2, "L": ind}
    for factor in (0.5, 0.95, 1.05, 2.0, 8.0):
        gm = factor * (c2 / c1) / r  # Sedra & Smith: start-up when gm·R > C2/C1
        params = CE.ideal_params(gm, r)
        roots = np.roots([ind * c1 * c2 * r, ind * c2, (c1 + c2) * r, gm * r + 1.0])
        unstable = roots[(roots.real > 0) & (roots.imag > 0)]
        st = steady_state(COLPITTS, vals, 0.0, params)
        assert bool(st.starts) == (unstable.size > 0), factor
        # |T| = gm·R·C1/C2 at ω0 (same source); tolerance: the root finder's 1e-11
        assert_allclose(float(st.margin), gm * r * c1 / c2, rtol=1e-7)
        if unstable.size:
            assert_allclose(float(st.f_start_hz), unstable[0].imag / TWO_PI, rtol=1e-6)


@pytest.mark.parametrize(("values", "params"), BOARDS)
def test_start_up_and_its_pole_agree_with_the_state_space_eigenvalues(values, params):
    st = steady_state(COLPITTS, values, STRAY, params)
    lam = pencil_poles(values, STRAY, params)
    up = rhp_pairs(lam)
    assert bool(st.starts) == (up.size > 0)
    if up.size:
        # the start-up pole is one of the eigenvalues (tolerance: secant 1e-8 on 1/T − 1)
        near = up[np.argmin(np.abs(up.imag / TWO_PI - float(st.f_start_hz)))]
        assert_allclose(float(st.f_start_hz), near.imag / TWO_PI, rtol=1e-6)
    # the margin is the gm factor at which the last pole pair leaves the right half-plane
    m = float(st.margin)
    assert m > 0
    assert rhp_pairs(pencil_poles(values, STRAY, params, 1.001 / m)).size > 0
    assert rhp_pairs(pencil_poles(values, STRAY, params, 0.999 / m)).size == 0


def test_mutation_first_crossing_rule_disagrees_with_the_eigenvalues_here():
    """A choke board: the loop gain's first zero-phase crossing (at the choke resonance)
    has |T| < 1, the tank's has |T| ≫ 1. The eigenvalues say it starts; so must picker."""
    values, params = CHOKE_FIRST
    up = rhp_pairs(pencil_poles(values, STRAY, params))
    assert up.size > 0  # the reference: an oscillatory pole pair in the right half-plane
    # the first zero-phase crossing on a fine grid (phase through 0, not through ±π)
    f = np.geomspace(10.0, 1e6, 400_001)
    t = loop_gain(COLPITTS, values, STRAY, params, f)
    ph = np.angle(t)
    cross = np.nonzero((np.sign(ph[:-1]) != np.sign(ph[1:])) & (np.abs(ph[1:] - ph[:-1]) < 1))[0]
    assert cross.size >= 2
    assert abs(t[cross[0]]) < 1.0 < abs(t[cross[1]])  # the rule would say "no start"
    st = steady_state(COLPITTS, values, STRAY, params)
    assert bool(st.starts)
    assert_allclose(float(st.f_start_hz), up[np.argmax(up.imag)].imag / TWO_PI, rtol=1e-6)


def test_a_board_without_gain_does_not_start_and_has_no_steady_figures():
    values = TANK
    params = replace(TYPICAL, r_c=20.0)  # a collector load too small for the loop
    assert rhp_pairs(pencil_poles(values, STRAY, params)).size == 0
    st = steady_state(COLPITTS, values, STRAY, params)
    assert not st.starts and not st.runs
    assert math.isnan(float(st.f_hz)) and float(st.amplitude_v) == 0.0
