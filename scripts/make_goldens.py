"""Record (or check) the output of every command on every demo spec.

The golden files in ``tests/goldens/`` pin what picker prints, so a change meant
to move code without changing behaviour can be shown to change nothing:
``tests/test_goldens.py`` reruns the same commands and compares them character for
character, every number to 1e-9 relative (:func:`same`: the last digits of a float
differ between processors; the few goldens of :data:`LOOSE`, whose orbits settle only to
the shooting's tolerance, more loosely) and the version field aside.

Regenerate after an intended change of output::

    python scripts/make_goldens.py          # rewrite tests/goldens/
    python scripts/make_goldens.py --check  # compare only; exit 1 on a difference

Every command runs in a fresh process (``python -m picker``) from the
``demo_specs/`` folder, with a wide, colourless terminal so tables do not wrap.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_specs"
GOLDEN = ROOT / "tests" / "goldens"

SOLVABLE = [
    "base_vhf",
    "buyer_exciter",
    "clapp_vfo",
    "colpitts_bjt",
    "follower_vfo",
    "hartley_beacon",
    "hartley_follower_vfo",
    "jfet_follower_vfo",
    "plan_sensor_base",
    "probe_exciter",
    "production_exciter",
    "tone_source",
]
AMPLIFIER = [
    "base_vhf",
    "colpitts_bjt",
    "follower_vfo",
    "hartley_beacon",
    "hartley_follower_vfo",
    "jfet_follower_vfo",
]

# name -> (arguments after "picker", output file the command writes or None)
COMMANDS: dict[str, tuple[list[str], str | None]] = {}
for _s in SOLVABLE:
    COMMANDS[f"solve_{_s}.json"] = (["solve", f"{_s}.toml", "--format", "json"], None)
    COMMANDS[f"solve_{_s}.csv"] = (["solve", f"{_s}.toml", "--format", "csv"], None)
    COMMANDS[f"solve_{_s}.txt"] = (["solve", f"{_s}.toml"], None)
COMMANDS["solve_probe_exciter_sobol.json"] = (
    ["solve", "probe_exciter.toml", "--format", "json", "--sampling", "sobol", "--top", "3"],
    None,
)
COMMANDS["solve_production_exciter_precision.json"] = (
    ["solve", "production_exciter.toml", "--format", "json", "--precision", "1%", "--top", "3"],
    None,
)
COMMANDS["evaluate_probe_exciter.json"] = (
    ["evaluate", "probe_exciter.toml", "--set", "C1=1.5n", "--set", "C2=6.8n", "--set", "L=220u"]
    + ["--format", "json"],
    None,
)
COMMANDS["evaluate_probe_exciter.txt"] = (
    ["evaluate", "probe_exciter.toml", "--set", "C1=1.5n", "--set", "C2=6.8n", "--set", "L=220u"]
    + ["--tol", "L=2%"],
    None,
)
COMMANDS["evaluate_clapp_vfo.json"] = (
    ["evaluate", "clapp_vfo.toml", "--set", "C1=1n", "--set", "C2=1n", "--set", "C3=100p"]
    + ["--set", "L=10u", "--format", "json"],
    None,
)
COMMANDS["evaluate_colpitts_bjt.json"] = (
    ["evaluate", "colpitts_bjt.toml", "--set", "C1=220p", "--set", "C2=680p", "--set", "L=10u"]
    + ["--format", "json"],
    None,
)
COMMANDS["evaluate_production_exciter.json"] = (
    ["evaluate", "production_exciter.toml", "--format", "json"]
    + ["--set", "C1=1.5n", "--set", "C2=6.8n", "--set", "L=220u"],
    None,
)
for _s in AMPLIFIER:
    COMMANDS[f"netlist_{_s}.cir"] = (["netlist", f"{_s}.toml", "-o", "{out}"], "out.cir")
COMMANDS["series_E24.txt"] = (["series", "E24", "--min", "1n", "--max", "10n"], None)
COMMANDS["series_E96_ohm.txt"] = (
    ["series", "E96", "--min", "1k", "--max", "2k", "--unit", "ohm"],
    None,
)
COMMANDS["calibrate_bench_units.json"] = (
    ["calibrate", "bench_units.csv", "--spec", "probe_exciter.toml", "--format", "json"],
    None,
)
COMMANDS["calibrate_bench_units.txt"] = (
    ["calibrate", "bench_units.csv", "--spec", "probe_exciter.toml"],
    None,
)
COMMANDS["calibrate_bench_units_fragment.toml"] = (
    ["calibrate", "bench_units.csv", "--spec", "probe_exciter.toml", "--fragment", "{out}"],
    "out.toml",
)
COMMANDS["calibrate_bench_units_into.toml"] = (
    ["calibrate", "bench_units.csv", "--into", "probe_exciter.toml", "-o", "{out}"],
    "out.toml",
)
COMMANDS["consolidate_plan_demo.json"] = (["consolidate", "plan_demo.toml", "-f", "json"], None)
COMMANDS["consolidate_plan_demo.txt"] = (["consolidate", "plan_demo.toml"], None)
COMMANDS["consolidate_plan_demo_bom.csv"] = (
    ["consolidate", "plan_demo.toml", "--bom", "{out}"],
    "out.csv",
)

# The simulate command's model side (no ngspice): the loaded-model figures it prints.
SIMULATE_MODEL = """
import json, sys
from pathlib import Path
try:
    from picker.cli.circuit import _design, _model_figures
    spec, topo, values, board, par, params = _design(Path(sys.argv[1]), [])
    out = _model_figures(topo, values, par, params)
