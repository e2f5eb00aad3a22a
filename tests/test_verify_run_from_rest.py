"""``--verify`` and ``simulate``: the model column of a board the model calls bursting.

Such a board never holds the orbit the model found, so its carrier and amplitude are
those of its own circuit run from rest (:mod:`picker.circuit.burst_carrier`), and where
that run, measured as ngspice's is, does not burst, its envelope too: the validation's
answers take the same reading (:func:`picker.circuit.validation.model_answers`), so the
figure measured there is the one these commands print beside ngspice. Here the orbit and
the run are stand-ins (a real run costs tens of seconds); ngspice runs the demo's board.
"""

from __future__ import annotations

import math

import pytest
from test_verify_demos import DEMOS, golden_candidates

from picker.api import load_spec
from picker.api.problem import parasitics_of
from picker.api.verify import DesignCheck
from picker.circuit import verify
from picker.circuit.burst_carrier import BurstCarrier
from picker.circuit.nominal_orbit import NominalOrbit
from picker.cli.circuit import BURST_CARRIER_CAUTION, verify_text
from picker.tank.board import board_values

pytestmark = pytest.mark.ngspice


def _orbit(f_hz: float) -> NominalOrbit:
    """An unstable orbit (the model's bursting verdict) at ``f_hz``."""
    names = NominalOrbit.__dataclass_fields__
    given = {"shift": 0.0, "bursting": True, "multiplier": 1.5, "f_hz": f_hz, "amplitude_v": 1.0}
    rest = {n: (math.nan, math.nan) if n == "harmonics_dbc" else math.nan for n in names}
    rest.update({"converged": True})
    return NominalOrbit(**{n: given.get(n, rest[n]) for n in names})


@pytest.mark.parametrize("run_state", ["unsettled", "steady", "bursting"])
def test_a_board_called_bursting_takes_its_run_from_rest(monkeypatch, run_state):
    spec = load_spec(DEMOS / "colpitts_bjt.toml")
    topo, par = spec.topo, parasitics_of(spec)
    params = spec.amplifier.to_params(spec.parts)
    c = golden_candidates("colpitts_bjt")[0]
    board = board_values(topo, {p: part["value"] for p, part in c["parts"].items()}, par)
    f0 = float(c["f_loaded_hz"])
    calls = []

    def orbits(nets):
        return [[_orbit(f0)] for _ in nets]

    def runs(nets, bursting, f_hint):
        calls.append(list(bursting))
        return [BurstCarrier(run_state, 1.01 * f0, 2.5, 400, 1e-3) for _ in nets]

    monkeypatch.setattr(verify, "board_orbits", orbits)
    monkeypatch.setattr(verify, "network_carriers", runs)
    (check,) = verify.check_boards(topo, [("nominal", board)], float(par.stray), params)
    assert calls == [[True]]  # the run is made for the board the orbit calls bursting
    m = check.model
    assert m["f_hz"] == pytest.approx(1.01 * f0) and m["amplitude_v"] == 2.5
    assert m["carrier_from"] == "run from rest" and m["carrier_spread"] == 1e-3
    # a run that does not burst clears the orbit's flag; one that bursts keeps it
    assert m["envelope"] == ("bursting" if run_state == "bursting" else run_state)
    assert check.state == "steady"  # ngspice's own reading of the demo's board is untouched
    # the table warns that a burst's carrier is a rough figure where either side bursts
    # (ngspice's reading of hy015 of the Hartley set moved over 790-1114 kHz with its step
    # and run length, tests/validation/README.md), and only there
    text = verify_text([DesignCheck(1, [check])], 1.0)
    assert (BURST_CARRIER_CAUTION in text) == (run_state == "bursting")
