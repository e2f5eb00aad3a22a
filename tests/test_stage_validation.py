"""The large-signal model against ngspice on the validation sets of the issue 12 stages and tank.

Reference data in ``tests/validation/``: ``stage_common_collector.json``,
``stage_common_base.json``, ``stage_common_source.json``, ``stage_common_drain.json``,
``stage_common_gate.json`` (24 random designs each of that stage in Colpitts and Clapp
tanks; the common-drain set 6 more Clapps, as its quota draw kept only Clapps below
start-up), ``tank_hartley.json`` (24 random Hartley designs, common-emitter and
common-source) and ``tank_hartley_tapped.json`` (24 random Hartley designs of the four
stages whose emitter or source sits on the coil's tap, six each), drawn like the common-emitter set (``scripts/make_validation.py --stage
NAME`` and ``--tank hartley``: the same ranges and quotas on the start-up margin, the
stage's own parts; the fet stages with JFET and MOSFET cards) and what ngspice's
transient of picker's netlist shows, measured by :mod:`picker.circuit.waveform` (written
without the model). Issue 11's targets are asserted per set; a target a set does not
meet is a strict xfail naming the measured figure and its likely cause (README,
"Amplifier stages", gives the figures), so it turns red the day it is met.
"""

from __future__ import annotations

import warnings
from functools import cache
from pathlib import Path

import pytest

from picker.circuit.netlist import write_netlist
from picker.circuit.network import Network
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.validation import (
    Accuracy,
    accuracy,
    design_from_dict,
    design_to_dict,
    load_reference,
    model_answers,
)

