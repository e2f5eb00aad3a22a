"""Two records of the stage sets that burst only under ngspice's trapezoidal rule.

cc013 (common-collector set) and cb011 (common-base set) are "bursting" in their
ngspice records, while the model, its periodic orbit and its own transient of the same
netlist (:mod:`picker.circuit.startup_run`) call them steady. Run again with Gear's
method at the netlist's own step (``.options method=gear``: the backward differentiation
formulas, Gear, *Numerical Initial Value Problems in Ordinary Differential Equations*,
1971, ch. 11), the same netlist runs steady; with the default trapezoidal rule it
collapses again and again (the rule's undamped response to the device's fast switching
at a step of a sixtieth of the tank's period). Their strict xfails in
``tests/test_stage_validation.py`` rest on this check; cc013 is the cheaper of the two.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from picker.circuit.netlist import transient_plan, write_netlist
from picker.circuit.ngspice import transient
from picker.circuit.validation import load_reference

DATA = Path(__file__).parent / "validation" / "stage_common_collector.json"
PERIODS = 200


def _envelope(netlist: str, options: str) -> np.ndarray:
    """Half the peak-to-peak swing at the tank top over each period of the first PERIODS
    ideal-tank periods (the netlist's .tran line kept, its stop time cut)."""
    lines = []
    for line in netlist.splitlines():
        if line.startswith(".meas"):
            continue
        if line.startswith(".tran"):
            step, stop = float(line.split()[1]), float(line.split()[2])
            period = 60.0 * step  # the netlist's step is a sixtieth of the ideal period
            stop = min(stop, PERIODS * period)
            line = f".tran {step:g} {stop:g} 0 {step:g}"
            if options:
                lines.append(f".options {options}")
        lines.append(line)
    run = transient("\n".join(lines) + "\n", timeout=300)
    k = np.floor(run.time / period).astype(int)
    return np.array([0.5 * np.ptp(run.v[k == j]) for j in range(10, PERIODS - 1) if np.any(k == j)])


@pytest.mark.ngspice
@pytest.mark.slow
def test_cc013_bursts_only_under_the_trapezoidal_rule():
    designs, answers = load_reference(DATA)
    k = [d.id for d in designs].index("cc013")
    d = designs[k]
    assert answers[k]["state"] == "bursting"
    plan = transient_plan(d.topo, d.values, d.stray, d.params)
    text = write_netlist(d.topo, d.values, d.stray, d.params, title=d.id, cycles=plan.cycles)
    assert abs(float(text.split(".tran ")[1].split()[0]) * 60.0 * plan.f0 - 1.0) < 1e-3
    trap, gear = _envelope(text, ""), _envelope(text, "method=gear")
    # the measurement's burst threshold (the envelope below 0.2 of its high percentile)
    assert trap.min() < 0.2 * np.percentile(trap, 98)
    assert gear.min() > 0.9 * gear.max()  # steady: a modulation under 0.1
