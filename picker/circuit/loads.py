"""The stage's output loads: the collector (drain) load and the next stage across the output.

Collector (drain) load, from the output node to the supply (an AC ground):

- a resistor R_C (``r_c``);
- an RF choke L_ch with its winding resistance r_w (``l_choke``, ``r_choke``);
- a resistor in series with the choke (both given): R_C + r_w + s·L_ch.

Its DC resistance (the bias's drop) is R_C, r_w or R_C + r_w
(:attr:`picker.circuit.amplifier.AmplifierParams.r_collector_dc`).

External load, the next stage's input (``r_next``, optionally ``c_next`` in parallel),
from the output node to ground through a coupling capacitor C_x (``c_next_coupling``):
the next stage takes no DC from the oscillator, so the bias is unchanged; at the
carrier its admittance is

    Y_x = 1/(1/(s·C_x) + 1/(1/R_x + s·C_L))                                     (X1)

(series connection of C_x with R_x ∥ C_L; admittances of series and parallel branches,
any circuit-theory text). With C_x large it is 1/R_x + s·C_L beside the collector load,
so the textbook's load across C1 (Sedra & Smith, *Microelectronic Circuits*, Colpitts
section, R = R_C ∥ R_x ∥ r_o; C_L adds to C1) holds; ``tests/test_loads.py`` checks the
start-up edge against that form and against ngspice.

Every stage with a collector (drain) load stamps :func:`output_admittance` from its
output node to AC ground and writes :func:`load_lines` into its netlist. A follower's
output is its emitter (source): it stamps :func:`next_stage_admittance` beside R_E and
writes :func:`next_stage_lines` at the emitter.
"""

from __future__ import annotations

from typing import Any

from picker.circuit.amplifier import AmplifierParams

__all__ = [
    "collector_admittance",
    "load_lines",
    "next_stage_admittance",
    "next_stage_lines",
    "output_admittance",
]


def _g(x: float) -> str:
    """A value as a netlist writes it (six significant figures)."""
    return f"{float(x):.6g}"


def collector_admittance(params: AmplifierParams, s: Any) -> Any:
    """The collector load's admittance at ``s``: 1/R_C, 1/(r_w + s·L_ch) or
    1/(R_C + r_w + s·L_ch) (series impedances add); a ValueError without a load."""
    if params.l_choke is not None:
        return 1.0 / ((params.r_c or 0.0) + params.r_choke + s * params.l_choke)
    if params.r_c is None:
        raise ValueError("the amplifier needs a collector load: r_c or l_choke")
    return 1.0 / params.r_c + 0.0 * s


def next_stage_admittance(params: AmplifierParams, s: Any) -> Any:
    """Equation (X1), the next stage through its coupling capacitor; 0 without one."""
    if params.r_next is None:
        return 0.0 * s
    y_l = 1.0 / params.r_next + (0.0 if params.c_next is None else s * params.c_next)
    return 1.0 / (1.0 / (s * params.c_next_coupling) + 1.0 / y_l)


def output_admittance(params: AmplifierParams, s: Any) -> Any:
    """The collector load and the next stage, both from the output node to AC ground."""
    return collector_admittance(params, s) + next_stage_admittance(params, s)


def load_lines(params: AmplifierParams, col: str) -> list[str]:
    """The netlist lines of the collector load (supply ``vcc`` to ``col``: the choke, its
    winding, the resistor in that order) and the next stage (:func:`next_stage_lines`)."""
    lines: list[str] = []
    if params.l_choke is not None:
        chain = [("LCH", params.l_choke)]
        if params.r_choke > 0:
            chain.append(("RCH", params.r_choke))
        if params.r_c is not None:
            chain.append(("RC", params.r_c))
        nodes = ["vcc", *(f"nch{i}" if i else "nch" for i in range(len(chain) - 1)), col]
        lines += [
            f"{n} {a} {b} {_g(v)}" for (n, v), a, b in zip(chain, nodes, nodes[1:], strict=False)
        ]
    elif params.r_c is not None:
        lines.append(f"RC vcc {col} {_g(params.r_c)}")
    else:
        raise ValueError("the amplifier needs a collector load: r_c or l_choke")
    return lines + next_stage_lines(params, col)


def next_stage_lines(params: AmplifierParams, out: str) -> list[str]:
    """The next stage from ``out`` to ground through its coupling capacitor (none without
    ``r_next``)."""
    lines: list[str] = []
    if params.r_next is not None:
        lines += [
            f"CNX {out} nnx {_g(params.c_next_coupling)}",
            f"RNX nnx 0 {_g(params.r_next)}",
        ]
        if params.c_next is not None:
            lines.append(f"CNXL nnx 0 {_g(params.c_next)}")
    return lines
