"""``evaluate`` as the buyer needs it: solve's top pick evaluated again gives solve's
figures on every demo (pairs and stock parts included); ``--tol`` and ``--part``
choose the stock part; ``--set C1=a+b`` enters a parallel pair.

The reference for the round trip is solve's own JSON, taken through the command
line as a user would (values, pairs and part ids written back as ``--set`` /
``--part`` text). The same seed and sample count give the same boards, so the
passing count must be equal, not close. The stock facts are read from the demo
stock list with Python's csv module, not through picker's loader.
"""

from __future__ import annotations

import csv
import json

import pytest
from conftest import DEMO

from picker import api

SOLVABLE = sorted(
    p.name for p in DEMO.glob("*.toml") if "topology" in p.read_text(encoding="utf-8")
)
STOCK = DEMO / "stock_demo.csv"


def _stock_rows():
    with open(STOCK, encoding="utf-8-sig", newline="") as f:
        return list(csv.DictReader(f))


def _args(parts: dict) -> list[str]:
    """Solve's pick as evaluate's options: --part for stock parts, else --set/--tol."""
    out = []
    for p, x in parts.items():
        pair = x.get("pair")
        if x.get("part_id"):
            ids = [q["part_id"] for q in pair] if pair else [x["part_id"]]
            out.append(f"--part={p}={'+'.join(ids)}")
        else:
            vals = [q["value"] for q in pair] if pair else [x["value"]]
            out.append(f"--set={p}={'+'.join(repr(v) for v in vals)}")
            out.append(f"--tol={p}={x['tolerance'] * 100!r}%")
    return out


@pytest.mark.parametrize("name", SOLVABLE)
def test_top_pick_round_trips(run_cli, name):
    spec = str(DEMO / name)
    code, out, err = run_cli("solve", spec, "-f", "json", "--top", "3")
    assert code == 0, err
    data = json.loads(out)
    for best in data["candidates"][:3]:
        code, out2, err = run_cli("evaluate", spec, *_args(best["parts"]), "-f", "json")
        assert code == 0, err
        (ev,) = json.loads(out2)["candidates"]
        assert ev["yield"]["passed"] == best["yield"]["passed"], name
        assert ev["yield"]["samples"] == best["yield"]["samples"]
        assert ev["f_nominal_hz"] == best["f_nominal_hz"]
        assert ev["feedback_fraction"] == best["feedback_fraction"]
        for p, x in best["parts"].items():
            e = ev["parts"][p]
            assert e["value"] == x["value"]
            assert e["tolerance"] == x["tolerance"]
            assert e.get("part_id") == x.get("part_id")
            assert e.get("pair") == x.get("pair")
            assert e.get("price") == x.get("price")
        assert ev.get("cost") == best.get("cost")


def test_evaluating_a_candidate_object_reproduces_it():
    """The notebook form: evaluate(spec, candidate) on the stock demo with pairs."""
    s = api.load_spec(DEMO / "buyer_exciter.toml")
    r = api.solve(s, top=3)
    for c in r.candidates:
        e = api.evaluate(s, c).candidates[0]
        assert e.yield_.passed == c.yield_.passed
        assert e.parts == c.parts


def _no_cost_spec(tmp_path):
    """The buyer demo ranked by yield without pairs: solve then prefers 2 % stock parts
    where the list holds a value at 5 % and 2 %."""
    text = (DEMO / "buyer_exciter.toml").read_text(encoding="utf-8")
    text = text.replace("parallel = true", "parallel = false").replace("pair_ratio_max = 10", "")
    text = text.replace('rank_by = "cost"', "").replace("max_per_board = 0.15", "")
    text = text.replace('stock = "stock_demo.csv"', f'stock = "{STOCK}"')
    p = tmp_path / "spec.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_values_alone_name_the_part_they_took(tmp_path):
    """Why evaluate(spec, candidate.values) gave 0.896 where solve gave 0.988: the values
    do not say which stock part; the stock list holds several at one value, and evaluate
    took the cheapest (5 %) where solve had ranked the 2 % part first. Now the part ids
    (or the candidate) reproduce solve, and values alone say which part they took."""
    s = api.load_spec(_no_cost_spec(tmp_path))
    c = api.solve(s, top=1).candidates[0]
    tol2 = {p for p, pp in c.parts.items() if pp.tolerance == 0.02}
    assert tol2  # the case in point: solve chose a 2 % part
    by_values = api.evaluate(s, c.values)
    assert any("several tolerances" in w for w in by_values.warnings)
    # the cheapest part of those values is the 5 % one: fewer boards pass
    assert by_values.candidates[0].yield_.passed < c.yield_.passed
    by_ids = api.evaluate(s, {}, parts=c.part_ids).candidates[0]
    assert by_ids.yield_.passed == c.yield_.passed
    by_tol = api.evaluate(s, c.values, tolerances={p: 0.02 for p in tol2}).candidates[0]
    assert by_tol.yield_.passed == c.yield_.passed


