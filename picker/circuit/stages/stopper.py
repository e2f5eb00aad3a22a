"""The base (gate) stopper: a resistor in series with the device's control terminal.

A resistor R_S of some tens to a few hundred ohms between the stage's input node (the
base or gate as the rest of the circuit sees it: the tank's end, the bias network, the
base bypass of a common-base stage) and the device's own base (gate), right at the
device, damps a parasitic VHF oscillation of the device with its lead and board
inductance (common practice, no source). Every stage takes it (``r_stopper``; the
spec's ``r_stopper``): in each the device's base (gate) is the stage's ``input`` node,
its emitter (source) the ``common`` node and its collector (drain) the ``output`` node
(the follower's collector and the common-base stage's base are AC ground and carry
those names), so one treatment serves all six.

Small signal. It is the textbook base resistance r_b of the hybrid-π model (Gray &
Meyer, *Analysis and Design of Analog Integrated Circuits*, hybrid-π model with r_b;
SPICE's RB): an inner node b' (:data:`INNER`) joined to the input b by G = 1/R_S, to the
emitter e by y_π and to the collector c by y_μ, and the controlled source gm·v_b'e.
Two equivalent ways are used:

- the inner node kept (:func:`inner_stamps`, the generic nodal solver of
  :func:`picker.circuit.network.loop_gain_matrix` and the harmonic balances of
  :mod:`picker.circuit.junctions` and :mod:`picker.circuit.harmonic`, whose junction
  then sits at b' where it belongs);
- the inner node eliminated (:func:`stopper_return_ratio`, the stages' closed forms).
  Kirchhoff's current law at b' gives v_b' = (G·v_b + y_π·v_e + y_μ·v_c)/Σ,
  Σ = G + y_π + y_μ; the star-mesh transform of the three admittances (Kennelly's
  star-mesh theorem) leaves G·y_π/Σ from b to e, G·y_μ/Σ from b to c and y_π·y_μ/Σ from
  c to e, and the controlled source becomes

      i = gm·v_b'e = gm·G/Σ·(v_b − v_e) + gm·y_μ/Σ·(v_c − v_e).                    (S1)

  The stage's closed form is solved with the eliminated device (its fields complex
  admittances at s: 1/r_π → G·y_π/Σ, s·C_μ → G·y_μ/Σ, 1/r_o → 1/r_o + y_π·y_μ/Σ,
  gm → gm·G/Σ) and the return ratio of the whole source (S1) is
  T = −gm·(x_b' − x_e) = T' − gm·y_μ/Σ·(x_c − x_e); the same T as with the node kept
  (tests/test_stopper.py checks both against each other and against ngspice).

Large signal. The describing function compresses the junction (g_π, C_π's stored charge
and gm by the same factor, :meth:`picker.circuit.stages.base.Stage.compressed`) and the
drive it is compressed by is the junction's own, v_b'e: the node voltages the closed
form returns carry b' (:func:`stopper_return_ratio`), and :meth:`Stage.control` names
the node the large-signal modules read the drive at. DC: the base current's drop
I_B·R_S adds R_S to the base's Thevenin resistance (:func:`picker.circuit.bias.dc_loop`,
:func:`picker.circuit.device.bias_point`).
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import SmallSignal
from picker.circuit.stages.base import INNER, Stage, Stamp
from picker.tank.base import Topology

__all__ = ["INNER", "STOPPER_CAUTION", "inner_stamps", "stopper_lines", "stopper_return_ratio"]

#: The saturated (overdriven) boards' steady state with a stopper (measured in ngspice,
#: README "Base (gate) stopper"): the harmonic balance of the junctions behind the stopper
#: where :attr:`picker.circuit.stages.base.Stage.saturated_balance`, else the describing
#: function, which carries only the fundamental of the base current through the stopper.
STOPPER_CAUTION = (
    "base (gate) stopper: on a board the model marks overdriven (the device saturates), the "
    "fast model's steady state behind the stopper was measured within 0.1 % in frequency "
    "(emitter follower, common emitter) and 0.4 % (common base) of ngspice, its amplitude "
    "less certain; verify such boards in ngspice"
)


def _device_admittances(s: np.ndarray, ss: SmallSignal) -> tuple[Any, Any, Any]:
    """(y_π, y_μ, g_o) of the device at ``s``."""
    return 1.0 / ss.r_pi + s * ss.c_pi, s * ss.c_mu, 1.0 / ss.r_o + 0.0 * s


def _inverse(y: Any) -> Any:
    """1/y, infinite where y = 0 (a device without input admittance)."""
    y = np.asarray(y)
    zero = y == 0
    return np.where(zero, np.inf, 1.0 / np.where(zero, 1.0, y))


def inner_stamps(
    stage: Stage, s: np.ndarray, topology: Topology, params: AmplifierParams, ss: SmallSignal
) -> list[Stamp]:
    """The stage's stamps with the stopper as a resistor to the inner node :data:`INNER`:
    the stage's own stamps of a device without y_π, y_μ and g_o (its bias network, loads
    and coupling parts; a collector-feedback resistor stays at the outer base), then
    G = 1/R_S from ``input`` to b', y_π b'–``common``, y_μ b'–``output``, g_o
    ``output``–``common``."""
    bare = replace(ss, r_pi=np.inf, c_pi=0.0, c_mu=0.0, r_o=np.inf)
    y_pi, y_mu, g_o = _device_admittances(s, ss)
    b, c, e = stage.input, stage.output, stage.common
    return [
        *stage.stamps(s, topology, params, bare),
        Stamp(b, INNER, 1.0 / float(params.r_stopper or np.inf) + 0.0 * s),
        Stamp(INNER, e, y_pi),
        Stamp(INNER, c, y_mu),
        Stamp(c, e, g_o),
    ]


def stopper_return_ratio(
    stage: Stage,
    s: np.ndarray,
    tank: tuple[Any, Any, Any],
    topology: Topology,
    params: AmplifierParams,
    ss: SmallSignal,
    *,
    nodes: bool = False,
) -> Any:
    """Return ratio T (and, with ``nodes``, the node voltages, b' among them) of the stage
    with its stopper, by the stage's closed form on the eliminated device (module
    docstring, (S1))."""
    g = 1.0 / float(params.r_stopper or np.inf)
    y_pi, y_mu, g_o = _device_admittances(s, ss)
    sig = g + y_pi + y_mu
    arr: Any = SmallSignal  # fields become complex admittances at s, one per element
    eff = arr(
        gm=ss.gm * g / sig,
        r_pi=_inverse(g * y_pi / sig),
        c_pi=0.0,
        c_mu=g * y_mu / (sig * s),
        r_o=1.0 / (g_o + y_pi * y_mu / sig),
        i_dc=ss.i_dc,
    )
    t, x = stage.loop_gain(s, tank, topology, params, eff, nodes=True)
    xc = x.get(stage.output, 0.0)
    xe = x.get(stage.common, 0.0)
    xb = x.get(stage.input, 0.0)
    t = t - ss.gm * y_mu / sig * (xc - xe)
    if not nodes:
        return t
    x = dict(x)
    x[INNER] = (g * xb + y_pi * xe + y_mu * xc) / sig
    return t, x


def stopper_lines(params: AmplifierParams, outer: str) -> tuple[list[str], str]:
    """The stopper's netlist line from ``outer`` (the stage's input node) to the inner node,
    and the node the device's base (gate) is written on: ``([], outer)`` without one."""
    if params.r_stopper is None:
        return [], outer
    return [f"RSTOP {outer} {INNER} {float(params.r_stopper):.6g}"], INNER
