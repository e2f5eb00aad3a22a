"""Second hardening round: no input lost, no input crashes or hangs a command.

Each test reproduces one failure found by attacking the commands as a new user
would (odd files, hostile contents, output places, signals, large inputs) and
fails on the code before this round. Exit statuses and the one-line error rule
are the project's own (README "Exit statuses"); the file-type facts are POSIX's
(``stat``: S_ISREG, S_ISFIFO, S_ISCHR; common practice, no source).
"""

from __future__ import annotations

import os
import resource
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

from picker import files
from picker.errors import SpecError

ROOT = Path(__file__).resolve().parent.parent
SENTINEL = "an input that must survive\n"


def _stock_spec(tmp: Path) -> tuple[Path, Path]:
    """The buyer demo (it names stock_demo.csv) in ``tmp``, made cheap."""
    spec = tmp / "buyer.toml"
    d = cheap(load_demo("buyer_exciter.toml"))
    spec.write_text(to_toml(d), encoding="utf-8")
    stock = tmp / "stock_demo.csv"
    stock.write_text((DEMO / "stock_demo.csv").read_text("utf-8"), encoding="utf-8")
    return spec, stock


def _lot_spec(tmp: Path) -> tuple[Path, Path]:
    """A one-design spec whose C1 is a measured lot file."""
    lot = tmp / "c1_lot.csv"
    rng = np.random.default_rng(9)
    lot.write_text(
        "serial,value\n"
        + "".join(f"{i},{v:.4f} nF\n" for i, v in enumerate(1 + 0.01 * rng.standard_normal(50))),
        encoding="utf-8",
    )
    spec = tmp / "lot.toml"
    spec.write_text(
        'topology = "colpitts"\n[frequency]\ntarget = "965 kHz"\nwindow = "±2 %"\n'
        "[feedback]\nmin = 0.05\nmax = 1.0\n"
        '[parts.C1]\nvalues = ["1 nF"]\ntolerance = "2 %"\nlot = "c1_lot.csv"\n'
        '[parts.C2]\nvalues = ["4.7 nF"]\ntolerance = "2 %"\n'
        '[parts.L]\nvalues = ["33 uH"]\ntolerance = "5 %"\n'
        "[yield]\nsamples = 200\nseed = 3\n",
        encoding="utf-8",
    )
    return spec, lot


# ------------------------------------------------------------------ 1. every input is an input


# No format, or the one the .csv name implies (a contradicting --format is refused before
# this check: tests/test_csv_out.py).
@pytest.mark.parametrize("fmt", [None, "csv"])
@pytest.mark.parametrize("how", ["path", "dotdot", "symlink", "hardlink"])
def test_solve_never_writes_over_a_stock_list_the_spec_names(tmp_path, how, fmt):
    # Found: `solve buyer_exciter.toml --format csv -o stock_demo.csv --force` exited 0 and
    # replaced the stock list with the results.
    spec, stock = _stock_spec(tmp_path)
    (tmp_path / "sub").mkdir()
    target = {
        "path": stock,
        "dotdot": tmp_path / "sub" / ".." / "stock_demo.csv",
        "symlink": tmp_path / "link.csv",
        "hardlink": tmp_path / "hard.csv",
    }[how]
    if how == "symlink":
        target.symlink_to(stock)
    elif how == "hardlink":
        os.link(stock, target)
    before = stock.read_bytes()
    code, out, err = run_cli(
        ["solve", str(spec), *(["-f", fmt] if fmt else []), "-o", str(target), "--force"],
        cwd=tmp_path,
    )
    assert code == 2, err
    assert "refusing to write over an input file" in error_line(err)
    assert stock.read_bytes() == before


def test_evaluate_never_writes_over_its_lot_file(tmp_path):
    spec, lot = _lot_spec(tmp_path)
    before = lot.read_bytes()
    sets = ["--set", "C1=1n", "--set", "C2=4.7n", "--set", "L=33u"]
    code, out, err = run_cli(
        ["evaluate", str(spec), *sets, "-f", "csv", "-o", str(lot), "--force"], cwd=tmp_path
    )
    assert code == 2, err
    assert "refusing to write over an input file" in error_line(err)
    assert lot.read_bytes() == before


