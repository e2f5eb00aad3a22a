"""Fuzzing the other input files: stock lists, measurement files, lot files and plans.

Stock lists, lot files and plans are loaded through their loaders directly
(``load_stock``, ``read_lot_csv``, ``load_plan``): each case must either load
or raise a :class:`~picker.errors.SpecError` whose one line names the file and
the row (or key); any other exception fails the test. Measurement files go
through ``picker calibrate`` in-process, and a few stock lists and plans
through ``picker consolidate`` end to end, with the CLI oracle of
:mod:`test_fuzz_harness`.
"""

from __future__ import annotations

import copy
import csv
import io
import tomllib

import numpy as np
from conftest import DEMO
from hypothesis import event, given
from hypothesis import strategies as st
from test_fuzz_harness import (
    HOSTILE_TEXTS,
    assert_clean_exit,
    cheap,
    fuzz_settings,
    hostile_values,
    leaf_paths,
    load_demo,
    names_location,
    run_cli,
    set_path,
    to_toml,
)

from picker.errors import SpecError

STOCK_ROWS = list(csv.reader(io.StringIO((DEMO / "stock_demo.csv").read_text(encoding="utf-8"))))
UNITS_TEXT = (DEMO / "bench_units.csv").read_text(encoding="utf-8")

_CELL = st.one_of(
    st.sampled_from(HOSTILE_TEXTS),
    st.text(max_size=10),
    st.sampled_from(["C", "L", "R", "c", "", "1000:0.01;100:0.02", "1:0", "x:y", "100:-1", "-5"]),
    st.sampled_from(["1e-9", "4.7e-9", "nan", "inf", "-1", "0", "1e400", "2.5", "NaN", "1,5"]),
)


@st.composite
def _csv_text(draw, rows: list[list[str]], *, header_names: list[str]) -> str:
    """Damage a CSV given as rows (the first is the header)."""
    rows = copy.deepcopy(rows)
    for _ in range(draw(st.integers(1, 3))):
        how = draw(
            st.sampled_from(
                ["cell", "cell", "cell", "header", "dup-row", "drop-cell", "add-cell", "drop-col"]
            )
        )
        r = draw(st.integers(0, len(rows) - 1))
        if how == "cell" and rows[r]:
            c = draw(st.integers(0, len(rows[r]) - 1))
            rows[r][c] = draw(_CELL)
        elif how == "header" and rows[0]:
            c = draw(st.integers(0, len(rows[0]) - 1))
            rows[0][c] = draw(st.sampled_from([*header_names, "Value ", "VALUE", "prize", ""]))
        elif how == "dup-row" and len(rows) > 1:
            rows.append(list(rows[max(r, 1)]))
        elif how == "drop-cell" and rows[r]:
            rows[r].pop()
        elif how == "add-cell":
            rows[r].append(draw(_CELL))
        elif how == "drop-col" and rows[0]:
            c = draw(st.integers(0, len(rows[0]) - 1))
            for row in rows:
                if c < len(row):
                    row.pop(c)
    buf = io.StringIO()
    csv.writer(buf, lineterminator=draw(st.sampled_from(["\n", "\r\n"]))).writerows(rows)
    text = buf.getvalue()
    how = draw(st.sampled_from(["none", "none", "truncate", "bom", "blank", "quote", "nul"]))
    if how == "truncate":
        text = text[: draw(st.integers(0, len(text)))]
    elif how == "bom":
        text = "\ufeff" + text
    elif how == "blank":
        text = text.replace("\n", "\n\n", 1)
    elif how == "quote":
        i = draw(st.integers(0, max(len(text) - 1, 0)))
        text = text[:i] + '"' + text[i:]
    elif how == "nul":
        text = text.replace(",", ",\x00", 1)
    return text


def _assert_spec_error(exc: SpecError, path) -> str:
    line = exc.one_line()
    assert "\n" not in line and line.startswith(str(path)), line
    return line[len(str(path)) + 2 :]


# --------------------------------------------------------------------------- stock lists


@fuzz_settings(400)
@given(text=_csv_text(STOCK_ROWS, header_names=list(STOCK_ROWS[0])), raw=st.booleans())
def test_a_damaged_stock_list_loads_or_names_the_row(tmp_path_factory, text, raw):
    from picker.spec.stock import load_stock

    p = tmp_path_factory.mktemp("stock") / "stock.csv"
    if raw:  # bytes that are not UTF-8 now and then
        p.write_bytes(text.encode("utf-8") + b"\xff\xfe" * (len(text) % 3 == 0))
    else:
        p.write_text(text, encoding="utf-8", newline="")
    try:
        s = load_stock(p)
    except SpecError as exc:
        event("refused")
        rest = _assert_spec_error(exc, p)
        assert rest.startswith("row ") or rest.startswith("expected"), rest
        return
    event("loaded")
    assert len(s) > 0
    assert np.all(s.value > 0) and np.all(np.isfinite(s.value))
    assert np.all((s.tol > 0) & (s.tol < 1))
    assert np.all(s.on_hand >= 0)


