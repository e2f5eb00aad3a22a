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
from test_verify_demos import top_board

from picker.api.verify import DesignCheck
from picker.circuit import verify
from picker.circuit.burst_carrier import BurstCarrier
from picker.circuit.nominal_orbit import NominalOrbit
from picker.cli.circuit import BURST_CARRIER_CAUTION, verify_text

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
    topo, par, params, board, c = top_board("colpitts_bjt")
    f0 = float(c["f_loaded_hz"])
    calls = []

    def orbits(nets):
        return [[_orbit(f0)] for _ in nets]

    def runs(nets, bursting, f_hint, relaxing):
        calls.append(list(bursting))
        assert relaxing == [False]  # the orbit exists: the usual step
        return [
            BurstCarrier(run_state, 1.01 * f0, 2.5, 400, 1e-3, 4e-3, 7, startup_time_s=3.3e-5)
            for _ in nets
        ]

    monkeypatch.setattr(verify, "board_orbits", orbits)
    monkeypatch.setattr(verify, "network_carriers", runs)
    (check,) = verify.check_boards(topo, [("nominal", board)], float(par.stray), params)
    assert calls == [[True]]  # the run is made for the board the orbit calls bursting
    m = check.model
    assert m["f_hz"] == pytest.approx(1.01 * f0) and m["amplitude_v"] == 2.5
    assert m["carrier_from"] == "run from rest" and m["carrier_spread"] == 1e-3
    assert m["carrier_kick_spread"] == 4e-3  # the runs' own scatter, beside the chunks'
    # the start-up time is the run's too (read as ngspice's is), not the describing
    # function's start-up pole's
    assert m["startup_time_s"] == 3.3e-5
    # a run that does not burst clears the orbit's flag; one that bursts keeps it
    assert m["envelope"] == ("bursting" if run_state == "bursting" else run_state)
    assert check.state == "steady"  # ngspice's own reading of the demo's board is untouched
    # the table warns that a burst's carrier is a rough figure where either side bursts
    # (ngspice's reading of hy015 of the Hartley set moved over 790-1114 kHz with its step
    # and run length, tests/validation/README.md), and only there
    text = verify_text([DesignCheck(1, [check])], 1.0)
    flat = " ".join(text.split())  # the notes wrap at the width
    assert (BURST_CARRIER_CAUTION in flat) == (run_state == "bursting")
    # and says where the model's column comes from, naming the board
    assert "come from the board's own circuit run from rest" in flat and "1 nominal" in flat
    # an 80-column terminal gets the tables whole: no line wider, no figure broken
    narrow = verify_text([DesignCheck(1, [check])], 1.0, width=80)
    assert max(len(line) for line in narrow.splitlines()) <= 80
    f_text = f"{m['f_hz'] / 1e6:.6g} MHz"  # the demo runs near 4.9 MHz
    row = next(line for line in narrow.splitlines() if "nominal" in line and "MHz" in line)
    assert f_text in row and f"{100 * (m['f_hz'] / check.f_sim - 1.0):+.2f} %" in row


def test_runs_that_split_give_the_carrier_as_their_range(monkeypatch):
    # seven runs whose carriers span 8 % (above SPLIT, 2 %): the JSON carries their
    # range, and the notes say the carrier is that range, naming the board; one that
    # spans 1 % (below SPLIT) carries no range and no such note
    topo, par, params, board, c = top_board("colpitts_bjt")
    f0 = float(c["f_loaded_hz"])
    checks = {}
    for span in (0.08, 0.01):
        lo, hi = 0.97 * f0, (0.97 + span) * f0

        def runs(nets, bursting, f_hint, relaxing, lo=lo, hi=hi, span=span):
            return [BurstCarrier("bursting", f0, 2.5, 400, 1e-3, span, 7, lo, hi) for _ in nets]

        monkeypatch.setattr(verify, "board_orbits", lambda nets: [[_orbit(f0)] for _ in nets])
        monkeypatch.setattr(verify, "network_carriers", runs)
        (checks[span],) = verify.check_boards(topo, [("nominal", board)], float(par.stray), params)
    m = checks[0.08].model
    assert (m["carrier_low_hz"], m["carrier_high_hz"]) == (0.97 * f0, 1.05 * f0)
    assert checks[0.01].model["carrier_low_hz"] is None
    flat = " ".join(verify_text([DesignCheck(1, [checks[0.08]])], 1.0).split())
    assert "the runs from rest split between courses" in flat and "1 nominal" in flat
    assert f"{0.97 * f0 / 1e6:.4g} MHz to {1.05 * f0 / 1e6:.4g} MHz" in flat
    flat = " ".join(verify_text([DesignCheck(1, [checks[0.01]])], 1.0).split())
    assert "split between courses" not in flat
    # simulate's note: the same range, in its clause on the runs' span
    from picker.cli.circuit import _kick_spread

    clause = _kick_spread(m)
    assert "span 8.00 %" in clause and "the board's carrier is their range" in clause
    assert "their range" not in _kick_spread(checks[0.01].model)


