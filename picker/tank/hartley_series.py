"""The series-capacitor Hartley: the Hartley tank with a capacitor C_S in series with C.

The circuit: the tapped coil (L1 across the amplifier's output, L2 across its input,
coupling k, the tap at the common node through its bypass) as in
:mod:`picker.tank.hartley`; between the coil's two ends, C in series with C_S (position
``CS``). Round the loop the coil, C and C_S are in series, as the Clapp puts C3 in series
with the Colpitts inductor (Clapp, Proc. IRE 36 (1948)), so the tank resonates at

    f = 1 / (2π √(L_eff·C_s)),   L_eff = L1 + L2 + 2M,   1/C_s = 1/C + 1/C_S      (HS1)

(the Hartley's (H1) with the chain's series capacitance; capacitors in series add their
elastances). The stray sits across the chain, between the coil's ends. A small C_S
(a series padder) sets the frequency with a large C and narrows what C's tolerance and
drift do to it: S_C = −½·C_s/C, S_CS = −½·C_s/C_S (the series-chain sensitivities of
:meth:`picker.tank.base.Topology.sensitivities`); the two standard values in series also
give finer steps of frequency than one.

The feedback fraction is the Hartley's (H2), beta = (L2 + M)/(L1 + M): at the frequency
(HS1) the chain and the coil carry one loop current, and the divider is the coil's
(derived as for (H2) in :mod:`picker.tank.hartley`; checked on the netlist in
tests/test_tank_conformance.py). Every formula and circuit method is the Hartley's,
written there over the chain of capacitors (``capacitors``); this module declares the
positions. C_S may carry a trimmer in parallel.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, ClassVar

from picker.tank.hartley import Hartley

__all__ = ["CS_HOLD", "SERIES_HARTLEY", "SeriesHartley"]

#: DC hold across C_S, ohm (a high value that holds the inner node's DC and is an open
#: circuit at the carrier; common practice, no source).
CS_HOLD = 100e6


class SeriesHartley(Hartley):
    """Series-capacitor Hartley: positions L1, L2, C, CS; the chain C-CS; coupling k."""

    name = "hartley-series"
    positions: ClassVar[tuple[str, ...]] = ("L1", "L2", "C", "CS")
    capacitors: ClassVar[tuple[str, ...]] = ("C", "CS")
    typical = {"L1": 10e-6, "L2": 4.7e-6, "C": 10e-9, "CS": 1.1e-9}
    model_caution = (
        "the series-capacitor Hartley's large-signal model misses ngspice on many boards "
        "(24 random designs: 75 % within 2 % in frequency with the run from rest that "
        "--verify makes; solve does not make it and gives no frequency for a design that "
        "relaxes with no steady solution; some run as pulse trains far below the tank's "
        "frequency); check the design with --verify"
    )

    def _bridge(
        self, s: Any, values: Mapping[str, Any], stray: Any, esr: Mapping[str, float]
    ) -> Any:
        """C in series with C_S ∥ :data:`CS_HOLD` (each capacitor with its ESR), and the
        stray across the chain."""
        y_c = self.capacitor_admittance(s, values["C"], esr.get("C", 0.0))
        y_cs = self.capacitor_admittance(s, values["CS"], esr.get("CS", 0.0)) + 1.0 / CS_HOLD
        return 1.0 / (1.0 / y_c + 1.0 / y_cs) + s * stray

    def dc_across(self, v_out: float, v_in: float) -> dict[str, float]:
        """The hold across C_S leaves it no DC; C carries the ends' difference."""
        return {"C": v_out - v_in, "CS": 0.0}

    def netlist_lines(
        self,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        capacitor_esr: Mapping[str, float],
        out_node: str,
        in_node: str,
        bleed: float | None = None,
    ) -> list[str]:
        """The Hartley's lines (the chain C from the output end to ``m1``, C_S from ``m1``
        to the input end) and the hold ``RCSHOLD`` across C_S."""
        lines = super().netlist_lines(values, stray, r_l, capacitor_esr, out_node, in_node, bleed)
        at = next(i for i, ln in enumerate(lines) if ln.startswith("CS "))
        return [*lines[: at + 1], f"RCSHOLD m1 {in_node} {CS_HOLD:.6g}", *lines[at + 1 :]]


SERIES_HARTLEY = SeriesHartley()
