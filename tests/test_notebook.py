"""The notebook API, called exactly as a user would write the cells.

Plausible bugs caught: ``dir(picker)`` hiding the entry points; a spec built
with ``Spec(**d)`` that skips its stock list (a bare TypeError in solve); a
value typed as text ("150 pF") refused by ``evaluate``; a DataFrame whose
numbers are strings or whose columns lack units; a repr of thousands of
characters; plot functions that need a file and return nothing; user text
reaching the notebook's HTML unescaped.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

import picker

DEMO = Path(__file__).resolve().parent.parent / "demo_specs"


def _colpitts_f(c1: float, c2: float, l_h: float, stray: float) -> float:
    """f = 1 / (2π √(L·(C1·C2/(C1+C2) + stray))) (Sedra & Smith, Colpitts section;
    stray across the tank as README's formula)."""
    return 1.0 / (2 * math.pi * math.sqrt(l_h * (c1 * c2 / (c1 + c2) + stray)))


def test_dir_shows_the_api() -> None:
    names = dir(picker)
    for n in ("solve", "evaluate", "load_spec", "spec_from_dict", "Spec", "SolveResult"):
        assert n in names
    for n in ("plot_histogram", "result_figures", "write_report"):
        assert n in names


@pytest.fixture(scope="module")
def probe():
    spec = picker.load_spec(DEMO / "probe_exciter.toml")
    return spec, picker.solve(spec, top=5, samples=2000, plot_data=True)


def test_cells_of_a_notebook(probe, tmp_path) -> None:
    spec, result = probe
    # cell: a short repr, not the whole spec and every figure
    text = repr(result)
    assert len(text) < 300, text
    assert "Proximity probe exciter" in text
    assert "C1" in text and "yield" in text
    assert len(repr(result.candidates[0])) < 300
    # cell: a DataFrame with numbers as numbers, the unit in the column name
    df = result.to_dataframe()
    assert len(df) == len(result.candidates)
    for col in ("C1_F", "C2_F", "L_H", "f_nominal_Hz", "yield", "yield_ci_low"):
        assert df[col].dtype == np.float64, col
    stray = spec.parasitics.stray
    for _, row in df.iterrows():
        # the Colpitts formula on the row's own values, independent of picker's tank code
        f = _colpitts_f(row["C1_F"], row["C2_F"], row["L_H"], stray)
        assert row["f_nominal_Hz"] == pytest.approx(f, rel=1e-12)
        assert row["yield_ci_low"] <= row["yield"] <= row["yield_ci_high"]
    # cell: the JSON object as a dict (what --format json prints)
    from picker.report.designs import to_json

    assert result.to_dict() == json.loads(to_json(result))
    # cell: the notebook's HTML view
    html = result._repr_html_()
    assert html.startswith("<div>") and "<table>" in html
    assert html.count("<tr>") == len(result.candidates) + 1


def test_plots_return_figures_take_axes_and_write_nothing_unasked(probe, tmp_path, monkeypatch):
    from matplotlib.figure import Figure

    _, result = probe
    monkeypatch.chdir(tmp_path)
    figs = picker.result_figures(result)
    assert set(figs) == {"histogram.png", "yield_vs_tolerance.png", "drivers.png"}
    assert all(isinstance(f, Figure) for f in figs.values())
    # the user's own figure with two axes: each plot draws where it is told
    mine = Figure(figsize=(10, 4))
    a, b = mine.subplots(1, 2)
    pd = result.plot_data
    got = picker.plot_histogram(pd["frequencies"], pd["f_min"], pd["f_max"], pd["target"], ax=a)
    assert got is mine and a.patches  # bars drawn on the given axes
    got = picker.plot_drivers(pd["drivers"], ax=b)
    assert got is mine and b.patches
    assert list(tmp_path.iterdir()) == []  # no path given: no file written
    picker.plot_drivers(pd["drivers"], tmp_path / "d.png")
    assert (tmp_path / "d.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # RFC 2083, 3.1


def test_evaluate_takes_engineering_text(probe) -> None:
    spec, result = probe
    best = result.candidates[0].values
    # the values as a user types them: "150 pF", "2200 uH"
    as_text = {
        p: f"{v * 1e12:.10g} pF" if p.startswith("C") else f"{v * 1e6:.10g} uH"
        for p, v in best.items()
    }
    a = picker.evaluate(spec, best, samples=2000)
    b = picker.evaluate(spec, as_text, samples=2000)
    assert a.to_dict() == b.to_dict()
    short = {p: t.replace(" pF", "p").replace(" uH", "u") for p, t in as_text.items()}
    c = picker.evaluate(spec, short, samples=2000, tolerances={"L": "10 %"})
    assert c.to_dict() == a.to_dict()  # "10 %" is the spec's own tolerance of L
    with pytest.raises(picker.SpecError, match="C1"):
        picker.evaluate(spec, {**as_text, "C1": "150 µH"}, samples=2000)


def _stock_spec(tmp_path: Path) -> dict:
    stock = tmp_path / "shelf.csv"
    stock.write_text(
        "id,kind,value,tolerance,dielectric,core,voltage,on_hand,price\n"
        "A1,C,150 pF,5 %,C0G,,50 V,100,0.01\n"
        "A2,C,330 pF,5 %,C0G,,50 V,100,0.01\n"
        "A3,C,470 pF,5 %,C0G,,50 V,100,0.01\n"
        "A4,C,1 nF,5 %,C0G,,50 V,100,0.01\n"
        "B1,L,1 mH,5 %,,ferrite,,100,0.05\n"
        "B2,L,2.2 mH,5 %,,ferrite,,100,0.05\n",
        encoding="utf-8",
    )
    text = (
        'topology = "colpitts"\n[frequency]\ntarget = "310 kHz"\nwindow = "±10 %"\n'
        "[feedback]\nmin = 0.1\nmax = 1.0\n"
        f"[parts.C1]\nstock = {json.dumps(str(stock))}\n"
        f"[parts.C2]\nstock = {json.dumps(str(stock))}\n"
        f"[parts.L]\nstock = {json.dumps(str(stock))}\n"
        "[yield]\nsamples = 2000\n"
    )
    return tomllib.loads(text)


def test_dataframe_of_a_stock_spec_with_pairs() -> None:
    spec = picker.load_spec(DEMO / "buyer_exciter.toml")
    df = picker.solve(spec, samples=1000).to_dataframe()
    for col in ("C1_first_F", "C1_second_F", "C1_part_id", "C1_price", "cost_per_board"):
        assert col in df.columns, col
    pairs = df[df["C1_second_F"].notna()]
    assert len(pairs)  # the demo's top designs use pairs
    # a pair's total is the sum of its two parts (values from the stock list)
    np.testing.assert_allclose(
        pairs["C1_F"], pairs["C1_first_F"] + pairs["C1_second_F"], rtol=1e-12
    )
    # cost per board = the three positions' prices (a pair's price is both parts')
    total = df["C1_price"] + df["C2_price"] + df["L_price"]
    np.testing.assert_allclose(df["cost_per_board"], total, rtol=1e-9)


def test_spec_from_keywords_and_from_a_dict_behave_the_same(tmp_path) -> None:
    d = _stock_spec(tmp_path)
    from_dict = picker.solve(picker.spec_from_dict(d))
    from_kw = picker.solve(picker.Spec(**d))
    assert from_kw.to_dict() == from_dict.to_dict()
    assert from_kw.candidates[0].parts["C1"].part_id.startswith("A")
    # a stock list that is not there: the spec's key named, not a bare TypeError
    d["parts"]["C1"]["stock"] = str(tmp_path / "missing.csv")
    with pytest.raises(picker.SpecError, match="parts.C1.stock"):
        picker.solve(picker.Spec(**d))


def test_repr_html_escapes_user_text(probe) -> None:
    from dataclasses import replace

    spec, result = probe
    evil = spec.model_copy(update={"title": "<script>alert(1)</script> & co"})
    html = replace(result, spec=evil)._repr_html_()
    assert "<script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; co" in html
