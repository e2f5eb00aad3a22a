"""Fuzzing spec files: mutated demo specs through ``picker solve`` and ``evaluate``.

Each case starts from a bundled demo spec made cheap (200 boards, 5 Monte
Carlo designs, a bounded search; :func:`test_fuzz_harness.cheap`) and applies
one to three mutations: a key set to a hostile value (wrong type, wrong unit,
NaN, inf, huge, tiny, unicode, a datetime), an unknown key, a key removed, a
table replaced by a scalar or a scalar by a table, or a damage to the TOML
text itself (truncated, a line repeated so a key is duplicated, a character
changed). The oracle is :func:`test_fuzz_harness.assert_clean_exit`: exit
status 0, 1 or 2, and on 2 exactly one line naming the spec file and the key.
"""

from __future__ import annotations

import tomllib

from conftest import DEMO
from hypothesis import event, given
from hypothesis import strategies as st
from test_fuzz_harness import (
    assert_clean_exit,
    cheap,
    check_json_result,
    del_path,
    fuzz_settings,
    hostile_values,
    leaf_paths,
    load_demo,
    run_cli,
    set_path,
    to_toml,
)

#: Demo specs the fuzzers start from (the plan's base spec is a plain Colpitts).
BASES = {
    name: cheap(load_demo(name))
    for name in (
        "probe_exciter.toml",
        "clapp_vfo.toml",
        "tone_source.toml",
        "colpitts_bjt.toml",
        "production_exciter.toml",
        "buyer_exciter.toml",  # stock positions, a parallel pair, [cost]
        "hartley_beacon.toml",  # [tank] coupling, two inductors
    )
}


def _write(folder, name: str, text: str):
    """The spec, and the stock list the buyer's demo names beside it."""
    (folder / "stock_demo.csv").write_text((DEMO / "stock_demo.csv").read_text("utf-8"))
    p = folder / name
    p.write_bytes(text.encode("utf-8", "surrogatepass"))
    return p


#: Keys whose mutation could make a case slow rather than wrong; they only get
#: values that are invalid or small.
_COSTLY = {"samples", "candidates", "max_samples", "temperature_points", "max_designs", "top"}
_COSTLY_VALUES = st.sampled_from(
    [0, -1, 1, 2, 99, 100, 150, 1.5, "200", True, 2**63 - 1, -(2**63), float("nan"), [], {}]
)

_NEW_KEYS = st.sampled_from(
    ["tolerence", "Min", "value", "stray_c", "C4", "windows", "seed ", "ü", "", "max.min", "parts"]
)


@st.composite
def mutated_spec(draw) -> tuple[str, str, list[str]]:
    """(base name, TOML text, what was done) for one mutated spec."""
    name = draw(st.sampled_from(sorted(BASES)))
    data = BASES[name]
    notes: list[str] = []
    for _ in range(draw(st.integers(1, 3))):
        paths = leaf_paths(data)
        kind = draw(st.sampled_from(["set", "set", "set", "unknown", "delete", "renest", "text"]))
        if kind == "set" and paths:
            path = draw(st.sampled_from(paths))
            value = draw(_COSTLY_VALUES if path[-1] in _COSTLY else hostile_values())
            data = set_path(data, path, value)
            notes.append(f"set {'.'.join(path)} = {value!r}")
        elif kind == "unknown":
            tables = [()] + [p for p in paths if isinstance(_get(data, p), dict)]
            parent = draw(st.sampled_from(tables))
            key = draw(_NEW_KEYS)
            data = set_path(data, (*parent, key), draw(hostile_values(depth=0)))
            notes.append(f"unknown key {'.'.join((*parent, key))!r}")
        elif kind == "delete" and paths:
            path = draw(st.sampled_from(paths))
            data = del_path(data, path)
            notes.append(f"delete {'.'.join(path)}")
        elif kind == "renest" and paths:
            path = draw(st.sampled_from(paths))
            old = _get(data, path)
            new = draw(hostile_values(depth=0)) if isinstance(old, dict) else {"value": old}
            data = set_path(data, path, new)
            notes.append(f"renest {'.'.join(path)}")
        else:
            notes.append("text")
    text = to_toml(data)
    if "text" in notes:
        text = draw(_damage(text))
    return name, text, notes


def _get(d, path):
    for k in path:
        d = d[k]
    return d


@st.composite
def _damage(draw, text: str) -> str:
    lines = text.splitlines(keepends=True)
    how = draw(st.sampled_from(["truncate", "duplicate", "char", "swap", "drop-bracket"]))
    if how == "truncate":
        return text[: draw(st.integers(0, len(text)))]
    if how == "duplicate" and lines:
        i = draw(st.integers(0, len(lines) - 1))
        return "".join(lines[: i + 1] + [lines[i]] + lines[i + 1 :])
    if how == "char" and text:
        i = draw(st.integers(0, len(text) - 1))
        c = draw(st.sampled_from(['"', "=", "[", "]", "\n", "#", "\x00", "\ufeff", "é", ",", " "]))
        return text[:i] + c + text[i + 1 :]
    if how == "swap" and len(lines) > 1:
        i = draw(st.integers(0, len(lines) - 2))
        lines[i], lines[i + 1] = lines[i + 1], lines[i]
        return "".join(lines)
    return text.replace("]", "", 1)


@fuzz_settings(800)
@given(case=mutated_spec(), fmt=st.sampled_from(["json", "table", "csv"]))
def test_solve_on_a_mutated_spec_never_tracebacks(tmp_path_factory, case, fmt):
    name, text, notes = case
    p = _write(tmp_path_factory.mktemp("spec"), name, text)
    code, out, err = run_cli(
        ["solve", str(p), "-f", fmt, "--samples", "200", "--candidates", "5"], cwd=p.parent
    )
    event(f"exit {code}")
    assert_clean_exit(code, out, err, files=(p,))
    if code == 0 and fmt == "json":
        check_json_result(out)


@fuzz_settings(200)
@given(case=mutated_spec())
def test_evaluate_on_a_mutated_spec_never_tracebacks(tmp_path_factory, case):
    name, text, _ = case
    p = _write(tmp_path_factory.mktemp("spec"), name, text)
    try:
        topo = tomllib.loads(text).get("topology", "colpitts")
    except (tomllib.TOMLDecodeError, ValueError, RecursionError):  # huge integers, deep nesting
        topo = "colpitts"
    sets = ["--set", "C1=150p", "--set", "C2=330p", "--set", "L=2.2m"]
    if str(topo).strip().lower() == "clapp":
        sets += ["--set", "C3=47p"]
    code, out, err = run_cli(
        ["evaluate", str(p), *sets, "-f", "json", "--samples", "200"], cwd=p.parent
    )
    event(f"exit {code}")
    assert_clean_exit(code, out, err, files=(p,))
    if code == 0:
        check_json_result(out)