def test_plan_inputs_include_the_files_its_channel_specs_name(tmp_path):
    from picker.spec.plan import load_plan

    plan = load_plan(DEMO / "plan_demo.toml")
    names = {Path(p).name for p in plan.inputs()}
    assert {"plan_demo.toml", "stock_demo.csv"} <= names


@pytest.mark.parametrize("kind", ["chardev", "fifo", "directory"])
def test_an_output_must_be_a_regular_file_even_with_force(tmp_path, kind):
    # Found: `-o <character device> --force` run as root replaced the device with a file.
    spec, _ = _stock_spec(tmp_path)
    if kind == "chardev":
        # A private node of the null device (Linux major 1, minor 3: devices.txt), never
        # /dev/null itself: the code before this round replaced it with a regular file.
        target = tmp_path / "null"
        try:
            os.mknod(target, stat.S_IFCHR | 0o666, os.makedev(1, 3))
        except PermissionError:
            pytest.skip("making a device node needs root (CAP_MKNOD)")
    elif kind == "fifo":
        target = tmp_path / "pipe"
        os.mkfifo(target)
    else:
        target = tmp_path / "folder"
        target.mkdir()
    mode = os.stat(target).st_mode
    code, out, err = run_cli(["solve", str(spec), "-o", str(target), "--force"], cwd=tmp_path)
    assert code == 2, err
    line = error_line(err)
    assert "regular file" in line or "directory" in line
    assert os.stat(target).st_mode == mode


def test_an_output_that_is_a_symlink_loop_is_one_line(tmp_path):
    spec, _ = _stock_spec(tmp_path)
    loop = tmp_path / "loop"
    loop.symlink_to(tmp_path / "loop")
    code, out, err = run_cli(["solve", str(spec), "-o", str(loop), "--force"], cwd=tmp_path)
    assert code == 2, err
    assert "loop" in error_line(err)


# ------------------------------------------------------------------ 4. writers


def test_outputs_are_checked_before_the_run(tmp_path, monkeypatch):
    # Found: `solve -o readonly/o.json` and `consolidate --bom missing/b.csv` ran the whole
    # job before refusing. The job is replaced by one that fails the test if it runs.
    from picker import api
    from picker.api import plan as plan_api

    def never(*a, **k):
        raise AssertionError("the run started before the output was checked")

    monkeypatch.setattr(api, "solve", never)
    monkeypatch.setattr(plan_api, "run_plan", never)
    spec, _ = _stock_spec(tmp_path)
    ro = tmp_path / "readonly"
    ro.mkdir()
    monkeypatch.setattr(os, "access", lambda p, m, **k: Path(p) != ro)  # root ignores modes
    code, out, err = run_cli(["solve", str(spec), "-o", str(ro / "o.json")], cwd=tmp_path)
    assert code == 2 and "permission" in error_line(err), err
    code, out, err = run_cli(
        ["consolidate", str(DEMO / "plan_demo.toml"), "--bom", str(tmp_path / "missing" / "b.csv")]
    )
    assert code == 2 and "folder does not exist" in error_line(err), err


def test_new_files_take_the_umask_and_force_keeps_the_mode(tmp_path):
    # Found: every file was written 0600, and --force turned a 0664 file into 0600.
    old = os.umask(0o022)
    try:
        files.atomic_write(tmp_path / "a.txt", "x")
        assert stat.S_IMODE(os.stat(tmp_path / "a.txt").st_mode) == 0o644
        os.umask(0o002)
        files.atomic_write(tmp_path / "b.txt", "x")
        assert stat.S_IMODE(os.stat(tmp_path / "b.txt").st_mode) == 0o664
        os.chmod(tmp_path / "a.txt", 0o640)
        files.atomic_write(tmp_path / "a.txt", "y", force=True)
        assert stat.S_IMODE(os.stat(tmp_path / "a.txt").st_mode) == 0o640
        assert (tmp_path / "a.txt").read_text() == "y"
    finally:
        os.umask(old)