def test_tol_picks_the_stock_part_of_that_tolerance(run_cli):
    """--set C1=6.8n --tol C1=2%: the 2 % part of the stock list and its price."""
    rows = [
        r
        for r in _stock_rows()
        if r["kind"] == "C" and r["value"] == "6.8 nF" and r["tolerance"].strip() == "2 %"
    ]
    assert len(rows) == 1
    want = rows[0]
    five = [r for r in _stock_rows() if r["value"] == "6.8 nF" and r["tolerance"] == "5 %"]
    assert five and five[0]["id"] != want["id"]  # the list holds both
    args = ["--set", "C1=6.8n", "--tol", "C1=2%", "--set", "C2=33n", "--set", "L=22u"]
    code, out, err = run_cli("evaluate", str(DEMO / "buyer_exciter.toml"), *args, "-f", "json")
    assert code == 0, err
    c1 = json.loads(out)["candidates"][0]["parts"]["C1"]
    assert c1["part_id"] == want["id"]
    assert c1["tolerance"] == 0.02
    # build of 200 is below the first break (2000), so the unit price column applies
    assert c1["price"] == float(want["price"])


def test_part_id_and_pair_from_the_command_line(run_cli):
    rows = {r["id"]: r for r in _stock_rows()}
    a, b = "SB-C019", "SB-C017"  # 4.7 nF and 3.3 nF in the demo list
    spec = str(DEMO / "buyer_exciter.toml")
    code, out, err = run_cli(
        "evaluate", spec, "--set", "C1=4.7n+3.3n", "--part", "C2=SB-C030", "--set", "L=22u",
        "-f", "json",
    )  # fmt: skip
    assert code == 0, err
    c = json.loads(out)["candidates"][0]["parts"]
    assert [q["part_id"] for q in c["C1"]["pair"]] == [a, b]
    assert c["C1"]["price"] == pytest.approx(float(rows[a]["price"]) + float(rows[b]["price"]))
    assert c["C2"]["part_id"] == "SB-C030" and c["C2"]["tolerance"] == 0.05


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (["--part", "C1=NOPE"], "stock list"),
        (["--part", "C1=SB-L005"], "not a capacitor"),
        (["--set", "C1=4.7n", "--part", "C1=SB-C017"], "not 4.7 nF"),
        (["--set", "C1=4.7n+"], "two joined by '+'"),
        (["--set", "L=22u+10u"], "capacitors only"),
        (["--part", "C1=SB-C019", "--tol", "C1=2%"], "not 2 %"),
    ],
)
def test_bad_parts_one_line(run_cli, args, words):
    base = ["--set", "C2=33n", "--set", "L=22u"]
    if "L=22u+10u" in args:
        base = ["--set", "C2=33n", "--set", "C1=6.8n"]
    code, _, err = run_cli("evaluate", str(DEMO / "buyer_exciter.toml"), *base, *args)
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1 and words in err


def test_a_plus_in_an_exponent_is_not_a_pair():
    from picker.cli.options import parse_design

    got = parse_design(["C1=4.7e+3p", "C2=4.7n+3.3n", "L=+22u"])
    assert got == {"C1": pytest.approx(4.7e-9), "C2": (4.7e-9, 3.3e-9), "L": 22e-6}
