"""The periodic orbit of designs at their nominal values: the offset the Monte Carlo adds.

Where the describing function finds the transistor saturated at a design's nominal
(marked) values, its steady frequency is off by up to several per cent and its
bursting verdict by a rule of thumb (:data:`picker.circuit.envelope.SATURATED_BURST`);
the periodic orbit of the design's own netlist by shooting
(:mod:`picker.circuit.periodic`) is right to about 0.1 % against ngspice on the
validation sets (``tests/validation/``), but costs about a second per design, far too
much for every board of the Monte Carlo. So, the issue's "large-signal model for the
nominal offset, linear model for the spread" applied once more:

    ln f_steady(board) ≈ ln f_fast(board) + [ln f_orbit − ln f_fast](nominal)     (O1)
    bursts(board)      ⇔ the nominal orbit has a Floquet multiplier outside
                         the unit circle                                         (O2)
                         or the nominal design's start-up from rest collapses    (O3)

with f_fast the Monte Carlo's own steady frequency (:mod:`picker.circuit.loaded`,
(A1)-(A3)). (O1) assumes the describing function's error moves little across the
boards of one design (a few per cent of part tolerance against a model error that
depends on how hard the device saturates); tests/test_nominal_orbit.py bounds it on
validation designs by shooting every board. (O2) freezes the verdict at nominal: the
fast model's own verdict on saturated boards (the relaxation rule) is the weaker one
(bursting precision 0.78 and recall 0.70 on the main validation set against 0.80 and
0.80 with the orbit), so the orbit's verdict wins for every board of the design.
(O3) (:mod:`picker.circuit.startup_run`) adds the bursts a locally stable orbit hides:
the start-up overshoot charges the emitter bypass past the point where the loop gain
drops below 1 (hard squegging); it is run where the orbit is stable, and where shooting
fails it gives the verdict alone (with the describing function's figures).

Only designs whose nominal drive saturates get an orbit (elsewhere harmonic balance of
the junctions already holds the frequency to about 0.1 %), only for the bjt stages whose
netlist :func:`picker.circuit.transient.build_circuit` reads (the transistor's
terminals off the supply), and only where shooting converges; elsewhere (O1)-(O2) do
not apply and the fast model stands.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import thermal_voltage
from picker.circuit.network import Network
from picker.circuit.periodic import board_lines, periodic_circuits
from picker.circuit.startup_run import HORIZON, startup_collapses
from picker.circuit.steady import steady_state
from picker.circuit.transient import build_circuit
from picker.tank.base import TWO_PI, Topology
from picker.tank.board import Parasitics, board_values

__all__ = ["NominalOrbit", "board_orbits", "nominal_orbits"]


@dataclass(frozen=True)
class NominalOrbit:
    """The orbit of one design at its nominal board values.

    ``shift`` = ln f_orbit − ln f_fast ((O1)); ``bursting`` the Floquet verdict ((O2));
    ``multiplier`` the largest non-trivial multiplier's modulus; the rest the steady
    figures of the orbit (as :class:`picker.circuit.steady.SteadyState` names them).
    ``converged`` is False where shooting failed but the start-up run
    (:mod:`picker.circuit.startup_run`) gave the verdict: the figures are then the
    describing function's (``shift`` 0, ``multiplier`` NaN)."""

    shift: float
    bursting: bool
    multiplier: float
    f_hz: float
    amplitude_v: float
    harmonics_dbc: tuple[float, float]
    peak_current_a: float
    dissipation_w: float
    converged: bool = True


def nominal_orbits(
    topology: Topology,
    nominal: Mapping[str, np.ndarray],
    parasitics: Parasitics,
    params: AmplifierParams,
) -> list[NominalOrbit | None]:
    """:class:`NominalOrbit` of each design with marked values ``nominal`` (n,), or None
    where the orbit does not apply (module docstring); all designs in one batch."""
    pos = topology.positions
    marked = {p: np.asarray(nominal[p], dtype=float).reshape(-1) for p in pos}
    if marked[pos[0]].size == 0:
        return []
    bv = board_values(topology, marked, parasitics)
    net = Network.build(topology, bv, parasitics.stray, params)
    return board_orbits([net])[0]


