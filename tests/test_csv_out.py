"""Files other tools read: the results CSV, ``-o FILE`` by extension, the series CSV.

CSV layout follows RFC 4180 (Shafranovich, "Common Format and MIME Type for
Comma-Separated Values (CSV) Files", 2005): section 2 rule 1, records end in
CRLF; rule 3, one header line; rule 6, fields holding commas, quotes or line
breaks are quoted. Files start with the UTF-8 byte-order mark EF BB BF (Unicode
Standard, section 23.8 "Specials", U+FEFF), which spreadsheets take as the sign
of UTF-8 (common practice, no source). Read back with Python's csv module and
pandas, both independent of the writer.
"""

from __future__ import annotations

import csv
import io
import json
import math

import pandas as pd
import pytest
from conftest import DEMO

BUYER = str(DEMO / "buyer_exciter.toml")
PROBE = str(DEMO / "probe_exciter.toml")
UTF8_BOM = b"\xef\xbb\xbf"  # Unicode U+FEFF encoded in UTF-8


def _csv(run_cli, spec, *more):
    code, out, err = run_cli("solve", spec, "-f", "csv", "--samples", "500", *more)
    assert code == 0, err
    return out


def test_results_csv_numbers_are_numbers_and_headers_carry_units(run_cli):
    out = _csv(run_cli, BUYER)
    # RFC 4180 section 2 rule 1: every record ends in CRLF
    assert out.endswith("\r\n") and "\n" not in out.replace("\r\n", "")
    rows = list(csv.DictReader(io.StringIO(out, newline="")))
    head = list(rows[0])
    for col in ("C1_F", "C2_F", "L_H", "f_nominal_Hz", "f_worst_low_Hz", "f_worst_high_Hz"):
        assert col in head
    for col in ("C1_tolerance", "C1_dielectric", "C1_part_id", "C1_price", "L_core"):
        assert col in head
    for col in ("yield", "yield_ci_low", "yield_ci_high", "warnings", "C1_second_F"):
        assert col in head
    for r in rows:
        for col in ("C1_F", "L_H", "f_nominal_Hz", "yield", "C2_price", "cost_per_board"):
            float(r[col])  # a number, not "4.7 nF"
        assert r["C1_dielectric"] == "C0G"  # from the spec and the stock list
        assert 0 < float(r["yield_ci_low"]) <= float(r["yield"]) <= float(r["yield_ci_high"]) <= 1
    # the JSON of the same run: the same numbers, bit for bit (repr round trip)
    code, js, _ = run_cli("solve", BUYER, "-f", "json", "--samples", "500")
    c = json.loads(js)["candidates"]
    assert [float(r["f_nominal_Hz"]) for r in rows] == [x["f_nominal_hz"] for x in c]
    assert [r["C2_part_id"] for r in rows] == [x["parts"]["C2"]["part_id"] for x in c]
    for r, x in zip(rows, c, strict=True):
        pair = x["parts"]["C1"].get("pair")
        if pair:  # a pair: both parts, ids and values, and the total in C1_F
            # the CSV gives the stock list's value; the JSON the total minus the partner
            assert math.isclose(float(r["C1_first_F"]), pair[0]["value"], rel_tol=1e-12)
            assert float(r["C1_second_F"]) == pair[1]["value"]
            assert r["C1_second_part_id"] == pair[1]["part_id"]
            assert math.isclose(float(r["C1_F"]), pair[0]["value"] + pair[1]["value"])


def test_pandas_reads_floats(run_cli, tmp_path):
    out = tmp_path / "designs.csv"
    code, _, err = run_cli("solve", BUYER, "--samples", "500", "-o", str(out))
    assert code == 0, err
    raw = out.read_bytes()
    assert raw.startswith(UTF8_BOM)  # a file: the byte-order mark
    assert b"\r\n" in raw and b"\n" not in raw.replace(b"\r\n", b"")
    df = pd.read_csv(out, encoding="utf-8-sig")
    for col in ("C1_F", "L_H", "f_nominal_Hz", "yield", "C1_tolerance", "cost_per_board"):
        assert pd.api.types.is_float_dtype(df[col]), col
    assert pd.api.types.is_integer_dtype(df["rank"])
    assert f"picker: wrote {out}" in err


