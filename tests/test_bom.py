"""BOM export: CSV-injection guard, number round trip, safe writes.

The guard follows OWASP's "CSV Injection" guidance (cells starting with
= + - @ tab or carriage return are prefixed with a single quote; common
practice). CSV quoting follows RFC 4180 and is read back with Python's csv
module; JSON is read back with the json module.
"""

from __future__ import annotations

import csv
import io
import json
import math

import pytest

from picker.buyer.model import BomLine
from picker.errors import SpecError
from picker.report.bom import COLUMNS, bom_csv, bom_json, bom_rows, write_bom

HOSTILE = [
    "=cmd|' /C calc'!A0",
    "=1+1",
    "+SUM(A1:A9)",
    "-2+3",
    "@SUM(1)",
    "\t=1",
    "\r=1",
    '=HYPERLINK("http://example.invalid","x")',
]


def _line(part_id="C-1", material="C0G", **kw):
    base = dict(
        part_id=part_id,
        kind="C",
        value=4.7e-9,
        tol=0.05,
        qty_per_board=2,
        qty_build=200,
        unit_price=0.01,
        extended_price=2.0000000000000004,  # 0.01 x 200 with float noise
        on_hand=math.inf,
        short_by=0,
        material=material,
    )
    base.update(kw)
    return BomLine(**base)


def _read_csv(text):
    return list(csv.reader(io.StringIO(text, newline="")))


@pytest.mark.parametrize("bad", HOSTILE)
def test_hostile_cells_are_neutralised(bad):
    rows = _read_csv(bom_csv([_line(part_id=bad, material=bad)]))
    assert rows[0] == list(COLUMNS)
    got = dict(zip(COLUMNS, rows[1], strict=True))
    for col in ("part_id", "material"):
        assert got[col] == "'" + bad  # the original text survives behind the quote
        assert got[col][0] not in "=+-@\t\r"


def test_every_cell_is_safe_and_numbers_round_trip():
    lines = [_line(part_id=h, material=h) for h in HOSTILE] + [
        _line(
            "L-9",
            kind="L",
            value=2.2e-5,
            tol=0.1,
            material="ferrite",
            unit_price=math.nan,
            extended_price=math.nan,
            on_hand=150.0,
            short_by=50,
        )
    ]
    rows = _read_csv(bom_csv(lines))
    for r in rows[1:]:
        for cell in r:
            assert not cell or cell[0] not in "=+-@\t\r"
    last = dict(zip(COLUMNS, rows[-1], strict=True))
    assert last["value"] == "22 µH"
    assert float(last["value_si"]) == 2.2e-5  # repr round-trips exactly
    assert last["unit_price"] == "" and last["extended_price"] == ""
    assert last["on_hand"] == "150" and last["short_by"] == "50"
    first = dict(zip(COLUMNS, rows[1], strict=True))
    assert first["value"] == "4.7 nF" and first["tolerance"] == "5 %"
    assert first["extended_price"] == "2.0"  # float noise rounded away
    assert first["on_hand"] == ""  # not tracked


def test_plain_cells_unchanged():
    rows = _read_csv(bom_csv([_line(part_id="CAP 0042, rev B", material='X7R "soft"')]))
    got = dict(zip(COLUMNS, rows[1], strict=True))
    assert got["part_id"] == "CAP 0042, rev B"
    assert got["material"] == 'X7R "soft"'


def test_json_round_trip():
    data = json.loads(bom_json([_line(on_hand=500.0)], build_quantity=100))
    assert data["build_quantity"] == 100
    row = data["bom"][0]
    assert set(row) == set(COLUMNS)
    assert row["value_si"] == 4.7e-9 and row["on_hand"] == 500
    assert row["extended_price"] == 2.0
    assert bom_rows([_line(unit_price=math.nan)])[0]["unit_price"] is None


