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