def test_no_overwrite_without_force_is_atomic(tmp_path, monkeypatch):
    # Found: two writers without --force both exited 0 (check, then rename). Here the other
    # writer's file appears after the check and before the write: it must survive.
    target = tmp_path / "o.json"
    real = files.check_output

    def check_then_race(*a, **k):
        out = real(*a, **k)
        target.write_text(SENTINEL)  # the other writer wins the race
        return out

    monkeypatch.setattr(files, "check_output", check_then_race)
    with pytest.raises(SpecError, match="exists"):
        files.atomic_write(target, "mine")
    assert target.read_text() == SENTINEL
    assert [p.name for p in tmp_path.iterdir()] == ["o.json"]  # no temporary file left


def test_sigterm_while_a_plot_is_written_removes_it_and_exits_130(tmp_path, monkeypatch):
    # Found: SIGTERM or SIGHUP during --plot left the temporary PNG behind (12 of 12).
    from picker.report import plots

    real = plots.plot_histogram

    def draw_then_signal(*a, **k):
        out = real(*a, **k)
        os.kill(os.getpid(), signal.SIGTERM)  # arrives while the temporary PNG exists
        return out

    monkeypatch.setattr(plots, "plot_histogram", draw_then_signal)
    spec, _ = _stock_spec(tmp_path)
    folder = tmp_path / "plots"
    code, out, err = run_cli(["solve", str(spec), "--plot", str(folder)], cwd=tmp_path)
    assert code == 130
    assert error_line(err) == "interrupted"
    assert [n for n in os.listdir(folder) if "tmp" in n] == []
    assert signal.getsignal(signal.SIGTERM) is signal.SIG_DFL  # handler given back


def _wait_for_handlers(pid: int, timeout: float = 60) -> None:
    """Wait until ``pid`` catches SIGTERM and SIGHUP (its run has begun): the caught-signal
    mask of /proc/PID/status (Linux proc(5))."""
    want = (1 << (signal.SIGTERM - 1)) | (1 << (signal.SIGHUP - 1))
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        status = Path(f"/proc/{pid}/status").read_text()
        caught = int(next(x for x in status.splitlines() if x.startswith("SigCgt:")).split()[1], 16)
        if caught & want == want:
            return
        time.sleep(0.05)
    raise AssertionError("the command never installed its signal handlers")


def _default_stop_signals() -> None:
    for s in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP):
        signal.signal(s, signal.SIG_DFL)


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM, signal.SIGHUP])
def test_a_signal_mid_run_prints_one_line_and_exits_130(tmp_path, sig):
    # Found: Ctrl-C exited 130 without a word. A real process, stopped mid-run.
    spec = tmp_path / "s.toml"
    d = load_demo("production_exciter.toml")
    d["yield"]["samples"] = 2_000_000
    d["yield"]["max_samples"] = 2_000_000
    spec.write_text(to_toml(d), encoding="utf-8")
    proc = subprocess.Popen(
        [sys.executable, "-m", "picker", "solve", str(spec), "-o", str(tmp_path / "o.json")],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        cwd=tmp_path,
        restore_signals=True,
        start_new_session=True,
        # as a user's terminal would start it: a run under nohup or in a background job
        # inherits SIGHUP or SIGINT ignored, and picker rightly leaves an ignored signal so
        preexec_fn=_default_stop_signals,
    )
    try:
        _wait_for_handlers(proc.pid)
        time.sleep(1)
        proc.send_signal(sig)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:  # a failed wait leaves no run behind
            proc.kill()
            proc.communicate()
    assert proc.returncode == 130, err
    assert err.strip() == "picker: error: interrupted"
    assert sorted(os.listdir(tmp_path)) == ["s.toml"]


# ------------------------------------------------------------------ 2. one bounded reader


def _subprocess(*argv: str, timeout: float = 60) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "picker", *argv],
        capture_output=True,
        text=True,
        timeout=timeout,
        stdin=subprocess.DEVNULL,
    )


def test_a_fifo_with_no_writer_is_refused_at_once(tmp_path):
    # Found: a FIFO with no writer blocked every command forever.
    fifo = tmp_path / "spec.toml"
    os.mkfifo(fifo)
    start = time.monotonic()
    r = _subprocess("solve", str(fifo), timeout=60)
    assert r.returncode == 2
    assert "FIFO" in error_line(r.stderr)
    assert time.monotonic() - start < 60


