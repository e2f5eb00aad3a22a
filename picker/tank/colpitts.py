"""The Colpitts tank: L against C1 and C2 in series, C1/C2 the feedback divider.

Sedra & Smith, *Microelectronic Circuits*, Colpitts oscillator section:
f = 1 / (2π √(L · C1·C2/(C1 + C2))), feedback fraction beta = C1 / C2, the
amplifier's gain must reach 1 / beta. C1 sits across the amplifier's output
(collector-emitter), C2 across its input (base-emitter), L from output to
input. Every formula is the series-chain default of
:class:`picker.tank.base.Topology`.
"""

from __future__ import annotations

from picker.tank.base import Topology

__all__ = ["COLPITTS", "Colpitts"]


class Colpitts(Topology):
    """Colpitts: positions C1, C2, L; the chain C1-C2; feedback pair (C1, C2)."""

    name = "colpitts"
    positions = ("C1", "C2", "L")
    capacitors = ("C1", "C2")
    inductor = "L"
    feedback_pair = ("C1", "C2")
    typical = {"C1": 1e-9, "C2": 2.2e-9, "L": 22e-6}


COLPITTS = Colpitts()