@pytest.mark.parametrize("run_state", ["bursting", "unsettled"])
def test_a_distorted_board_takes_its_run_and_the_run_s_burst(monkeypatch, run_state):
    # a board the describing function calls steady far from a sine, no orbit shot (here
    # the demo's board, flagged by a stand-in for distorted): --verify makes the run at the
    # model's frequency and takes its carrier; a burst in the run sets the model's envelope
    # to bursting, a run that does not burst leaves it steady (fails if verify leaves the
    # distorted flag out of run_hint or run_bursts)
    topo, par, params, board, c = top_board("colpitts_bjt")
    f0 = float(c["f_loaded_hz"])
    asked = []

    def runs(nets, bursting, f_hint, relaxing):
        asked.append(f_hint)
        return [BurstCarrier(run_state, 0.9 * f0, 3.0, 400, 1e-3, 1e-3, 7) for _ in nets]

    monkeypatch.setattr(verify, "board_orbits", lambda nets: [[None] for _ in nets])
    monkeypatch.setattr(verify, "distorted", lambda shot, starts, bursting, harm: not shot)
    monkeypatch.setattr(verify, "network_carriers", runs)
    (check,) = verify.check_boards(topo, [("nominal", board)], float(par.stray), params)
    m = check.model
    assert len(asked) == 1 and asked[0][0] == pytest.approx(f0, rel=0.02)  # the model's f
    assert m["f_hz"] == pytest.approx(0.9 * f0) and m["carrier_from"] == "run from rest"
    assert m["envelope"] == ("bursting" if run_state == "bursting" else "steady")


def test_run_hint_picks_bursting_and_relaxing_designs():
    """Which designs get a run from rest, and the frequency that scales it."""
    from picker.circuit.burst_carrier import run_hint

    assert run_hint(True, True, 1e6, 1.2e6) == 1e6  # bursting: the orbit's frequency
    assert run_hint(True, False, math.nan, 1.2e6) == 1.2e6  # no steady solution: the tank's
    assert run_hint(True, False, 1e6, 1.2e6) is None  # steady: the model's figures stand
    assert run_hint(False, False, math.nan, 1.2e6) is None  # does not start: nothing to run
    assert run_hint(True, False, math.nan, math.nan) is None  # no scale to run it at
    # steady far outside the describing function's premise: run at the model's frequency
    assert run_hint(True, False, 1e6, 1.2e6, warped=True) == 1e6


def test_a_distorted_design_is_one_the_describing_function_calls_steady_far_from_a_sine():
    """burst_carrier.distorted: no orbit shot, starts, called steady, and a harmonic above
    DISTORTED_DBC (-6 dBc: half the fundamental's amplitude); the run's burst then sets
    its verdict both ways, where an ordinary steady design's run can only clear one."""
    from picker.circuit.burst_carrier import distorted, run_bursts

    assert distorted(False, True, False, [-2.4, -5.7])  # h010's describing function
    assert distorted(False, True, False, [-30.0, -5.9])  # the 3rd harmonic counts too
    assert not distorted(False, True, False, [-6.1, -12.0])  # below the line
    assert not distorted(True, True, False, [-2.4, -5.7])  # the orbit was shot: its figures
    assert not distorted(False, False, False, [-2.4, -5.7])  # does not start
    assert not distorted(False, True, True, [-2.4, -5.7])  # already called bursting
    assert not distorted(False, True, False, [math.nan, math.nan])
    burst = BurstCarrier("bursting", 1e6, 1.0, 400, 1e-3)
    calm = BurstCarrier("unsettled", 1e6, 1.0, 400, 1e-3)
    assert run_bursts(False, False, burst, warped=True)
    assert not run_bursts(False, False, calm, warped=True)
    assert not run_bursts(False, False, burst)  # a steady verdict the run cannot overturn


