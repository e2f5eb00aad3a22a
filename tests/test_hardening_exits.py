"""Exit statuses across every command (the table in the README, "Exit statuses").

0 done; 1 valid input but nothing meets it; 2 bad input (one line naming the
file and key, row or option); 3 a solver or simulator failed. Every row of the
README table is checked here for each command that can produce it.
"""

from __future__ import annotations

import dataclasses
import json

import pytest
from conftest import DEMO
from test_fuzz_harness import assert_clean_exit, cheap, error_line, load_demo, run_cli, to_toml

from picker.errors import SpecError

EXCITER = str(DEMO / "probe_exciter.toml")
BJT = str(DEMO / "colpitts_bjt.toml")
UNITS = str(DEMO / "bench_units.csv")
PLAN = str(DEMO / "plan_demo.toml")


def _infeasible(tmp_path, name: str) -> str:
    d = cheap(load_demo(name))
    d["frequency"] = {"target": d["frequency"]["target"], "window": "±0.0001 %"}
    p = tmp_path / "infeasible.toml"
    p.write_text(to_toml(d), encoding="utf-8")
    return str(p)


@pytest.mark.parametrize(
    ("argv", "status"),
    [
        (["solve", EXCITER, "--samples", "200", "--top", "1"], 0),
        (
            [
                "evaluate",
                EXCITER,
                "--set",
                "C1=1.5n",
                "--set",
                "C2=6.8n",
                "--set",
                "L=220u",
                "--samples",
                "200",
            ],
            0,
        ),
        (["series", "E24", "--min", "1n", "--max", "10n"], 0),
        (["series", "E24", "--min", "1.01n", "--max", "1.02n"], 1),  # no value in range
        (["calibrate", UNITS, "--topology", "colpitts"], 0),
        (["solve", EXCITER, "--format", "xml"], 2),
        (["evaluate", EXCITER, "--set", "C1=1 uH"], 2),
        (["series", "E7"], 2),
        (["calibrate", UNITS], 2),
        (["consolidate", PLAN, "--time-limit", "0"], 2),
        (["netlist", EXCITER, "-o", "x.cir"], 2),  # no [amplifier] section
        (["simulate", BJT, "--timeout", "-1"], 2),
        (["bench", "--no-such-option"], 2),
        (["no-such-command"], 2),
    ],
)
def test_status_of_each_command(argv, status, tmp_path):
    code, out, err = run_cli(argv, cwd=tmp_path)
    assert code == status, err
    if status == 2:
        error_line(err)  # exactly one line, no traceback
        assert out == ""
    elif status == 1:
        assert "Traceback" not in err


def test_solve_and_the_circuit_commands_exit_1_on_an_infeasible_spec(tmp_path):
    spec = _infeasible(tmp_path, "probe_exciter.toml")
    code, out, err = run_cli(["solve", spec, "-f", "json"], cwd=tmp_path)
    assert code == 1 and json.loads(out)["status"] == "infeasible"
    amp = _infeasible(tmp_path, "colpitts_bjt.toml")
    for argv in (["netlist", amp, "-o", str(tmp_path / "x.cir")], ["simulate", amp]):
        code, out, err = run_cli(argv, cwd=tmp_path)
        assert code == 1, err
        assert "no design meets the spec" in error_line(err) and amp in err
        assert not (tmp_path / "x.cir").exists()


def test_consolidate_exits_1_on_an_infeasible_plan(tmp_path):
    plan = load_demo("plan_demo.toml")
    plan["base"] = str(DEMO / "plan_sensor_base.toml")
    plan["stock"] = str(DEMO / "stock_demo.csv")
    plan["min_yield"] = "100 %"  # no design of any channel reaches it
    plan["candidates"] = 10
    p = tmp_path / "plan.toml"
    p.write_text(to_toml(plan), encoding="utf-8")
    code, out, err = run_cli(["consolidate", str(p), "--format", "json"], cwd=tmp_path)
    assert code == 1, err
    assert json.loads(out)["status"] == "infeasible"


