"""A burst in ngspice is confirmed at a finer step before it is believed (picker.circuit.ngspice).

The trapezoidal rule, ngspice's default integration, is A-stable but not L-stable: it
does not damp the fast components of a stiff circuit (Hairer & Wanner, *Solving Ordinary
Differential Equations II*, IV.3), so at the netlist's step (a sixtieth of the tank
period) it can ring on a transistor's switching and make a steady oscillator burst. The
references here are ngspice's own runs of a validation record's netlist (committed in
tests/validation/) at the netlist's step and at a five times finer one, and with the
damped Gear method (``.options method=gear``, ngspice manual, ".options") at the
netlist's step, which does not share the trapezoidal rule's fault.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from picker.circuit.netlist import transient_plan, write_netlist
from picker.circuit.ngspice import (
    STEP_REFINE,
    SimulationResult,
    ngspice_path,
    refine_step,
    simulate,
    step_disagrees,
    step_note,
)
from picker.circuit.validation import load_reference, run_design
from picker.circuit.waveform import WaveformMeasurement
from picker.errors import SolverError

DATA = Path(__file__).parent / "validation"
#: The artefact record checked in ngspice: the common-collector Clapp cc013 (797 periods),
#: bursting at the netlist's step, steady at a five times finer one and with Gear.
ARTEFACT = ("stage_common_collector.json", "cc013")


def _wave(state: str, f_hz: float) -> WaveformMeasurement:
    nan = math.nan
    return WaveformMeasurement(state, f_hz, 1.0, 1.0, nan, nan, nan, nan, (nan, nan), 0.0)


def test_refine_step_divides_the_step_and_keeps_the_stop_time():
    deck = "t\nR1 a 0 1k\n.tran 2.5e-08 0.001 0 2.5e-08\n.meas tran x param='1'\n.end\n"
    out = refine_step(deck, 5)
    (tran,) = [line.split() for line in out.splitlines() if line.startswith(".tran")]
    assert float(tran[1]) == pytest.approx(5e-9, rel=1e-9)
    assert float(tran[2]) == 0.001  # the stop time stays
    assert float(tran[4]) == pytest.approx(5e-9, rel=1e-9)
    # every other line as it was
    assert [x for x in out.splitlines() if not x.startswith(".tran")] == [
        x for x in deck.splitlines() if not x.startswith(".tran")
    ]
    with pytest.raises(SolverError, match="no .tran"):
        refine_step("t\nR1 a 0 1k\n.end\n", 5)


def test_a_finer_run_disagrees_on_another_state_or_a_moved_carrier():
    assert step_disagrees(_wave("bursting", 1e6), _wave("steady", 1e6))
    assert step_disagrees(_wave("unsettled", 1e6), _wave("unsettled", 1.0015e6))
    assert not step_disagrees(_wave("bursting", 1e6), _wave("bursting", 1.0009e6))
    assert not step_disagrees(_wave("none", math.nan), _wave("none", math.nan))


def _fake_runs(monkeypatch, readings):
    """Make :func:`simulate` see ``readings`` (factor -> (state, carrier)) instead of
    running ngspice; returns the factors it ran, in order."""
    import picker.circuit.ngspice as ng

    ran: list[int] = []

    def once(netlist, node, timeout, f_hint, tail_start, t_kick):
        (tran,) = [line.split() for line in netlist.splitlines() if line.startswith(".tran")]
        factor = round(1e-6 / float(tran[4]))
        ran.append(factor)
        state, f = readings[factor]
        return SimulationResult(f, 1.0, 1.0, True, {}, (), node, _wave(state, f))

    monkeypatch.setattr(ng, "_simulate_once", once)
    return ran


DECK = "t\nR1 a 0 1k\n.tran 1e-06 0.001 0 1e-06\n.end\n"


def test_a_moved_burst_is_checked_again_at_25x(monkeypatch):
    """A burst whose carrier moved at 5x is run once more at 25x, and the 25x run is the
    answer where it moved again (the Hartley set's hy001: 999.6 kHz at the netlist's step,
    1028.5 kHz at 5x, 995.1 kHz at 25x and 125x); a 25x run that agrees with 5x leaves 5x
    standing; a burst the same at 5x is not run at 25x."""
    ran = _fake_runs(
        monkeypatch,
        {1: ("bursting", 999.6e3), 5: ("bursting", 1028.5e3), 25: ("bursting", 995.1e3)},
    )
    sim = simulate(DECK, confirm=True)
    assert ran == [1, 5, 25]
    assert sim.step_refined == 25 and sim.waveform.f_hz == 995.1e3
    assert sim.coarse is not None and sim.coarse.f_hz == 999.6e3
    ran = _fake_runs(
        monkeypatch,
        {1: ("bursting", 999.6e3), 5: ("bursting", 1028.5e3), 25: ("bursting", 1028.6e3)},
    )
    sim = simulate(DECK, confirm=True)
    assert ran == [1, 5, 25] and sim.step_refined == 5 and sim.waveform.f_hz == 1028.5e3
    ran = _fake_runs(monkeypatch, {1: ("bursting", 999.6e3), 5: ("bursting", 999.7e3)})
    sim = simulate(DECK, confirm=True)
    assert ran == [1, 5] and sim.step_refined == 1
    ran = _fake_runs(monkeypatch, {1: ("bursting", 999.6e3), 5: ("steady", 1000e3)})
    sim = simulate(DECK, confirm=True)
    assert ran == [1, 5] and sim.step_refined == 5 and sim.waveform.state == "steady"


def _artefact():
    designs, answers = load_reference(DATA / ARTEFACT[0])
    i = [d.id for d in designs].index(ARTEFACT[1])
    return designs[i], answers[i]


@pytest.mark.ngspice
@pytest.mark.validation
def test_artefact_record_bursts_only_at_the_netlist_step():
    try:
        ngspice_path()
    except SolverError as exc:
        pytest.fail(f"{exc} (this test does not skip; CI installs ngspice)")
    d, record = _artefact()
    plan = transient_plan(d.topo, d.values, d.stray, d.params)
    deck = write_netlist(d.topo, d.values, d.stray, d.params, title=d.id, cycles=plan.cycles)
    kw = {"timeout": 300.0, "f_hint": plan.f0, "tail_start": plan.tail_start, "t_kick": plan.t_kick}
    sim: SimulationResult = simulate(deck, confirm=True, **kw)  # type: ignore[arg-type]
    # at the netlist's own step the trapezoidal rule makes it burst ...
    assert sim.coarse is not None and sim.coarse.state == "bursting"
    # ... at a five times finer step it runs steady, and that run is the answer
    assert sim.step_refined == STEP_REFINE[0]
    assert sim.waveform.state == "steady"
    # the damped Gear method at the netlist's own step agrees with the finer run
    gear = simulate(deck.replace("\n.end\n", "\n.options method=gear\n.end\n"), **kw)  # type: ignore[arg-type]
    assert gear.waveform.state == "steady"
    assert gear.waveform.f_hz == pytest.approx(sim.waveform.f_hz, rel=2e-3)
    assert gear.waveform.amplitude_v == pytest.approx(sim.waveform.amplitude_v, rel=0.05)
    # the committed record is the finer run, and says what the netlist's step showed
    assert record["state"] == "steady"
    assert record["f_hz"] == pytest.approx(sim.waveform.f_hz, rel=1e-4)
    note, fresh = record["step_refined"], step_note(sim)["step_refined"]
    assert note["factor"] == fresh["factor"] == STEP_REFINE[0]
    assert note["state_at_netlist_step"] == "bursting"
    assert note["f_hz_at_netlist_step"] == pytest.approx(fresh["f_hz_at_netlist_step"], rel=1e-4)


@pytest.mark.ngspice
@pytest.mark.validation
def test_a_steady_record_is_not_rerun():
    """A steady board pays nothing: ``run_design`` with ``confirm`` gives its record as it
    is (one run, no ``step_refined``)."""
    try:
        ngspice_path()
    except SolverError as exc:
        pytest.fail(f"{exc} (this test does not skip; CI installs ngspice)")
    designs, answers = load_reference(DATA / ARTEFACT[0])
    steady = [
        k for k, a in enumerate(answers) if a["state"] == "steady" and "step_refined" not in a
    ]
    i = min(
        steady,
        key=lambda k: (
            answers[k]["tstop_s"] * designs[k].topo.frequency(designs[k].values, designs[k].stray)
        ),
    )  # the shortest run
    fresh = run_design(designs[i], confirm=True)
    assert fresh["state"] == "steady" and "step_refined" not in fresh
    assert fresh["f_hz"] == pytest.approx(answers[i]["f_hz"], rel=1e-4)
