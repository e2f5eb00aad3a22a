"""The tank as built on a board: parasitics, the board values and their derivatives.

The board model (picker's ``[parasitics]`` convention)::

    f = 1 / (2π √(L·l_scale · (C_s(C1 + c1_shunt, C2 + c2_shunt[, C3]) + stray)))

``stray`` sits across the whole tank, ``c1_shunt`` across the output-side
capacitor of the feedback pair (C1, the amplifier's output), ``c2_shunt``
across the input-side one (C2, the amplifier's input), and ``l_scale`` is the
ratio of true to marked inductance. Which position each parasitic touches is
the topology's fact (:attr:`picker.tank.base.Topology.feedback_pair`,
:attr:`picker.tank.base.Topology.inductor`): nothing here names a position.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from picker.tank.base import Topology, resonant_frequency

__all__ = [
    "DEFAULTS",
    "PARAMETERS",
    "UNITS",
    "Parasitics",
    "apply_parasitics",
    "board_beta",
    "board_feedback_bounds",
    "board_frequency",
    "board_interval",
    "board_scale",
    "board_sensitivities",
    "board_shunt",
    "board_values",
    "ideal_jacobian",
    "shunt_positions",
]

#: Every parasitic the board model knows, in a fixed order.
PARAMETERS: tuple[str, ...] = ("stray", "c1_shunt", "c2_shunt", "l_scale")
#: Value of each parasitic on an ideal board.
DEFAULTS: Mapping[str, float] = {"stray": 0.0, "c1_shunt": 0.0, "c2_shunt": 0.0, "l_scale": 1.0}
#: SI unit of each parasitic ("1" = dimensionless).
UNITS: Mapping[str, str] = {"stray": "F", "c1_shunt": "F", "c2_shunt": "F", "l_scale": "1"}


@dataclass(frozen=True)
class Parasitics:
    """Board and device parasitics (SI): see :class:`picker.spec.model.ParasiticsSpec`."""

    stray: float = 0.0
    c1_shunt: float = 0.0
    c2_shunt: float = 0.0
    l_scale: float = 1.0


def shunt_positions(topology: Topology) -> dict[str, str]:
    """The position each shunt parasitic sits across: c1_shunt output side, c2_shunt input side
    (:meth:`picker.tank.base.Topology.shunt_targets`; none for a tank whose ends are inductors)."""
    return topology.shunt_targets()


def board_shunt(topology: Topology, pos: str, par: Parasitics) -> float:
    """Capacitance the board adds across ``pos`` (0.0 where none), F."""
    for name, at in topology.shunt_targets().items():
        if pos == at:
            return float(getattr(par, name))
    return 0.0


def board_scale(topology: Topology, pos: str, par: Parasitics) -> float:
    """Ratio of board to marked value of ``pos`` (``l_scale`` for an inductor, else 1.0)."""
    return par.l_scale if pos in topology.inductors else 1.0


def board_values(topology: Topology, values: Mapping[str, Any], par: Parasitics) -> dict[str, Any]:
    """Part values as the tank sees them: shunts added across the feedback pair, L scaled.

    A position with no parasitic, or absent from ``values``, is passed through
    unchanged (the same array).
    """
    out = dict(values)
    for p in values:
        shunt = board_shunt(topology, p, par)
        if shunt:
            out[p] = values[p] + shunt
        scale = board_scale(topology, p, par)
        if scale != 1.0:
            out[p] = values[p] * scale
    return out


def board_frequency(topology: Topology, values: Mapping[str, Any], par: Parasitics) -> Any:
    """Ideal-tank frequency of a board with its parasitics, Hz."""
    # a sampled stray per board (key "stray", picker.core.montecarlo) overrides par.stray
    return topology.frequency(board_values(topology, values, par), values.get("stray", par.stray))


def board_beta(topology: Topology, values: Mapping[str, Any], par: Parasitics) -> Any:
    """Feedback fraction of a board, e.g. (C1 + c1_shunt) / (C2 + c2_shunt)."""
    return topology.beta(board_values(topology, values, par))


def board_sensitivities(
    topology: Topology, values: Mapping[str, Any], par: Parasitics
) -> dict[str, np.ndarray]:
    """S_x = ∂ln f / ∂ln x with respect to each *marked* part value.

    The chain rule through a shunt gives an extra factor x / (x + shunt) for
    the feedback pair; a scale (the inductance's) does not change S.
    """
    bv = board_values(topology, values, par)
    s = topology.sensitivities(bv, par.stray)
    for p in topology.feedback_pair:
        if board_shunt(topology, p, par):
            s[p] = s[p] * (np.asarray(values[p]) / bv[p])
    return s


def board_feedback_bounds(
    topology: Topology,
    first: Any,
    beta_min: float,
    beta_max: float,
    par: Parasitics,
    *,
    widen: float = 0.0,
) -> tuple[Any, Any]:
    """Interval of the input-side marked value that puts the board's beta in the window.

    ``first`` holds marked output-side values;
    :meth:`picker.tank.base.Topology.feedback_bounds` on their board values,
    widened by the relative ``widen`` (board values), then less the input
    side's shunt and over its scale (an inductor's ``l_scale``).
    """
    out, inp = topology.feedback_pair
    fe = board_values(topology, {out: first}, par)[out]
    lo, hi = topology.feedback_bounds(fe, beta_min, beta_max)
    shunt = board_shunt(topology, inp, par)
    scale = board_scale(topology, inp, par)
    lo, hi = lo * (1 - widen) - shunt, hi * (1 + widen) - shunt
    return (lo, hi) if scale == 1.0 else (lo / scale, hi / scale)


def board_interval(
    topology: Topology,
    values: Mapping[str, Any],
    solved: str,
    f_min: Any,
    f_max: Any,
    par: Parasitics,
) -> tuple[Any, Any]:
    """Interval of ``solved``'s marked value that puts the board frequency in [f_min, f_max].

    :meth:`picker.tank.base.Topology.solve_interval` on the board values of
    the other positions (``values`` holds marked values of every position but
    ``solved``). A sampled stray per board (key ``"stray"``, as in
    :func:`board_frequency`) overrides ``par.stray``.
    """
    bv = board_values(topology, values, par)
    stray = values.get("stray", par.stray)
    return topology.solve_interval(
        bv, solved, f_min, f_max, stray, board_scale(topology, solved, par)
    )


def apply_parasitics(
    topology: Topology, values: Mapping[str, Any], parasitics: Mapping[str, float]
) -> dict[str, np.ndarray]:
    """Part values as the board sees them, plus the stray capacitance.

    Returns a new dict from :func:`board_values` (``C1 + c1_shunt``, ``C2 +
    c2_shunt``, ``L·l_scale``, other positions unchanged) with the key
    ``"stray"`` added. Missing parasitics take their ideal values. This is what
    a ``model`` passed to :func:`picker.calibration.fit.fit_parasitics` receives.
    """
    par = Parasitics(**{**DEFAULTS, **parasitics})
    out = board_values(topology, {k: np.asarray(v, dtype=float) for k, v in values.items()}, par)
    out["stray"] = np.asarray(par.stray, dtype=float)
    return out


def ideal_jacobian(
    topology: Topology,
    values: Mapping[str, Any],
    parasitics: Mapping[str, float],
    names: Any,
) -> np.ndarray:
    """∂f/∂p for each parasitic in ``names`` (natural units), shape (n_units, len(names)).

    With C_t = C_s + stray and f ∝ (L·l_scale·C_t)^(-1/2):
    ∂f/∂stray = −f/(2C_t); ∂f/∂c_k,shunt = −f/(2C_t)·(C_s/C_k')², because
    ∂C_s/∂C_k = (C_s/C_k)² for a series chain; ∂f/∂l_scale = −f/(2·l_scale).
    (Derived here; checked against finite differences in the tests.)
    """
    eff = apply_parasitics(topology, values, parasitics)
    across = shunt_positions(topology)
    cs = topology.c_series(eff)
    ct = cs + eff["stray"]
    f = resonant_frequency(topology.l_eff(eff), ct)
    cols = []
    for name in names:
        if name == "stray":
            d = -f / (2.0 * ct)
        elif name in across:
            d = -f / (2.0 * ct) * (cs / eff[across[name]]) ** 2
        elif name != "l_scale":
            raise ValueError(f"a {topology.name} tank has no parasitic {name}")
        else:
            d = -f / (2.0 * float({**DEFAULTS, **parasitics}["l_scale"]))
        cols.append(np.broadcast_to(d, np.shape(f)))
    return np.stack(cols, axis=1) if cols else np.zeros((np.size(f), 0))
