"""Shared machinery of the fuzz suite (tests/test_fuzz_*.py), and its own checks.

* :func:`run_cli` runs ``picker.cli.main.main`` in-process (much faster than a
  subprocess) and returns (exit status, stdout, stderr). Any exception other
  than ``SystemExit`` propagates, so hypothesis reports it as a failure: a
  traceback the user would have seen.
* :func:`assert_clean_exit` is the oracle every fuzz case passes through: the
  status is one of those allowed; on status 2 (bad input) stderr is exactly one
  line ``picker: error: FILE: KEY: message`` that names the file and a key,
  row or option; never a traceback.
* :func:`to_toml` writes a nested dict back to TOML (the standard library reads
  TOML but does not write it), including the hostile values the fuzzers need
  (NaN, inf, datetimes, empty tables, unicode).
* :func:`fuzz_settings` gives the hypothesis settings of a test. The profile is
  chosen by the environment variable ``PICKER_FUZZ``: unset or ``ci`` gives a
  fixed seed (``derandomize``) and the example counts written in each test;
  ``long`` gives twenty times as many examples with a fresh random seed per run
  (for manual runs; hypothesis prints the seed of any failure).
"""

from __future__ import annotations

import contextlib
import copy
import datetime as dt
import io
import json
import math
import os
import re
import tomllib
from pathlib import Path

from conftest import DEMO
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st

PROFILE = os.environ.get("PICKER_FUZZ", "ci").strip().lower() or "ci"
if PROFILE not in ("ci", "long"):
    raise RuntimeError(f"PICKER_FUZZ must be 'ci' or 'long'; got {PROFILE!r}")

_COMMON = dict(
    deadline=None,
    database=None,
    suppress_health_check=[
        HealthCheck.too_slow,
        HealthCheck.data_too_large,
        HealthCheck.filter_too_much,
        HealthCheck.function_scoped_fixture,
    ],
    print_blob=True,
)
settings.register_profile("picker-fuzz-ci", derandomize=True, **_COMMON)
settings.register_profile("picker-fuzz-long", derandomize=False, **_COMMON)

#: Examples in the long profile per example of the CI profile.
LONG_FACTOR = 20


def fuzz_settings(examples: int) -> settings:
    """Settings for a fuzz test that runs ``examples`` cases in CI."""
    parent = settings.get_profile(f"picker-fuzz-{PROFILE}")
    n = examples * (LONG_FACTOR if PROFILE == "long" else 1)
    return settings(parent, max_examples=n)


# --------------------------------------------------------------------------- running


def run_cli(argv: list[str], *, cwd: str | Path | None = None) -> tuple[int, str, str]:
    """Run ``picker`` in-process: (exit status, stdout, stderr).

    Exceptions other than SystemExit are not caught: each one is a bug (a
    traceback the user would see). ``cwd`` is the working folder during the
    run (fuzzed output names land there, not in the checkout).
    """
    from picker.cli.main import main

    out, err = io.StringIO(), io.StringIO()
    where = contextlib.chdir(cwd) if cwd is not None else contextlib.nullcontext()
    with where, contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            main([str(a) for a in argv])
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    return code, out.getvalue(), err.getvalue()


#: First words of a message that does not start with a location.
_MESSAGE_WORDS = ("expected", "not", "no", "cannot", "the", "refusing", "unknown", "a", "an")
_LOCATION_RE = re.compile(
    r"^(?:row \d+(?:, column [^:]+)?|--[\w-]+(?: [^:]*)?|[^\s:][^:]{0,120}?): \S"
)


def names_location(rest: str) -> bool:
    """True when ``rest`` (the message after the file name) starts with a key, row or
    option (``parts.C1.min: ...``, ``row 3, column value: ...``, ``--samples: ...``),
    or is a TOML syntax error that gives a line and column."""
    m = _LOCATION_RE.match(rest)
    if m and rest.split()[0].lower().strip(":") not in _MESSAGE_WORDS:
        return True
    if re.search(r"\((?:at line \d+, column \d+|at end of document)\)", rest):
        return True
    return rest.startswith("expected UTF-8")