def test_write_bom_safety(tmp_path):
    out = tmp_path / "bom.csv"
    write_bom(out, [_line()])
    first = out.read_bytes()
    # a UTF-8 byte-order mark, then the header (designators first)
    assert first.startswith(b"\xef\xbb\xbfdesignators,part_id,kind,value")
    with pytest.raises(SpecError, match="exists"):
        write_bom(out, [_line(part_id="X")])
    assert out.read_bytes() == first  # untouched
    write_bom(out, [_line(part_id="X")], force=True)
    assert b"X," in out.read_bytes()
    plan = tmp_path / "plan.toml"
    plan.write_text("x = 1\n")
    with pytest.raises(SpecError, match="input"):
        write_bom(plan.with_suffix(".json"), [_line()], inputs=[plan.with_suffix(".json")])
    with pytest.raises(SpecError, match=r"\.csv or \.json"):
        write_bom(tmp_path / "bom.xlsx", [_line()])
    assert not list(tmp_path.glob(".*.tmp"))  # no temporary file left behind
    j = tmp_path / "bom.json"
    write_bom(j, [_line()])
    assert json.loads(j.read_text())["bom"][0]["part_id"] == "C-1"


def _stock(tmp_path, text, name="stock.csv"):
    from picker.spec.stock import load_stock

    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return load_stock(p)


def test_designators_and_the_stock_lists_own_columns(tmp_path):
    # an ERP-style export: descriptive columns picker does not use, a currency column
    st = _stock(
        tmp_path,
        "id,kind,value,tolerance,manufacturer,mpn,footprint,currency\n"
        "C-1,C,4.7n,J,Maker A,MA-472J,0603,EUR\n"
        "C-2,C,1n,J,Maker B,=EVIL(),0402,EUR\n",
    )
    lines = [_line("C-1"), _line("C-2", value=1e-9), _line("C 10 nF 5 %", value=1e-8)]
    des = {"C-1": ["north.C1", "south.C1"], "C-2": ["east.C2"]}
    text = bom_csv(lines, designators=des, stocks=[st])
    # RFC 4180, section 2, rule 1: CRLF line ends
    assert text.count("\r\n") == 4 and "\n" not in text.replace("\r\n", "")
    rows = list(csv.DictReader(io.StringIO(text, newline="")))
    assert list(rows[0])[: len(COLUMNS)] == list(COLUMNS)
    assert list(rows[0])[len(COLUMNS) :] == ["manufacturer", "mpn", "footprint"]
    assert rows[0]["designators"] == "north.C1, south.C1"
    assert rows[0]["mpn"] == "MA-472J" and rows[0]["footprint"] == "0603"
    assert rows[0]["currency"] == "EUR"
    assert rows[1]["mpn"] == "'=EVIL()"  # the injection guard covers carried columns too
    assert rows[2]["designators"] == "" and rows[2]["mpn"] == ""  # a generic part: blank
    data = json.loads(bom_json(lines, designators=des, stocks=[st]))
    assert data["bom"][0]["manufacturer"] == "Maker A"


def test_plan_bom_carries_designators(tmp_path):
    """The demo plan's BOM: every chosen part names its channel.position places, and
    the quantities per board equal the number of places (a fact of the plan itself)."""
    from pathlib import Path

    from picker.cli.consolidate import run_consolidate

    demo = Path(__file__).resolve().parent.parent / "demo_specs" / "plan_demo.toml"
    out = tmp_path / "bom.csv"
    assert run_consolidate(demo, fmt="json", bom=out) == 0
    raw = out.read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf")
    rows = list(csv.DictReader(io.StringIO(raw.decode("utf-8-sig"), newline="")))
    channels = {"north", "east", "south"}
    seen = []
    for r in rows:
        places = r["designators"].split(", ")
        assert all(p.split(".")[0] in channels for p in places)
        assert int(r["qty_per_board"]) >= len(places)
        seen += places
    # three channels of a three-position Colpitts: nine places, each once
    assert len(seen) == len(set(seen)) == 9


