"""The bias network's slow states: each stage's DC nodes, the parts that hold and set them.

The envelope-and-bias equations of :mod:`picker.circuit.envelope` (its (E2),
C·dV/dt = −G·V + j·ΔI) need, per stage, the DC nodes whose voltages move while the
oscillation's amplitude settles, the capacitances C and conductances G between them
(modified nodal analysis on the circuit at a frequency far below the carrier: Ho,
Ruehli & Brennan, "The modified nodal approach to network analysis", IEEE Trans.
Circuits Syst. 22 (1975); capacitors as capacitors, the tank's inductor a short), the
node map P that merges nodes joined by a short (and drops the ones a short ties to
ground or the supply, which hold still), where a rise ΔI of the device's mean output
current enters (output −ΔI, input −ΔI/β, common +ΔI·(1 + 1/β): the device's terminal
currents, Kirchhoff's current law) and which node voltages make the control voltage
ΔV = V_input − V_common. Every stage supplies its own
(:meth:`picker.circuit.stages.base.Stage.slow_network`): :func:`grounded_common` is the
layout of the stages whose tank common end is grounded (common-emitter,
common-source), :func:`build` the generic builder the others use.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # types only: stages.base imports this module
    from picker.circuit.amplifier import AmplifierParams
    from picker.circuit.device import SmallSignal
    from picker.circuit.stages.base import BiasLoop, Stage
    from picker.tank.base import Topology

__all__ = [
    "GROUND",
    "Parts",
    "SlowNetwork",
    "build",
    "divider_resistance",
    "grounded_common",
    "lowfreq_capacitance",
]

#: The name of ground (and of the supply, an AC and slow-signal ground) in :func:`build`.
GROUND = "gnd"


@dataclass(frozen=True)
class SlowNetwork:
    """The DC nodes of a stage as :mod:`picker.circuit.envelope` uses them.

    ``cap``, ``cond``: capacitance (F) and conductance (S) matrices, elements × nodes ×
    nodes; ``proj``: nodes × reduced nodes (1 where a node belongs to a reduced node);
    ``inj``: current into each node per unit rise of the device's mean output current;
    ``sense``: ΔV = sense · V.
    """

    cap: np.ndarray
    cond: np.ndarray
    proj: np.ndarray
    inj: np.ndarray
    sense: np.ndarray


def lowfreq_capacitance(y: Any, s_lo: np.ndarray) -> Any:
    """The capacitance of an admittance ``y`` taken at the low frequency ``s_lo`` (on the
    imaginary axis): Im Y(jω_s)/ω_s (a capacitor's admittance is jωC)."""
    return y.imag / s_lo.imag


def _stamp(m: np.ndarray, a: int, b: int | None, y: Any) -> None:
    """Nodal stamp of ``y`` between nodes ``a`` and ``b`` (``None``: ground); Ho, Ruehli &
    Brennan (1975)."""
    m[:, a, a] += y
    if b is not None:
        m[:, b, b] += y
        m[:, a, b] -= y
        m[:, b, a] -= y


def grounded_common(
    stage: Stage,
    topology: Topology,
    params: AmplifierParams,
    ss: SmallSignal,
    loop: BiasLoop,
    tank: tuple[Any, Any, Any],
    s_lo: np.ndarray,
) -> SlowNetwork:
    """The DC nodes (output, top, input, common) of a stage whose tank common end is
    ground: the tank's output end ``top`` and input end carry its π capacitances to
    ground (``tank``: the π admittances at ``s_lo``,
    :meth:`picker.tank.base.Topology.pi_admittances`), C_pi on the input, the bridge
    (where it blocks DC) top–input, the blocking capacitor output–top, the emitter
    bypass C_E and R_E on the common node, the output's DC load, the divider's R_th on
    the input, the bleed on the top. Merged: output = top without a blocking
    capacitor, top = input where the bridge passes DC; the common node is dropped
    without an emitter resistor (held at ground). A bjt's results are those of the
    layout written first inside :mod:`picker.circuit.envelope` (the goldens check it)."""
    y_out, y_in, y_br = tank
    n = s_lo.size
    cap = np.zeros((n, 4, 4))
    cond = np.zeros((n, 4, 4))
    out_, top, inp, com = 0, 1, 2, 3
    tiny = 1e-6 * (y_out.imag / s_lo.imag)  # a node with no capacitor of its own
    _stamp(cap, top, None, y_out.imag / s_lo.imag)
    _stamp(cap, inp, None, y_in.imag / s_lo.imag + ss.c_pi)
    if not topology.bridge_passes_dc:
        _stamp(cap, top, inp, y_br.imag / s_lo.imag)
    if params.c_block is not None:
        _stamp(cap, out_, top, params.c_block)
    _stamp(cap, out_, None, tiny)
    _stamp(cap, com, None, loop.c_e if loop.c_e > 0 else tiny)
    _stamp(cond, out_, None, 1.0 / max(loop.r_out, 1e-3))
    # a fet's loop holds no gate current (R_th infinite) but its gate still returns to
    # ground through its resistors
    r_th = loop.r_th if math.isfinite(loop.r_th) else divider_resistance(params)
    if r_th is not None:
        _stamp(cond, inp, None, 1.0 / r_th)
    if loop.r_e > 0:
        _stamp(cond, com, None, 1.0 / loop.r_e)
    if stage.needs_bleed(topology, params):
        _stamp(cond, top, None, 1.0 / params.r_bleed)
    group = [0, 1, 2, 3]
    if params.c_block is None:
        group[top] = group[out_]
    if topology.bridge_passes_dc:
        group[inp] = group[top]
    keep = sorted(set(group[:3])) + ([3] if loop.r_e > 0 else [])
    proj = np.zeros((4, len(keep)))
    for node, g in enumerate(group):
        if g in keep:
            proj[node, keep.index(g)] = 1.0
    inj = np.array([-1.0, 0.0, -1.0 / loop.beta, 1.0 + 1.0 / loop.beta])
    sense = np.array([0.0, 0.0, 1.0, -1.0])
    return SlowNetwork(cap, cond, proj, inj, sense)


def divider_resistance(params: AmplifierParams) -> float | None:
    """The base (gate) divider's Thevenin resistance R_th = R_B1 ∥ R_B2 (the one resistor
    where only one is given: a single base resistor, or a gate resistor to ground; None
    without either): the source resistance the base's DC node sees (Thevenin's theorem)."""
    r = [x for x in (params.r_b1, params.r_b2) if x is not None]
    return 1.0 / sum(1.0 / x for x in r) if r else None


class Parts:
    """The named parts of a slow network as a stage lays them out, for :func:`build`."""

    def __init__(self) -> None:
        self.caps: list[tuple[str, str, Any]] = []
        self.conds: list[tuple[str, str, Any]] = []
        self.shorts: list[tuple[str, str]] = []

    def cap(self, a: str, b: str, c: Any) -> None:
        """A capacitor ``c`` between ``a`` and ``b``; ``None``: no capacitor there, a short
        (a part that passes DC with no resistance: no blocking capacitor, an inductor)."""
        if c is None:
            self.shorts.append((a, b))
        else:
            self.caps.append((a, b, c))

    def bias(self, loop: BiasLoop, params: AmplifierParams, base: str, emitter: str) -> None:
        """The resistors that set the device's DC loop: the divider's R_th from the base
        and R_E from the emitter, each to ground where present. A fet's loop holds no gate
        current (R_th infinite in :class:`BiasLoop`), but its gate's DC node still
        returns to ground through the gate resistors (:func:`divider_resistance`), or is
        ground itself where there are none (a gate tied to ground)."""
        r_th = loop.r_th if math.isfinite(loop.r_th) else divider_resistance(params)
        if r_th is None:
            self.shorts.append((base, GROUND))
        else:
            self.conds.append((base, GROUND, 1.0 / r_th))
        if loop.r_e > 0:
            self.conds.append((emitter, GROUND, 1.0 / loop.r_e))

    def network(
        self,
        nodes: Sequence[str],
        count: int,
        loop: BiasLoop,
        terminals: tuple[str | None, str, str],
    ) -> SlowNetwork:
        """:func:`build` with the device's terminal currents per unit rise of its mean
        output current at ``terminals`` (collector or ``None`` where it sits on the supply,
        base, emitter): −1, −1/β, +1 + 1/β (Kirchhoff's current law), and
        ΔV = V_base − V_emitter."""
        col, base, emitter = terminals
        inj = {base: -1.0 / loop.beta, emitter: 1.0 + 1.0 / loop.beta}
        if col is not None:
            inj[col] = -1.0
        sense = {base: 1.0, emitter: -1.0}
        return build(nodes, count, self.caps, self.conds, self.shorts, inj, sense)


def build(
    nodes: Sequence[str],
    count: int,
    caps: Sequence[tuple[str, str, Any]],
    conds: Sequence[tuple[str, str, Any]],
    shorts: Sequence[tuple[str, str]],
    inj: dict[str, float],
    sense: dict[str, float],
) -> SlowNetwork:
    """A :class:`SlowNetwork` from named parts: ``nodes`` (not ground, :data:`GROUND`),
    ``count`` elements, capacitors and conductances as (node, node, value per element or
    scalar), ``shorts`` (node pairs a DC path of no resistance joins: a union-find merges
    them; a group holding ground is dropped), the injection and the sense by node. Every
    node gets a capacitance to ground of 10⁻⁶ of the largest capacitance present, so that
    the capacitance matrix of the reduced nodes is invertible where a node has no
    capacitor of its own."""
    index = {name: i for i, name in enumerate(nodes)}
    k = len(nodes)
    cap = np.zeros((count, k, k))
    cond = np.zeros((count, k, k))

    def at(name: str) -> int | None:
        return None if name == GROUND else index[name]

    for a, b, y in caps:
        _stamp(cap, index[a], at(b), y)
    for a, b, y in conds:
        _stamp(cond, index[a], at(b), y)
    tiny = 1e-6 * np.max(np.abs(cap), axis=(1, 2))
    for i in range(k):
        _stamp(cap, i, None, tiny)
    parent = {name: name for name in (*nodes, GROUND)}

    def root(name: str) -> str:
        while parent[name] != name:
            name = parent[name]
        return name

    for a, b in shorts:
        ra, rb = root(a), root(b)
        if ra != rb:  # ground stays a root, so a group tied to it is found by its root
            parent[ra if ra != GROUND else rb] = rb if ra != GROUND else ra
    groups = list(dict.fromkeys(root(name) for name in nodes if root(name) != GROUND))
    proj = np.zeros((k, len(groups)))
    for name in nodes:
        r = root(name)
        if r != GROUND:
            proj[index[name], groups.index(r)] = 1.0
    inj_v = np.array([inj.get(name, 0.0) for name in nodes])
    sense_v = np.array([sense.get(name, 0.0) for name in nodes])
    return SlowNetwork(cap, cond, proj, inj_v, sense_v)