# --------------------------------------------------------------------------- measurements


@fuzz_settings(150)
@given(
    text=st.builds(lambda t: t, st.just(UNITS_TEXT)).flatmap(
        lambda t: _csv_text(
            [r for r in csv.reader(io.StringIO(t)) if r and not r[0].startswith("#")],
            header_names=["unit", "C1", "C2", "L", "C3", "frequency", "measured", "weight"],
        )
    ),
    fmt=st.sampled_from(["table", "json"]),
)
def test_calibrate_on_a_damaged_measurements_file(tmp_path_factory, text, fmt):
    p = tmp_path_factory.mktemp("units") / "units.csv"
    p.write_text(text, encoding="utf-8", newline="")
    code, out, err = run_cli(
        ["calibrate", str(p), "--topology", "colpitts", "--format", fmt], cwd=p.parent
    )
    event(f"exit {code}")
    assert_clean_exit(code, out, err, files=(p,), location=False)
    if code == 2:
        rest = err.split(f"{p}: ", 1)[1]
        assert rest.startswith("row ") or rest[:1].islower(), rest


# --------------------------------------------------------------------------- lot files


@fuzz_settings(150)
@given(
    cells=st.lists(
        st.sampled_from(["4.7 nF", "4.71n", "4.69e-9", "4.72 nF", "4.68n"]),
        min_size=15,
        max_size=30,
    ),
    bad=st.one_of(st.none(), _CELL),
    where=st.integers(0, 40),
    header=st.sampled_from(["value", "Value", "serial,value", "", "x,y"]),
)
def test_a_damaged_lot_file_reads_or_names_the_row(tmp_path_factory, cells, bad, where, header):
    from picker.spec.lots import load_lot_csv

    if bad is not None:
        cells = [*cells[:where], bad, *cells[where:]]
    p = tmp_path_factory.mktemp("lot") / "lot.csv"
    width = header.count(",") + 1
    lines = ([header] if header else []) + [",".join(["s"] * (width - 1) + [c]) for c in cells]
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    try:
        dev = load_lot_csv(p, 4.7e-9, "F", tol=0.05)
    except SpecError as exc:
        event("refused")
        _assert_spec_error(exc, p)
        return
    event("loaded")
    assert dev.size >= 20 and np.all(np.isfinite(dev)) and np.all(dev > -1)


# --------------------------------------------------------------------------- plans

PLAN = tomllib.loads((DEMO / "plan_demo.toml").read_text(encoding="utf-8"))


@fuzz_settings(300)
@given(data=st.data())
def test_a_mutated_plan_loads_or_names_the_key(tmp_path_factory, data):
    from picker.spec.plan import load_plan

    plan = copy.deepcopy(PLAN)
    for _ in range(data.draw(st.integers(1, 2))):
        path = data.draw(st.sampled_from(leaf_paths(plan)))
        plan = set_path(plan, path, data.draw(hostile_values()))
    p = tmp_path_factory.mktemp("plan") / "plan.toml"
    p.write_text(to_toml(plan), encoding="utf-8")
    try:
        load_plan(p)
    except SpecError as exc:
        event("refused")
        rest = _assert_spec_error(exc, p)
        assert names_location(rest), rest
        return
    event("loaded")


def _cheap_plan_dir(tmp, plan: dict, stock_text: str | None = None):
    base = cheap(load_demo("plan_sensor_base.toml"))
    base["yield"]["candidates"] = 20
    (tmp / "plan_sensor_base.toml").write_text(to_toml(base), encoding="utf-8")
    (tmp / "stock_demo.csv").write_text(
        stock_text if stock_text is not None else (DEMO / "stock_demo.csv").read_text("utf-8"),
        encoding="utf-8",
        newline="",
    )
    p = tmp / "plan.toml"
    p.write_text(to_toml(plan), encoding="utf-8")
    return p


_SMALL_PLAN = {**copy.deepcopy(PLAN), "candidates": 10, "time_limit": 2}


@fuzz_settings(15)
@given(data=st.data())
def test_consolidate_on_a_mutated_plan_or_stock(tmp_path_factory, data):
    tmp = tmp_path_factory.mktemp("consolidate")
    plan = copy.deepcopy(_SMALL_PLAN)
    stock_text = None
    if data.draw(st.booleans()):
        path = data.draw(st.sampled_from(leaf_paths(plan)))
        if path[-1] not in ("candidates", "time_limit", "build_quantity"):
            plan = set_path(plan, path, data.draw(hostile_values()))
    else:
        stock_text = data.draw(_csv_text(STOCK_ROWS, header_names=list(STOCK_ROWS[0])))
    p = _cheap_plan_dir(tmp, plan, stock_text)
    code, out, err = run_cli(
        ["consolidate", str(p), "--format", "json", "--time-limit", "2"], cwd=tmp
    )
    event(f"exit {code}")
    files = (p, tmp / "stock_demo.csv", tmp / "plan_sensor_base.toml")
    assert_clean_exit(code, out, err, files=files, location=False)
