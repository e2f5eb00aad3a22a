"""The Clapp tank: a Colpitts whose inductor has C3 in series.

Clapp, "An inductance-capacitance oscillator of unusual frequency stability",
Proc. IRE 36 (1948); Sedra & Smith, *Microelectronic Circuits*, LC
oscillators: f = 1 / (2π √(L·C_s)) with 1/C_s = 1/C1 + 1/C2 + 1/C3, feedback
fraction beta = C1 / C2 as in the Colpitts. C3 (the small series capacitor)
sets the frequency; the search solves for it when its table is larger than the
inductor's, and a trimmer may sit in parallel with it. Every formula is the
series-chain default of :class:`picker.tank.base.Topology`.
"""

from __future__ import annotations

from picker.tank.base import Topology

__all__ = ["CLAPP", "Clapp"]


class Clapp(Topology):
    """Clapp: positions C1, C2, C3, L; the chain C1-C2-C3; feedback pair (C1, C2)."""

    name = "clapp"
    positions = ("C1", "C2", "C3", "L")
    capacitors = ("C1", "C2", "C3")
    inductor = "L"
    feedback_pair = ("C1", "C2")
    trimmer_position = "C3"
    typical = {"C1": 1e-9, "C2": 2.2e-9, "C3": 220e-12, "L": 22e-6}


CLAPP = Clapp()
