"""How firmly ngspice pins a record's carrier (picker.circuit.reference_spread).

The references are ngspice's own runs of committed validation records' netlists, by the
trapezoidal rule at the netlist's step and at a five times finer one and by Gear's
method (``.options method=gear``, ngspice manual, ".options"); the readings committed
beside each record must come back when the script's reruns are made again.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from picker.circuit.ngspice import ngspice_path
from picker.circuit.reference_spread import (
    RERUNS,
    SETTLED,
    WINDOWS,
    _with_method,
    drift,
    span,
    span_error,
    wants_rerun,
)
from picker.circuit.validation import load_reference, rerun_design
from picker.errors import SolverError

DATA = Path(__file__).parent / "validation"
SETS = sorted(p for p in DATA.glob("*.json") if not p.stem.startswith("mode_study"))


def _reading(f_hz: float | None, state: str = "bursting") -> dict[str, object]:
    return {"state": state, "f_hz": f_hz}


def _record(readings: list[float | None]) -> dict[str, object]:
    """A bursting record at 1 MHz whose reruns read ``readings`` (run by run, window by
    window, in the order of RERUNS and WINDOWS)."""
    it = iter(readings)
    runs = {name: {w: _reading(next(it)) for w in WINDOWS} for name, _, _ in RERUNS}
    return {"state": "bursting", "f_hz": 1.0e6, "reruns": runs}


def test_drift_is_the_farthest_reading_from_the_record():
    n = len(RERUNS) * len(WINDOWS)
    # by hand: the readings lie 0.4 % below to 0.7 % above 1 MHz, so the drift is 0.7 %
    readings = [1.0e6] * n
    readings[1], readings[-1] = 0.996e6, 1.007e6
    assert drift(_record(readings)) == pytest.approx(0.007, rel=1e-9)
    assert drift(_record(readings)) <= SETTLED
    # one half of the tail reads 3 % high (a board switching regimes): not settled
    readings[4] = 1.03e6
    assert drift(_record(readings)) == pytest.approx(0.03, rel=1e-9)
    assert drift(_record(readings)) > SETTLED
    # a rerun that does not oscillate: no bound at all
    readings[2] = None
    assert math.isinf(drift(_record(readings)))
    # a record never run again has no drift
    assert math.isnan(drift({"state": "steady", "f_hz": 1.0e6}))


def test_span_of_the_readings_and_the_distance_from_it():
    n = len(RERUNS) * len(WINDOWS)
    # by hand: readings from 0.90 MHz to 1.10 MHz around a 1 MHz record; one rerun window
    # shows no oscillation and does not narrow or widen the span
    readings: list[float | None] = [1.0e6] * n
    readings[0], readings[5], readings[7] = 0.90e6, 1.10e6, None
    rec = _record(readings)
    assert span(rec) == (0.90e6, 1.10e6)
    assert span_error(1.05e6, rec) == 0.0  # inside the span
    assert span_error(0.90e6, rec) == 0.0  # on its end
    # above: counted from the upper end, 1.122 / 1.10 - 1 = 2.0 %
    assert span_error(1.122e6, rec) == pytest.approx(0.02, rel=1e-9)
    # below: counted from the lower end, 1 - 0.8775 / 0.90 = 2.5 %
    assert span_error(0.8775e6, rec) == pytest.approx(0.025, rel=1e-9)
    # a record never run again spans its own reading: the plain relative error
    one = {"state": "steady", "f_hz": 2.0e6}
    assert span(one) == (2.0e6, 2.0e6)
    assert span_error(2.03e6, one) == pytest.approx(0.015, rel=1e-9)
    assert span_error(1.97e6, one) == pytest.approx(0.015, rel=1e-9)
    # no frequency from the model, or a record that does not oscillate: no agreement
    assert math.isinf(span_error(math.nan, one))
    assert math.isinf(span_error(1.0e6, {"state": "none", "f_hz": None}))
    assert all(math.isnan(x) for x in span({"state": "none", "f_hz": None}))


def test_which_records_are_run_again():
    assert wants_rerun({"state": "bursting"}) and wants_rerun({"state": "unsettled"})
    assert wants_rerun({"state": "steady", "step_refined": {"factor": 5}})
    assert not wants_rerun({"state": "steady"}) and not wants_rerun({"state": "none"})


def test_gear_rerun_sets_the_method_before_the_analysis_and_refines_the_step():
    deck = "t\nR1 a 0 1k\n.tran 2.5e-08 0.001 0 2.5e-08\n.end\n"
    out = _with_method(deck, "gear", 5)
    lines = out.splitlines()
    # ngspice manual, ".options": METHOD=GEAR selects Gear's integration
    assert (
        lines.index(".options method=gear")
        == lines.index(next(x for x in lines if x.startswith(".tran"))) - 1
    )
    (tran,) = [x.split() for x in lines if x.startswith(".tran")]
    assert float(tran[1]) == pytest.approx(5e-9) and float(tran[4]) == pytest.approx(5e-9)
    assert _with_method(deck, "trap", 1) == deck
    with pytest.raises(SolverError, match="no .tran"):
        _with_method("t\nR1 a 0 1k\n.end\n", "gear", 1)


@pytest.mark.parametrize("path", SETS, ids=[p.stem for p in SETS])
def test_every_record_that_wants_reruns_has_them(path):
    data = json.loads(path.read_text(encoding="utf-8"))
    for rec in data["designs"]:
        r = rec["ngspice"]
        if not wants_rerun(r):
            assert "reruns" not in r
            continue
        runs = r["reruns"]
        assert sorted(runs) == sorted(name for name, _, _ in RERUNS), rec["design"]["id"]
        for run in runs.values():
            assert sorted(run) == sorted(WINDOWS)
            assert all(set(x) == {"state", "f_hz"} for x in run.values())


#: Two committed records of the tapped Hartley set rerun in ngspice: ht017, a burster
#: whose carrier ngspice holds within 0.2 % at every step, method and window, and ht009,
#: which reads 99.3 kHz over its record's tail but 106.8-114.4 kHz over each half of it
RERUN_CHECKS = [
    ("tank_hartley_tapped.json", "ht017", True),
    ("tank_hartley_tapped.json", "ht009", False),
]


@pytest.mark.ngspice
@pytest.mark.validation
@pytest.mark.parametrize("name, did, settled", RERUN_CHECKS)
def test_committed_reruns_come_back_in_ngspice(name, did, settled):
    try:
        ngspice_path()
    except SolverError as exc:
        pytest.fail(f"{exc} (this test does not skip; CI installs ngspice)")
    designs, answers = load_reference(DATA / name)
    i = [d.id for d in designs].index(did)
    fresh = rerun_design(designs[i], timeout=300.0)
    stored = answers[i]["reruns"]
    for run, windows in stored.items():
        for w, reading in windows.items():
            got = fresh[run][w]
            assert got["state"] == reading["state"], (run, w)
            # ngspice runs the same netlist to the same samples; the reading moves by
            # rounding only
            assert got["f_hz"] == pytest.approx(reading["f_hz"], rel=1e-6), (run, w)
    assert (drift({**answers[i], "reruns": fresh}) <= SETTLED) is settled
