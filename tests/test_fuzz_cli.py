"""Fuzzing command lines: every command with bad, missing, repeated and unknown options.

Each case starts from a valid command line (solve, evaluate, series, calibrate,
consolidate, netlist, simulate, bench) and damages it: an option's value
replaced by a hostile text, an option dropped or repeated, an unknown option,
a stray argument, a missing file, a directory where a file belongs, an input
given as the output. The oracle: exit status 0, 1 or 2 (3 only for
``simulate``, whose simulator may fail); on 2, one line on stderr that names
the option, argument or file at fault; never a traceback. Options that would
make a valid run slow (``--samples``, ``--candidates``, ``--precision``,
``--time-limit``, ``--timeout``) only get invalid or small values.

A few cases run as real subprocesses too, so the console script's own entry
(``python -m picker.cli.main``) is covered, not only ``main()``.
"""

from __future__ import annotations

import os
import subprocess

from conftest import DEMO, PYTHON, ROOT
from hypothesis import event, given
from hypothesis import strategies as st
from test_fuzz_harness import (
    HOSTILE_TEXTS,
    cheap,
    error_line,
    fuzz_settings,
    load_demo,
    run_cli,
    to_toml,
)

_SAFE_COUNTS = ["0", "-1", "1", "99", "100", "200", "abc", "1e3", "", "nan", "2.5", "999999999999"]
_SAFE = {
    "--samples": ["0", "-1", "99", "100", "200", "abc", "1e3", "", "nan", "99999999999999999999"],
    "--candidates": ["0", "-1", "1", "3", "abc", "", "1e9", "100001"],
    "--precision": ["0", "-1 %", "0 %", "51 %", "5 %", "abc", "", "nan", "1 kHz", "5"],
    "--time-limit": ["0", "-1", "nan", "inf", "abc", "", "3601"],
    "--timeout": ["0", "-1", "nan", "inf", "abc", "", "3601"],
    "--top": _SAFE_COUNTS,
    "--seed": ["-1", "0", "7", "abc", "", "1.5", "99999999999999999999"],
}

_VALUES = st.one_of(
    st.sampled_from(HOSTILE_TEXTS),
    st.text(max_size=8).filter(lambda t: "\x00" not in t),
    st.sampled_from(["table", "json", "csv", "TABLE", "xml", "random", "sobol", "huber", "x"]),
    st.sampled_from(["C1=150p", "C1=", "=150p", "X=1n", "C1=1 uH", "L=5", "C1=1e300", "c2=1n"]),
)


def _files(tmp):
    """The files the base command lines use, written fresh into ``tmp``."""
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
    (tmp / "plan.toml").write_text(to_toml(plan), encoding="utf-8")
    return {"spec": spec, "amp": amp, "units": units, "plan": tmp / "plan.toml", "tmp": tmp}


def _commands(f) -> dict[str, list[str]]:
    s, a, out = str(f["spec"]), str(f["amp"]), str(f["tmp"] / "out")
    return {
        "solve": ["solve", s, "--samples", "200", "--candidates", "5", "-f", "json", "--top", "2"],
        "solve-out": ["solve", s, "--samples", "200", "--candidates", "5", "-o", out + ".txt"],
        "evaluate": [
            "evaluate",
            s,
            "--set",
            "C1=150p",
            "--set",
            "C2=330p",
            "--set",
            "L=2.2m",
            "--tol",
            "L=5%",
            "--samples",
            "200",
            "-f",
            "json",
        ],
        "series": ["series", "E24", "--min", "1n", "--max", "10n", "--unit", "F"],
        "calibrate": ["calibrate", str(f["units"]), "--topology", "colpitts", "--format", "json"],
        "calibrate_into": [
            "calibrate",
            str(f["units"]),
            "--into",
            str(f["spec"]),
            "-o",
            out + ".toml",
        ],
        "consolidate": ["consolidate", str(f["plan"]), "--format", "json", "--time-limit", "2"],
        "netlist": [
            "netlist",
            a,
            "--set",
            "C1=150p",
            "--set",
            "C2=330p",
            "--set",
            "L=4.7u",
            "-o",
            out + ".cir",
        ],
        "simulate": [
            "simulate",
            a,
            "--set",
            "C1=150p",
            "--set",
            "C2=330p",
            "--set",
            "L=4.7u",
            "--timeout",
            "abc",
        ],
        "bench": ["bench", "--quick", "--no-such-option"],
    }


def _option_value_slots(argv: list[str]) -> list[int]:
    return [i for i in range(1, len(argv)) if argv[i - 1].startswith("-") and argv[i][:1] != "-"]