def error_line(err: str) -> str:
    """The single line of an error report; fails when stderr is not exactly one line."""
    assert "Traceback" not in err, err
    lines = err.splitlines()
    assert len(lines) == 1, f"expected one line on stderr, got {len(lines)}:\n{err}"
    line = lines[0]
    assert line.startswith("picker: error: "), line
    assert line.strip() == line and len(line) > len("picker: error: ") + 5, line
    return line[len("picker: error: ") :]


def assert_clean_exit(
    code: int,
    out: str,
    err: str,
    *,
    files: tuple[str | Path, ...] = (),
    allowed: tuple[int, ...] = (0, 1, 2),
    location: bool = True,
) -> str | None:
    """The fuzz oracle. Returns the error text (after ``picker: error:``) on status 2.

    Parameters
    ----------
    files:
        Paths one of which a status-2 message must name (the input the fault
        is in); empty for a fault in the command line itself.
    location:
        Whether a status-2 message must also name a key, row or option.
    """
    assert code in allowed, (
        f"exit status {code} not in {allowed}\nstdout: {out[:2000]}\nstderr: {err}"
    )
    if code == 2:
        text = error_line(err)
        if files and not re.match(r"--[a-z-]+[ :]", text):  # a fault of an option names it
            names = [str(f) for f in files]
            hit = [n for n in names if text.startswith(n + ": ")]
            assert hit, f"the message names none of {names}: {text}"
            rest = text[len(max(hit, key=len)) + 2 :]
        else:
            rest = text
        if location:
            assert names_location(rest), f"no key, row or option named: {text}"
        assert out == "", f"bad input but something went to stdout: {out[:500]}"
        return text
    assert "Traceback" not in err, err
    return None


def check_json_result(out: str) -> dict:
    """A solve/evaluate JSON result is one object with sane yields (no silent nonsense)."""
    data = json.loads(out)
    assert isinstance(data, dict)
    for c in data.get("candidates", []):
        y = c["yield"]
        assert 0.0 <= y["ci_low"] <= y["estimate"] <= y["ci_high"] <= 1.0, y
        assert y["samples"] >= 100
        assert c["f_nominal_hz"] > 0 and math.isfinite(c["f_nominal_hz"])
        for p in c["parts"].values():
            assert p["value"] > 0 and 0 < p["tolerance"] < 1, p
    return data


# --------------------------------------------------------------------------- TOML


_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(k: str) -> str:
    return k if _BARE_KEY.match(k) else json.dumps(k, ensure_ascii=False)


def _scalar(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        # JSON string escapes are valid TOML basic-string escapes, except that
        # TOML forbids raw control characters; json.dumps escapes them.
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, dt.datetime | dt.date | dt.time):
        return v.isoformat()
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_scalar(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_scalar(x)}" for k, x in v.items()) + "}"
    if isinstance(v, Raw):
        return v.text
    raise TypeError(f"cannot write {type(v).__name__} as TOML")


class Raw:
    """A value written into the TOML text as is (for values TOML cannot hold, e.g.
    an integer beyond 64 bits, which makes the file invalid on purpose)."""

    def __init__(self, text: str):
        self.text = text

    def __repr__(self) -> str:
        return f"Raw({self.text!r})"


def to_toml(data: dict, _prefix: str = "") -> str:
    """Write ``data`` as TOML: scalars first, then one [table] per nested dict."""
    lines: list[str] = []
    tables = []
    for k, v in data.items():
        if isinstance(v, dict) and v:
            tables.append((k, v))
        else:
            lines.append(f"{_key(k)} = {_scalar(v)}")
    for k, v in tables:
        name = f"{_prefix}.{_key(k)}" if _prefix else _key(k)
        lines.append("")
        lines.append(f"[{name}]")
        lines.append(to_toml(v, name))
    return "\n".join(lines).strip("\n") + "\n"


