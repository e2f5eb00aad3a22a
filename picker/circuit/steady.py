"""The oscillator as built: start-up, steady state and steadiness of boards (interface).

This module is the one entry point the rest of picker (the search, the Monte Carlo,
the report, ``--verify`` and the validation against ngspice) uses for the large-signal
behaviour of a loaded oscillator. :func:`steady_state` takes *board* values (marked
values with the spec's parasitics applied, as :func:`picker.circuit.oscillation.loaded_response`
does) and returns a :class:`SteadyState` of arrays of their broadcast shape.

First version: built on the linear model (zero-phase crossing of the loop gain, the
describing-function amplitude of :mod:`picker.circuit.amplitude`); the large-signal
model replaces the internals, not the interface.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.amplitude import amplitude_estimate
from picker.circuit.oscillation import loaded_response
from picker.tank.base import Topology

__all__ = ["SteadyState", "steady_state"]


@dataclass(frozen=True)
class SteadyState:
    """Large-signal figures of boards; every array has the broadcast shape of the values.

    Attributes
    ----------
    starts:
        bool: the linearised closed loop has a pole pair in the right half-plane.
    margin:
        gm over the gm at which the first pole pair crosses into the right half-plane
        (0 where no pole pair can cross).
    f_start_hz:
        frequency of that pole pair at start-up, Hz (NaN where it does not start).
    f_hz:
        steady oscillation frequency, Hz (NaN where it does not start).
    amplitude_v:
        steady peak voltage at the tank's output node (the stage's ``top``), V.
    bursting:
        bool: the steady state is unstable against slow envelope and bias
        perturbations (the oscillation comes and goes in bursts).
    startup_time_s:
        time from a small disturbance to 90 % of the steady amplitude, s.
    harmonics_dbc:
        2nd and 3rd harmonic at the tank's output node relative to the fundamental,
        dBc; shape ``values.shape + (2,)``.
    overdriven:
        bool: the estimate is outside the model's validity (saturation dominates).
    """

    starts: np.ndarray
    margin: np.ndarray
    f_start_hz: np.ndarray
    f_hz: np.ndarray
    amplitude_v: np.ndarray
    bursting: np.ndarray
    startup_time_s: np.ndarray
    harmonics_dbc: np.ndarray
    overdriven: np.ndarray

    @property
    def runs(self) -> np.ndarray:
        """bool: starts and runs steady (what a board needs to count towards yield)."""
        return self.starts & ~self.bursting


def steady_state(
    topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams
) -> SteadyState:
    """Start-up, steady state and steadiness of boards with board values ``values``.

    Parameters
    ----------
    topology:
        A registered tank topology.
    values:
        Position → array of board part values in SI units (F, H), broadcastable.
    stray:
        Stray capacitance across the inductor, F.
    params:
        The amplifier.

    Returns
    -------
    SteadyState
        Arrays of the broadcast shape of ``values``.
    """
    resp = loaded_response(topology, values, stray, params)
    amp = amplitude_estimate(topology, values, stray, params, resp)
    f, m = resp.f_hz, resp.margin
    starts = np.isfinite(f) & (m > 1.0)
    nan = np.full(f.shape, np.nan)
    return SteadyState(
        starts=starts,
        margin=m,
        f_start_hz=np.where(starts, f, np.nan),
        f_hz=np.where(starts, f, np.nan),
        amplitude_v=np.where(starts, amp.tank, 0.0),
        bursting=np.zeros(f.shape, dtype=bool),
        startup_time_s=nan,
        harmonics_dbc=np.full(f.shape + (2,), np.nan),
        overdriven=amp.overdriven & starts,
    )
