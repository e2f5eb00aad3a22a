"""The loaded oscillator: a tank (:mod:`picker.tank`) driven by an amplifier stage.

- :mod:`~picker.circuit.device`: the generic NPN, its bias point and hybrid-pi values;
- :mod:`~picker.circuit.amplifier`: the amplifier's parameters (plain data);
- :mod:`~picker.circuit.stages`: amplifier stages as plug-ins (common emitter, common
  source): stamps, bias, large-signal limit, DC voltages, netlist lines, cautions;
- :mod:`~picker.circuit.network`: the nodal solver and the loop gain;
- :mod:`~picker.circuit.oscillation`: frequency and start-up margin (root finding);
- :mod:`~picker.circuit.amplitude`: amplitude, capacitor stress and cautions;
- :mod:`~picker.circuit.loaded`, :mod:`~picker.circuit.loaded_search`,
  :mod:`~picker.circuit.figures`: the loaded model in the Monte Carlo, the search and
  the report;
- :mod:`~picker.circuit.netlist`, :mod:`~picker.circuit.ngspice`: SPICE export and the
  ngspice cross-check.
"""