def test_a_device_is_refused_before_reading(tmp_path):
    # Found: `picker solve /dev/zero` read until memory ran out (2.5 GB, then MemoryError).
    r = _subprocess("solve", "/dev/zero", timeout=60)
    assert r.returncode == 2
    assert "device" in error_line(r.stderr)


def test_a_fifo_stock_list_is_refused_at_once(tmp_path):
    spec, stock = _stock_spec(tmp_path)
    stock.unlink()
    os.mkfifo(stock)
    r = _subprocess("solve", str(spec), timeout=60)
    assert r.returncode == 2
    assert "FIFO" in error_line(r.stderr)


def test_a_file_over_the_size_limit_is_refused(tmp_path, monkeypatch):
    monkeypatch.setattr(files, "MAX_INPUT_BYTES", 100)
    spec, _ = _stock_spec(tmp_path)
    code, out, err = run_cli(["solve", str(spec)])
    assert code == 2
    assert "at most 100 bytes" in error_line(err)


@pytest.mark.parametrize("which", ["spec", "stock"])
def test_a_symlink_loop_as_input_is_one_line(tmp_path, which):
    # Found: a symlink loop as input raised RuntimeError / OSError (a traceback).
    spec, stock = _stock_spec(tmp_path)
    victim = spec if which == "spec" else stock
    victim.unlink()
    victim.symlink_to(victim)
    code, out, err = run_cli(["solve", str(spec)], cwd=tmp_path)
    assert code == 2
    assert "loop of symbolic links" in error_line(err)


def test_an_unreadable_stock_list_is_one_line(tmp_path, monkeypatch):
    # Found: PermissionError (a traceback). Tests run as root, which reads any file, so the
    # refusal is simulated where the reader opens the file.
    spec, stock = _stock_spec(tmp_path)
    real = os.open

    def deny(path, *a, **k):
        if Path(path).name == stock.name:
            raise PermissionError(13, "Permission denied", str(path))
        return real(path, *a, **k)

    monkeypatch.setattr(os, "open", deny)
    code, out, err = run_cli(["solve", str(spec)], cwd=tmp_path)
    assert code == 2
    assert "permission denied" in error_line(err)


def test_a_spec_with_a_byte_order_mark_is_read(tmp_path):
    # Found: a UTF-8 byte-order mark made a spec "not valid TOML" (the CSV loaders took one).
    spec, _ = _stock_spec(tmp_path)
    spec.write_bytes(b"\xef\xbb\xbf" + spec.read_bytes())
    code, out, err = run_cli(["solve", str(spec), "-f", "json"], cwd=tmp_path)
    assert code in (0, 1), err


@pytest.mark.parametrize(
    "text",
    [
        "x = " + "[" * 900 + "]" * 900,
        "x = " + "{a = " * 2000 + "1" + "}" * 2000,
    ],
)
def test_deep_nesting_is_one_line(tmp_path, text):
    # Found: arrays nested 900 deep or inline tables 2,000 deep raised RecursionError.
    spec = tmp_path / "s.toml"
    spec.write_text(text, encoding="utf-8")
    code, out, err = run_cli(["solve", str(spec)])
    assert code == 2
    assert "nested more than" in error_line(err)


@pytest.mark.parametrize("digits", [401, 5000])
def test_a_huge_integer_is_one_line(tmp_path, digits):
    # Found: a 401-digit integer raised OverflowError in the quantity parser.
    d = load_demo("probe_exciter.toml")
    spec = tmp_path / "s.toml"
    text = to_toml(d).replace('target = "310 kHz"', "target = 1" + "0" * (digits - 1))
    assert "target = 1000" in text
    spec.write_text(text, encoding="utf-8")
    code, out, err = run_cli(["solve", str(spec)])
    assert code == 2
    line = error_line(err)
    assert "frequency.target" in line or "not valid TOML" in line
    assert "0" * 300 not in line


def test_a_401_digit_integer_in_the_quantity_parser_is_a_spec_error():
    from picker.units import parse_quantity

    with pytest.raises(SpecError, match="too large"):
        parse_quantity(10**400, "Hz")


