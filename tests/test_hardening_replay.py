"""Issue 13's failures, checked through the command line and the public API only.

These tests name nothing that the code before the second hardening round lacked,
so ``scripts/replay_on_commit.py`` can run them on that code and show each one
fails there (and passes now). They cover the failures whose first tests use
helpers added in this round (``picker.report.text``, the calibration table's
constants) and the cases the first tests did not spell out (SIGHUP during a
plot, a title's terminal escapes on the command line, the time a long title
takes). The exit statuses and the one-line error rule are the project's own
(README "Exit statuses"); the rest is common practice, no source.
"""

from __future__ import annotations

import os
import signal
import stat
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import DEMO
from test_fuzz_harness import cheap, error_line, load_demo, run_cli, to_toml


def _titled_spec(tmp: Path, title: str) -> Path:
    d = cheap(load_demo("tone_source.toml"))
    d["title"] = title
    spec = tmp / "spec.toml"
    spec.write_text(to_toml(d), encoding="utf-8")
    return spec


@pytest.mark.parametrize("title", ["Exciter [/bold] B", "[/x]", "[bold red]loud[/]"])
def test_markup_in_a_title_is_printed_as_written(tmp_path, title):
    # Found: `title = "Exciter [/bold] B"` was a rich MarkupError traceback (exit 1).
    spec = _titled_spec(tmp_path, title)
    code, out, err = run_cli(["solve", str(spec)])
    assert code in (0, 1), err
    assert title in out


def test_markup_in_a_plan_channel_name_is_printed_as_written(tmp_path):
    # Found: a plan channel named `[/x]` was a traceback.
    text = (DEMO / "plan_demo.toml").read_text(encoding="utf-8")
    assert "[channels.north]" in text
    text = text.replace("[channels.north]", '[channels."[/x]"]')
    for name in ("plan_sensor_base.toml", "stock_demo.csv"):
        text = text.replace(f'"{name}"', f'"{DEMO / name}"')
    plan = tmp_path / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    code, out, err = run_cli(["consolidate", str(plan)])
    assert code == 0, err
    assert "[/x]" in out


def _units_csv(path: Path, n: int, first_id: str | None = None) -> Path:
    """``n`` invented boards of one Colpitts design whose frequency is the ideal tank's
    f = 1/(2π·sqrt(L·C1C2/(C1+C2))) (Clapp 1948; any textbook's Colpitts tank) times a
    small invented scatter, so the fit has something to explain."""
    rng = np.random.default_rng(5)
    c1 = 1e-9 * (1 + 0.02 * rng.standard_normal(n))
    c2 = 4.7e-9 * (1 + 0.02 * rng.standard_normal(n))
    ind = 33e-6 * (1 + 0.02 * rng.standard_normal(n))
    f = 1 / (2 * np.pi * np.sqrt(ind * c1 * c2 / (c1 + c2))) * (1 - 0.004 + 1e-4 * rng.random(n))
    rows = ["unit,C1,C2,L,frequency"]
    for i in range(n):
        uid = first_id if (i == 0 and first_id is not None) else f"U{i}"
        rows.append(f"{uid},{c1[i]:.6g},{c2[i]:.6g},{ind[i]:.6g},{f[i]:.8g}")
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_markup_in_a_measurement_unit_id_is_printed_as_written(tmp_path):
    # Found: a measurement unit id `[/x]` was a traceback.
    csv = _units_csv(tmp_path / "u.csv", 12, first_id="[/x]")
    code, out, err = run_cli(["calibrate", str(csv), "--topology", "colpitts"])
    assert code == 0, err
    assert "[/x]" in out


def test_terminal_escapes_in_a_title_are_not_printed_raw(tmp_path):
    # Found: escape sequences in a title reached the terminal raw.
    spec = _titled_spec(tmp_path, "Ex\x1b[31mred\x07bell\u202eevil")
    code, out, err = run_cli(["solve", str(spec)])
    assert code in (0, 1), err
    for ch in ("\x1b", "\x07", "\u202e"):
        assert ch not in out


def test_a_100k_character_title_takes_seconds_not_minutes(tmp_path):
    # Found: the table's time grew with the square of the title's length (100,000
    # characters: 60-90 s). Bounded at 30 s so a slow old code fails instead of waiting.
    spec = _titled_spec(tmp_path, "x" * 100_000)
    start = time.monotonic()
    try:
        r = subprocess.run(
            [sys.executable, "-m", "picker", "solve", str(spec)],
            capture_output=True,
            text=True,
            timeout=30,
            stdin=subprocess.DEVNULL,
        )
    except subprocess.TimeoutExpired:
        pytest.fail("solve with a 100,000-character title took over 30 s")
    assert r.returncode in (0, 1), r.stderr
    assert time.monotonic() - start < 30