DATA = Path(__file__).parent / "validation"
SETS = {
    "common-collector": DATA / "stage_common_collector.json",
    "common-base": DATA / "stage_common_base.json",
    "common-source": DATA / "stage_common_source.json",
    "common-drain": DATA / "stage_common_drain.json",
    "common-gate": DATA / "stage_common_gate.json",
    "hartley": DATA / "tank_hartley.json",
    "hartley-tapped": DATA / "tank_hartley_tapped.json",
}
#: The stages and tanks each set draws (a stage's set: that stage, Colpitts and Clapp).
STAGES = {
    "hartley": {"common-emitter", "common-source"},
    "hartley-tapped": {"common-collector", "common-drain", "common-base", "common-gate"},
}
TANKS = {"hartley": {"hartley"}, "hartley-tapped": {"hartley"}}
#: The fewest steady records a set holds: ten, but the emitter-tapped Hartley set (24
#: designs of the four stages whose emitter or source sits on the coil's tap, six each,
#: drawn by quota on the start-up margin as the others) bursts in ngspice on 12 of its 20
#: oscillating designs and runs steady on 8.
STEADY_LEAST = {"hartley-tapped": 8}
#: The fet kinds a set holds: JFETs and MOSFETs, but the common-emitter and common-source
#: Hartley set as redrawn with C_B in the transient plan (2026-12-04, same seed and
#: command) holds MOSFETs only: a self-biased JFET's gate network, R_G (100 kOhm-2.2 MOhm)
#: with the tap's and the blocking capacitor's C, now needs a run longer than the drawing
#: rule's cap, so the draw passes over it (the set drawn before held one JFET, which did
#: not start: linear margin 0.09). The JFET common-source stage is measured on the
#: common-source set; the emitter-tapped Hartley set holds JFETs in the common-gate stage.
FET_KINDS = {"hartley": {"nmos"}}
#: The fet and Hartley sets were redrawn after the transient plan began to count a lone
#: gate resistor's time constant (a self-biased JFET's gate network): the records made
#: before it could end before the gate had settled. The figures below are on the redrawn
#: sets (tests/validation/README.md).
#: The fet stages' overdriven designs (the steady state's flag or a margin above 5) take
#: their frequency, amplitude and bursting verdict from the periodic orbit of their own
#: netlist (picker.circuit.nominal_orbit): common-source 80 → 100 % within 2 %,
#: common-drain 87 → 100 %, common-gate 65 → 95 % (100 % once cg004 was read at its
#: fundamental, below); amplitude 89.5 → 100 % and
#: 82.6 → 100 %.
#: Every Hartley design that starts takes the orbit, saturated or not (its coils pass the
#: device's harmonics to the control terminal): within 2 % 50 → 70 %, median 1.96 → 0.11 %,
#: amplitude 78.6 → 100 %, bursting precision and recall 0.71 and 0.83 → 1.00 and 1.00.
FET_FREQUENCY = {
    "hartley": "90.0 % (18 of 20) on the set as redrawn with C_B in the transient plan "
    "(50.0 % before every Hartley design took the periodic orbit and the bursting ones the "
    "carrier of their run from rest, picker.circuit.burst_carrier; the median of seven runs "
    "since 2026-12-05): the bursters hy014 (-16.0 %) and hy015 (-2.2 %), whose ngspice carrier inside their short bursts has no "
    "converged value: run again at a finer step, with Gear and over each half of the tail, "
    "ngspice holds neither within 1 % (19.8 and 6.3 %, picker.circuit.reference_spread; "
    "they are the designs hy015 and hy016 of the set as first drawn, whose readings spread "
    "over 844-1098 and 68.3-72.7 kHz at 25x and 125x finer steps, Gear, RELTOL 1e-4 and "
    "other kicks); over the 17 designs ngspice does hold, 100 %; against the span of "
    "ngspice's readings of each record, 100 % (both lie inside theirs)",
}
FET_FREQUENCY["hartley-tapped"] = (
    "85.0 % (17 of 20): the three misses burst in ngspice, two common-base designs (ht008 "
    "+2.6 %, ht014 -18.2 %) and an emitter follower (ht009 +7.6 %), their carriers the "
    "median of the model's seven runs from rest (picker.circuit.burst_carrier; with one "
    "run, ht011 +2.3 % missed where ht008 did not); every steady design is within 1.1 % "
    "(ht004 +1.08 %). ngspice does not hold these three within 1 % when their netlists run "
    "again (picker.circuit.reference_spread: 12.8, 15.2 and 18.9 %): ht014 reads 240.8 kHz "
    "over its record's tail and 195.3 kHz over each half of it at every step and method "
    "(the model 196.9), ht009 99.3 kHz over its tail and 106.8-114.4 kHz over its halves "
    "(the model 106.8); over the 14 designs ngspice does hold, 100 %; against the span of "
    "ngspice's readings of each record, 100 % (all three lie inside theirs)"
)
AMPLITUDE: dict[str, str] = {}
#: met on the common-base set since a design the model flags takes the verdict of its own
#: circuit run from rest where that run does not burst (picker.circuit.validation.
#: model_answers): cb003 (a saturated Clapp with a collector choke, whose tank-mode orbit
#: is unstable) was the one false flag; ngspice runs it steady in its choke's mode,
#: 23.4 kHz, with the tank's mode phase-locked at its 5th harmonic, and its run from rest,
#: measured as the record is, shows no burst (+0.37 %; "unsettled" over its 800 measured
#: periods, a wandering envelope without gaps, which the statistics count as not bursting,
#: as they count ngspice's)
#: met on the common-collector set since every follower that starts takes the periodic
#: orbit of its netlist (picker.circuit.stages.base.Stage.orbit_on_start): cc016 (Clapp,
#: "unsettled" in ngspice, -2.0 % with the describing function, which called it steady
#: and unsaturated at 3.66 V against ngspice's 6.31 V) has an unstable orbit, so it takes
#: its run from rest: -0.33 % and +0.2 % in amplitude, not bursting (the run is
#: "unsettled" too); the set's Clapp worst is 0.33 %, its worst 0.42 % (cc004;
#: cc000 +0.60 % before its unconverged orbit gave way to its run from rest, +0.30 %)
#: met on the common-base set: cb003 (a saturated Clapp with a collector choke, flagged
#: bursting by the model) takes the carrier of its run from rest (picker.circuit.burst_carrier),
#: measured as its record is, at the waveform's fundamental (the choke's mode, 23.4 kHz):
#: +0.37 %; the set's 2 % share is 100 % since cb011 (-6.2 %: its orbit does not converge)
#: takes its run from rest too, -0.34 % (picker.circuit.burst_carrier.run_hint)