def test_consolidate_exits_3_when_the_solver_finds_no_plan_in_time(tmp_path, monkeypatch):
    from picker.api import plan
    from picker.report import plan as plan_report

    real = plan.run_plan

    def out_of_time(*args, **kwargs):
        run = real(*args, **kwargs)
        return dataclasses.replace(
            run, result=dataclasses.replace(run.result, status="unknown", plan=None)
        )

    monkeypatch.setattr(plan, "run_plan", out_of_time)
    monkeypatch.setattr(plan_report, "print_table", lambda run, con: None)
    code, out, err = run_cli(["consolidate", PLAN, "--format", "json"], cwd=tmp_path)
    assert code == 3, err
    text = error_line(err)
    assert "no plan within the time limit" in text and "--time-limit" in text
    assert json.loads(out)["status"] == "unknown"


def test_simulate_exits_3_when_ngspice_is_missing(tmp_path, monkeypatch):
    monkeypatch.setenv("PATH", str(tmp_path))  # no ngspice on this PATH
    code, out, err = run_cli(
        ["simulate", BJT, "--set", "C1=150p", "--set", "C2=330p", "--set", "L=4.7u"], cwd=tmp_path
    )
    assert code == 3, err
    assert "ngspice" in error_line(err)


def test_bad_input_names_the_file_and_the_key(tmp_path):
    d = cheap(load_demo("probe_exciter.toml"))
    d["parts"]["C1"]["min"] = "100 pH"
    p = tmp_path / "spec.toml"
    p.write_text(to_toml(d), encoding="utf-8")
    for cmd in (
        ["solve", str(p)],
        ["evaluate", str(p), "--set", "C1=1n"],
        ["netlist", str(p), "-o", "x.cir"],
    ):
        code, out, err = run_cli(cmd, cwd=tmp_path)
        text = assert_clean_exit(code, out, err, files=(p,), allowed=(2,))
        assert text.startswith(f"{p}: parts.C1.min: expected a capacitance")


def _read_faults(tmp_path):
    """A missing file, a directory, and a file whose byte 3 is not UTF-8 (0xff never is)."""
    folder = tmp_path / "folder"
    folder.mkdir()
    bad = tmp_path / "bad.txt"
    bad.write_bytes(b"abc\xffdef\n")
    return {"missing": tmp_path / "missing.txt", "directory": folder, "bytes": bad}


#: Each loader's messages for the three faults of ``_read_faults``, as they were before the
#: loaders shared picker.files.read_text (no source: the wording is ours; the check is that
#: sharing the reader changed none of it).
READ_FAULTS = {
    "spec": (
        "no such file",
        "expected a spec file, got a directory",
        "expected UTF-8 text; byte 3 is not",
    ),
    "measurements": (
        "no such file",
        "expected a CSV file, got a directory",
        "expected UTF-8 text; byte 3 is not",
    ),
    "plan": (
        "expected a plan file; no such file",
        "expected a plan file, got a directory",
        "expected UTF-8 text; byte 3 is not",
    ),
    "stock": (
        "expected a stock-list CSV file; no such file",
        "expected a stock-list CSV file; got a directory",
        "expected UTF-8 text; invalid start byte at byte 3",
    ),
    "lot": (
        "cannot read the lot file (No such file or directory)",
        "cannot read the lot file (Is a directory)",
        "expected a UTF-8 text CSV file",
    ),
}


@pytest.mark.parametrize("loader", list(READ_FAULTS))
def test_every_loader_words_its_read_faults_as_before(tmp_path, loader):
    from picker import load_spec
    from picker.calibration.measurements import load_measurements
    from picker.spec.lots import read_lot_csv
    from picker.spec.plan import load_plan
    from picker.spec.stock import load_stock
    from picker.tank import get_topology

    load = {
        "spec": load_spec,
        "measurements": lambda p: load_measurements(p, get_topology("colpitts")),
        "plan": load_plan,
        "stock": load_stock,
        "lot": lambda p: read_lot_csv(p, "F"),
    }[loader]
    faults = _read_faults(tmp_path)
    for (fault, path), message in zip(faults.items(), READ_FAULTS[loader], strict=True):
        with pytest.raises(SpecError) as info:
            load(path)
        got = (info.value.file, info.value.key, info.value.message)
        assert got == (str(path), None, message), fault
        assert "\n" not in str(info.value)
