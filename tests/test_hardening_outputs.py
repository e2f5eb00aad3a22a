"""Safe outputs: every file a command writes goes through a temporary file and a rename,
never replaces an input, replaces an existing file only with --force, and leaves no
temporary file behind when the write fails. Spreadsheet exports are guarded against
formula injection (OWASP, "CSV Injection": cells starting with = + - @ tab or CR).

Writers covered (the audit of every ``open(..., "w")``, ``write_text``, ``savefig``
and ``write_bytes`` in picker/ and scripts/): solve/evaluate ``-o`` and ``--plot``,
netlist ``-o``, calibrate ``--fragment``, ``--plot`` and ``-o`` (with ``--into``), consolidate ``--bom`` (CSV and
JSON), solve ``--bom`` (evaluate's is the same code), ``--report`` (HTML) on solve, calibrate and
consolidate. The rest write into temporary folders only (ngspice decks, benchmark inputs)
or regenerate a demo file on purpose (scripts/make_bench_units.py, through
``atomic_write(force=True)``).
"""

from __future__ import annotations

import csv
import io
import os
import re

import pytest
from conftest import DEMO
from test_fuzz_harness import cheap, error_line, load_demo, run_cli, to_toml

SENTINEL = "an existing file that must survive\n"


def _files(tmp):
    spec = tmp / "spec.toml"
    spec.write_text(to_toml(cheap(load_demo("probe_exciter.toml"))), encoding="utf-8")
    amp = tmp / "amp.toml"
    amp.write_text(to_toml(cheap(load_demo("colpitts_bjt.toml"))), encoding="utf-8")
    units = tmp / "units.csv"
    units.write_text((DEMO / "bench_units.csv").read_text("utf-8"), encoding="utf-8")
    base = cheap(load_demo("plan_sensor_base.toml"))
    base["yield"]["candidates"] = 10
    (tmp / "plan_sensor_base.toml").write_text(to_toml(base), encoding="utf-8")
    (tmp / "stock_demo.csv").write_text((DEMO / "stock_demo.csv").read_text("utf-8"))
    plan = load_demo("plan_demo.toml")
    plan["candidates"] = 10
    plan["build_quantity"] = 100  # within the demo stock on hand, so a plan exists
    (tmp / "plan.toml").write_text(to_toml(plan), encoding="utf-8")
    return spec, amp, units, tmp / "plan.toml"


def _buyer(tmp):
    """The stock demo spec beside the stock list _files copies (solve --bom reads both)."""
    spec = tmp / "buyer.toml"
    if not spec.exists():
        spec.write_text(to_toml(cheap(load_demo("buyer_exciter.toml"))), encoding="utf-8")
    return spec


#: writer name -> (command line with OUT for the output path, the input files it reads)
def _writers(tmp):
    spec, amp, units, plan = _files(tmp)
    mc = ["--samples", "200", "--candidates", "5", "--top", "2"]
    sets = ["--set", "C1=150p", "--set", "C2=330p", "--set", "L=4.7u"]
    return {
        "solve -o": (["solve", str(spec), *mc, "-f", "json", "-o", "OUT"], [spec]),
        "solve -o csv": (["solve", str(spec), *mc, "-f", "csv", "-o", "OUT"], [spec]),
        "evaluate -o": (
            [
                "evaluate",
                str(spec),
                "--set",
                "C1=1.5n",
                "--set",
                "C2=6.8n",
                "--set",
                "L=220u",
                "--samples",
                "200",
                "-o",
                "OUT",
            ],
            [spec],
        ),
        "netlist -o": (["netlist", str(amp), *sets, "-o", "OUT"], [amp]),
        "calibrate --fragment": (
            ["calibrate", str(units), "--topology", "colpitts", "--fragment", "OUT"],
            [units],
        ),
        "calibrate --plot": (
            ["calibrate", str(units), "--topology", "colpitts", "--plot", "OUT"],
            [units],
        ),
        "solve --bom": (
            ["solve", str(_buyer(tmp)), *mc, "-f", "json", "--bom", "OUT.csv"],
            [_buyer(tmp), tmp / "stock_demo.csv"],
        ),
        "calibrate --into -o": (
            ["calibrate", str(units), "--into", str(spec), "-o", "OUT"],
            [units, spec],
        ),
        "consolidate --bom csv": (
            ["consolidate", str(plan), "--bom", "OUT.csv", "--time-limit", "2"],
            [plan, tmp / "stock_demo.csv", tmp / "plan_sensor_base.toml"],
        ),
        "consolidate --bom json": (
            ["consolidate", str(plan), "--bom", "OUT.json", "--time-limit", "2"],
            [plan, tmp / "stock_demo.csv", tmp / "plan_sensor_base.toml"],
        ),
        "solve --report": (["solve", str(spec), *mc, "--report", "OUT.html"], [spec]),
        "calibrate --report": (
            ["calibrate", str(units), "--topology", "colpitts", "--report", "OUT.html"],
            [units],
        ),
        "consolidate --report": (
            ["consolidate", str(plan), "--report", "OUT.html", "--time-limit", "2"],
            [plan, tmp / "stock_demo.csv", tmp / "plan_sensor_base.toml"],
        ),
    }


WRITERS = [
    "solve -o",
    "solve -o csv",
    "evaluate -o",
    "netlist -o",
    "calibrate --fragment",
    "calibrate --plot",
    "calibrate --into -o",
    "consolidate --bom csv",
    "consolidate --bom json",
    "solve --bom",
    "solve --report",
    "calibrate --report",
    "consolidate --report",
]