def test_one_attofarad_is_accepted():
    # README: "capacitors 1 aF to 10 F"; "1 aF" was refused as an unknown prefix.
    from picker.parts import limits
    from picker.units import parse_quantity

    assert parse_quantity("1 aF", "F") == 1e-18  # atto = 1e-18 (SI Brochure, 9th ed., table 7)
    assert limits.value_problem(1e-18, "F", "1 aF") is None


@pytest.mark.parametrize("kind", ["stock", "lot"])
def test_a_csv_cell_over_the_limit_is_one_line(tmp_path, kind):
    # Found: a CSV cell over 131,072 characters raised _csv.Error.
    spec, path = _stock_spec(tmp_path) if kind == "stock" else _lot_spec(tmp_path)
    text = path.read_text("utf-8").splitlines()
    text[1] = '"' + "x" * 140_000 + '"' + text[1][text[1].index(",") :]
    path.write_text("\n".join(text) + "\n", encoding="utf-8")
    code, out, err = run_cli(["solve", str(spec)], cwd=tmp_path)
    assert code == 2
    assert "characters" in error_line(err) or "CSV" in error_line(err)


@pytest.mark.parametrize("kind", ["stock", "lot"])
def test_a_named_file_that_is_not_the_kind_is_not_echoed(tmp_path, kind):
    # Found: `stock = "../../../../etc/shadow"` echoed that file's first line.
    spec, path = _stock_spec(tmp_path) if kind == "stock" else _lot_spec(tmp_path)
    secret = "root:$6$SECRETHASHVALUE:20228:0:99999:7:::"
    path.write_text(secret + "\nbin:*:20228:0:99999:7:::\n", encoding="utf-8")
    code, out, err = run_cli(["solve", str(spec)], cwd=tmp_path)
    assert code == 2
    line = error_line(err)
    assert "SECRET" not in line and "99999" not in line


# ------------------------------------------------------------------ 5. numbers


def test_a_normal_distribution_that_would_draw_negative_values_is_refused(tmp_path):
    # Found: tolerance 99 % with the normal distribution drew negative part values and
    # reported spread drivers of 0 with R² = 1. sigma = tol/3 and the sampler's deepest
    # variate is 2^-53 (z = -8.2): from a tolerance of 3/8.2 = 36.5 % a value can be <= 0.
    d = load_demo("probe_exciter.toml")
    d["yield"]["distribution"] = "normal"
    d["parts"]["L"]["tolerance"] = "99 %"
    spec = tmp_path / "s.toml"
    spec.write_text(to_toml(d), encoding="utf-8")
    code, out, err = run_cli(["solve", str(spec)])
    assert code == 2
    line = error_line(err)
    assert "parts.L.tolerance" in line and "below zero" in line
    d["parts"]["L"]["tolerance"] = "30 %"  # z = -8.2 gives -82 %: still a positive value
    spec.write_text(to_toml(cheap(d)), encoding="utf-8")
    code, out, err = run_cli(["solve", str(spec), "-f", "json"])
    assert code in (0, 1), err


# ------------------------------------------------------------------ 3. memory