def test_single_design_bom_from_solve(run_cli, tmp_path):
    """solve --bom: the best design's parts, each at its position, priced from the stock
    list (read here with the csv module) at the build quantity's break."""
    from pathlib import Path

    demo = Path(__file__).resolve().parent.parent / "demo_specs"
    with open(demo / "stock_demo.csv", encoding="utf-8-sig", newline="") as f:
        stock = {r["id"]: r for r in csv.DictReader(f)}
    out = tmp_path / "bom.csv"
    code, js, err = run_cli(
        "solve", str(demo / "buyer_exciter.toml"), "-f", "json", "--bom", str(out)
    )
    assert code == 0, err
    assert f"picker: wrote {out}" in err
    best = json.loads(js)["candidates"][0]
    rows = list(csv.DictReader(io.StringIO(out.read_bytes().decode("utf-8-sig"), newline="")))
    assert sum(int(r["qty_per_board"]) for r in rows) == best["cost"]["parts_per_board"]
    want = {}
    for pos, part in best["parts"].items():
        for q in part.get("pair") or [part]:
            want.setdefault(q["part_id"], []).append(pos)
    assert {r["part_id"]: r["designators"].split(", ") for r in rows} == want
    build = best["cost"]["build_quantity"]  # 200: below every price break of the demo list
    for r in rows:
        s = stock[r["part_id"]]
        breaks = [b.split(":") for b in s["price_breaks"].split(";") if b]
        qty = int(r["qty_build"])
        assert qty == build * int(r["qty_per_board"])
        price = float(s["price"])
        for q, p in breaks:  # the largest break not above the quantity (common practice)
            if qty >= int(q):
                price = float(p)
        assert float(r["unit_price"]) == pytest.approx(price)
        assert float(r["extended_price"]) == pytest.approx(price * qty)
        on_hand = int(s["on_hand"])
        assert int(r["short_by"]) == max(0, qty - on_hand)


# ------------------------------------------------------------------ currency of the prices
# ISO 4217 alphabetic codes are three letters A-Z ("EUR", "USD", "CHF"); the list itself is
# not checked (an in-house or new code is accepted).


def _currency_spec(tmp_path, value: str) -> object:
    from pathlib import Path

    demo = Path(__file__).resolve().parent.parent / "demo_specs"
    text = (demo / "buyer_exciter.toml").read_text(encoding="utf-8")
    assert "\n[cost]\n" in text
    text = text.replace("\n[cost]\n", f"\n[cost]\ncurrency = {json.dumps(value)}\n")
    (tmp_path / "stock_demo.csv").write_text(
        (demo / "stock_demo.csv").read_text(encoding="utf-8"), encoding="utf-8"
    )
    p = tmp_path / "buyer.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_spec_currency_fills_the_bom_the_table_and_the_json(run_cli, tmp_path, monkeypatch):
    monkeypatch.setenv("COLUMNS", "120")
    spec = _currency_spec(tmp_path, "eur")  # lower case is read as the code
    out = tmp_path / "bom.csv"
    code, js, err = run_cli("solve", str(spec), "--samples", "300", "-f", "json", "--bom", str(out))
    assert code == 0, err
    rows = list(csv.DictReader(io.StringIO(out.read_bytes().decode("utf-8-sig"), newline="")))
    assert rows and {r["currency"] for r in rows} == {"EUR"}
    data = json.loads(js)
    assert all(c["cost"]["currency"] == "EUR" for c in data["candidates"])
    page = tmp_path / "report.html"
    code, text, err = run_cli("solve", str(spec), "--samples", "300", "--report", str(page))
    assert code == 0, err
    assert "cost/board (EUR)" in text
    html = page.read_text("utf-8")  # the report page names the currency as the table does
    assert "cost/board (EUR)" in html and "unit price (EUR)" in html


def test_without_a_currency_the_bom_column_is_blank_and_json_unchanged(run_cli, tmp_path):
    from pathlib import Path

    demo = Path(__file__).resolve().parent.parent / "demo_specs"
    out = tmp_path / "bom.json"
    code, js, err = run_cli(
        "solve",
        str(demo / "buyer_exciter.toml"),
        "--samples",
        "300",
        "-f",
        "json",
        "--bom",
        str(out),
    )
    assert code == 0, err
    assert {r["currency"] for r in json.loads(out.read_text("utf-8"))["bom"]} == {""}
    assert all("currency" not in c["cost"] for c in json.loads(js)["candidates"])