def board_orbits(nets: Sequence[Network]) -> list[list[NominalOrbit | None]]:
    """:class:`NominalOrbit` of every board of each of ``nets`` (a list per network; None
    where the orbit does not apply: module docstring). The describing function
    (:func:`picker.circuit.steady.steady_state`) of each network picks the saturated boards
    and starts their shooting; the boards whose netlists share a transistor card, a tank
    top and a temperature are shot in one batch (each converges on its own)."""
    out: list[list[NominalOrbit | None]] = [[None] * net.size for net in nets]
    # (network, board, netlist lines, f_fast, amplitude, start-up horizon, the describing
    # function's harmonics, peak current and dissipation)
    Row = tuple[int, int, list[str], float, float, float, tuple[float, float, float, float]]
    groups: dict[tuple[Any, ...], list[Row]] = {}
    models: dict[tuple[Any, ...], list[str]] = {}
    for k, net in enumerate(nets):
        if net.size == 0 or net.stage.device != "bjt":
            continue
        el = {p: net.el[p] for p in net.topology.positions}
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            st = steady_state(net.topology, el, net.el["stray"], net.params)
        f_fast = np.asarray(st.f_hz, dtype=float).reshape(-1)
        amp = np.asarray(st.amplitude_v, dtype=float).reshape(-1)
        t_up = np.asarray(st.startup_time_s, dtype=float).reshape(-1)
        harm = np.asarray(st.harmonics_dbc, dtype=float).reshape(-1, 2)
        i_pk = np.asarray(st.peak_current_a, dtype=float).reshape(-1)
        p_dev = np.asarray(st.dissipation_w, dtype=float).reshape(-1)
        tau = net.stage.relaxation_time(net.params)
        sel = np.flatnonzero(
            np.asarray(st.starts).reshape(-1)
            & np.asarray(st.overdriven).reshape(-1)
            & np.isfinite(f_fast)
            & np.isfinite(amp)
            & (amp > 0)
        )
        if sel.size == 0:
            continue
        lines, cards = board_lines(net, sel)
        for i, ln in zip(sel.tolist(), lines, strict=True):
            # one batch per netlist shape: no circuit is padded to another's size, so a
            # board's orbit is the same bit for bit alone or beside others
            shape = tuple(sorted(line.split()[0] for line in ln if not line.startswith("*")))
            key = (tuple(cards), net.stage.top, thermal_voltage(net.params.temperature_c), shape)
            models[key] = cards
            horizon = 2.0 * float(np.nan_to_num(t_up[i])) + HORIZON * tau
            fast = (float(harm[i, 0]), float(harm[i, 1]), float(i_pk[i]), float(p_dev[i]))
            groups.setdefault(key, []).append(
                (k, i, ln, float(f_fast[i]), float(amp[i]), horizon, fast)
            )
    for key, rows in groups.items():
        try:
            circ = build_circuit([r[2] for r in rows], models[key], key[1], key[2])
        except ValueError:  # a netlist the transient reader does not simulate
            continue
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            ps = periodic_circuits(
                circ,
                np.array([TWO_PI * r[3] for r in rows]),
                np.array([r[4] for r in rows]),
                np.full(len(rows), math.nan),
            )
        # (O3): where the orbit is stable or was not found, the start-up from rest
        run = np.flatnonzero(~(ps.ok & ps.unstable))
        collapse = np.zeros(len(rows), dtype=bool)
        ran = np.zeros(len(rows), dtype=bool)
        if run.size:
            w_fast = np.array([TWO_PI * r[3] for r in rows])
            a_fast = np.array([r[4] for r in rows])
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                got, fine = startup_collapses(
                    circ.take(run),
                    np.where(ps.ok, ps.w, w_fast)[run],
                    np.where(ps.ok, ps.top, a_fast)[run],
                    np.array([rows[j][5] for j in run]),
                )
            collapse[run], ran[run] = got, fine
        for j, (k, i, _, f0, a0, _, fast) in enumerate(rows):
            if not bool(ps.ok[j]):
                if ran[j]:
                    out[k][i] = NominalOrbit(
                        shift=0.0,
                        bursting=bool(collapse[j]),
                        multiplier=math.nan,
                        f_hz=f0,
                        amplitude_v=a0,
                        harmonics_dbc=(fast[0], fast[1]),
                        peak_current_a=fast[2],
                        dissipation_w=fast[3],
                        converged=False,
                    )
                continue
            f = float(ps.w[j]) / TWO_PI
            out[k][i] = NominalOrbit(
                shift=math.log(f) - math.log(f0),
                bursting=bool(ps.unstable[j] or collapse[j]),
                multiplier=float(ps.multiplier[j]),
                f_hz=f,
                amplitude_v=float(ps.top[j]),
                harmonics_dbc=(float(ps.harmonics_dbc[j, 0]), float(ps.harmonics_dbc[j, 1])),
                peak_current_a=float(ps.peak_current[j]),
                dissipation_w=float(ps.dissipation[j]),
            )
    return out