def test_a_large_calibration_batch_prints_a_bounded_table(tmp_path):
    # Found: calibrating 988k units took over 2.3 GB and 3 minutes, one table row per unit.
    # The table's length may not grow with the batch: 4,000 units about as many lines as 400.
    small = _units_csv(tmp_path / "s.csv", 400)
    big = _units_csv(tmp_path / "b.csv", 4000)
    c1, out_small, err1 = run_cli(["calibrate", str(small), "--topology", "colpitts"])
    c2, out_big, err2 = run_cli(["calibrate", str(big), "--topology", "colpitts"])
    assert c1 == 0 and c2 == 0, err1 + err2
    assert out_big.count("\n") < 100, out_big.count("\n")


def test_sighup_while_a_plot_is_written_removes_it_and_exits_130(tmp_path, monkeypatch, request):
    # Found: SIGTERM or SIGHUP during --plot left the temporary PNG behind (12 of 12).
    from picker.report import plots

    real = plots.plot_histogram

    def draw_then_signal(*a, **k):
        out = real(*a, **k)
        os.kill(os.getpid(), signal.SIGHUP)  # arrives while the temporary PNG exists
        return out

    monkeypatch.setattr(plots, "plot_histogram", draw_then_signal)
    if signal.getsignal(signal.SIGHUP) is signal.SIG_IGN:
        # pytest itself under nohup: a terminal's run has SIGHUP at its default, and
        # picker rightly leaves an ignored SIGHUP ignored
        signal.signal(signal.SIGHUP, signal.SIG_DFL)
        request.addfinalizer(lambda: signal.signal(signal.SIGHUP, signal.SIG_IGN))
    spec = tmp_path / "tone.toml"
    spec.write_text(to_toml(cheap(load_demo("tone_source.toml"))), encoding="utf-8")
    folder = tmp_path / "plots"
    code, out, err = run_cli(["solve", str(spec), "--plot", str(folder)], cwd=tmp_path)
    assert code == 130
    assert error_line(err) == "interrupted"
    assert [n for n in os.listdir(folder) if "tmp" in n] == []


def test_solve_output_takes_the_umask_and_force_keeps_the_mode(tmp_path):
    # Found: every file was written 0600 whatever the umask; --force turned 0664 into 0600.
    spec = tmp_path / "tone.toml"
    spec.write_text(to_toml(cheap(load_demo("tone_source.toml"))), encoding="utf-8")
    out = tmp_path / "o.json"

    def solve(*extra: str) -> None:
        r = subprocess.run(
            [sys.executable, "-m", "picker", "solve", str(spec), "-o", str(out), *extra],
            capture_output=True,
            text=True,
            timeout=300,
            stdin=subprocess.DEVNULL,
            preexec_fn=lambda: os.umask(0o022),
        )
        assert r.returncode in (0, 1), r.stderr

    solve()
    assert stat.S_IMODE(os.stat(out).st_mode) == 0o644  # 0666 & ~0022 (POSIX open(2))
    os.chmod(out, 0o664)
    solve("--force")
    assert stat.S_IMODE(os.stat(out).st_mode) == 0o664


def test_one_attofarad_parses():
    # README: "capacitors 1 aF to 10 F"; "1 aF" was refused as an unknown prefix.
    from picker.units import parse_quantity

    assert parse_quantity("1 aF", "F") == pytest.approx(1e-18)  # SI Brochure 9th ed., table 7


def test_a_csv_cell_over_the_limit_in_a_measurement_file_is_one_line(tmp_path):
    # Found again on the round's code: a measurement file with a cell over 131,072
    # characters (the csv module's field limit) was a _csv.Error traceback in calibrate.
    csv = _units_csv(tmp_path / "u.csv", 12)
    lines = csv.read_text(encoding="utf-8").splitlines()
    lines[2] = '"' + "x" * 140_000 + '"' + lines[2][lines[2].index(",") :]
    csv.write_text("\n".join(lines) + "\n", encoding="utf-8")
    code, out, err = run_cli(["calibrate", str(csv), "--topology", "colpitts"])
    assert code == 2, err
    assert "characters" in error_line(err)


def test_a_fifo_a_plan_names_is_called_a_fifo(tmp_path):
    # Found again on the round's code: a plan whose base spec is a FIFO was refused as
    # "no such file" though the file is there (a hang on the code before the round).
    text = (DEMO / "plan_demo.toml").read_text(encoding="utf-8")
    assert '"plan_sensor_base.toml"' in text
    text = text.replace('"plan_sensor_base.toml"', '"base.toml"')
    text = text.replace('"stock_demo.csv"', f'"{DEMO / "stock_demo.csv"}"')
    plan = tmp_path / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    os.mkfifo(tmp_path / "base.toml")
    try:
        r = subprocess.run(
            [sys.executable, "-m", "picker", "consolidate", str(plan)],
            capture_output=True,
            text=True,
            timeout=60,
            stdin=subprocess.DEVNULL,
        )
    except subprocess.TimeoutExpired:
        pytest.fail("consolidate waited on a FIFO the plan names")
    assert r.returncode == 2, r.stderr
    line = error_line(r.stderr)
    assert "FIFO" in line and "no such" not in line, line
