"""The invented bipolar amplifier several circuit tests share (typical small-signal
values of our own for a 9 V common-emitter stage, not a check value themselves)."""

from __future__ import annotations

from picker.circuit.amplifier import AmplifierParams

BJT = AmplifierParams(
    vcc=9.0,
    r_c=1500.0,
    r_b1=68e3,
    r_b2=10e3,
    r_e=2200.0,
    c_e=47e-9,
    c_block=10e-9,
    inductor_q=50.0,
)