def test_csv_from_a_series_spec_has_no_buyer_columns(run_cli):
    rows = list(csv.DictReader(io.StringIO(_csv(run_cli, PROBE), newline="")))
    assert "cost_per_board" not in rows[0]
    assert all(r["C1_part_id"] == "" for r in rows)
    assert {r["L_tolerance"] for r in rows} == {"0.1"}  # the spec's 10 % as a fraction


@pytest.mark.parametrize(
    ("name", "check"),
    [
        ("out.json", lambda t: json.loads(t)["status"] == "ok"),
        ("out.csv", lambda t: t.lstrip("\ufeff").startswith("rank,C1_F,")),
        ("out.txt", lambda t: "yield" in t and "┃" in t),
    ],
)
def test_output_format_from_the_extension(run_cli, tmp_path, name, check):
    out = tmp_path / name
    code, stdout, err = run_cli("solve", PROBE, "--samples", "500", "-o", str(out))
    assert code == 0, err
    assert stdout == ""
    assert check(out.read_text(encoding="utf-8"))


def test_format_that_contradicts_the_extension_is_refused(run_cli, tmp_path):
    out = tmp_path / "designs.csv"
    code, _, err = run_cli("solve", PROBE, "-f", "json", "-o", str(out))
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "--format" in err and "designs.csv" in err
    assert not out.exists()
    code, _, err = run_cli("solve", PROBE, "-f", "csv", "-o", str(out), "--samples", "500")
    assert code == 0, err  # agreeing is fine


def test_html_output_is_the_report(run_cli, tmp_path):
    # -o FILE.html writes the --report page (issue 14: the extension picks the format)
    page = tmp_path / "r.html"
    code, out, err = run_cli("solve", PROBE, "-o", str(page), "--samples", "500")
    assert code == 0, err
    assert out == "" and f"wrote {page}" in err
    text = page.read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html") and "</html>" in text.lower()
    # a contradicting --format, or --report beside it, is refused before the run
    other = tmp_path / "s.html"
    code, _, err = run_cli("solve", PROBE, "-f", "json", "-o", str(other))
    assert code == 2 and "--format" in err and not other.exists()
    code, _, err = run_cli("solve", PROBE, "-o", str(other), "--report", str(tmp_path / "t.html"))
    assert code == 2 and "--report" in err and not other.exists()


def test_evaluate_csv(run_cli):
    code, out, err = run_cli(
        "evaluate", PROBE, "--set", "C1=1.5n", "--set", "C2=6.8n", "--set", "L=220u",
        "-f", "csv", "--samples", "500",
    )  # fmt: skip
    assert code == 0, err
    (row,) = list(csv.DictReader(io.StringIO(out, newline="")))
    assert float(row["C1_F"]) == 1.5e-9 and float(row["L_H"]) == 220e-6


def test_series_csv_and_json(run_cli):
    # IEC 60063:2015 E12 between 1 nF and 3.3 nF: 1.0 1.2 1.5 1.8 2.2 2.7 3.3
    want = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3]
    code, out, _ = run_cli("series", "E12", "--min", "1n", "--max", "3.3n", "-f", "csv")
    assert code == 0 and out.endswith("\r\n")
    rows = list(csv.DictReader(io.StringIO(out, newline="")))
    assert [round(float(r["value_F"]) * 1e9, 6) for r in rows] == want
    code, out, _ = run_cli("series", "E12", "--min", "1n", "--max", "3.3n", "-f", "json")
    assert [round(v * 1e9, 6) for v in json.loads(out)["values"]] == want


def test_results_csv_and_dataframe_are_the_same_table(run_cli, tmp_path):
    """The CSV a file user gets and the DataFrame a notebook user gets are one table:
    the same columns in the same order and the same numbers, read back by pandas."""
    import picker

    spec = picker.load_spec(BUYER)
    res = picker.solve(spec, samples=500)
    df = res.to_dataframe()
    out = tmp_path / "designs.csv"
    code, _, err = run_cli("solve", BUYER, "--samples", "500", "-o", str(out))
    assert code == 0, err
    back = pd.read_csv(out, encoding="utf-8-sig", keep_default_na=False, na_values=[""])
    assert list(back.columns) == list(df.columns)
    assert "tied_with_previous" in back.columns  # the ties column reaches the file too
    for col in ("rank", "C1_F", "L_H", "f_nominal_Hz", "yield", "yield_ci_low", "cost_per_board"):
        assert back[col].tolist() == pytest.approx(df[col].tolist(), rel=1e-15), col
    assert back["C2_part_id"].tolist() == df["C2_part_id"].tolist()
