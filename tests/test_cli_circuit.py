"""picker netlist / simulate: file safety, exit statuses, and the ngspice comparison."""

from __future__ import annotations

import json

import pytest

from picker.cli.main import main

SPEC = """title = "cli circuit test (invented)"
topology = "colpitts"
[frequency]
target = "1.29 MHz"
window = "±3 %"
[feedback]
min = 0.2
max = 1.0
[parts.C1]
series = "E12"
tolerance = "5 %"
min = "470 pF"
max = "4.7 nF"
[parts.C2]
series = "E12"
tolerance = "5 %"
min = "470 pF"
max = "4.7 nF"
[parts.L]
series = "E12"
tolerance = "5 %"
min = "10 uH"
max = "47 uH"
q = 50
[parasitics]
stray = "3 pF"
[amplifier]
supply = "9 V"
r_load = "1k5"
r_bias_top = "68k"
r_bias_bottom = "10k"
r_emitter = "2k2"
c_emitter = "47n"
c_coupling = "10n"
"""
SETS = ["--set", "C1=1n", "--set", "C2=2.2n", "--set", "L=22u"]


def _run(argv):
    with pytest.raises(SystemExit) as info:
        main(argv)
    return info.value.code


@pytest.fixture()
def spec(tmp_path):
    p = tmp_path / "osc.toml"
    p.write_text(SPEC, encoding="utf-8")
    return p


def test_netlist_writes_once_and_refuses_to_overwrite(spec, tmp_path, capsys):
    out = tmp_path / "osc.cir"
    assert _run(["netlist", str(spec), *SETS, "-o", str(out)]) in (0, None)
    text = out.read_text(encoding="utf-8")
    assert "Q1 c b e PICKER_NPN" in text and ".tran" in text and text.rstrip().endswith(".end")
    assert _run(["netlist", str(spec), *SETS, "-o", str(out)]) == 2
    assert "exists" in capsys.readouterr().err
    assert _run(["netlist", str(spec), *SETS, "-o", str(spec), "--force"]) == 2
    assert spec.read_text(encoding="utf-8") == SPEC


def test_bad_set_and_missing_amplifier_exit_2(spec, tmp_path, capsys):
    assert _run(["netlist", str(spec), "--set", "C1=1n", "-o", str(tmp_path / "x.cir")]) == 2
    no_amp = tmp_path / "plain.toml"
    no_amp.write_text(SPEC.split("[amplifier]")[0], encoding="utf-8")
    assert _run(["netlist", str(no_amp), *SETS, "-o", str(tmp_path / "y.cir")]) == 2
    err = capsys.readouterr().err
    assert "[amplifier]" in err and len(err.strip().splitlines()) == 2


@pytest.mark.ngspice
def test_simulate_json_reports_model_beside_ngspice(spec, capsys):
    assert _run(["simulate", str(spec), *SETS, "--format", "json"]) in (0, None)
    out = json.loads(capsys.readouterr().out)
    sim = out["simulated"]
    assert sim["oscillating"] and out["startup_margin"] > 1.5
    # ngspice transient against the loaded model: 2 % (issue 3 acceptance bound)
    assert abs(sim["f_hz"] / out["f_loaded_hz"] - 1) < 0.02


def test_netlist_without_output_goes_to_stdout(spec, tmp_path, capsys):
    before = sorted(p.name for p in tmp_path.iterdir())
    assert _run(["netlist", str(spec), *SETS]) in (0, None)
    out = capsys.readouterr().out
    assert out.startswith("cli circuit test (invented): C1=1e-09")
    assert "Q1 c b e PICKER_NPN" in out and out.rstrip().endswith(".end")
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no file written


@pytest.mark.ngspice
def test_simulate_table_says_window_and_verdict(spec, capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "80")
    assert _run(["simulate", str(spec), *SETS]) in (0, None)
    out = capsys.readouterr().out
    assert max(len(line) for line in out.splitlines()) <= 80  # an 80-column terminal
    out = " ".join(out.split())  # the long lines wrap at the width
    # the window is 1.29 MHz ± 3 %: 1.2513 MHz to 1.3287 MHz
    assert "window 1.2513 MHz to 1.3287 MHz:" in out
    assert "inside the window" in out and "verdict: ok" in out
    assert "envelope" in out and "steady" in out and "start-up time" in out
    assert "bursting board's carrier" not in out  # the caution is for bursting boards only
    assert "run from rest" not in out  # a steady board's model column is its steady solution