def load_demo(name: str) -> dict:
    """A demo spec as a dict."""
    return tomllib.loads((DEMO / name).read_text(encoding="utf-8"))


def cheap(spec: dict) -> dict:
    """A copy of a spec with a cheap Monte Carlo and a bounded search (for fuzzing)."""
    d = copy.deepcopy(spec)
    y = d.setdefault("yield", {})
    y["samples"] = 200
    y["candidates"] = 5
    y.pop("precision", None)
    y.pop("max_samples", None)
    d.setdefault("report", {})["top"] = 3
    d.setdefault("search", {})["max_designs"] = 200_000
    return d


def leaf_paths(d: dict, prefix: tuple = ()) -> list[tuple]:
    """Every key path of a nested dict (tables and leaves), depth first."""
    out = []
    for k, v in d.items():
        p = (*prefix, k)
        out.append(p)
        if isinstance(v, dict):
            out.extend(leaf_paths(v, p))
    return out


def set_path(d: dict, path: tuple, value) -> dict:
    out = copy.deepcopy(d)
    node = out
    for k in path[:-1]:
        if not isinstance(node.get(k), dict):
            node[k] = {}
        node = node[k]
    node[path[-1]] = value
    return out


def del_path(d: dict, path: tuple) -> dict:
    out = copy.deepcopy(d)
    node = out
    for k in path[:-1]:
        node = node[k]
    node.pop(path[-1], None)
    return out


# --------------------------------------------------------------------------- hostile values

#: Texts an engineer might paste from a datasheet or a spreadsheet, and worse.
HOSTILE_TEXTS = (
    "",
    " ",
    "4,7nF",
    "4.7 nf",
    "47 u",
    "5",
    "5 %",
    "5%%",
    "±3 %",
    "−5 %",
    "10 uH",
    "10 H",
    "1 kHz",
    "1 kohm",
    "3.3 V",
    "2 mA",
    "10 mS",
    "J",
    "Z",
    "+80/-20 %",
    "nan",
    "NaN nF",
    "inf",
    "-inf",
    "1e999",
    "1e-999 F",
    "0x10",
    "1_000",
    "４.７ nF",
    "4.7 µF",
    "4.7 μF",
    "4.7 \u00b5",
    "\x00",
    "\u202e4.7 nF",
    "💥",
    "e12",
    "E13",
    "E24",
    "colpitts",
    "Clapp ",
    "9" * 400,
    "-0",
    "0 pF",
    "4n7n",
    "4..7n",
    "4.7 nF extra",
    "1R0",
    "4R7",
    "103",
    "25 °C",
    "-300 °C",
    "300 K",
    "100 ppm/°C",
    "ppm",
    "=1+1",
    "@SUM(A1)",
    "0.05",
    "50 ppm",
    "1 F",
    "1 pF",
    "1 GHz",
    "1 Hz",
    "C0G",
    "X7R",
    "ferrite",
    "uniform",
    "normal",
    "random",
    "sobol",
    "wilson",
    "Ω",
    "1e308",
    "1 MHz",
    "meg",
    "1 megHz",
)

#: Terminal escapes and control characters (shown escaped or refused, never a traceback).
ESCAPE_TEXTS = (
    "\x1b[31mred\x1b[0m",
    "\x1b]0;window title\x07",
    "\x1b[2J",
    "a\rb",
    "a\bb",
    "\x7f",
    "\u2028",
    "tab\there",
)

#: Rich console markup (user text must never be parsed as markup).
MARKUP_TEXTS = (
    "Exciter [/bold] B",
    "[/x]",
    "[bold]",
    "[red]x[/red]",
    "[link=file:///etc/passwd]x[/link]",
    "\\[b]",
    "[",
    "[[/]]",
)

