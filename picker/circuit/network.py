"""The loaded oscillator as a linear network: a tank and a stage, their stamps, the loop gain.

Model and assumptions (stated here, repeated in the README):

1. Linear small-signal operation at the DC bias point: the stage's device is
   its small-signal model (:mod:`picker.circuit.stages`), the tank its parts
   with their losses (:mod:`picker.tank`).
2. The loop is broken at the stage's controlled source: the loop gain is Bode's
   return ratio T(jω) = −gm·(v_in − v_common)/1 A·V⁻¹ for a unit test source in
   place of the controlled one, T = −gm·uᵀ·Y⁻¹·u' with Y the passive
   nodal-admittance matrix; by the matrix-determinant lemma
   det(Y + gm·u'uᵀ) = det(Y)·(1 − T), so T = 1 is exactly the characteristic
   equation of the linear circuit.
3. The oscillation frequency is the frequency near the ideal tank frequency
   where the phase of T crosses zero; the start-up margin is |T| there (1.0 is
   the edge of starting; the board starts when the margin exceeds 1)
   (:mod:`picker.circuit.oscillation`).
4. Losses: inductor ESR in series with L (constant, or from Q at a frequency:
   ESR = ω_Q·L/Q, evaluated at q_frequency or, if none, at the ideal tank
   frequency), optional capacitor ESR in series with each capacitor, the
   stage's own losses. Frequency-dependent loss (skin effect, core loss) is not
   modelled.
5. The amplitude estimate is a describing-function estimate
   (:func:`picker.circuit.amplitude.amplitude_estimate`); harmonics and supply
   limits are flags, not modelled.

Two solvers give T. :func:`loop_gain_matrix` is the generic one: every element
of the tank and of the stage stamps its admittance into the nodal matrix, in
the manner of modified nodal analysis (Ho, Ruehli & Brennan, IEEE Trans.
Circuits Syst. 22, 1975), and a stacked ``numpy.linalg.solve`` gives the node
voltages. :func:`loop_gain` (and the root finder) use the stage's closed form
(:meth:`picker.circuit.stages.base.Stage.loop_gain`), several times faster; the
two agree to rounding (tests/test_circuit.py, tests/test_stage_conformance.py).

Axis convention: ``values`` arrays broadcast together; results have the
broadcast shape (typically samples on axis 0, candidates on axis 1).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, fields, replace
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import SmallSignal
from picker.circuit.stages import Stage, stage_of
from picker.circuit.stages.base import Stamp
from picker.circuit.stages.stopper import inner_stamps, stopper_return_ratio
from picker.tank.base import TWO_PI, Topology

_SS_FIELDS = tuple(f.name for f in fields(SmallSignal))

__all__ = [
    "LoadedResponse",
    "Network",
    "device_stamps",
    "loop_gain",
    "loop_gain_matrix",
    "tank_stamps",
]


@dataclass(frozen=True)
class LoadedResponse:
    """Loaded-model result; arrays of the broadcast shape of ``values``.

    ``f_hz`` is NaN and ``margin`` 0 where no zero-phase crossing was found
    near the tank frequency (the board cannot oscillate there).
    Unpacks as ``f_hz, margin = loaded_response(...)``.
    """

    f_hz: np.ndarray
    margin: np.ndarray

    def __iter__(self) -> Iterator[np.ndarray]:
        return iter((self.f_hz, self.margin))


@dataclass(frozen=True)
class Network:
    """A tank and a stage with their element values, flattened to 1-D (one per board).

    ``el`` maps each tank position to its values, ``"stray"`` to the stray
    capacitance across the inductor and ``"r_l"`` to the inductor's series loss
    resistance (ohm); ``shape`` is the broadcast shape the values came in.
    """

    topology: Topology
    stage: Stage
    params: AmplifierParams
    ss: SmallSignal
    shape: tuple[int, ...]
    el: dict[str, np.ndarray]

    @classmethod
    def build(
        cls, topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams
    ) -> Network:
        """Flatten broadcast ``values`` and ``stray``; derive the inductor's loss from its Q.

        ESR = ω_Q·L/Q with ω_Q = 2π·``q_frequency``, or the ideal tank frequency of
        each board when none is given; else the constant ``inductor_esr``.
        """
        stage = stage_of(params)
        ss = stage.small_signal(params)
        names = list(topology.positions)
        arrays = np.broadcast_arrays(*(np.asarray(values[p], dtype=float) for p in names))
        shape = arrays[0].shape
        el = {p: a.reshape(-1) for p, a in zip(names, arrays, strict=True)}
        el["stray"] = np.broadcast_to(np.asarray(stray, dtype=float), shape).reshape(-1)
        ind = el[topology.inductor]
        if params.inductor_q is not None:
            if params.q_frequency is not None:
                wq = TWO_PI * params.q_frequency
            else:
                wq = TWO_PI * topology.frequency({p: el[p] for p in names}, el["stray"])
            el["r_l"] = wq * ind / params.inductor_q
        else:
            el["r_l"] = np.full(ind.shape, float(params.inductor_esr))
        return cls(topology, stage, params, ss, shape, el)

    @property
    def size(self) -> int:
        """Number of boards (elements)."""
        return int(self.el["stray"].shape[0])

    def tank_admittances(self, s: np.ndarray, sl: Any = slice(None)) -> tuple[Any, Any, Any]:
        """The tank's (Y_out, Y_in, Y_bridge) at ``s`` for the elements ``sl``
        (:meth:`picker.tank.base.Topology.pi_admittances`)."""
        el = self.el
        return self.topology.pi_admittances(
            s,
            {p: el[p][sl] for p in self.topology.positions},
            el["stray"][sl],
            el["r_l"][sl],
            self.params.capacitor_esr,
        )

    def device_at(self, sl: Any = slice(None)) -> SmallSignal:
        """The device values for the elements ``sl``: ``ss`` itself where its fields are
        scalars, else (a device compressed per element, :meth:`with_device`) the slice."""
        ss = self.ss
        if np.ndim(ss.gm) == 0:
            return ss
        arr: Any = SmallSignal
        return arr(*(np.asarray(getattr(ss, f))[sl] for f in _SS_FIELDS))  # type: ignore[no-any-return]

    def with_device(self, ss: SmallSignal) -> Network:
        """The same network with device values ``ss`` (scalars, or arrays of one value per
        element, as :meth:`picker.circuit.stages.base.Stage.compressed` gives)."""
        return replace(self, ss=ss)

    def return_ratio(self, s: np.ndarray, sl: Any = slice(None), *, nodes: bool = False) -> Any:
        """T at complex frequencies ``s`` (1-D, one per element of ``sl``) by the stage's
        closed form; with ``nodes``, ``(T, {node: voltage for a unit test current})``."""
        tank = self.tank_admittances(s, sl)
        ss = self.device_at(sl)
        if self.params.r_stopper is not None:  # the base stopper: its inner node eliminated
            return stopper_return_ratio(
                self.stage, s, tank, self.topology, self.params, ss, nodes=nodes
            )
        return self.stage.loop_gain(s, tank, self.topology, self.params, ss, nodes=nodes)


def tank_stamps(stage: Stage, tank: tuple[Any, Any, Any]) -> list[Stamp]:
    """The tank's (Y_out, Y_in, Y_bridge) as stamps between the stage's tank nodes:
    Y_out from the tank top to ground, Y_in from the input to ground, Y_bridge
    between them."""
    y_out, y_in, y_bridge = tank
    return [
        Stamp(stage.top, "0", y_out),
        Stamp(stage.input, "0", y_in),
        Stamp(stage.top, stage.input, y_bridge),
    ]


def nodal_matrix(stamps: list[Stamp], nodes: tuple[str, ...], n: int) -> np.ndarray:
    """The stacked nodal admittance matrix (n, k, k) of ``stamps`` over ``nodes`` (a
    stamp's node not among them is ground); modified nodal analysis, Ho, Ruehli &
    Brennan, IEEE Trans. Circuits Syst. 22, 1975."""
    index = {node: i for i, node in enumerate(nodes)}
    k = len(index)
    y = np.zeros((n, k, k), dtype=complex)
    for st in stamps:
        i, j = index.get(st.a), index.get(st.b)
        if i is not None:
            y[:, i, i] += st.y
        if j is not None:
            y[:, j, j] += st.y
        if i is not None and j is not None:
            y[:, i, j] -= st.y
            y[:, j, i] -= st.y
    return y


def junction_free_stamps(net: Network, idx: np.ndarray, s: np.ndarray) -> list[Stamp]:
    """The stamps of ``net`` at ``s`` (one per element of ``idx``) without the junction's
    r_pi and diffusion capacitance: the linear network the harmonic balances drive."""
    stage, params, ss = net.stage, net.params, net.ss
    c_diff = stage.diffusion_capacitance(params, ss)
    lin = replace(ss, r_pi=np.inf, c_pi=ss.c_pi - c_diff)
    stamps = tank_stamps(stage, net.tank_admittances(s, idx))
    return stamps + device_stamps(stage, s, net.topology, params, lin)


def device_stamps(
    stage: Stage, s: np.ndarray, topology: Topology, params: AmplifierParams, ss: SmallSignal
) -> list[Stamp]:
    """The stage's stamps; with a base stopper, with its inner node kept
    (:func:`picker.circuit.stages.stopper.inner_stamps`; the nodes are then
    :meth:`picker.circuit.stages.base.Stage.network_nodes`)."""
    if params.r_stopper is not None:
        return inner_stamps(stage, s, topology, params, ss)
    return stage.stamps(s, topology, params, ss)


def _probe(
    topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams, f_hz: Any
) -> tuple[Network, np.ndarray]:
    """The network at the broadcast shape of ``f_hz`` and ``values``, and s = j·2πf (1-D)."""
    f = np.asarray(f_hz, dtype=float)
    vals = {p: np.asarray(values[p], dtype=float) for p in topology.positions}
    probe = np.broadcast_arrays(f, *vals.values())
    shape = probe[0].shape
    net = Network.build(
        topology, dict(zip(vals, probe[1:], strict=True)), np.broadcast_to(stray, shape), params
    )
    return net, 1j * TWO_PI * probe[0].reshape(-1)


def loop_gain(
    topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams, f_hz: Any
) -> np.ndarray:
    """Return ratio T(j·2πf) of the loaded oscillator (complex, broadcast shape of the inputs).

    T = 1 is the oscillation condition; see the module docstring (assumption 2).
    """
    net, s = _probe(topology, values, stray, params, f_hz)
    return np.asarray(net.return_ratio(s)).reshape(net.shape)


def loop_gain_matrix(
    topology: Topology, values: Mapping[str, Any], stray: Any, params: AmplifierParams, f_hz: Any
) -> np.ndarray:
    """The same return ratio as :func:`loop_gain` from the generic nodal solver.

    Every element stamps itself into one stacked nodal matrix over the stage's
    nodes (the tank's stamps from :func:`tank_stamps`, the stage's from
    :meth:`picker.circuit.stages.base.Stage.stamps`); a unit test current
    replaces the controlled source (+1 A into the output node, −1 A into the
    common node) and T = −gm·(x_in − x_common) (assumption 2). A cross-check
    and a speed comparison; slower.
    """
    net, s = _probe(topology, values, stray, params, f_hz)
    stage = net.stage
    stamps = tank_stamps(stage, net.tank_admittances(s))
    stamps += device_stamps(stage, s, topology, params, net.ss)
    nodes = stage.network_nodes(params)
    index = {node: i for i, node in enumerate(nodes)}
    n, k = s.shape[0], len(index)
    y = nodal_matrix(stamps, nodes, n)
    u = np.zeros((n, k, 1), dtype=complex)
    u[:, index[stage.output], 0] += 1.0
    if stage.common in index:
        u[:, index[stage.common], 0] -= 1.0
    x = np.linalg.solve(y, u)[..., 0]
    v_in = x[:, index[stage.control(params)]]
    v_common = x[:, index[stage.common]] if stage.common in index else 0.0
    return (-stage.transconductance(net.ss) * (v_in - v_common)).reshape(net.shape)