@pytest.mark.ngspice
def test_simulate_json_window_figures_follow_the_carrier(spec, capsys):
    assert _run(["simulate", str(spec), *SETS, "--format", "json"]) in (0, None)
    out = json.loads(capsys.readouterr().out)
    f = out["simulated"]["f_hz"]
    w = out["window"]
    # the window from the spec: target 1.29 MHz, ±3 %
    assert w["f_min_hz"] == pytest.approx(1.29e6 * 0.97) and w["f_max_hz"] == pytest.approx(
        1.29e6 * 1.03
    )
    assert w["from_target"] == pytest.approx(f / 1.29e6 - 1)
    assert w["margin_to_edge"] == pytest.approx(min(f - w["f_min_hz"], w["f_max_hz"] - f) / 1.29e6)
    assert w["in_window"] is True and out["verdict"] == "ok"
    assert out["simulated"]["envelope"] == "steady"


@pytest.mark.ngspice
def test_evaluate_verify_checks_nominal_and_two_corners(spec, capsys):
    argv = ["evaluate", str(spec), *SETS, "--verify", "--format", "json", "--samples", "200"]
    assert _run(argv) in (0, None)
    data = json.loads(capsys.readouterr().out)
    check = data["ngspice_check"]
    (design,) = check["designs"]
    nominal, low, high = design["boards"]
    assert [b["board"] for b in design["boards"]] == ["nominal", "low corner", "high corner"]
    # every part of an LC tank lowers f as it grows (f = 1/(2π√(L·C_eff))), so the low
    # corner has every part at +5 % and the high corner at −5 %
    for pos, v in (("C1", 1e-9), ("C2", 2.2e-9), ("L", 22e-6)):
        assert low["values"][pos] == pytest.approx(v * 1.05)
        assert high["values"][pos] == pytest.approx(v * 0.95)
    f = [b["ngspice"]["f_hz"] for b in (low, nominal, high)]
    assert f[0] < f[1] < f[2]  # ngspice agrees on the corners' order
    lo, hi = 1.29e6 * 0.97, 1.29e6 * 1.03  # the spec's window
    for b in (low, nominal, high):
        f_b = b["ngspice"]["f_hz"]
        where = "below the window" if f_b < lo else "above the window" if f_b > hi else "ok"
        assert b["ngspice"]["state"] == "steady" and b["verdict"] == where
        assert b["model_minus_ngspice"] == pytest.approx(
            b["model"]["f_hz"] / b["ngspice"]["f_hz"] - 1
        )


def test_verify_without_amplifier_is_refused_before_the_run(spec, tmp_path, capsys):
    no_amp = tmp_path / "plain.toml"
    no_amp.write_text(SPEC.split("[amplifier]")[0], encoding="utf-8")
    assert _run(["evaluate", str(no_amp), *SETS, "--verify"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--verify" in err[0] and "[amplifier]" in err[0]


def test_verify_and_simulate_without_ngspice_exit_3(spec, monkeypatch, capsys):
    monkeypatch.setenv("PATH", "/nonexistent")
    assert _run(["simulate", str(spec), *SETS]) == 3
    assert _run(["evaluate", str(spec), *SETS, "--verify", "--samples", "200"]) == 3
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 2 and all("ngspice is not installed" in line for line in err)


def test_verdict_names_what_fails():
    # the definitions of picker.circuit.verify.verdict: starts, steady, in the window
    from picker.circuit.verify import verdict

    window = (0.97e6, 1.03e6)
    assert verdict("steady", 1.0e6, window) == "ok"
    assert verdict("none", None, window) == "does not start"
    assert verdict("bursting", 1.0e6, window) == "bursts"
    assert verdict("unsettled", 1.04e6, window) == "unsettled; above the window"
    assert verdict("steady", 0.96e6, window) == "below the window"
    assert verdict("steady", 0.96e6, None) == "ok"


def test_corners_follow_the_sign_of_each_sensitivity():
    # a part whose sensitivity is positive moves the other way (first-order worst case:
    # Σ|S_i|·t_i, as in the worst-case span)
    from picker.api.results import Candidate, PartPick
    from picker.api.verify import corner_values
    from picker.core.montecarlo import YieldEstimate

    parts = {
        "C1": PartPick("C1", 1e-9, "F", "E12", 0.05),
        "C2": PartPick("C2", 2e-9, "F", "E12", 0.02),
        "L": PartPick("L", 1e-5, "H", "E12", 0.10),
    }
    sens = {"C1": -0.2, "C2": +0.1, "L": -0.5}
    y = YieldEstimate(1.0, 1.0, 1.0, 1, 1, 0.95, "wilson", 0)
    c = Candidate(1, parts, 1e6, 0.0, 0.5, y, 1.0, 0.9e6, 1.1e6, sens)
    low = corner_values(c, -1)
    high = corner_values(c, +1)
    assert low == pytest.approx({"C1": 1.05e-9, "C2": 1.96e-9, "L": 1.1e-5})
    assert high == pytest.approx({"C1": 0.95e-9, "C2": 2.04e-9, "L": 0.9e-5})
