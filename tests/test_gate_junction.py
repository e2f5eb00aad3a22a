"""The JFET gate junction's rectified current (picker.circuit.fet.gate_junction_mean).

Reference: the mean over a period of SPICE's gate diode law I_G = IS·(exp(v/V_T) − 1)
(Massobrio & Antognetti, *Semiconductor Device Modeling with SPICE*, 2nd ed., JFET
gate junctions) driven by v_gs + a·cos θ, integrated numerically by scipy's quad, with
V_T = kT/q at 300.15 K from the CODATA constants (scipy.constants), so independent of
the closed form (I0) under test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants, integrate

from picker.circuit.fet import gate_junction_mean

VT = constants.k * 300.15 / constants.e
IS = 1e-14


def _mean_by_quadrature(v: float, a: float) -> float:
    def f(t: float) -> float:
        return IS * (math.exp((v + a * math.cos(t)) / VT) - 1.0)

    value, _ = integrate.quad(f, 0.0, math.pi, limit=400, epsabs=0.0, epsrel=1e-11)
    return value / math.pi


@pytest.mark.parametrize(
    ("v", "a"),
    [(-1.0, 0.0), (-1.0, 0.5), (-2.0, 2.55), (-0.3, 0.2), (-6.0, 6.4), (0.1, 0.05)],
)
def test_mean_equals_the_period_average_of_the_diode_law(v, a):
    got = float(gate_junction_mean(np.array(v), np.array(a)))
    assert got == pytest.approx(_mean_by_quadrature(v, a), rel=1e-7, abs=1e-25)


def test_large_drive_does_not_overflow():
    """A peak 1 V below the junction: about −IS (reverse); a peak far above it: finite."""
    got = gate_junction_mean(np.array([-100.0, -1.0]), np.array([99.0, 300.0]))
    assert np.all(np.isfinite(got))
    assert got[0] == pytest.approx(-IS, rel=1e-6) and got[1] > 1.0
