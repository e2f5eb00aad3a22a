"""A board whose carrier still drifts at the end of its planned run is run longer.

``picker.circuit.verify.settled_run`` runs a board's netlist for the plan's length and,
while the steady carrier still moves across the measured tail by more than
``SETTLING_DRIFT``, again ``LENGTHEN`` times as long (up to ``LONGEST_RUN`` times the
plan), reading the plan's span at the end of the longer run.

The loop is checked with a stand-in for ngspice whose drift is scripted; the physics
with ngspice on the series Hartley set's hs021, a common-source board whose gate node
holds the collector coupling capacitor (861 nF) through the coils, charged through a
divider of 13 kΩ: a time constant of about 12.6 ms (tests/test_bias_time_constant.py).
The plan's measured tail starts after two such constants, and its planned run still
drifts there (by -0.32 %; before the plan counted C_B it took the constant as 1.3 ms and
the planned run, drifting by -0.28 %, read 2.7 % above the settled carrier). The
reference for the settled carrier is ngspice's own run 24 times the plan's length, read
over its last span (an RC settling is exponential, so 24 plans, 156 ms or twelve time
constants, leave a drift far below what either run can resolve: common practice, no
source).
"""

from __future__ import annotations

import dataclasses
import json
import math
from typing import Any

import pytest
from test_verify_demos import simulate_top

from picker.api.verify import DesignCheck
from picker.circuit import verify
from picker.circuit.netlist import TransientPlan, write_netlist
from picker.circuit.ngspice import SETTLING_DRIFT, SimulationResult, simulate
from picker.circuit.validation import design_from_dict
from picker.circuit.waveform import WaveformMeasurement
from picker.cli.circuit import verify_text

PLAN = TransientPlan(f0=1e5, cycles=700, tstop=7e-3, t_kick=1e-5, tail_start=3e-3, resolved=True)


def _result(drift: float, state: str = "steady") -> SimulationResult:
    wave = WaveformMeasurement(
        state=state, f_hz=1e5, amplitude_v=1.0, fundamental_v=1.0, modulation=0.0,
        envelope_low=1.0, envelope_high=1.0, startup_time_s=1e-4,
        harmonics_dbc=(-30.0, -40.0), tail_start_s=PLAN.tail_start,
    )  # fmt: skip
    return SimulationResult(
        frequency_hz=1e5, amplitude_v=1.0, early_amplitude_v=1.0, oscillating=True, meas={},
        warnings=(), node="t", waveform=wave, carrier_drift=drift,
    )  # fmt: skip


def _scripted(monkeypatch: pytest.MonkeyPatch, drifts: list[tuple[float, str]]) -> list[Any]:
    """Replace ngspice by runs whose drift (and state) come from ``drifts`` in turn;
    returns the calls made (netlist text, timeout, tail start)."""
    calls: list[Any] = []

    def fake(text: str, **kw: Any) -> SimulationResult:
        calls.append((text, kw["timeout"], kw["tail_start"]))
        drift, state = drifts[len(calls) - 1]
        return _result(drift, state)

    monkeypatch.setattr(verify, "simulate", fake)
    return calls


def _longer(tstop: float) -> str:
    return f"netlist to {tstop:.6g}"


def test_a_settled_run_is_not_lengthened(monkeypatch):
    calls = _scripted(monkeypatch, [(2e-4, "steady")])
    sim, factor, planned = verify.settled_run("planned", PLAN, _longer, timeout=10.0)
    assert (factor, planned, len(calls)) == (1, None, 1)
    assert calls[0] == ("planned", 10.0, PLAN.tail_start)


def test_a_drifting_run_is_run_four_then_sixteen_times_as_long(monkeypatch):
    calls = _scripted(monkeypatch, [(-4e-3, "steady"), (-1.5e-3, "steady"), (-1e-5, "steady")])
    sim, factor, planned = verify.settled_run("planned", PLAN, _longer, timeout=10.0)
    assert factor == 16
    assert planned is not None and planned.carrier_drift == -4e-3
    assert sim.carrier_drift == -1e-5
    span = PLAN.tstop - PLAN.tail_start  # the measured span sits at each run's end
    assert [c[0] for c in calls[1:]] == [_longer(4 * PLAN.tstop), _longer(16 * PLAN.tstop)]
    assert [c[1] for c in calls] == [10.0, 40.0, 160.0]
    assert [c[2] for c in calls[1:]] == pytest.approx(
        [4 * PLAN.tstop - span, 16 * PLAN.tstop - span]
    )


def test_lengthening_stops_at_the_longest_run(monkeypatch):
    calls = _scripted(monkeypatch, [(-4e-3, "steady")] * 5)
    sim, factor, _ = verify.settled_run("planned", PLAN, _longer, timeout=1.0)
    assert factor == verify.LONGEST_RUN and len(calls) == 3
    assert sim.drifting  # still drifting: the caller's caution says so


def test_a_longer_run_that_bursts_ends_the_lengthening(monkeypatch):
    calls = _scripted(monkeypatch, [(-4e-3, "steady"), (math.nan, "bursting")])
    sim, factor, planned = verify.settled_run("planned", PLAN, _longer, timeout=1.0)
    assert (factor, sim.waveform.state, len(calls)) == (4, "bursting", 2)
    assert planned is not None


def test_drifting_is_the_threshold_on_either_side():
    assert _result(-1.01 * SETTLING_DRIFT).drifting
    assert _result(1.01 * SETTLING_DRIFT).drifting
    assert not _result(0.99 * SETTLING_DRIFT).drifting
    assert not _result(math.nan, "bursting").drifting