def _accuracy_of(path: Path) -> Accuracy:
    """The model's answers on the reference set at ``path`` against its ngspice records."""
    designs, answers = load_reference(path)
    with warnings.catch_warnings():
        # the start-up pole search divides by a return ratio of zero and the bias solve by
        # a zero determinant where the pole pair meets the real axis (a relaxation, which
        # takes its run from rest: picker.circuit.burst_carrier.run_hint)
        warnings.simplefilter("ignore", RuntimeWarning)
        model = model_answers(designs)
    return accuracy([d.topology for d in designs], model, answers)


@cache
def _acc(name: str) -> Accuracy:
    return _accuracy_of(SETS[name])


#: Sets whose expected failure is not strict: the figure lies on the target's edge and a
#: burster's carrier there moves with the machine's rounding (picker.circuit.burst_carrier,
#: KICKS). The Hartley set's 2 % share: 90.0 % on the machine of 2026-12-04/05 (hy015
#: -2.2 %), and met (at least 95 %) in a fresh-clone CI run on another machine on 2026-12-05 with
#: the same code, which a strict marker turned into a failure.
ON_THE_EDGE = frozenset({"hartley"})


def _sets(
    unmet: dict[str, str], names: list[str] | None = None, edge: frozenset[str] = frozenset()
) -> list[object]:
    """Every set (or ``names``), xfail (reason) for the ones named in ``unmet``: strict
    but for those named in ``edge`` (:data:`ON_THE_EDGE`)."""
    return [
        pytest.param(n, marks=pytest.mark.xfail(strict=n not in edge, reason=unmet[n]))
        if n in unmet
        else n
        for n in sorted(SETS if names is None else names)
    ]


@pytest.mark.parametrize("name", sorted(SETS))
def test_set_holds_twenty_designs_of_its_stage_in_its_tanks(name):
    designs, answers = load_reference(SETS[name])
    assert len(designs) >= 20
    assert {d.params.stage for d in designs} == STAGES.get(name, {name})
    assert {d.topology for d in designs} == TANKS.get(name, {"colpitts", "clapp"})
    assert all(a["warnings"] == [] for a in answers)  # no floating node, no step failure
    states = [a["state"] for a in answers]
    assert states.count("none") >= 2 and states.count("steady") >= STEADY_LEAST.get(name, 10)
    fets = [d.params.fet for d in designs if d.params.kind == "fet"]
    if fets:  # the fet kinds of the set (both, as a rule), each with its own card
        assert {f.kind for f in fets if f is not None} == FET_KINDS.get(name, {"njf", "nmos"})
        assert len({(f.vto, f.k) for f in fets if f is not None}) == len(fets)


@pytest.mark.parametrize("name", ["common-source", "hartley", "hartley-tapped"])
def test_fet_cards_and_coupling_survive_the_file(name):
    """A design read back from its file writes the netlist ngspice ran: the fet's own
    ``.model`` card (its VTO as drawn) and a Hartley's K line with its k."""
    designs, _ = load_reference(SETS[name])
    for d in designs:
        assert design_from_dict(design_to_dict(d)) == d
        text = write_netlist(d.topo, d.values, d.stray, d.params, title=d.id, cycles=400)
        if d.params.fet is not None:
            assert f"VTO={d.params.fet.vto:.6g}" in text
        if d.topology == "hartley":
            assert 0.3 <= d.coupling <= 0.99
            assert any(
                line.startswith("K12 ") and float(line.split()[-1]) == d.coupling
                for line in text.splitlines()
            )


@pytest.mark.parametrize(
    "name",
    _sets(FET_FREQUENCY, edge=ON_THE_EDGE),
)
def test_frequency_within_2_percent_for_95_percent(name):
    assert _acc(name).freq_within_2pct >= 0.95


@pytest.mark.parametrize("name", sorted(SETS))
def test_frequency_within_2_percent_for_95_percent_of_settled_references(name):
    # over the designs whose ngspice carrier holds within 1 % when the record is run
    # again (finer step, Gear, each half of the tail: picker.circuit.reference_spread);
    # not one of issue 11's targets: it tells the model's misses from the reference's
    # (every miss of the two Hartley sets drifts by 2-91 % in ngspice)
    acc = _acc(name)
    assert acc.settled >= 14
    assert acc.freq_within_2pct_settled >= 0.95


