"""picker.circuit.amplifier."""