#: TOML values that break parsers and number conversions: integers of hundreds or
#: thousands of digits, arrays and inline tables nested far deeper than any spec.
HOSTILE_RAW = (
    Raw("1" + "0" * 400),
    Raw("-" + "9" * 5000),
    Raw("[" * 900 + "]" * 900),
    Raw("{a = " * 2000 + "1" + "}" * 2000),
    Raw("[" * 40 + "1" + "]" * 40),
)

HOSTILE_NUMBERS = (
    0,
    -1,
    1,
    5,
    100,
    0.5,
    0.03,
    -0.03,
    1e308,
    -1e308,
    1e-308,
    5e-324,
    math.nan,
    math.inf,
    -math.inf,
    2**63 - 1,
    -(2**63),
    1e12,
    1e-15,
    -0.0,
    3,
    10_000_000,
)

_DATES = (
    dt.datetime(1979, 5, 27, 7, 32, tzinfo=dt.UTC),
    dt.date(2024, 1, 1),
    dt.time(7, 32),
)


def hostile_values(*, depth: int = 1) -> st.SearchStrategy:
    """Values of every TOML type, chosen to break parsers."""
    base = st.one_of(
        st.sampled_from(HOSTILE_TEXTS),
        st.sampled_from(HOSTILE_NUMBERS),
        st.booleans(),
        st.sampled_from(_DATES),
        st.text(max_size=12),
        st.floats(allow_nan=True, allow_infinity=True),
        st.integers(min_value=-(2**63), max_value=2**63 - 1),
        st.just(Raw("99999999999999999999")),  # beyond 64 bits: invalid TOML
        st.sampled_from(HOSTILE_RAW),
        st.sampled_from(ESCAPE_TEXTS),
    )
    if depth <= 0:
        return base
    inner = hostile_values(depth=depth - 1)
    return st.one_of(
        base,
        st.lists(inner, max_size=3),
        st.dictionaries(st.sampled_from(["a", "min", "max", "value", "C1"]), inner, max_size=2),
    )


# --------------------------------------------------------------------------- self-checks


def test_to_toml_round_trips_every_demo_spec():
    # tomllib (Python standard library, TOML 1.0) is the reference reader.
    for p in sorted(DEMO.glob("*.toml")):
        data = tomllib.loads(p.read_text(encoding="utf-8"))
        assert tomllib.loads(to_toml(data)) == data, p.name


def test_to_toml_writes_hostile_scalars_tomllib_reads_back():
    data = {"a": {"nan": math.nan, "s": "\x00\u202e💥", "d": _DATES[0], "l": [1, "x"], "e": {}}}
    back = tomllib.loads(to_toml(data))
    assert math.isnan(back["a"]["nan"]) and back["a"]["s"] == "\x00\u202e💥"
    assert back["a"]["d"] == _DATES[0] and back["a"]["l"] == [1, "x"] and back["a"]["e"] == {}


def test_oracle_rejects_a_traceback_and_two_lines():
    import pytest

    with pytest.raises(AssertionError):
        assert_clean_exit(2, "", "Traceback (most recent call last):\n  ...\n")
    with pytest.raises(AssertionError):
        assert_clean_exit(2, "", "picker: error: a\npicker: error: b\n")
    with pytest.raises(AssertionError):  # no file named
        assert_clean_exit(2, "", "picker: error: x.toml: parts.C1: bad\n", files=("y.toml",))
    with pytest.raises(AssertionError):  # no key named
        assert_clean_exit(2, "", "picker: error: x.toml: something bad\n", files=("x.toml",))
    assert assert_clean_exit(2, "", "picker: error: x.toml: parts.C1.min: bad\n", files=("x.toml",))


def test_oracle_accepts_the_real_messages(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(to_toml(cheap(load_demo("probe_exciter.toml"))).replace('"5 %"', '"5 H"', 1))
    code, out, err = run_cli(["solve", str(p)])
    text = assert_clean_exit(code, out, err, files=(p,), allowed=(2,))
    assert "parts.C1.tolerance" in text