def test_a_relaxing_board_takes_its_run_from_rest_and_its_state(monkeypatch):
    """hs002 of the series-capacitor Hartley set starts (margin 13) but its start-up pole
    pair meets the real axis before the drive compresses it: the steady state has no
    frequency. ``--verify`` then shows its run from rest (here a stand-in) and takes the
    run's state, whatever it is; ngspice's reading (bursting, 184 kHz in the record) is
    its own. Fails if the relaxing board is left without a model frequency, or if its
    run's state is dropped because the steady state never called it bursting."""
    from pinned import pinned

    d, _ = pinned("hs002")
    hints = []

    def runs(nets, go, f_hint, relaxing):
        hints.extend(f for f, g in zip(f_hint, go, strict=True) if g)
        assert relaxing == [True]  # no steady solution: the finer step of a relaxation
        return [BurstCarrier("steady", 0.4 * f_hint[0], 20.0, 400, 1e-3) for _ in nets]

    monkeypatch.setattr(verify, "board_orbits", lambda nets: [[None] for _ in nets])
    monkeypatch.setattr(verify, "network_carriers", runs)
    (check,) = verify.check_boards(d.topo, [("hs002", d.values)], d.stray, d.params)
    f_tank = float(d.topo.frequency(d.values, d.stray))
    assert hints == [pytest.approx(f_tank)]
    m = check.model
    assert m["starts"] and m["f_hz"] == pytest.approx(0.4 * f_tank)
    assert m["envelope"] == "steady" and m["carrier_from"] == "run from rest"
    assert check.state == "bursting"  # ngspice, as recorded (tests/validation/)


def test_simulate_s_note_gives_the_runs_spread_only_where_the_model_says_it():
    """``simulate``'s note on a model column from the run from rest names how far apart
    the runs with kicks a hair apart read (picker.circuit.burst_carrier.KICKS): 0.0123
    prints as 1.23 %; a column without the figure (or NaN) adds nothing."""
    from picker.cli.circuit import _kick_spread

    assert "span 1.23 %" in _kick_spread({"carrier_kick_spread": 0.0123})
    assert _kick_spread({"carrier_kick_spread": math.nan}) == ""
    assert _kick_spread({}) == ""


def test_solve_and_evaluate_caution_a_design_far_from_a_sine():
    """``solve`` and ``evaluate`` make no run from rest, so the held-out set's h010 (pinned:
    ngspice bursts at 158.2 kHz, the describing function calls it steady at 177.2 kHz with
    its 2nd harmonic at -2.4 dBc, no orbit shot) keeps the steady verdict there; its
    figures carry a caution naming the harmonic and pointing to simulate and --verify."""
    from pinned import pinned

    from picker.circuit.figures import nominal_figures
    from picker.tank.board import Parasitics

    d, record = pinned("h010")
    assert record["state"] == "bursting"
    fig = nominal_figures(d.topo, d.values, Parasitics(stray=d.stray), d.params)
    assert fig["large_signal"]["envelope"] == "steady"  # the describing function's verdict
    notes = [n for n in fig["cautions"] if n.startswith("far from a sine")]
    assert len(notes) == 1
    h2 = fig["large_signal"]["harmonics_dbc"]["h2"]
    assert h2 > -6.0 and f"{h2:.1f} dBc" in notes[0]
    assert "simulate or --verify" in notes[0]
    # the main set's d019 (pinned; steady in ngspice, harmonics -11.4 and -16.0 dBc in the
    # describing function): below the line, no such caution
    d19, _ = pinned("d019")
    fig19 = nominal_figures(d19.topo, d19.values, Parasitics(stray=d19.stray), d19.params)
    assert max(fig19["large_signal"]["harmonics_dbc"].values()) < -6.0
    assert not any(n.startswith("far from a sine") for n in fig19["cautions"])
