"""The Hartley tank's loop against ngspice: the start-up pole, and the steady state by the orbit.

Outside references: ngspice's pole-zero analysis (``.pz``: the natural frequencies of the
netlist linearised at its operating point, found by ngspice's own root search) of
picker's Hartley netlists, and the committed ngspice transients of the Hartley
validation set (``tests/validation/tank_hartley.json``, measured by
:mod:`picker.circuit.waveform`, written apart from the model).

What they show: the model's linear loop is the netlist's (the start-up pole agrees with
``.pz`` to a few 1e-5), but its large-signal steady state out of saturation was not: the
coils at the tank's ends pass the device's harmonic currents to the control terminal,
and the describing function with harmonic balance missed hy004 by -8.0 %, hy005 by
+17.8 %, hy010 by +144 % and hy022 by -2.4 %. Every Hartley board that starts now takes
the periodic orbit of its own netlist (:mod:`picker.circuit.nominal_orbit`), shot again
at finer steps where the first shot does not converge (hy022).
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from pinned import pinned

from picker.circuit.netlist import write_netlist
from picker.circuit.network import Network
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.stability import startup
from picker.circuit.steady import steady_state


def _pz_poles(netlist: str) -> np.ndarray:
    """The poles ngspice's ``.pz`` finds for the netlist (its transient lines and start-up
    kick dropped) with a current into the tank top as the input."""
    skip = ("IKICK", ".TRAN", ".MEAS", ".END")
    keep = [ln for ln in netlist.splitlines() if not ln.upper().startswith(skip)]
    deck = "\n".join(keep) + "\n.control\npz t 0 t 0 cur pol\nprint all\n.endc\n.end\n"
    with tempfile.TemporaryDirectory(prefix="picker-pz-") as tmp:
        path = Path(tmp) / "pz.cir"
        path.write_text(deck, encoding="utf-8")
        out = subprocess.run(
            ["ngspice", "-b", str(path)], capture_output=True, text=True, timeout=60, check=False
        ).stdout
    num = r"([-+0-9.eE]+)"
    found = re.findall(rf"pole\(\d+\)\s*=\s*{num},\s*{num}", out)
    return np.array([complex(float(a), float(b)) for a, b in found])


@pytest.mark.ngspice
@pytest.mark.skipif(shutil.which("ngspice") is None, reason="ngspice not installed")
@pytest.mark.parametrize("ident", ["hy004", "hy010", "hy011", "hy014", "hy018"])
def test_startup_pole_equals_ngspice_pole_zero_analysis(ident):
    """Common-source (hy004, hy010) and common-emitter (hy011, hy014, hy018) designs,
    where ``.pz`` converges: one pole pair in the right half-plane, at the model's.
    Tolerance 0.2 %: ``.pz`` solves the same linearised circuit (measured 3e-8 to 6e-4
    apart, the largest on hy018, whose bjt capacitances ngspice takes at its own
    operating point), ten times below the 2 % frequency target."""
    d, _ = pinned(ident)
    text = write_netlist(d.topo, d.values, d.stray, d.params, title=d.id, cycles=400)
    poles = _pz_poles(text)
    right = poles[poles.real > 0]
    assert right.size == 2 and np.all(right.imag != 0)
    _, su = startup(d.topo, d.values, d.stray, d.params)
    assert int(su.pairs[0]) == 1
    p = complex(su.pole[0])
    near = right[np.argmin(np.abs(right - p))]
    assert abs(near - p) <= 2e-3 * abs(p)


@cache
def _orbits(ids: tuple[str, ...]) -> dict[str, object]:
    nets = [Network.build(d.topo, d.values, d.stray, d.params) for d, _ in (pinned(i) for i in ids)]
    return {i: o[0] for i, o in zip(ids, board_orbits(nets), strict=True)}


#: Steady in ngspice, not saturated in the describing function, and missed by it by
#: more than 2 %: a MOSFET near start-up (hy004, margin 1.3), a bjt at margin 10
#: (hy005), the MOSFET whose waveform is far from a sine (hy010, its carrier 41 kHz
#: against the ideal tank's 80 kHz) and hy022, whose first shot does not converge.
#: the steady designs the fast model alone misses by more than 2 % (hy005, +17.8 % once,
#: is +0.23 % since the two-junction balance carries twelve harmonics where the drive needs them)
OFF = ("hy004", "hy010", "hy022")


@pytest.mark.slow
@pytest.mark.parametrize("ident", OFF)
def test_orbit_holds_hartley_designs_the_describing_function_misses(ident):
    """The orbit's carrier within 0.3 % of ngspice's (the issue's median target; measured
    0.02-0.22 %) and its amplitude within 5 % (measured 0.1 % or less), where the fast
    model alone is more than 2 % off (so the test fails if the orbit is not used)."""
    d, rec = pinned(ident)
    assert rec["state"] == "steady"
    f_sim, a_sim = float(rec["f_hz"]), float(rec["amplitude_v"])  # type: ignore[arg-type]
    fast = steady_state(d.topo, d.values, d.stray, d.params)
    assert abs(float(fast.f_hz) / f_sim - 1.0) > 0.02
    orb = _orbits(OFF)[ident]
    assert orb is not None
    assert not orb.bursting  # type: ignore[attr-defined]
    assert orb.f_hz == pytest.approx(f_sim, rel=3e-3)  # type: ignore[attr-defined]
    assert orb.amplitude_v == pytest.approx(a_sim, rel=0.05)  # type: ignore[attr-defined]
