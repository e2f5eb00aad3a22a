"""A design that starts but has no steady solution: what ``solve`` and ``evaluate`` say.

The series-capacitor Hartley with a small C_S starts (its start-up pole pair crosses into
the right half-plane) but the pole pair, followed to the actual gm, meets the real axis
before the drive compresses it: the large-signal model has no steady frequency. Six of
the 24 designs of ``tests/validation/tank_hartley_series.json`` are such (ngspice's
transients of picker's netlists, the committed records). There the start-up pole's
frequency is not where the board runs: it misses ngspice's carrier by 2.5 % to 160 % on
those six, so the figures give no loaded frequency, the verdict "no steady state", a
caution, and no spread drivers (no board oscillates).
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from conftest import write_spec

from picker.circuit.figures import nominal_figures
from picker.circuit.oscillation import loaded_response
from picker.circuit.steady import NO_STEADY_STATE, steady_state
from picker.circuit.validation import load_reference
from picker.core.propagation import first_order_shares
from picker.production.drivers import regression_fit
from picker.tank.board import Parasitics

SERIES_SET = Path(__file__).parent / "validation" / "tank_hartley_series.json"


def _no_steady_designs():
    designs, answers = load_reference(SERIES_SET)
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # the pole meets the real axis
        for d, a in zip(designs, answers, strict=True):
            v = {p: np.array([x]) for p, x in d.values.items()}
            st = steady_state(d.topo, v, d.stray, d.params)
            if bool(st.starts[0]) and not math.isfinite(float(st.f_hz[0])):
                lin = float(loaded_response(d.topo, v, d.stray, d.params).f_hz[0])
                out.append((d, a, lin))
    return out


def test_the_start_up_pole_is_not_where_a_design_without_steady_state_runs():
    """The old fallback (the linear model's start-up frequency) against ngspice's record:
    more than 2 % off on every such design of the set. Fails if the set loses them (the
    model found a steady state) or if the fallback were a fair figure after all."""
    rows = _no_steady_designs()
    assert len(rows) >= 5
    for d, a, lin in rows:
        assert a["f_hz"] is not None, d.id  # every one oscillates in ngspice
        assert abs(lin / float(a["f_hz"]) - 1.0) > 0.02, d.id


def test_figures_give_no_loaded_frequency_and_say_why():
    d, _, lin = _no_steady_designs()[0]
    assert math.isfinite(lin)  # what the figures used to report as the loaded frequency
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        fig = nominal_figures(d.topo, d.values, Parasitics(stray=d.stray), d.params)
    assert fig["f_loaded_hz"] is None
    ls = fig["large_signal"]
    assert ls["starts"] is True and ls["f_hz"] is None
    assert ls["envelope"] == NO_STEADY_STATE
    assert any("no steady oscillation" in c for c in fig["cautions"])


def test_regression_has_no_shares_when_no_board_oscillates():
    x = {"L": np.linspace(-0.01, 0.01, 50), "C": np.linspace(0.01, -0.01, 50)}
    fit = regression_fit(x, np.full(50, np.nan))
    assert math.isnan(fit.r2)
    assert all(math.isnan(v) for v in fit.shares.values())
    # one board that oscillates is still no spread
    y = np.full(50, np.nan)
    y[3] = 0.0
    assert math.isnan(regression_fit(x, y).r2)


def test_first_order_shares_are_nan_where_the_model_has_no_slope():
    # var(ln f) ≈ Σ (S_i·σ_i)² (first-order propagation, GUM JCGM 100:2008 eq. 10):
    # (0.5·0.02)² = 1e-4 and (0.5·0.01)² = 2.5e-5, shares 0.8 and 0.2 (by hand)
    nan = math.nan
    sh = first_order_shares(
        {"L": [-0.5, nan, -0.5], "C": [-0.5, -0.3, -0.5]},
        {"L": [0.02, 0.02, 0.0], "C": [0.01, 0.01, 0.0]},
    )
    assert sh["L"][0] == pytest.approx(0.8) and sh["C"][0] == pytest.approx(0.2)
    # a NaN slope (no steady frequency): no shares, not zeros
    assert math.isnan(sh["L"][1]) and math.isnan(sh["C"][1])
    # no spread at all stays "no spread": zeros
    assert sh["L"][2] == 0.0 and sh["C"][2] == 0.0


SPEC = """
title = "relaxing series Hartley"
topology = "hartley-series"
[frequency]
target = "130 kHz"
window = "±10 %"
[tank]
coupling = 0.98
[parts.L1]
series = "E24"
tolerance = "5 %"
min = "100 uH"
max = "1 mH"
q = 160
q_frequency = "130 kHz"
[parts.L2]
series = "E24"
tolerance = "5 %"
min = "47 uH"
max = "470 uH"
q = 160
q_frequency = "130 kHz"
[parts.C]
series = "E24"
tolerance = "2 %"
min = "1 nF"
max = "10 nF"
[parts.CS]
series = "E24"
tolerance = "2 %"
min = "1 nF"
max = "10 nF"
[parasitics]
stray = "3.6 pF"
[amplifier]
kind = "bjt"
stage = "common-emitter"
supply = "6.6 V"
r_load = "309 ohm"
r_bias_top = "4.96 kohm"
r_bias_bottom = "1.48 kohm"
r_emitter = "124 ohm"
c_emitter = "24.6 nF"
c_coupling = "93.9 nF"
[yield]
samples = 500
seed = 1
"""
#: hs004 of the set (no steady state in the model; in ngspice a pulse train repeating at
#: 32.3 kHz, a quarter of the tank's 127 kHz)
HS004 = ["L1=420u", "L2=124u", "C=3.24n", "CS=3.05n"]


def _evaluate(run_cli, tmp_path: Path, *extra: str):
    args = ["evaluate", str(write_spec(tmp_path, SPEC))]
    for s in HS004:
        args += ["--set", s]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return run_cli(*args, *extra)


def test_evaluate_reports_no_steady_state_in_json(run_cli, tmp_path: Path):
    code, out, err = _evaluate(run_cli, tmp_path, "-f", "json")
    assert code in (0, 1), err  # 1: no design in the window
    (c,) = json.loads(out)["candidates"]
    assert c["f_loaded_hz"] is None and c["in_window"] is False
    assert c["large_signal"]["envelope"] == NO_STEADY_STATE
    assert c["yield"]["passed"] == 0
    assert c["drivers_mc"]["r2"] is None
    assert all(v is None for v in c["drivers_mc"]["shares"].values())
    # nor a first-order one: the model has no frequency, so no slope to apportion
    assert set(c["drivers"]) == {"L1", "L2", "C", "CS"}
    assert all(v is None for v in c["drivers"].values())


def test_evaluate_table_names_the_verdict_and_prints_no_fitted_drivers(run_cli, tmp_path: Path):
    _, out, _ = _evaluate(run_cli, tmp_path)
    out = " ".join(out.split())  # the terminal's wrapping
    assert NO_STEADY_STATE in out
    assert "a design with no loaded frequency" in out
    assert "R²" not in out  # no regression was fitted
    assert "fewer than two simulated boards oscillate" in out


def test_evaluate_report_page_shows_the_verdict(run_cli, tmp_path: Path):
    page = tmp_path / "relaxing.html"
    code, _, err = _evaluate(run_cli, tmp_path, "--report", str(page))
    assert code in (0, 1), err
    html = page.read_text(encoding="utf-8")
    assert "<th>runs</th>" in html
    assert f">{NO_STEADY_STATE}</td>" in html
