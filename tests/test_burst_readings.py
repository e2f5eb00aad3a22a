"""A candidate's figures where the model calls it bursting: the carrier and amplitude of
its own circuit run from rest (:func:`picker.circuit.figures.burst_readings`).

The run itself is checked against ngspice's records in ``tests/test_burst_carrier.py``
and the validation sets; here the plumbing: which designs run, with which circuit, and
where the run's figures land in the JSON. The run is replaced by a stand-in that
records what it was given and answers with figures no model gives.
"""

from __future__ import annotations

import numpy as np
from amplifiers import BJT

from picker.circuit import figures
from picker.circuit.burst_carrier import BurstCarrier
from picker.tank import get_topology
from picker.tank.board import Parasitics


def _fig(envelope: str | None, f_hz: float) -> dict:
    ls = {"starts": envelope is not None, "envelope": envelope, "f_hz": f_hz, "amplitude_v": 1.0}
    return {"f_ideal_hz": f_hz * 1.01, "f_loaded_hz": f_hz, "large_signal": ls}


def test_only_bursting_designs_run_and_their_figures_take_the_run(monkeypatch):
    seen: dict[str, object] = {}

    def stand_in(nets, run, f_hz):
        seen.update(nets=list(nets), run=list(run), f_hz=list(f_hz))
        return [
            BurstCarrier("bursting", 1234.5 * (k + 1), 7.25, 400, 1e-4) for k in range(len(nets))
        ]

    monkeypatch.setattr(figures, "network_carriers", stand_in)
    topo = get_topology("colpitts")
    values = [
        {"C1": 1e-9, "C2": 4.7e-9, "L": 10e-6},
        {"C1": 2.2e-9, "C2": 6.8e-9, "L": 15e-6},
        {"C1": 3.3e-9, "C2": 10e-9, "L": 22e-6},
    ]
    figs = [_fig("steady", 1.5e6), _fig("bursting", 1.1e6), _fig(None, 0.9e6)]
    out = figures.burst_readings(topo, values, Parasitics(stray=2e-12), BJT, figs)
    # one network ran: the second design's, at its own values, hinted at its model frequency
    assert seen["run"] == [True] and seen["f_hz"] == [1.1e6]
    (net,) = seen["nets"]
    np.testing.assert_array_equal(np.ravel(net.el["C1"]), [2.2e-9])
    np.testing.assert_array_equal(np.ravel(net.el["L"]), [15e-6])
    # the bursting design's frequency and amplitude are the run's, in both places
    assert out[1]["large_signal"]["f_hz"] == 1234.5 and out[1]["f_loaded_hz"] == 1234.5
    assert out[1]["large_signal"]["amplitude_v"] == 7.25
    assert out[1]["large_signal"]["carrier_from"] == "run from rest"
    assert out[1]["large_signal"]["carrier_spread"] == 1e-4
    # the others keep their figures
    assert out[0]["large_signal"]["f_hz"] == 1.5e6 and out[0]["f_loaded_hz"] == 1.5e6
    assert out[0]["large_signal"]["carrier_from"] == "steady state"
    assert out[2]["f_loaded_hz"] == 0.9e6
    # the caller's dicts are not changed
    assert "carrier_from" not in figs[1]["large_signal"] and figs[1]["f_loaded_hz"] == 1.1e6


def test_a_run_that_fails_leaves_the_model_figures(monkeypatch):
    monkeypatch.setattr(
        figures,
        "network_carriers",
        lambda nets, run, f: [BurstCarrier("none", np.nan, np.nan, 0, np.nan) for _ in nets],
    )
    topo = get_topology("colpitts")
    figs = [_fig("bursting", 1.1e6)]
    out = figures.burst_readings(
        topo, [{"C1": 1e-9, "C2": 4.7e-9, "L": 10e-6}], Parasitics(), BJT, figs
    )
    assert out[0]["large_signal"]["f_hz"] == 1.1e6
    assert out[0]["large_signal"]["carrier_from"] == "steady state"