def test_two_thousand_stock_capacitors_with_pairs_stay_within_1_5_gb(tmp_path):
    # Found: with parallel = true every pair and every (C1, C2) pair was built before the
    # limits applied: 1,000 capacitors 3.1 GB just to be refused, 2,000 MemoryError.
    rows = ["id,kind,value,tolerance,dielectric,core,voltage,on_hand,price,price_breaks"]
    for k, x in enumerate(np.geomspace(100e-12, 100e-9, 2000)):
        rows.append(f"BC{k:05d},C,{x * 1e12:.4g} pF,5 %,C0G,,50 V,1000,0.01,")
    for k, x in enumerate(np.geomspace(22e-6, 470e-6, 40)):
        rows.append(f"BL{k:05d},L,{x * 1e6:.4g} uH,5 %,,ferrite,,1000,0.05,")
    (tmp_path / "stock_demo.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    spec = tmp_path / "big.toml"
    spec.write_text(to_toml(cheap(load_demo("buyer_exciter.toml"))), encoding="utf-8")
    code = (
        "import resource, subprocess, sys\n"
        "r = subprocess.run([sys.executable, '-m', 'picker', 'solve', sys.argv[1], '-f', 'json'],"
        " capture_output=True, text=True)\n"
        "peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss\n"
        "print(r.returncode, peak, r.stderr.strip().replace(chr(10), ' | '))\n"
    )
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    r = subprocess.run(
        [sys.executable, "-c", code, str(spec)],
        capture_output=True,
        text=True,
        timeout=600,
        preexec_fn=lambda: resource.setrlimit(resource.RLIMIT_AS, (4 << 30, hard)),
    )
    status, peak_kb, err = r.stdout.split(" ", 2)
    print(
        f"2,000 stock capacitors with pairs: exit {status}, peak RSS {int(peak_kb) / 1024:.0f} MB"
    )
    assert int(peak_kb) < 1.5 * 1024 * 1024  # ru_maxrss is in kilobytes on Linux
    assert status in ("0", "1", "2"), err
    if status == "2":
        assert err.count("|") == 0 and err.startswith("picker: error: "), err


# ------------------------------------------------------------------ leftovers of issue 13


def _clapp_design_args() -> list[str]:
    """A design of the Clapp demo (which samples with the normal distribution)."""
    return ["--set", "C1=100p", "--set", "C2=100p", "--set", "C3=68p", "--set", "L=27u"]


def test_evaluate_tol_with_the_normal_distribution_is_checked_like_the_spec():
    # Found: `evaluate --tol L=99%` skipped the spec-level check against non-physical draws.
    # sigma = tol/3 (JCGM 100:2008, G.1, coverage factor 3) and the sampler's deepest
    # variate is 2^-53, z = Phi^-1(2^-53) = -8.2 (scipy.special.ndtri): from a tolerance of
    # 3/8.2 = 36.5 % a draw nominal*(1 + z*tol/3) is at or below zero.
    from scipy.special import ndtri

    limit = 3 / -float(ndtri(2.0**-53))
    assert 0.36 < limit < 0.37
    spec = str(DEMO / "clapp_vfo.toml")
    for tol, refused in (("99%", True), ("37%", True), ("36%", False), ("30%", False)):
        assert (float(tol[:-1]) / 100 > limit) == refused  # the case is on the side it claims
        code, out, err = run_cli(
            ["evaluate", spec, *_clapp_design_args(), "--tol", f"L={tol}", "--samples", "200"]
        )
        if refused:
            assert code == 2, (tol, err)
            line = error_line(err)
            assert line.startswith("--tol L: ") and "below zero" in line, line
        else:
            assert code in (0, 1), (tol, err)


def test_evaluate_tol_with_a_uniform_distribution_may_be_wide():
    # A uniform draw stays within ±tol: 60 % is physical (values from 0.4 x nominal).
    code, out, err = run_cli(
        [
            "evaluate",
            str(DEMO / "probe_exciter.toml"),
            "--set",
            "C1=1n",
            "--set",
            "C2=4.7n",
            "--set",
            "L=33u",
            "--tol",
            "L=60%",
            "--samples",
            "200",
        ]
    )
    assert code in (0, 1), err


def test_a_fifo_lot_file_is_called_a_fifo(tmp_path):
    # Found: a FIFO lot file was reported as "no such lot file".
    spec, lot = _lot_spec(tmp_path)
    lot.unlink()
    os.mkfifo(lot)
    r = _subprocess("solve", str(spec), timeout=60)
    assert r.returncode == 2
    line = error_line(r.stderr)
    assert "FIFO" in line and "no such" not in line, line


def test_a_symlink_loop_lot_file_is_called_a_loop(tmp_path):
    spec, lot = _lot_spec(tmp_path)
    lot.unlink()
    lot.symlink_to(lot)
    code, out, err = run_cli(["solve", str(spec)], cwd=tmp_path)
    assert code == 2
    line = error_line(err)
    assert "loop of symbolic links" in line and "no such" not in line, line


def test_a_missing_lot_file_is_still_no_such_lot_file(tmp_path):
    spec, lot = _lot_spec(tmp_path)
    lot.unlink()
    code, out, err = run_cli(["solve", str(spec)], cwd=tmp_path)
    assert code == 2
    assert "no such lot file" in error_line(err)
