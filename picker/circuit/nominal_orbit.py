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
                         the unit circle, not only real negative ones           (O2)
                         or the nominal design's start-up from rest collapses    (O3)

with f_fast the Monte Carlo's own steady frequency (:mod:`picker.circuit.loaded`,
(A1)-(A3)). (O1) assumes the describing function's error moves little across the
boards of one design (a few per cent of part tolerance against a model error that
depends on how hard the device saturates); tests/test_nominal_orbit.py bounds it on
validation designs by shooting every board. (O2) freezes the verdict at nominal: the
fast model's own verdict on saturated boards (the relaxation rule) is the weaker one
(bursting precision 0.78 and recall 0.70 on the main validation set against 0.80 and
0.80 with the orbit), so the orbit's verdict wins for every board of the design. An
orbit unstable only by real negative multipliers (a flip,
:mod:`picker.circuit.periodic`) doubles its period nearby and does not burst.
(O3) (:mod:`picker.circuit.startup_run`) adds the bursts a locally stable orbit hides:
the start-up overshoot charges the emitter bypass past the point where the loop gain
drops below 1 (hard squegging); it is run where the orbit is stable, and where
shooting fails it gives the verdict alone (with the describing function's figures). A
fet's run lasts the slowest bias time constant of its schematic
(:func:`picker.circuit.netlist.bias_time_constant`: a self-biased JFET's gate resistor
with the tank's capacitance), as the gate junction's rectified current pumps the gate
negative there (grid-leak squegging: cs002 of the common-source set, whose orbit is
stable, multiplier 0.84, collapses from rest as in ngspice, within 30 periods).

Only designs whose nominal drive saturates get an orbit (on a Hartley tank, every design
that starts: its ends are coils, so the device's harmonic currents reach the control
terminal through the tank's capacitor nearly unfiltered, and the describing function
with harmonic balance of a few harmonics missed by up to 18 % out of saturation, 144 %
on a MOSFET whose waveform is far from a sine; on the Hartley validation set the orbit
holds every steady design it converges on within 0.55 % of ngspice,
tests/test_stage_validation.py; and on an emitter follower, every design that starts,
:attr:`picker.circuit.stages.base.Stage.orbit_on_start`: the emitter is both the output
and the return of the base junction, so the device's current pulses into C1 reach the
junction's drive directly; the follower Clapp cc016 of the common-collector set, which
the describing function called steady and unsaturated at 3.66 V against ngspice's 6.31 V
and 2.0 % low in frequency, has an unstable orbit there and so takes its run from rest,
0.33 % from ngspice's carrier; the set's other followers move by at most 0.23 %, each
toward ngspice's carrier or not at all) (elsewhere harmonic balance of the junctions already holds the frequency to about 0.1 %), only for the stages whose
netlist :func:`picker.circuit.transient.build_circuit` reads (every bjt stage: the
follower's collector on the supply, the Hartley tank's coupled coils; the fet stages,
JFET and MOSFET, the source follower's drain on the supply included), and only where
shooting converges; elsewhere (O1)-(O2) do not apply and the fast model stands. A fet is
shot where the steady state calls it overdriven or its start-up margin exceeds
:data:`picker.circuit.amplitude.OVERDRIVE_MARGIN` (what the caution calls overdriven):
far above start-up the square law is cut off for most of the cycle, which the
describing function's knee does not flag, and its frequency is off by up to 16 % there
(cs005 of the common-source set, margin 11). On the fet validation sets the orbit
moved the share within 2 % from 80 to 100 % (common source), 87 to 100 % (common
drain) and 65 to 95 % (common gate); each design keeps its own card in the batch.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.amplitude import OVERDRIVE_MARGIN
from picker.circuit.device import thermal_voltage
from picker.circuit.netlist import bias_time_constant
from picker.circuit.network import Network
from picker.circuit.periodic import PeriodicState, board_lines, periodic_circuits
from picker.circuit.shooting import STEPS
from picker.circuit.startup_run import HORIZON, startup_collapses
from picker.circuit.steady import steady_state
from picker.circuit.transient import Circuit, build_circuit
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


#: Steps a period of the second shot of a coupled-coil tank's orbit that did not converge.
FINER_STEPS = 2 * STEPS


def _retry_finer(
    circ: Circuit, rows: Sequence[tuple[Any, ...]], ps: PeriodicState
) -> PeriodicState:
    """``ps`` with the orbits that did not converge shot again at :data:`FINER_STEPS` steps
    a period. On a Hartley tank the bias network's slowest mode can leave a Floquet
    multiplier within a few 1e-4 of the trivial one (hy022 of the Hartley validation set:
    0.99966), and Newton's step at 128 steps a period does not settle; at 256 it does
    (its orbit then 0.02 % from ngspice's carrier)."""
    bad = np.flatnonzero(~ps.ok)
    if bad.size == 0:
        return ps
    again = periodic_circuits(
        circ.take(bad),
        np.array([TWO_PI * rows[j][3] for j in bad.tolist()]),
        np.array([rows[j][4] for j in bad.tolist()]),
        np.full(bad.size, math.nan),
        steps=FINER_STEPS,
    )
    fields = {}
    for name in PeriodicState.__dataclass_fields__:
        a = np.array(getattr(ps, name), copy=True)
        a[bad] = getattr(again, name)
        fields[name] = a
    return PeriodicState(**fields)


def board_orbits(nets: Sequence[Network]) -> list[list[NominalOrbit | None]]:
    """:class:`NominalOrbit` of every board of each of ``nets`` (a list per network; None
    where the orbit does not apply: module docstring). The describing function
    (:func:`picker.circuit.steady.steady_state`) of each network picks the saturated boards
    and starts their shooting; the boards whose netlists share a transistor card, a tank
    top and a temperature are shot in one batch (each converges on its own)."""
    out: list[list[NominalOrbit | None]] = [[None] * net.size for net in nets]
    # (network, board, netlist lines, f_fast, amplitude, the fet's own card, start-up
    # horizon (None: no start-up run), the describing function's harmonics, peak current
    # and dissipation)
    Row = tuple[
        int,
        int,
        list[str],
        float,
        float,
        list[str],
        float | None,
        tuple[float, float, float, float],
    ]
    groups: dict[tuple[Any, ...], list[Row]] = {}
    models: dict[tuple[Any, ...], list[str]] = {}
    coupled: set[tuple[Any, ...]] = set()  # the batches of coupled-coil tanks
    for k, net in enumerate(nets):
        if net.size == 0 or net.stage.device not in ("bjt", "fet"):
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
        over = np.asarray(st.overdriven).reshape(-1)
        if net.stage.device == "fet":
            # a fet overdriven as the caution calls it (:data:`OVERDRIVE_MARGIN`): far
            # above start-up the square law is cut off for most of the cycle although
            # the describing function finds no saturation (the knee)
            over = over | (np.asarray(st.margin).reshape(-1) > OVERDRIVE_MARGIN)
        if net.topology.coupled or net.stage.orbit_on_start:
            # a tank of coupled coils (Hartley), an emitter follower: every board that
            # starts (module docstring)
            over = np.asarray(st.starts).reshape(-1).copy()
        sel = np.flatnonzero(
            np.asarray(st.starts).reshape(-1)
            & over
            & np.isfinite(f_fast)
            & np.isfinite(amp)
            & (amp > 0)
        )
        if sel.size == 0:
            continue
        fet = net.stage.device == "fet"
        if fet:  # a fet batch takes each board's own card
            per = [board_lines(net, np.array([i])) for i in sel.tolist()]
            lines, own = [p[0][0] for p in per], [p[1] for p in per]
            cards: list[str] = []
        else:
            lines, cards = board_lines(net, sel)
            own = [cards] * sel.size
        for i, ln, card in zip(sel.tolist(), lines, own, strict=True):
            # one batch per netlist shape: no circuit is padded to another's size, so a
            # board's orbit is the same bit for bit alone or beside others
            shape = tuple(sorted(line.split()[0] for line in ln if not line.startswith("*")))
            key = (tuple(cards), net.stage.top, thermal_voltage(net.params.temperature_c), shape)
            models[key] = cards
            if net.topology.coupled:
                coupled.add(key)
            # (O3): a fet's bias recovers through its gate network too (a self-biased
            # JFET's gate resistor with the tank's capacitance, charged by the gate
            # junction's rectified current: grid-leak squegging), so its run takes the
            # slowest bias time constant of the schematic
            slow = tau
            if fet:
                vals = {p: float(net.el[p][i]) for p in net.topology.positions}
                slow = max(tau, bias_time_constant(net.topology, vals, net.params))
            horizon = 2.0 * float(np.nan_to_num(t_up[i])) + HORIZON * slow
            fast = (float(harm[i, 0]), float(harm[i, 1]), float(i_pk[i]), float(p_dev[i]))
            groups.setdefault(key, []).append(
                (k, i, ln, float(f_fast[i]), float(amp[i]), card, horizon, fast)
            )
    for key, rows in groups.items():
        try:
            circ = build_circuit(
                [r[2] for r in rows],
                models[key],
                key[1],
                key[2],
                cards=[r[5] for r in rows] if not key[0] else None,
            )
        except ValueError:  # a netlist the transient reader does not simulate
            continue
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            ps = periodic_circuits(
                circ,
                np.array([TWO_PI * r[3] for r in rows]),
                np.array([r[4] for r in rows]),
                np.full(len(rows), math.nan),
            )
            if key in coupled:
                ps = _retry_finer(circ, rows, ps)
        unstable = ps.ok & ps.unstable & ~ps.flip  # (O2): a flip does not burst
        # (O3): where the orbit is stable or was not found, the start-up from rest
        run = np.flatnonzero(~unstable & np.array([r[6] is not None for r in rows]))
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
                    np.array([float(rows[j][6] or 0.0) for j in run]),
                )
            collapse[run], ran[run] = got, fine
        for j, (k, i, _, f0, a0, _, _, fast) in enumerate(rows):
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
                bursting=bool(unstable[j] or collapse[j]),
                multiplier=float(ps.multiplier[j]),
                f_hz=f,
                amplitude_v=float(ps.top[j]),
                harmonics_dbc=(float(ps.harmonics_dbc[j, 0]), float(ps.harmonics_dbc[j, 1])),
                peak_current_a=float(ps.peak_current[j]),
                dissipation_w=float(ps.dissipation[j]),
            )
    return out
