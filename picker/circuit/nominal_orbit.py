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

with f_fast the Monte Carlo's own steady frequency (:mod:`picker.circuit.loaded`,
(A1)-(A3)). (O1) assumes the describing function's error moves little across the
boards of one design (a few per cent of part tolerance against a model error that
depends on how hard the device saturates); tests/test_nominal_orbit.py bounds it on
validation designs by shooting every board. (O2) freezes the verdict at nominal: the
fast model's own verdict on saturated boards (the relaxation rule) is the weaker one
(bursting precision 0.78 and recall 0.70 on the main validation set against 0.80 and
0.80 with the orbit), so the orbit's verdict wins for every board of the design.

Only designs whose nominal drive saturates get an orbit (elsewhere harmonic balance of
the junctions already holds the frequency to about 0.1 %), only for the bjt stages
(the emitter follower's collector, on the supply, is linked to it by 1 mΩ:
:func:`picker.circuit.periodic.supply_linked`), and only where shooting converges;
elsewhere (O1)-(O2) do not apply and the fast model stands. (O2)'s verdict leaves out a
flip (a real multiplier below −1): it doubles the period but keeps the envelope steady
(:func:`picker.circuit.periodic.periodic_circuits`).
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
    figures of the orbit (as :class:`picker.circuit.steady.SteadyState` names them)."""

    shift: float
    bursting: bool
    multiplier: float
    f_hz: float
    amplitude_v: float
    harmonics_dbc: tuple[float, float]
    peak_current_a: float
    dissipation_w: float


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
    groups: dict[tuple[Any, ...], list[tuple[int, int, list[str], float, float]]] = {}
    models: dict[tuple[Any, ...], list[str]] = {}
    for k, net in enumerate(nets):
        if net.size == 0 or net.stage.device != "bjt":
            continue
        el = {p: net.el[p] for p in net.topology.positions}
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            st = steady_state(net.topology, el, net.el["stray"], net.params)
        f_fast = np.asarray(st.f_hz, dtype=float).reshape(-1)
        amp = np.asarray(st.amplitude_v, dtype=float).reshape(-1)
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
            groups.setdefault(key, []).append((k, i, ln, float(f_fast[i]), float(amp[i])))
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
        for j, (k, i, _, f0, _) in enumerate(rows):
            if not bool(ps.ok[j]):
                continue
            f = float(ps.w[j]) / TWO_PI
            out[k][i] = NominalOrbit(
                shift=math.log(f) - math.log(f0),
                bursting=bool(ps.unstable[j]),
                multiplier=float(ps.multiplier[j]),
                f_hz=f,
                amplitude_v=float(ps.top[j]),
                harmonics_dbc=(float(ps.harmonics_dbc[j, 0]), float(ps.harmonics_dbc[j, 1])),
                peak_current_a=float(ps.peak_current[j]),
                dissipation_w=float(ps.dissipation[j]),
            )
    return out