def _argv(argv, out):
    return [str(out) + a[3:] if a.startswith("OUT") else a for a in argv]


def _target(argv, tmp):
    (a,) = [x for x in argv if x.startswith("OUT")]
    return tmp / ("out" + a[3:])


def _leftovers(folder) -> list[str]:
    return [n for n in os.listdir(folder) if n.endswith(".tmp") or ".tmp." in n]


@pytest.mark.parametrize("writer", WRITERS)
def test_an_existing_output_is_kept_without_force_and_replaced_with_it(writer, tmp_path):
    argv, _ = _writers(tmp_path)[writer]
    target = _target(argv, tmp_path)
    target.write_text(SENTINEL)
    code, out, err = run_cli(_argv(argv, tmp_path / "out"), cwd=tmp_path)
    assert code == 2, err
    assert "pass --force to replace it" in error_line(err)
    assert target.read_text() == SENTINEL
    code, out, err = run_cli([*_argv(argv, tmp_path / "out"), "--force"], cwd=tmp_path)
    assert code == 0, err
    assert target.read_bytes() != SENTINEL.encode() and target.stat().st_size > 50
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("writer", WRITERS)
def test_an_input_given_as_the_output_is_refused_even_with_force(writer, tmp_path):
    argv, inputs = _writers(tmp_path)[writer]
    (a,) = [x for x in argv if x.startswith("OUT")]
    tried = 0
    for inp in inputs:
        if a != "OUT" and not str(inp).endswith(a[3:]):
            continue  # the BOM writer takes .csv or .json names only
        tried += 1
        before = inp.read_bytes()
        cmd = [str(inp) if x == a else x for x in argv] + ["--force"]
        code, out, err = run_cli(cmd, cwd=tmp_path)
        assert code == 2, (cmd, err)
        assert "refusing to write over an input file" in error_line(err)
        assert inp.read_bytes() == before
    # no input of the plan is .json, none of these is .html (tests/test_html_report.py
    # gives a spec named .html as the report)
    assert tried or writer == "consolidate --bom json" or writer.endswith("--report")


@pytest.mark.parametrize("writer", WRITERS)
def test_a_failed_write_leaves_no_temporary_file_and_no_output(writer, tmp_path, monkeypatch):
    argv, _ = _writers(tmp_path)[writer]
    target = _target(argv, tmp_path)

    def no_rename(src, dst):  # the disk fills up at the last moment
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", no_rename)
    monkeypatch.setattr(os, "link", no_rename)  # without --force the temporary file is linked
    code, out, err = run_cli(_argv(argv, tmp_path / "out"), cwd=tmp_path)
    assert code == 2, err
    assert "No space left on device" in error_line(err)
    assert not target.exists()
    assert _leftovers(tmp_path) == []


def test_the_plot_folder_keeps_existing_plots_refuses_a_file_and_cleans_up(tmp_path, monkeypatch):
    spec, *_ = _files(tmp_path)
    base = ["solve", str(spec), "--samples", "200", "--candidates", "5", "--top", "1"]
    folder = tmp_path / "plots"
    code, out, err = run_cli([*base, "--plot", str(folder)], cwd=tmp_path)
    assert code == 0, err
    names = sorted(os.listdir(folder))
    assert names == ["drivers.png", "histogram.png", "yield_vs_tolerance.png"]
    stamp = {n: (folder / n).read_bytes() for n in names}
    code, out, err = run_cli([*base, "--plot", str(folder)], cwd=tmp_path)
    assert code == 2 and "pass --force" in error_line(err)
    assert {n: (folder / n).read_bytes() for n in names} == stamp
    code, out, err = run_cli([*base, "--plot", str(spec)], cwd=tmp_path)  # the input, a file
    assert code == 2 and "expected a folder for the plots" in error_line(err)
    monkeypatch.setattr(os, "replace", lambda a, b: (_ for _ in ()).throw(OSError(13, "denied")))
    code, out, err = run_cli([*base, "--plot", str(tmp_path / "new"), "--force"], cwd=tmp_path)
    assert code == 2 and "denied" in error_line(err)
    assert _leftovers(tmp_path / "new") == []


def test_a_bom_from_a_hostile_stock_list_cannot_run_a_formula(tmp_path):
    _files(tmp_path)
    rows = list(csv.reader(io.StringIO((DEMO / "stock_demo.csv").read_text("utf-8"))))
    starts = ["=", "+", "-", "@", "\t", "\r"]
    for i, row in enumerate(rows[1:]):
        row[0] = f'{starts[i % len(starts)]}HYPERLINK("x")-{i}'  # every part id hostile
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(rows)
    (tmp_path / "stock_demo.csv").write_text(buf.getvalue(), encoding="utf-8")
    bom = tmp_path / "bom.csv"
    code, out, err = run_cli(
        ["consolidate", str(tmp_path / "plan.toml"), "--bom", str(bom), "--time-limit", "2"],
        cwd=tmp_path,
    )
    assert code == 0, err
    table = list(csv.DictReader(io.StringIO(bom.read_text(encoding="utf-8"))))
    ids = [r["part_id"] for r in table]
    assert any(i.startswith("'") for i in ids), ids  # stock parts were picked
    for cell in (v for r in table for v in r.values() if v):
        assert not re.match(r"[=+@\t\r]", cell), cell
        if cell.startswith("-"):
            float(cell)  # a plain negative number is not a formula