@pytest.mark.parametrize("name", sorted(SETS))
def test_frequency_within_2_percent_of_ngspice_s_span_for_95_percent(name):
    # the frequency targets with each reference taken as the span of ngspice's own
    # readings of it: the record's and its reruns' (finer step, Gear, each half of the
    # tail; picker.circuit.reference_spread.span_error). A burster whose carrier ngspice
    # reads 844-1098 kHz is not a reference one figure can be held to 2 % of; a model
    # figure inside that span agrees with ngspice as well as ngspice agrees with itself.
    # Measured 100 % on every set; on the two Hartley sets every miss of the plain share
    # lies inside its record's span (hy014 -16.0 % in a span of -19.8 to +12.9 %; ht014
    # -18.2 % in -18.9 to +0.3 %)
    acc = _acc(name)
    assert acc.freq_within_2pct_span >= 0.95
    assert acc.freq_median_span <= 0.003
    assert acc.freq_within_2pct_span >= acc.freq_within_2pct


@pytest.mark.parametrize(
    "name",
    _sets({}),
)
def test_frequency_median_error_at_most_0_3_percent(name):
    assert _acc(name).freq_median_error <= 0.003


@pytest.mark.parametrize("name", sorted(SETS))
def test_startup_right_for_98_percent(name):
    assert _acc(name).startup_right >= 0.98


@pytest.mark.parametrize("name", _sets(AMPLITUDE))
def test_amplitude_within_30_percent_for_90_percent_of_steady(name):
    assert _acc(name).amplitude_within_30pct >= 0.90


#: The sets with a burster in ngspice. The common-collector and common-base sets had one
#: each (cc013, cb011), the trapezoidal rule's: at a 5x finer step, and with Gear, both run
#: steady (tests/validation/README.md, tests/test_step_confirm.py), so they are checked for
#: no bursting.
BURSTERS = ["common-source", "hartley", "hartley-tapped"]


@pytest.mark.parametrize(
    "name",
    _sets(
        {},
        BURSTERS,
    ),
)
def test_bursting_precision_and_recall_at_least_0_8(name):
    acc = _acc(name)
    assert acc.bursting > 0
    assert acc.burst_precision >= 0.8 and acc.burst_recall >= 0.8


@pytest.mark.parametrize(
    "name",
    _sets({}, sorted(set(SETS) - set(BURSTERS))),
)
def test_no_bursting_predicted_where_ngspice_shows_none(name):
    acc = _acc(name)
    assert acc.bursting == 0
    assert acc.burst_precision != acc.burst_precision  # NaN: the model flags none either


CLAPPS = ["common-collector", "common-base", "common-source", "common-drain", "common-gate"]


@pytest.mark.parametrize(
    "name",
    _sets({}, CLAPPS),
)
def test_clapp_within_half_a_percent(name):
    assert _acc(name).clapp_oscillating > 0
    assert _acc(name).clapp_worst_error <= 0.005


def test_an_unsaturated_follower_takes_the_orbit_of_its_netlist():
    """Every emitter follower that starts is shot (Stage.orbit_on_start), saturated or not:
    cc002 (a Colpitts at a start-up margin of 3.2, which the describing function finds out
    of saturation) gets an orbit, stable, within 0.05 % of ngspice's carrier in its record
    (measured 0.008 %); a rule that shot only saturated followers gives it none."""
    designs, answers = load_reference(SETS["common-collector"])
    k = next(i for i, d in enumerate(designs) if d.id == "cc002")
    d, ngspice = designs[k], answers[k]
    assert ngspice["state"] == "steady"
    orbit = board_orbits([Network.build(d.topo, d.values, d.stray, d.params)])[0][0]
    assert orbit is not None and not orbit.bursting
    assert orbit.f_hz == pytest.approx(float(ngspice["f_hz"]), rel=5e-4)


# ---------------------------------------------------------------- the series-capacitor Hartley

