"""The large-signal model on held-out designs of the five issue-12 stages, against ngspice.

Reference data in ``tests/validation/``: ``stage_holdout_x.json`` (20 designs, seed 31415)
and ``stage_holdout_y.json`` (60 designs, seed 27182), drawn by
``scripts/make_validation.py --stage common-collector,common-base,common-source,
common-drain,common-gate --tank colpitts --balanced`` (the stage sets' ranges and quotas
on the start-up margin, an equal share of each stage, Colpitts and Clapp tanks) with
seeds no stage set used, after the model of every stage was settled; nothing in the model
was chosen on them. They answer the question the stage sets cannot: does the accuracy
hold on designs the model was not developed on? Issue 11's targets are asserted on the
80 designs together (both draws, as drawn; README, "Amplifier stages", gives the figures
of each draw and of each stage).
"""

from __future__ import annotations

import warnings
from functools import cache
from pathlib import Path

import pytest

from picker.circuit.validation import Accuracy, accuracy, load_reference, model_answers

DATA = Path(__file__).parent / "validation"
DRAWS = {"x": DATA / "stage_holdout_x.json", "y": DATA / "stage_holdout_y.json"}
STAGES = {"common-collector", "common-base", "common-source", "common-drain", "common-gate"}


@cache
def _data():
    designs, answers = [], []
    for path in DRAWS.values():
        d, a = load_reference(path)
        designs += d
        answers += a
    return designs, answers


@cache
def _acc() -> Accuracy:
    designs, answers = _data()
    with warnings.catch_warnings():
        # the start-up pole search divides by a return ratio of zero where the pole pair
        # meets the real axis (as in tests/test_stage_validation.py)
        warnings.simplefilter("ignore", RuntimeWarning)
        model = model_answers(designs)
    return accuracy([d.topology for d in designs], model, answers)


def test_the_draws_hold_every_stage_evenly_with_their_own_seeds():
    designs, answers = _data()
    assert len(designs) == 80
    assert len({d.id for d in designs}) == 80
    for stage in STAGES:
        assert sum(d.params.stage == stage for d in designs) == 16
    assert {d.topology for d in designs} == {"colpitts", "clapp"}
    assert all(a["warnings"] == [] for a in answers)  # no floating node, no step failure


def test_frequency_within_2_percent_for_95_percent_median_at_most_0_3_percent():
    acc = _acc()
    assert acc.oscillating >= 60
    assert acc.freq_within_2pct >= 0.95
    assert acc.freq_median_error <= 0.003


def test_frequency_within_2_percent_for_95_percent_of_settled_references():
    # over the designs whose ngspice carrier holds within 1 % when the record is run
    # again (picker.circuit.reference_spread): every record here holds, so the figure is
    # the plain one's (x004 and x011 are the model's misses)
    acc = _acc()
    assert acc.settled >= 60
    assert acc.freq_within_2pct_settled >= 0.95


def test_frequency_within_2_percent_of_ngspice_s_span_for_95_percent():
    # each reference taken as the span of ngspice's readings of it
    # (picker.circuit.reference_spread.span_error); no record of the two draws spreads
    # enough to change a verdict, so the figure is the plain one's
    acc = _acc()
    assert acc.freq_within_2pct_span >= 0.95
    assert acc.freq_median_span <= 0.003


def test_startup_right_for_98_percent():
    assert _acc().startup_right >= 0.98


def test_bursting_precision_and_recall_at_least_0_8():
    acc = _acc()
    assert acc.bursting > 0
    assert acc.burst_precision >= 0.8 and acc.burst_recall >= 0.8


def test_amplitude_within_30_percent_for_90_percent_of_steady():
    acc = _acc()
    assert acc.steady >= 50
    assert acc.amplitude_within_30pct >= 0.90


def test_clapp_within_half_a_percent():
    acc = _acc()
    assert acc.clapp_oscillating >= 10
    assert acc.clapp_worst_error <= 0.005


@pytest.mark.parametrize("draw", sorted(DRAWS))
def test_each_draw_was_made_by_its_documented_command(draw):
    """The seed and prefix each file records are those tests/validation/README.md gives."""
    import json

    data = json.loads(DRAWS[draw].read_text(encoding="utf-8"))
    assert data["seed"] == {"x": 31415, "y": 27182}[draw]
    assert all(r["design"]["id"].startswith(draw) for r in data["designs"])
