"""Tank topologies: effective capacitance, feedback fraction, frequency and sensitivities.

Convention (Sedra & Smith, *Microelectronic Circuits*, Colpitts section): C1 sits
across the amplifier's output (collector-emitter), C2 across its input
(base-emitter), L from output to input. The feedback fraction is
beta = C1 / C2 and the amplifier needs a gain of at least 1 / beta.

Every function takes numpy arrays (any broadcastable shapes) in SI units and is
pure. ``values`` is a mapping from position name ("C1", "C2", "C3", "L") to an
array.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from picker.errors import SpecError

TWO_PI = 2.0 * np.pi


def resonant_frequency(l, c_eff):
    """Ideal tank frequency f = 1 / (2π √(L·C)) in Hz (Thomson's formula)."""
    return 1.0 / (TWO_PI * np.sqrt(np.asarray(l) * np.asarray(c_eff)))


def series_capacitance(*caps):
    """Capacitors in series: 1 / Σ(1/Ci)."""
    inv = sum(1.0 / np.asarray(c, dtype=float) for c in caps)
    return 1.0 / inv


@dataclass(frozen=True)
class Topology:
    """A tank topology: its part positions and its vectorised formulas."""

    name: str
    positions: tuple[str, ...]
    capacitors: tuple[str, ...]

    def c_series(self, values: Mapping[str, np.ndarray]):
        """Capacitance of the capacitor chain alone (no stray), in F."""
        return series_capacitance(*(values[p] for p in self.capacitors))

    def c_eff(self, values: Mapping[str, np.ndarray], stray=0.0):
        """Effective tank capacitance: the series chain plus stray across the tank."""
        return self.c_series(values) + stray

    def frequency(self, values: Mapping[str, np.ndarray], stray=0.0):
        """Nominal oscillation frequency of the ideal tank, Hz."""
        return resonant_frequency(values["L"], self.c_eff(values, stray))

    @staticmethod
    def beta(values: Mapping[str, np.ndarray]):
        """Feedback fraction beta = C1 / C2."""
        return np.asarray(values["C1"]) / np.asarray(values["C2"])

    def sensitivities(self, values: Mapping[str, np.ndarray], stray=0.0) -> dict[str, np.ndarray]:
        """First-order sensitivities S_x = ∂ln f / ∂ln x for every position.

        f ∝ (L·C_eff)^(-1/2) gives S_L = -1/2. For a capacitor Ci in the series
        chain, ∂ln C_s/∂ln Ci = C_s/Ci, so S_Ci = -½ · (C_s/C_eff) · (C_s/Ci);
        with no stray this is the textbook -½·C_eff/Ci (REFERENCES.md,
        derived and checked by central differences in the tests). The
        capacitor terms sum to -½·C_s/C_eff, i.e. -½ without stray.
        """
        cs = self.c_series(values)
        ce = cs + stray
        out = {"L": np.broadcast_to(-0.5, np.shape(cs)).astype(float)}
        for p in self.capacitors:
            out[p] = -0.5 * (cs / ce) * (cs / np.asarray(values[p]))
        return {p: out[p] for p in self.positions}


COLPITTS = Topology("colpitts", ("C1", "C2", "L"), ("C1", "C2"))
CLAPP = Topology("clapp", ("C1", "C2", "C3", "L"), ("C1", "C2", "C3"))
TOPOLOGIES = {t.name: t for t in (COLPITTS, CLAPP)}


def get_topology(name: str) -> Topology:
    """Look a topology up by name ("colpitts" or "clapp")."""
    try:
        return TOPOLOGIES[name.strip().lower()]
    except KeyError:
        raise SpecError(
            f"expected a topology, one of {', '.join(TOPOLOGIES)}; got {name!r}", key="topology"
        ) from None


@dataclass(frozen=True)
class Parasitics:
    """Board and device parasitics (SI): see :class:`picker.spec.model.ParasiticsSpec`."""

    stray: float = 0.0
    c1_shunt: float = 0.0
    c2_shunt: float = 0.0
    l_scale: float = 1.0


def board_values(values: Mapping[str, np.ndarray], par: Parasitics) -> dict[str, np.ndarray]:
    """Part values as the tank sees them: shunts added across C1/C2, L scaled.

    A position with no parasitic is passed through unchanged (the same array).
    """
    out = dict(values)
    if par.c1_shunt:
        out["C1"] = values["C1"] + par.c1_shunt
    if par.c2_shunt:
        out["C2"] = values["C2"] + par.c2_shunt
    if par.l_scale != 1.0:
        out["L"] = values["L"] * par.l_scale
    return out


def board_frequency(topology: Topology, values: Mapping[str, np.ndarray], par: Parasitics):
    """Ideal-tank frequency of a board with its parasitics, Hz."""
    return topology.frequency(board_values(values, par), par.stray)


def board_beta(values: Mapping[str, np.ndarray], par: Parasitics):
    """Feedback fraction of a board, (C1 + c1_shunt) / (C2 + c2_shunt)."""
    return (np.asarray(values["C1"]) + par.c1_shunt) / (np.asarray(values["C2"]) + par.c2_shunt)


def board_sensitivities(
    topology: Topology, values: Mapping[str, np.ndarray], par: Parasitics
) -> dict[str, np.ndarray]:
    """S_x = ∂ln f / ∂ln x with respect to each *marked* part value.

    The chain rule through the shunt gives an extra factor x / (x + shunt)
    for C1 and C2; the inductance scale does not change S_L = -1/2.
    """
    bv = board_values(values, par)
    s = topology.sensitivities(bv, par.stray)
    if par.c1_shunt:
        s["C1"] = s["C1"] * (np.asarray(values["C1"]) / bv["C1"])
    if par.c2_shunt:
        s["C2"] = s["C2"] * (np.asarray(values["C2"]) / bv["C2"])
    return s
