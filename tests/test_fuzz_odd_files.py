"""Fuzzing what a command reads and where it writes: odd files, links, markup in text.

Three fuzzers, each with the CLI oracle of :mod:`test_fuzz_harness` (exit 0, 1
or 2; on 2 one line, never a traceback, never a hang):

* every input of every command (the spec, the stock list and lot file it names,
  a measurement file, a plan and its channel spec) replaced by an odd file: a
  FIFO with no writer, a directory, a link to ``/dev/zero``, a symbolic link
  loop, a dangling link, an empty or binary file, a file over the size limit,
  or the same text behind a byte-order mark or a link (which must still work);
* every output pointed at one of the command's inputs, directly, through a
  symbolic or hard link or a ``..`` path, with or without ``--force``: always
  refused, the input unchanged;
* console markup and terminal escapes in every text field of every demo spec,
  a measurement file's unit ids and a plan's channel names.
"""

from __future__ import annotations

import os
from pathlib import Path

from conftest import DEMO
from hypothesis import event, given
from hypothesis import strategies as st
from test_fuzz_harness import (
    ESCAPE_TEXTS,
    MARKUP_TEXTS,
    assert_clean_exit,
    cheap,
    error_line,
    fuzz_settings,
    leaf_paths,
    load_demo,
    run_cli,
    set_path,
    to_toml,
)

from picker import files


def _setup(tmp: Path) -> dict[str, tuple[list[str], dict[str, Path]]]:
    """command name -> (argv, {input role: path}) with every input written in ``tmp``."""
    (tmp / "stock_demo.csv").write_text((DEMO / "stock_demo.csv").read_text("utf-8"))
    buyer = tmp / "buyer.toml"
    buyer.write_text(to_toml(cheap(load_demo("buyer_exciter.toml"))), encoding="utf-8")
    lot = tmp / "lot.csv"
    lot.write_text("value\n" + "".join(f"{1 + k / 1000:.3f} nF\n" for k in range(-20, 21)))
    lot_spec = tmp / "lot.toml"
    lot_spec.write_text(
        'topology = "colpitts"\n[frequency]\ntarget = "965 kHz"\nwindow = "±2 %"\n'
        "[feedback]\nmin = 0.05\nmax = 1.0\n"
        '[parts.C1]\nvalues = ["1 nF"]\ntolerance = "2 %"\nlot = "lot.csv"\n'
        '[parts.C2]\nvalues = ["4.7 nF"]\ntolerance = "2 %"\n'
        '[parts.L]\nvalues = ["33 uH"]\ntolerance = "5 %"\n'
        "[yield]\nsamples = 200\nseed = 3\n",
        encoding="utf-8",
    )
    units = tmp / "units.csv"
    units.write_text((DEMO / "bench_units.csv").read_text("utf-8"))
    amp = tmp / "amp.toml"
    amp.write_text(to_toml(cheap(load_demo("colpitts_bjt.toml"))), encoding="utf-8")
    base = cheap(load_demo("plan_sensor_base.toml"))
    base["yield"]["candidates"] = 10
    (tmp / "plan_sensor_base.toml").write_text(to_toml(base), encoding="utf-8")
    plan = {**load_demo("plan_demo.toml"), "candidates": 10, "time_limit": 2}
    plan["build_quantity"] = 100
    (tmp / "plan.toml").write_text(to_toml(plan), encoding="utf-8")
    sets = ["--set", "C1=1n", "--set", "C2=4.7n", "--set", "L=33u"]
    return {
        "solve": (
            ["solve", str(buyer), "-f", "json"],
            {"spec": buyer, "stock": tmp / "stock_demo.csv"},
        ),
        "evaluate": (
            ["evaluate", str(lot_spec), *sets, "-f", "json"],
            {"spec": lot_spec, "lot": lot},
        ),
        "calibrate": (["calibrate", str(units), "--topology", "colpitts"], {"units": units}),
        "netlist": (
            ["netlist", str(amp), "--set", "C1=150p", "--set", "C2=330p", "--set", "L=4.7u"],
            {"spec": amp},
        ),
        "consolidate": (
            ["consolidate", str(tmp / "plan.toml"), "--time-limit", "2"],
            {
                "plan": tmp / "plan.toml",
                "channel spec": tmp / "plan_sensor_base.toml",
                "stock": tmp / "stock_demo.csv",
            },
        ),
    }


ODDITIES = (
    "fifo",
    "directory",
    "dev-zero",
    "loop",
    "dangling",
    "empty",
    "binary",
    "too-large",
    "bom",
    "symlink",
)
_WORKS = ("bom", "symlink")  # the same text behind a byte-order mark or a link


