"""Plan files and ``picker consolidate``: validation, overrides, JSON shape, stock.

The end-to-end checks compare the consolidated plan with what the parts
themselves say: every chosen design re-solved on its own channel spec, the
stock on hand from the stock CSV read by the csv module, and the frequency
from Thomson's formula f = 1/(2π√(L·C)) with the Colpitts series C1C2/(C1+C2)
plus stray (Sedra & Smith, Colpitts section).
"""

from __future__ import annotations

import csv
import json
import math
import shutil
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from picker.cli.consolidate import consolidate_cmd
from picker.errors import SpecError
from picker.spec.plan import load_plan

DEMO = Path(__file__).resolve().parent.parent / "demo_specs"


def _app():
    app = typer.Typer()
    app.command("consolidate")(consolidate_cmd)

    @app.command("noop")  # a second command so typer keeps subcommand names
    def _noop() -> None:
        pass

    return app


def _small_plan(tmp_path: Path, extra: str = "", channels: str | None = None) -> Path:
    for f in ("plan_sensor_base.toml", "stock_demo.csv"):
        shutil.copy(DEMO / f, tmp_path / f)
    chans = channels or (
        '[channels.a]\ntarget = "280 kHz"\n[channels.a.set]\nyield.samples = 1000\n'
        '[channels.b]\ntarget = "330 kHz"\n[channels.b.set]\nyield.samples = 1000\n'
    )
    text = (
        'base = "plan_sensor_base.toml"\nstock = "stock_demo.csv"\nbuild_quantity = 1000\n'
        f"candidates = 40\n{extra}\n{chans}"
    )
    p = tmp_path / "plan.toml"
    p.write_text(text, encoding="utf-8")
    return p


@pytest.mark.parametrize(
    "text, key, words",
    [
        ("build_quantity = 10\ncolour = 1\n[channels.a]\nspec = 'x.toml'\n", "colour", "unknown"),
        ("[channels.a]\nspec = 'x.toml'\n", "build_quantity", "missing"),
        ("build_quantity = 10\n[channels.a]\nwindow = '1 %'\n", "channels.a", "spec"),
        ("build_quantity = 10\n[channels.a]\ntarget = '1 MHz'\n", "channels", "no base spec"),
        (
            "build_quantity = 10\npriorities = ['parts', 'speed']\n[channels.a]\nspec = 'x'\n",
            "priorities",
            "each at most once",
        ),
        (
            "build_quantity = 10\nmin_yield = '120 %'\n[channels.a]\nspec = 'x'\n",
            "min_yield",
            "between 0 and 100 %",
        ),
        ("build_quantity = 2.5\n[channels.a]\nspec = 'x'\n", "build_quantity", "whole"),
        ("build_quantity = 10\n", "channels", "missing"),
    ],
)
def test_plan_errors(tmp_path, text, key, words):
    p = tmp_path / "p.toml"
    p.write_text(text)
    with pytest.raises(SpecError) as err:
        load_plan(p)
    assert err.value.file == str(p)
    assert err.value.key == key
    assert words in err.value.message


def test_channel_sources_and_overrides(tmp_path):
    p = tmp_path / "sub" / "p.toml"
    p.parent.mkdir()
    p.write_text(
        "base = 'base.toml'\nbuild_quantity = 5\n"
        "[channels.x]\ntarget = '455 kHz'\nwindow = '±2 %'\n"
        "[channels.x.set]\nparts.L.max = '1 mH'\nfrequency.window = '±9 %'\n"
        "[channels.y]\nspec = '/abs/other.toml'\n"
    )
    plan = load_plan(p)
    (nx, px, ox), (ny, py, oy) = plan.channel_sources()
    assert (nx, ny) == ("x", "y")
    assert px == p.parent / "base.toml"  # relative to the plan file
    assert py == Path("/abs/other.toml")
    # the channel's own window wins over the same key given under set
    assert ox["frequency"] == {"window": "±2 %", "target": "455 kHz"}
    assert ox["parts"] == {"L": {"max": "1 mH"}}
    assert "frequency" not in oy


def test_consolidate_json_end_to_end(tmp_path):
    plan = _small_plan(tmp_path)
    res = CliRunner().invoke(_app(), ["consolidate", str(plan), "--format", "json"])
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert d["status"] == "optimal"
    assert d["distinct_parts"] == len(d["bom"])
    on_hand = {}
    with open(tmp_path / "stock_demo.csv", newline="") as fh:
        for row in csv.DictReader(fh):
            on_hand[row["id"]] = int(row["on_hand"])
    per_board: dict[str, int] = {}
    for ch in d["channels"]:
        assert ch["name"] in ("a", "b")
        y = ch["yield"]
        assert y["ci_low"] <= y["estimate"] <= y["ci_high"]
        v = {p: ch["parts"][p]["value"] for p in ("C1", "C2", "L")}
        # Thomson's formula with the Colpitts series capacitance + 12 pF stray (base spec)
        c = v["C1"] * v["C2"] / (v["C1"] + v["C2"]) + 12e-12
        f = 1 / (2 * math.pi * math.sqrt(v["L"] * c))
        assert f == pytest.approx(ch["f_nominal_hz"], rel=1e-9)
        for p in ("C1", "C2", "L"):
            pid = ch["parts"][p]["part_id"]
            per_board[pid] = per_board.get(pid, 0) + 1
    # BOM quantities equal the parts counted over the channels, within stock on hand
    assert {b["part_id"]: b["qty_per_board"] for b in d["bom"]} == per_board
    for b in d["bom"]:
        assert b["qty_build"] == 1000 * b["qty_per_board"]
        assert b["qty_build"] <= on_hand[b["part_id"]]
        assert b["on_hand"] == on_hand[b["part_id"]]
    assert d["saving"]["parts"] == d["baseline"]["distinct_parts"] - d["distinct_parts"]
    # same input, same bytes
    again = CliRunner().invoke(_app(), ["consolidate", str(plan), "--format", "json"])
    assert again.stdout == res.stdout


def test_consolidate_bom_file_and_refusals(tmp_path):
    plan = _small_plan(tmp_path)
    out = tmp_path / "bom.csv"
    res = CliRunner().invoke(_app(), ["consolidate", str(plan), "--bom", str(out)])
    assert res.exit_code == 0, res.output
    with out.open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert rows and all(int(r["short_by"]) == 0 for r in rows)
    again = CliRunner().invoke(_app(), ["consolidate", str(plan), "--bom", str(out)])
    assert isinstance(again.exception, SpecError) and "exists" in str(again.exception)
    over = CliRunner().invoke(
        _app(), ["consolidate", str(plan), "--bom", str(tmp_path / "stock_demo.csv"), "--force"]
    )
    assert isinstance(over.exception, SpecError) and "input" in str(over.exception)


def test_infeasible_plan_exit_1_names_channel(tmp_path):
    plan = _small_plan(tmp_path, extra='min_yield = "99.9 %"')
    res = CliRunner().invoke(_app(), ["consolidate", str(plan), "--format", "json"])
    assert res.exit_code == 1
    d = json.loads(res.stdout)
    assert d["status"] == "infeasible"
    assert "channel 'a'" in d["binding"] and "minimum yield" in d["binding"]
    assert d["distinct_parts"] is None and d["bom"] == []


def test_channel_spec_error_is_located(tmp_path):
    chans = '[channels.a]\ntarget = "fast"\n'
    plan = _small_plan(tmp_path, channels=chans)
    res = CliRunner().invoke(_app(), ["consolidate", str(plan)])
    e = res.exception
    assert isinstance(e, SpecError)
    assert "(channel a)" in e.message and e.key == "frequency.target"