#: 24 random series-capacitor Hartley designs, common-emitter and common-source, drawn as the
#: Hartley set is (``--tank hartley-series``; tests/validation/README.md; redrawn on
#: 2026-12-04 with C_B in the transient plan). The model misses this tank's frequency
#: target against the record's one reading (a strict xfail) and meets it against the span
#: of ngspice's readings of each record; every such design carries a caution
#: (picker.tank.base.Topology.model_caution). Its bursting and amplitude targets are met
#: since a design that relaxes (no steady solution) or whose orbit does not converge takes
#: its run from rest (picker.circuit.burst_carrier.run_hint): on the set as first drawn,
#: bursting precision and recall from 0.83 / 0.50 to 0.91 / 1.00, amplitude from 77.8 to
#: 100 %; on the redrawn set 1.00 / 1.00 and 100 %.
SERIES_HARTLEY_SET = DATA / "tank_hartley_series.json"


@cache
def _series_acc() -> Accuracy:
    return _accuracy_of(SERIES_HARTLEY_SET)


def test_series_hartley_set_is_drawn_and_starts_right():
    designs, answers = load_reference(SERIES_HARTLEY_SET)
    assert len(designs) == 24 and {d.topology for d in designs} == {"hartley-series"}
    assert {d.params.stage for d in designs} == {"common-emitter", "common-source"}
    assert all(a["warnings"] == [] for a in answers)
    assert _series_acc().startup_right >= 0.98


@pytest.mark.xfail(
    strict=True,
    reason="80.0 % within 2 % (16 of 20 oscillating), median 0.33 %, on the set as "
    "redrawn with C_B in the transient plan, with the median of seven runs from rest read "
    "around the tank's ideal frequency as ngspice's record is (75.0 % and 1.23 % on the "
    "set as first drawn): the four misses are bursters ngspice itself does not hold "
    "within 1 % when their netlists run again (picker.circuit.reference_spread): hs006 "
    "-8.2 %, hs010 +4.1 %, hs016 -16.5 %, hs018 -3.5 %, each inside the span of "
    "ngspice's own readings of its record",
)
def test_series_hartley_frequency_within_2_percent_for_95_percent():
    acc = _series_acc()
    assert acc.freq_within_2pct >= 0.95 and acc.freq_median_error <= 0.003


def test_series_hartley_frequency_within_2_percent_of_ngspice_s_span_for_95_percent():
    # measured 100 % (20 of 20), median 0.02 %, since the model's run from rest is read
    # around the tank's ideal frequency, as ngspice's record is (picker.circuit.
    # burst_carrier._ideal_hz); read around the orbit's frequency instead it was 85 %:
    # hs008 (a pulse train whose orbit runs at half the tank's ideal frequency) read
    # 546.4 kHz, a line of its comb below the band ngspice's record is searched in
    # (549-2196 kHz), against 603.9-661.2 kHz in ngspice; hs010 -3.7 % and hs016 -11.4 %
    # from their spans; read alike they lie inside them
    acc = _series_acc()
    assert acc.freq_within_2pct_span >= 0.95 and acc.freq_median_span <= 0.003
    assert acc.freq_within_2pct_span >= acc.freq_within_2pct


def test_series_hartley_frequency_within_2_percent_for_95_percent_of_settled_references():
    # over the designs whose ngspice carrier holds within 1 % when run again
    # (picker.circuit.reference_spread): every one within 2 % since a design that relaxes
    # runs from rest at the finer step (on the set as first drawn, hs004 -2.7 % -> -1.07 %);
    # the four misses of the plain share are boards ngspice itself reads 7.9-18.4 % apart.
    # The set as first drawn had 13 such designs; the redraw with C_B in the transient plan
    # (2026-12-04, same seed and command) has 10, all within 2 %, median 0.03 % (0.10 % with one run from rest): the floor
    # is ten, so that the share still means something
    acc = _series_acc()
    assert acc.settled >= 10
    assert acc.freq_within_2pct_settled >= 0.95


def test_series_hartley_bursting_precision_and_recall_at_least_0_8():
    acc = _series_acc()
    assert acc.burst_precision >= 0.8 and acc.burst_recall >= 0.8


def test_series_hartley_amplitude_within_30_percent_for_90_percent_of_steady():
    assert _series_acc().amplitude_within_30pct >= 0.90