def _make_odd(path: Path, oddity: str) -> None:
    text = path.read_bytes()
    path.unlink()
    if oddity == "fifo":
        os.mkfifo(path)
    elif oddity == "directory":
        path.mkdir()
    elif oddity == "dev-zero":
        path.symlink_to("/dev/zero")
    elif oddity == "loop":
        path.symlink_to(path)
    elif oddity == "dangling":
        path.symlink_to(path.parent / "nowhere")
    elif oddity == "empty":
        path.write_bytes(b"")
    elif oddity == "binary":
        path.write_bytes(b"\x00\xff\xfe" + bytes(range(256)) * 4)
    elif oddity == "too-large":
        path.write_bytes(text + b"\n" * files.MAX_INPUT_BYTES)  # over the limit set below
    elif oddity == "bom":
        path.write_bytes(b"\xef\xbb\xbf" + text)
    elif oddity == "symlink":
        real = path.with_name("real-" + path.name)
        real.write_bytes(text)
        path.symlink_to(real.name)


@fuzz_settings(120)
@given(
    command=st.sampled_from(["solve", "evaluate", "calibrate", "netlist", "consolidate"]),
    oddity=st.sampled_from(ODDITIES),
    pick=st.integers(0, 2),
)
def test_any_input_replaced_by_an_odd_file(tmp_path_factory, command, oddity, pick):
    tmp = tmp_path_factory.mktemp("odd")
    argv, roles = _setup(tmp)[command]
    role = sorted(roles)[pick % len(roles)]
    path = roles[role]
    if command == "netlist":
        argv = [*argv, "-o", str(tmp / "board.cir")]  # netlist always writes a file
    limit = files.MAX_INPUT_BYTES
    if oddity == "too-large":  # a limit above every input, then one input beyond it
        files.MAX_INPUT_BYTES = max(os.path.getsize(p) for p in roles.values()) + 1024
    try:
        _make_odd(path, oddity)
        code, out, err = run_cli(argv, cwd=tmp)
    finally:
        files.MAX_INPUT_BYTES = limit
    event(f"{oddity}: exit {code}")
    assert_clean_exit(code, out, err, location=False)
    if oddity in _WORKS:
        assert code in (0, 1), (command, role, err)
    else:
        assert code == 2, (command, role, oddity, out[-300:])


#: command -> (argv with OUT for the output, the option that takes it)
_WRITERS = {
    "solve": ["-o", "OUT", "-f", "csv"],
    "evaluate": ["-o", "OUT", "-f", "csv"],
    "calibrate": ["--fragment", "OUT"],
    "netlist": ["-o", "OUT"],
    "consolidate": ["--bom", "OUT"],
}


@fuzz_settings(80)
@given(
    command=st.sampled_from(sorted(_WRITERS)),
    how=st.sampled_from(["same", "symlink", "hardlink", "dotdot"]),
    force=st.booleans(),
    pick=st.integers(0, 2),
)
def test_an_output_never_replaces_an_input_however_it_is_named(
    tmp_path_factory, command, how, force, pick
):
    tmp = tmp_path_factory.mktemp("links")
    argv, roles = _setup(tmp)[command]
    role = sorted(roles)[pick % len(roles)]
    inp = roles[role]
    if command == "consolidate" and inp.suffix != ".csv":
        inp = roles["stock"]  # --bom takes .csv or .json names only
    (tmp / "sub").mkdir()
    target = {
        "same": inp,
        "symlink": tmp / f"link{inp.suffix}",
        "hardlink": tmp / f"hard{inp.suffix}",
        "dotdot": tmp / "sub" / ".." / inp.name,
    }[how]
    if how == "symlink":
        target.symlink_to(inp)
    elif how == "hardlink":
        os.link(inp, target)
    before = inp.read_bytes()
    out_args = [str(target) if a == "OUT" else a for a in _WRITERS[command]]
    code, out, err = run_cli([*argv, *out_args, *(["--force"] if force else [])], cwd=tmp)
    event(f"{how}: exit {code}")
    assert code == 2, (command, role, how, err)
    line = error_line(err)
    assert "input file" in line or ("exists" in line and not force), line
    assert inp.read_bytes() == before


def _text_leaves(d: dict) -> list[tuple]:
    out = []
    for path in leaf_paths(d):
        v = d
        for k in path:
            v = v[k]
        if isinstance(v, str) and path[-1] in ("title", "note", "id", "name", "description"):
            out.append(path)
    return out


@fuzz_settings(60)
@given(
    name=st.sampled_from(
        ["probe_exciter.toml", "production_exciter.toml", "clapp_vfo.toml", "colpitts_bjt.toml"]
    ),
    text=st.sampled_from(MARKUP_TEXTS + ESCAPE_TEXTS),
)
def test_markup_and_escapes_in_text_fields_are_shown_as_text(tmp_path_factory, name, text):
    tmp = tmp_path_factory.mktemp("markup")
    d = cheap(load_demo(name))
    d["title"] = text
    for path in _text_leaves(d):
        d = set_path(d, path, text)
    spec = tmp / "s.toml"
    spec.write_text(to_toml(d), encoding="utf-8")
    code, out, err = run_cli(["solve", str(spec)], cwd=tmp)
    assert_clean_exit(code, out, err, location=False)
    assert "\x1b" not in out and "\x07" not in out  # shown escaped, never sent raw