@pytest.mark.parametrize("bad", ["EURO", "E1R", "", "€", "US D", 978])
def test_a_currency_that_is_not_three_letters_is_one_line(run_cli, tmp_path, bad):
    from pathlib import Path

    demo = Path(__file__).resolve().parent.parent / "demo_specs"
    text = (demo / "buyer_exciter.toml").read_text(encoding="utf-8")
    text = text.replace("\n[cost]\n", f"\n[cost]\ncurrency = {json.dumps(bad)}\n")
    p = tmp_path / "buyer.toml"
    p.write_text(text, encoding="utf-8")
    code, out, err = run_cli("solve", str(p))
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert "cost.currency" in lines[0] and "three-letter currency code" in lines[0]


def test_a_stock_lists_own_currency_wins_over_the_spec(tmp_path):
    st = _stock(tmp_path, "id,kind,value,tolerance,currency\nC-1,C,4.7n,J,USD\n")
    rows = bom_rows([_line("C-1"), _line("C 10 nF 5 %", value=1e-8)], stocks=[st], currency="EUR")
    assert rows[0]["currency"] == "USD"  # the list priced it
    assert rows[1]["currency"] == "EUR"  # a generic part, priced by the spec's keys


def test_plan_currency_in_bom_json_and_table(run_cli, tmp_path, monkeypatch):
    from pathlib import Path

    monkeypatch.setenv("COLUMNS", "80")
    demo = Path(__file__).resolve().parent.parent / "demo_specs"
    text = (demo / "plan_demo.toml").read_text(encoding="utf-8")
    text = text.replace('base = "', f'currency = "CHF"\nbase = "{demo}/', 1)
    text = text.replace('stock = "', f'stock = "{demo}/', 1)
    p = tmp_path / "plan.toml"
    p.write_text(text, encoding="utf-8")
    out = tmp_path / "bom.csv"
    code, js, err = run_cli("consolidate", str(p), "-f", "json", "--bom", str(out))
    assert code == 0, err
    assert json.loads(js)["currency"] == "CHF"
    rows = list(csv.DictReader(io.StringIO(out.read_bytes().decode("utf-8-sig"), newline="")))
    assert {r["currency"] for r in rows} == {"CHF"}
    code, table, err = run_cli("consolidate", str(p))
    assert code == 0, err
    assert "extended (CHF)" in table and "CHF" in table.splitlines()[-2]


def _plan_with_channel_currencies(tmp_path, north: str, east: str):
    from pathlib import Path

    demo = Path(__file__).resolve().parent.parent / "demo_specs"
    text = (demo / "plan_demo.toml").read_text(encoding="utf-8")
    text = text.replace('base = "', f'base = "{demo}/', 1).replace(
        'stock = "', f'stock = "{demo}/', 1
    )
    text += f'\n[channels.north.set]\n"cost.currency" = "{north}"\n'
    text = text.replace(
        'min_yield = "85 %"\n',
        f'min_yield = "85 %"\n[channels.east.set]\n"cost.currency" = "{east}"\n',
    )
    p = tmp_path / "plan.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_plan_takes_the_channel_specs_currency(run_cli, tmp_path):
    p = _plan_with_channel_currencies(tmp_path, "USD", "usd")
    code, js, err = run_cli("consolidate", str(p), "-f", "json")
    assert code == 0, err
    data = json.loads(js)
    assert data["currency"] == "USD" and {r["currency"] for r in data["bom"]} == {"USD"}


def test_plan_channels_in_two_currencies_are_refused(run_cli, tmp_path):
    p = _plan_with_channel_currencies(tmp_path, "USD", "EUR")
    out = tmp_path / "bom.csv"
    code, js, err = run_cli("consolidate", str(p), "--bom", str(out))
    assert code == 2 and not out.exists() and js == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("picker: error: ")
    assert "currency" in lines[0] and "EUR, USD" in lines[0]
