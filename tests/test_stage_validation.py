"""The large-signal model against ngspice on the validation sets of the issue 12 stages.

Reference data: ``tests/validation/stage_common_collector.json`` and
``tests/validation/stage_common_base.json``, 24 random designs each drawn like the
common-emitter set (``scripts/make_validation.py --stage NAME``: the same ranges and
quotas on the start-up margin, the stage's own parts) and what ngspice's transient of
picker's netlist shows, measured by :mod:`picker.circuit.waveform` (written without the
model). Issue 11's targets are asserted per stage; a target a stage does not meet is a
strict xfail naming it (README, "Amplifier stages", gives the figures), so it turns red
the day it is met.
"""

from __future__ import annotations

from functools import cache
from pathlib import Path

import pytest

from picker.circuit.validation import Accuracy, accuracy, load_reference, model_answer

DATA = Path(__file__).parent / "validation"
SETS = {
    "common-collector": DATA / "stage_common_collector.json",
    "common-base": DATA / "stage_common_base.json",
}
FREQ_CC = "unmet: 94.1 % within 2 % (16 of 17; the miss is the set's one burster, -3.5 %)"
FREQ_CB = "unmet: 70 % within 2 % (14 of 20; saturated designs -2.9 to -8.3 %, a choke mode -81 %)"
BURST_CC = "unmet: recall 0 (the one burster is saturated; no relaxation rule for the follower)"
CLAPP_CC = "unmet: Clapp worst 1.7 % (2 oscillating Clapp designs, both above 1.5 %)"
CLAPP_CB = "unmet: Clapp worst 81 % (a saturated Clapp with a collector choke, in the choke's mode)"


@cache
def _acc(name: str) -> Accuracy:
    designs, answers = load_reference(SETS[name])
    model = [model_answer(d) for d in designs]
    return accuracy([d.topology for d in designs], model, answers)


def _stages(unmet: dict[str, str]) -> list[object]:
    """Every stage's set, strict xfail (reason) for the ones named in ``unmet``."""
    return [
        pytest.param(n, marks=pytest.mark.xfail(strict=True, reason=unmet[n])) if n in unmet else n
        for n in sorted(SETS)
    ]


@pytest.mark.parametrize("name", sorted(SETS))
def test_set_holds_twenty_designs_of_its_stage_in_both_tanks(name):
    designs, answers = load_reference(SETS[name])
    assert len(designs) >= 20
    assert {d.params.stage for d in designs} == {name}
    assert {d.topology for d in designs} == {"colpitts", "clapp"}
    assert all(a["warnings"] == [] for a in answers)  # no floating node, no step failure
    states = [a["state"] for a in answers]
    assert states.count("none") >= 2 and states.count("steady") >= 10


@pytest.mark.parametrize("name", _stages({"common-collector": FREQ_CC, "common-base": FREQ_CB}))
def test_frequency_within_2_percent_for_95_percent(name):
    assert _acc(name).freq_within_2pct >= 0.95


@pytest.mark.parametrize("name", sorted(SETS))
def test_frequency_median_error_at_most_0_3_percent(name):
    assert _acc(name).freq_median_error <= 0.003


@pytest.mark.parametrize("name", sorted(SETS))
def test_startup_right_for_98_percent(name):
    assert _acc(name).startup_right >= 0.98


@pytest.mark.parametrize("name", sorted(SETS))
def test_amplitude_within_30_percent_for_90_percent_of_steady(name):
    assert _acc(name).amplitude_within_30pct >= 0.90


@pytest.mark.parametrize("name", _stages({"common-collector": BURST_CC}))
def test_bursting_precision_and_recall_at_least_0_8(name):
    acc = _acc(name)
    assert acc.burst_precision >= 0.8 and acc.burst_recall >= 0.8


@pytest.mark.parametrize("name", _stages({"common-collector": CLAPP_CC, "common-base": CLAPP_CB}))
def test_clapp_within_half_a_percent(name):
    assert _acc(name).clapp_worst_error <= 0.005