#: hs021 of the series Hartley set as drawn on 2026-12-03 (tank_hartley_series.json),
#: kept here so the test does not follow the set if it is redrawn
HS021 = json.loads(
    """{
 "coupling": 0.89,
 "id": "hs021",
 "params": {
  "c_base": null,
  "c_block": 8.61e-07,
  "c_e": 1.1e-07,
  "c_mu": null,
  "c_next": null,
  "c_next_coupling": 1e-07,
  "c_pi": null,
  "capacitor_esr": {},
  "current_gain": null,
  "early_voltage": null,
  "f_t": null,
  "fet": {
   "cgd": 4e-12,
   "cgs": 2e-11,
   "k": 0.0115,
   "kind": "nmos",
   "label": "generic-nmos",
   "lam": 0.043,
   "vto": 1.7
  },
  "gm": null,
  "i_bias": null,
  "inductor_esr": 0.0,
  "inductor_q": 89.0,
  "kind": "fet",
  "l_choke": null,
  "overdrive_voltage": null,
  "p_type": false,
  "q_frequency": null,
  "r_b1": 26400.0,
  "r_b2": 25500.0,
  "r_bleed": 1000000.0,
  "r_c": 199.0,
  "r_choke": 0.0,
  "r_e": 374.0,
  "r_e_unbypassed": null,
  "r_feedback": null,
  "r_next": null,
  "r_o": null,
  "r_stopper": null,
  "stage": "common-source",
  "temperature_c": 27.0,
  "vcc": 9.6
 },
 "stray": 2.1e-12,
 "topology": "hartley-series",
 "values": {
  "C": 4.52e-09,
  "CS": 2.88e-09,
  "L1": 0.000585,
  "L2": 0.000102
 }
}"""
)


@pytest.fixture(scope="module")
def hs021() -> tuple[Any, Any]:
    """hs021's design and its board checked in ngspice (about 20 s)."""
    d = design_from_dict(HS021)
    (b,) = verify.check_boards(
        d.topo, [("nominal", d.values)], d.stray, d.params, workers=1, timeout=600.0
    )
    return d, b


@pytest.mark.ngspice
def test_hs021_is_run_until_its_bias_settles(hs021):
    d, b = hs021
    assert b.planned is not None and b.planned.drifting  # the plan reads it too early
    assert b.lengthened > 1 and not b.sim.drifting
    # the reference: ngspice's run 24 plans long, read over the plan's span at its end
    _, (plan,) = verify.board_plans(d.topo, [d.values], d.stray, d.params)
    tstop = 24 * plan.tstop
    text = write_netlist(d.topo, d.values, d.stray, d.params, title="hs021", tstop=tstop)
    ref = simulate(
        text,
        timeout=600.0,
        f_hint=plan.f0,
        tail_start=tstop - (plan.tstop - plan.tail_start),
        t_kick=plan.t_kick,
    )
    # 0.02 %: both runs are settled (drift under 0.1 % over the span); the planned run is
    # measurably off: 0.30 % measured 2026-12-04 with C_B in the plan (83.56 against
    # 83.31 kHz; about 2.7 % before the plan counted C_B), so a lengthening that did not
    # move the reading, or a reference read too early, fails here
    assert b.f_sim == pytest.approx(ref.frequency_hz, rel=2e-4)
    assert abs(b.planned.frequency_hz / ref.frequency_hz - 1.0) > 2 * SETTLING_DRIFT
    note = b.to_dict()["ngspice"]["lengthened"]
    assert note["factor"] == b.lengthened
    assert note["f_hz_planned"] == pytest.approx(b.planned.frequency_hz)
    assert note["carrier_drift_planned"] == pytest.approx(b.planned.carrier_drift)


@pytest.mark.ngspice
def test_simulate_reports_the_longer_run(hs021, monkeypatch):
    # `picker simulate` on the demo's top design, its ngspice check replaced by hs021's
    # lengthened one: the text and JSON it prints from a lengthened check
    _, b = hs021
    real = verify.check_boards

    def lengthened(*args: Any, **kw: Any) -> list[Any]:
        (c,) = real(*args, **kw)
        return [dataclasses.replace(c, sim=b.sim, lengthened=b.lengthened, planned=b.planned)]

    monkeypatch.setattr(verify, "check_boards", lengthened)
    text = simulate_top("colpitts_bjt")
    assert text.exit_code == 0, text.output
    flat = " ".join(text.output.split())
    off = f"{100 * (b.planned.frequency_hz / b.f_sim - 1):+.2f} %"
    assert f"so the board was run {b.lengthened} times as long (the planned run" in flat
    assert f"kHz, {off})" in flat
    assert f"moved by {100 * b.planned.carrier_drift:+.2f} % across the planned run" in flat
    assert "the bias was still settling when the run ended" not in flat  # settled now
    js = simulate_top("colpitts_bjt", "--format", "json")
    assert js.exit_code == 0, js.output
    assert json.loads(js.output)["simulated"]["lengthened"]["factor"] == b.lengthened


@pytest.mark.ngspice
def test_verify_notes_name_the_lengthened_board(hs021):
    _, b = hs021
    flat = " ".join(verify_text([DesignCheck(1, [b])], 1.0).split())
    off = f"{100 * (b.planned.frequency_hz / b.f_sim - 1):+.2f} %"
    assert f"run longer (1 nominal: {b.lengthened} times, the planned run read {off})" in flat
