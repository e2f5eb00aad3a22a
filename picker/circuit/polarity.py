"""p-type devices (PNP, p-channel JFET and MOSFET) as the mirror image of the n-type circuit.

Mirror symmetry: SPICE's device models write the p-type device as the n-type one with
a type sign of −1 on its controlling voltages and terminal currents (the BJT's
Gummel-Poon model, the JFET's and the level-1 MOSFET's; Massobrio & Antognetti,
*Semiconductor Device Modeling with SPICE*, 2nd ed., ch. 2-4; the ngspice manual's
device chapters). Negate every node voltage and every branch current of a circuit:
resistors, capacitors and inductors keep their equations (v = R·i is odd in both), a
source's value is negated, and an n-type device's equations become those of the p-type
device with the same parameters. So the p-type stage with its supply at −V_CC is the
n-type stage with +V_CC, mirrored:

* every DC voltage and current is the negative of the n-type one (the bias point);
* the small-signal network is the same (admittances are derivatives: the two sign
  changes cancel), so the start-up margin and frequency are the same;
* under drive, the mirrored waveform is −v(t): the same frequency, amplitude (peak),
  harmonic levels and steadiness.

picker therefore models a p-type stage (every stage: the bipolar ones with a PNP, the
fet ones with a p-channel JFET or MOSFET) with the n-type equations and the same card,
and mirrors only what a user reads with a sign: the netlist (:func:`mirror_netlist`:
the supply at −V_CC, the PNP/PJF/PMOS card, the kick and the measurement level
negated) and the capacitors' DC voltages (:func:`mirror_voltages`).
``tests/test_polarity.py`` checks the symmetry in ngspice: the PNP netlist's operating
point and transient are the NPN's negated.

The card's parameters are the mirrored n-type device's: IS, BF, VAF, … as for an NPN;
a p-channel JFET's pinch-off VTO negative, as ngspice's PJF card takes it; a p-channel
MOSFET's threshold VTO positive (the netlist writes it negated, as ngspice's PMOS
card takes it).
"""

from __future__ import annotations

import re
from dataclasses import replace

from picker.circuit.device import GENERIC_PNP
from picker.circuit.stages.base import StageNetlist, spice_number

__all__ = ["GENERIC_PNP", "P_TYPE_CAUTION", "mirror_netlist", "mirror_voltages"]

#: The caution every p-type stage carries (:func:`picker.circuit.amplitude.cautions`).
P_TYPE_CAUTION = (
    "p-type device (PNP, p-channel): the supply is negative with respect to ground, every "
    "DC voltage the negative of the n-type circuit's; turn polarised capacitors round and "
    "check the supply's polarity before power-up"
)

_TYPES = {"NPN": "PNP", "NJF": "PJF", "NMOS": "PMOS"}


def _mirror_model(line: str) -> str:
    """A ``.model`` line of the p-type device: the type word, and a MOSFET's VTO negated."""
    words = line.split()
    if len(words) < 3 or words[0].lower() != ".model" or words[2] not in _TYPES:
        return line
    kind = words[2]
    line = line.replace(f" {kind} ", f" {_TYPES[kind]} ", 1)
    if kind == "NMOS":
        line = re.sub(
            r"VTO=(\S+)", lambda m: f"VTO={spice_number(-float(m.group(1)))}", line, count=1
        )
    return line


def _rename_fet_model(line: str) -> str:
    """A fet card's name as the p-channel one (PICKER_NJF → PICKER_PJF, PICKER_NMOS →
    PICKER_PMOS), in its ``.model`` line and its element line alike."""
    return re.sub(r"\bPICKER_N(JF|MOS)\b", r"PICKER_P\1", line)


def mirror_netlist(part: StageNetlist) -> StageNetlist:
    """The stage's netlist of the p-type device: supply negated, cards mirrored, the kick
    and the tank top's DC level negated (the element lines otherwise unchanged)."""
    elements = []
    for line in part.elements:
        line = _rename_fet_model(line)
        words = line.split()
        if words and words[0].upper() == "VCC" and len(words) == 5 and words[3] == "DC":
            line = f"{' '.join(words[:4])} {spice_number(-float(words[4]))}"
        elif words and words[0].startswith("*"):
            line = line.replace("NPN", "PNP").replace("n-channel", "p-channel")
            line = line.replace(" fet:", " fet mirrored to p-channel:")
        elements.append(line)
    return replace(
        part,
        elements=elements,
        models=[_mirror_model(_rename_fet_model(m)) for m in part.models],
        kick=-part.kick,
        top_dc=-part.top_dc,
    )


def mirror_voltages(voltages: dict[str, float]) -> dict[str, float]:
    """DC voltages of the p-type circuit: those of the n-type one, negated."""
    return {k: -v for k, v in voltages.items()}