@st.composite
def damaged_command(draw, files):
    name = draw(st.sampled_from(sorted(_commands(files))))
    argv = list(_commands(files)[name])
    for _ in range(draw(st.integers(1, 2))):
        how = draw(
            st.sampled_from(
                ["value", "value", "value", "drop", "repeat", "unknown", "extra", "file", "swap"]
            )
        )
        slots = _option_value_slots(argv)
        if how == "value" and slots:
            i = draw(st.sampled_from(slots))
            opt = argv[i - 1]
            argv[i] = draw(st.sampled_from(_SAFE[opt])) if opt in _SAFE else draw(_VALUES)
        elif how == "drop" and len(argv) > 1:
            i = draw(st.integers(1, len(argv) - 1))
            del argv[i]
        elif how == "repeat" and slots:
            i = draw(st.sampled_from(slots))
            argv += [argv[i - 1], argv[i]]
        elif how == "unknown":
            argv.insert(
                draw(st.integers(1, len(argv))),
                draw(
                    st.sampled_from(
                        ["--foo", "-x", "--Samples", "--format=", "--", "-", "--set", "--help=1"]
                    )
                ),
            )
        elif how == "extra":
            argv.append(draw(st.sampled_from(["extra", "", "--", str(files["spec"])])))
        elif how == "file" and len(argv) > 1:
            targets = [i for i, a in enumerate(argv) if a.startswith(str(files["tmp"]))]
            if targets:
                i = draw(st.sampled_from(targets))
                argv[i] = draw(
                    st.sampled_from(
                        [
                            str(files["tmp"]),  # a directory
                            str(files["tmp"] / "missing.toml"),
                            str(files["spec"]),  # an input
                            str(files["units"]),
                            "",
                        ]
                    )
                )
        elif how == "swap" and len(argv) > 2:
            i = draw(st.integers(1, len(argv) - 2))
            argv[i], argv[i + 1] = argv[i + 1], argv[i]
    return name, argv


def _check(name: str, argv: list[str], code: int, out: str, err: str, files) -> None:
    allowed = (0, 1, 2, 3) if name in ("simulate", "bench") else (0, 1, 2)
    assert code in allowed, f"{argv}: exit {code}\n{err}"
    assert "Traceback" not in err, err
    if "--help" in argv and code == 0:
        return
    if code == 2 and not err and out.startswith("Usage"):
        return  # a bare command group prints its help
    if code in (2, 3):
        text = error_line(err)
        # the message names an option, an argument, a command or a file of the case
        options = [a.split("=")[0] for a in argv if a.startswith("-")]
        tokens = [*options, "argument", "command", "option", str(files["tmp"]), "--set", ".: "]
        tokens += [f"{a}: " for a in argv[1:] if a]  # a file named as given
        assert any(t and t in text for t in tokens) or text.startswith(("--", "NAME")), (
            argv,
            text,
        )
        if code == 2:
            assert out == "", (argv, out[:300])


@fuzz_settings(400)
@given(data=st.data())
def test_a_damaged_command_line_never_tracebacks(tmp_path_factory, data):
    files = _files(tmp_path_factory.mktemp("cli"))
    name, argv = data.draw(damaged_command(files))
    if name == "bench" and "--no-such-option" not in argv:
        return  # a valid bench run takes seconds: not a fuzz case
    if name == "simulate" and "abc" not in argv:
        return  # a valid simulate runs ngspice: not a fuzz case
    code, out, err = run_cli(argv, cwd=files["tmp"])
    event(f"{name}: exit {code}")
    _check(name, argv, code, out, err, files)


def test_the_console_entry_reports_bad_input_in_one_line_as_a_subprocess(tmp_path):
    files = _files(tmp_path)
    cases = [
        (["solve", str(files["spec"]), "--samples", "abc"], "--samples"),
        (["solve", str(tmp_path / "missing.toml")], "no such file"),
        (["series", "E24", "--min", "4,7n"], "--min"),
        (["calibrate", str(files["units"])], "--topology"),
        (["evaluate", str(files["spec"]), "--set", "C1=1 uH"], "--set C1"),
    ]
    for argv, want in cases:
        r = subprocess.run(
            [PYTHON, "-m", "picker.cli.main", *argv],
            capture_output=True,
            text=True,
            timeout=120,
            cwd=tmp_path,
            env={**os.environ, "PYTHONPATH": str(ROOT)},
        )
        assert r.returncode == 2, (argv, r.stderr)
        assert want in error_line(r.stderr) and r.stdout == "", (argv, r.stderr)