except ImportError:  # before _model_figures (1126a75 and older)
    from picker.cli.circuit import _design, _figures
    spec, topo, values, board, stray, params = _design(Path(sys.argv[1]), [])
    out = _figures(topo, board, stray, params)
print(json.dumps(out, sort_keys=True))
"""
SIMULATE_MODEL_OLD = SIMULATE_MODEL.replace("picker.cli.circuit", "picker.cli_circuit")

VERSION = re.compile(r'("version": ?)"[^"]*"')
SOLVER_TIME = re.compile(r"solver [0-9.]+ s")  # wall-clock time of CP-SAT, not a result


def _normalise(text: str) -> str:
    return SOLVER_TIME.sub("solver * s", VERSION.sub(r'\1"*"', text))


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env.update(
        {"COLUMNS": "200", "LINES": "100", "NO_COLOR": "1", "TERM": "dumb", "PYTHONHASHSEED": "0"}
    )
    env.pop("FORCE_COLOR", None)
    return env


def run(name: str) -> str:
    """The output of one golden command, as text."""
    if name.startswith("simulate_model_"):
        spec = name.removeprefix("simulate_model_").removesuffix(".json") + ".toml"
        code = SIMULATE_MODEL
        try:
            import picker.cli.circuit  # noqa: F401
        except ImportError:
            code = SIMULATE_MODEL_OLD
        proc = subprocess.run(
            [sys.executable, "-c", code, spec],
            cwd=DEMO,
            env=_env(),
            capture_output=True,
            text=True,
            check=False,
        )
        return f"exit {proc.returncode}\n{_normalise(proc.stdout)}"
    args, out_name = COMMANDS[name]
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / out_name if out_name else None
        argv = [a.replace("{out}", str(out)) for a in args]
        proc = subprocess.run(
            [sys.executable, "-m", "picker", *argv],
            cwd=DEMO,
            env=_env(),
            capture_output=True,
            text=True,
            check=False,
        )
        text = f"exit {proc.returncode}\n"
        if out is not None:
            stdout = proc.stdout.replace(str(out), "{out}")
            text += stdout + "--- file ---\n" + out.read_text(encoding="utf-8")
        else:
            text += proc.stdout
        if proc.stderr:
            err = proc.stderr if out is None else proc.stderr.replace(str(out), "{out}")
            text += "--- stderr ---\n" + err
    return _normalise(text)


#: A number in a golden: an integer or decimal with an optional exponent.
NUMBER = re.compile(r"[-+]?(?:\d+\.\d*|\.\d+|\d+)(?:[eE][-+]?\d+)?")
#: Two numbers that differ by less than this (relative) are the same result: the last
#: digits of a float depend on the machine (numpy's SIMD paths, the BLAS and libm round
#: differently on different processors), not on picker.
RTOL = 1e-9


#: Goldens whose figures come from periodic orbits that settle only to the shooting's
#: tolerance (likely, not shown: the processor's rounding then decides the last Newton
#: steps along the orbit's frozen modes): the Hartley beacon demo's solve output, on two
#: machines with the same code, differed
#: by up to 7.7e-7 relative in a loaded frequency and 2.6e-5 in a harmonic, enough to
#: move one board of 5,000 across the window's edge (yields 0.7056 and 0.7058) and a
#: printed frequency's last digit (3.5552 and 3.55521 MHz, the shorter padded by one more
#: space in its table cell). Runs of spaces count as one there, and their numbers are compared
#: to :data:`LOOSE_RTOL` relative, :data:`LOOSE_ATOL` absolute (a share: one board in
#: 5,000 is 2e-4) or one unit in the last printed digit of the shorter, whichever is
#: widest.
LOOSE = frozenset(f"solve_hartley_beacon.{ext}" for ext in ("json", "csv", "txt"))
LOOSE_RTOL = 1e-4
LOOSE_ATOL = 5e-4


def _last_digit(text: str) -> float:
    """One unit in the last printed digit of the number ``text`` (1 for an integer)."""
    mant, _, exp = text.lower().partition("e")
    places = len(mant.partition(".")[2])
    return float(10.0 ** (int(exp or 0) - places))


def same(expected: str, got: str, *, loose: bool = False) -> bool:
    """Whether ``got`` is the golden ``expected``: every character outside the numbers
    identical, every number equal to :data:`RTOL` relative (module docstring), or with
    ``loose`` to the tolerances of :data:`LOOSE`."""
    if expected == got:
        return True
    e_parts, g_parts = NUMBER.split(expected), NUMBER.split(got)
    if loose:  # a number printed a digit shorter is padded by one more space
        e_parts = [re.sub(" +", " ", p) for p in e_parts]
        g_parts = [re.sub(" +", " ", p) for p in g_parts]
    if e_parts != g_parts:
        return False
    for a, b in zip(NUMBER.findall(expected), NUMBER.findall(got), strict=True):
        if a != b:
            x, y = float(a), float(b)
            tol = RTOL * max(abs(x), abs(y))
            if loose:
                unit = max(_last_digit(a), _last_digit(b))  # the shorter's
                tol = max(LOOSE_RTOL * max(abs(x), abs(y)), LOOSE_ATOL, unit)
            if abs(x - y) > tol:
                return False
    return True


def names() -> list[str]:
    return sorted(COMMANDS) + [f"simulate_model_{s}.json" for s in AMPLIFIER]


def main(argv: list[str]) -> int:
    if argv not in ([], ["--check"]):
        # anything else (``--help`` too) prints the usage and writes nothing: a mistyped
        # flag must not overwrite the goldens
        print("usage: python scripts/make_goldens.py [--check]")
        print("  no flag: rewrite tests/goldens/; --check: compare only, exit 1 on a difference")
        return 0 if argv in (["--help"], ["-h"]) else 2
    check = argv == ["--check"]
    GOLDEN.mkdir(parents=True, exist_ok=True)
    bad = 0
    for name in names():
        text = run(name)
        path = GOLDEN / name
        if check:
            if not path.exists() or not same(
                path.read_text(encoding="utf-8"), text, loose=name in LOOSE
            ):
                print(f"differs: {name}")
                bad += 1
        else:
            path.write_text(text, encoding="utf-8")
            print(f"wrote {path.relative_to(ROOT)}")
    if check:
        print(f"{len(names()) - bad} of {len(names())} goldens identical")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
