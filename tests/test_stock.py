"""Stock-list loader: parsing, row/column errors, price breaks, value tables.

Value codes are checked against IEC 60062 (RKM code: 4n7 = 4.7 nF; tolerance
letter J = 5 %, K = 10 %). The price-break rule (largest break not above the
quantity; below the first break, the first break's price) is common practice,
no source.
"""

from __future__ import annotations

import csv
import io

import numpy as np
import pytest

from picker.errors import SpecError
from picker.spec.stock import load_stock, stock_table, unit_price, unknown_columns_note

HEADER = "id,kind,value,tolerance,dielectric,core,voltage,on_hand,price,price_breaks\n"


def _write(tmp_path, text, name="stock.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


GOOD = HEADER + (
    "C-100,C,4n7,J,C0G,,50 V,1000,0.05,100:0.03;1000:0.01\n"
    "C-101,c,4.7e-9,5 %,X7R,,50,,0.02,\n"
    "C-102,C,4.7 nF,0.05,C0G,,100,300,0.02,\n"
    "L-200,L,10 uH,K,,ferrite,,20,,\n"
    "L-201,L,1e-5,2 %,,air,,3,0.4,\n"
)


def test_load_good_file(tmp_path):
    s = load_stock(_write(tmp_path, GOOD))
    assert list(s.ids) == ["C-100", "C-101", "C-102", "L-200", "L-201"]
    assert list(s.kind) == ["C", "C", "C", "L", "L"]
    # IEC 60062 RKM code: 4n7 = 4.7 nF; all three spellings give the same value
    np.testing.assert_allclose(s.value, [4.7e-9, 4.7e-9, 4.7e-9, 1e-5, 1e-5], rtol=1e-12)
    # IEC 60062 letters J = 5 %, K = 10 %
    np.testing.assert_allclose(s.tol, [0.05, 0.05, 0.05, 0.10, 0.02], rtol=1e-12)
    assert list(s.material) == ["C0G", "X7R", "C0G", "ferrite", "air"]
    np.testing.assert_array_equal(s.voltage[:3], [50.0, 50.0, 100.0])
    assert np.isnan(s.voltage[3])
    np.testing.assert_array_equal(s.on_hand, [1000, np.inf, 300, 20, 3])
    assert s.row(3) == 5  # header is row 1


def test_price_breaks(tmp_path):
    s = load_stock(_write(tmp_path, GOOD))
    i = s.lookup("C-100")
    got = unit_price(s, [i] * 6, [1, 99, 100, 999, 1000, 10**6])
    np.testing.assert_allclose(got, [0.05, 0.05, 0.03, 0.03, 0.01, 0.01])
    assert np.isnan(unit_price(s, s.lookup("L-200"), 5)[0])  # no price given
    # price column blank, breaks only: below the first break the first break applies
    s2 = load_stock(_write(tmp_path, HEADER + "X,C,1n,5 %,,,,,,50:0.2;500:0.1\n", "b.csv"))
    np.testing.assert_allclose(unit_price(s2, [0, 0, 0], [10, 50, 600]), [0.2, 0.2, 0.1])


def test_stock_table_filters_and_sorts(tmp_path):
    s = load_stock(_write(tmp_path, GOOD))
    t = stock_table(s, "C", 1e-9, 1e-8)
    # equal values: cheaper first, then part id
    assert list(t["part_id"]) == ["C-101", "C-102", "C-100"]
    np.testing.assert_allclose(t["price"], [0.02, 0.02, 0.05])
    np.testing.assert_array_equal(t["stock_qty"], [np.inf, 300, 1000])
    t = stock_table(s, "C", 1e-9, 1e-8, dielectric="c0g", min_voltage=75)
    assert list(t["part_id"]) == ["C-102"]
    t = stock_table(s, "L", 1e-6, 1e-4, tolerance_max=0.05)
    assert list(t["part_id"]) == ["L-201"]
    t = stock_table(s, "C", 1e-9, 1e-8, qty=1000)  # priced at the 1000 break
    assert list(t["part_id"]) == ["C-100", "C-101", "C-102"]
    assert len(stock_table(s, "C", 1e-12, 1e-11)["values"]) == 0


def test_quoted_file_matches_plain(tmp_path):
    quoted = HEADER + '"C-1",C,"4.7 nF",J,C0G,,,"10","0.5",\n'
    plain = HEADER + "C-1,C,4.7 nF,J,C0G,,,10,0.5,\n"
    a, b = load_stock(_write(tmp_path, quoted, "a.csv")), load_stock(_write(tmp_path, plain))
    for f in ("value", "tol", "on_hand", "break_qty", "break_price"):
        np.testing.assert_array_equal(getattr(a, f), getattr(b, f))


@pytest.mark.parametrize(
    "body, key, words",
    [
        ("A,C,4n7,J,,,,,,\nA,C,1n,J,,,,,,\n", "row 3, column id", "row 2"),
        ("A,R,4n7,J,,,,,,\n", "row 2, column kind", "C or L"),
        ("A,C,10 uH,J,,,,,,\n", "row 2, column value", "10 uH"),
        ("A,C,-1e-9,J,,,,,,\n", "row 2, column value", "positive"),
        ("A,C,,J,,,,,,\n", "row 2, column value", "positive"),
        ("A,C,1n,150 %,,,,,,\n", "row 2, column tolerance", "150 %"),
        ("A,C,1n,J,,,,-5,,\n", "row 2, column on_hand", "-5"),
        ("A,C,1n,J,,,,2.5,,\n", "row 2, column on_hand", "whole"),
        ("A,C,1n,J,,,,,-0.1,\n", "row 2, column price", "-0.1"),
        ("A,C,1n,J,,,,,abc,\n", "row 2, column price", "abc"),
        ("A,C,1n,J,,,,,,100:0.1;50:0.2\n", "row 2, column price_breaks", "increasing"),
        ("A,C,1n,J,,,,,,100-0.1\n", "row 2, column price_breaks", "qty:price"),
        ("A,C,1n,J,,,,,,0:0.1\n", "row 2, column price_breaks", "whole quantity"),
        ("A,L,1u,J,X7R,,,,,\n", "row 2, column dielectric", "capacitors"),
        ("A,C,1n,J,,ferrite,,,,\n", "row 2, column core", "inductors"),
        ("A,C,1n,J,,,-3 V,,,\n", "row 2, column voltage", "positive"),
        ("A,C,1n,J,,,,,,\nB,C,1n,J,,,,\n", "row 3", "10 cells"),
        # a blank line shifts the row numbers the message reports
        ("A,C,1n,J,,,,,,\n\nB,C,1n,J,,,,-1,,\n", "row 4, column on_hand", "-1"),
    ],
)
def test_row_errors(tmp_path, body, key, words):
    p = _write(tmp_path, HEADER + body)
    with pytest.raises(SpecError) as err:
        load_stock(p)
    e = err.value
    assert e.file == str(p)
    assert e.key == key
    assert words in e.message
    assert "\n" not in str(e)


def test_row_numbers_with_quoted_line_break(tmp_path):
    # a quoted cell spanning two lines: the next record starts on line 4
    body = 'A,C,1n,J,"C0G\nspecial",,,,,\nB,C,1n,J,,,,x,,\n'
    with pytest.raises(SpecError) as err:
        load_stock(_write(tmp_path, HEADER + body))
    assert err.value.key == "row 4, column on_hand"


@pytest.mark.parametrize(
    "text, key, words",
    [
        # an unknown column is kept, so the fault is the missing one (the error names both)
        ("id,kind,value,colour\n", "row 1", "does not know: colour"),
        ("id,kind,value\n", "row 1", "tolerance"),
        ("id,kind,value,tolerance,id\n", "row 1, column 5", "twice"),
        (HEADER, None, "at least one part row"),
        ("", None, "empty"),
    ],
)
def test_header_errors(tmp_path, text, key, words):
    with pytest.raises(SpecError) as err:
        load_stock(_write(tmp_path, text))
    assert err.value.key == key
    assert words in err.value.message


def test_missing_file_and_case_insensitive_header(tmp_path):
    with pytest.raises(SpecError, match="no such file"):
        load_stock(tmp_path / "nope.csv")
    s = load_stock(_write(tmp_path, " ID ,Kind,VALUE,Tolerance\nq1,L,22 uH,M\n"))
    assert s.ids[0] == "q1" and s.value[0] == pytest.approx(22e-6, rel=1e-12)
    assert s.tol[0] == pytest.approx(0.20)  # IEC 60062: M = 20 %
    assert np.isinf(s.on_hand[0])


@pytest.mark.parametrize("delim", [";", "\t"])
def test_delimiter_is_detected(tmp_path, delim):
    """A ';'- or tab-separated export (spreadsheets in locales with a decimal comma
    write ';'; common practice, no source) loads as the comma file does."""
    rows = list(csv.reader(io.StringIO(GOOD)))
    buf = io.StringIO()
    csv.writer(buf, delimiter=delim, lineterminator="\n").writerows(rows)
    other = load_stock(_write(tmp_path, buf.getvalue(), "other.csv"))
    ref = load_stock(_write(tmp_path, GOOD))
    assert list(other.ids) == list(ref.ids)
    np.testing.assert_array_equal(other.value, ref.value)
    np.testing.assert_array_equal(other.break_price, ref.break_price)
    np.testing.assert_array_equal(other.on_hand, ref.on_hand)


def test_unknown_columns_are_kept(tmp_path):
    text = (
        "ID;Kind;Value;Tolerance;Manufacturer;MPN;Footprint;\n"
        "C-1;C;4n7;J;Maker A;MA-472J;0603;\n"
        "C-2;C;1n;K;Maker B;MB-102K;0402;\n"
    )
    s = load_stock(_write(tmp_path, text))
    assert list(s.extra) == ["Manufacturer", "MPN", "Footprint"]  # as written, in order
    assert list(s.extra["MPN"]) == ["MA-472J", "MB-102K"]
    note = unknown_columns_note(s)
    assert note is not None and "Manufacturer, MPN, Footprint" in note
    assert unknown_columns_note(load_stock(_write(tmp_path, GOOD, "g.csv"))) is None


def test_cli_notes_unknown_columns_once(run_cli, tmp_path):
    from conftest import DEMO

    lines = (DEMO / "stock_demo.csv").read_text(encoding="utf-8").splitlines()
    lines = [ln + (",mpn" if i == 0 else f",X{i}") for i, ln in enumerate(lines)]
    (tmp_path / "stock_demo.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    spec = tmp_path / "spec.toml"
    spec.write_text((DEMO / "buyer_exciter.toml").read_text(encoding="utf-8"), encoding="utf-8")
    code, _, err = run_cli("solve", str(spec), "--samples", "500", "-f", "json")
    assert code == 0, err
    notes = [ln for ln in err.splitlines() if "carried to the BOM: mpn" in ln]
    assert len(notes) == 1  # three positions read the same list: one note
