"""Buyer's view of one oscillator: stock-list positions, parallel pairs and cost.

References: Thomson's formula f = 1/(2π√(L·C)) with the Colpitts series
capacitance C1C2/(C1+C2) plus stray (Sedra & Smith, Colpitts section);
capacitors in parallel add (Kirchhoff's current law); a uniform tolerance ±t
has σ = t/√3 (GUM, JCGM 100:2008, 4.3.7) and the variance of a sum of
independent parts is the sum of the variances (JCGM 100:2008, 5.1.2); the sum
of two independent uniforms is trapezoidal (scipy.stats.trapezoid); sample
variance of normal data: (n−1)s²/σ² ~ χ²(n−1) (scipy.stats.chi2). The price
break rule (largest break not above the quantity bought) is common practice,
no source. Stock lists and specs here are invented; every check value is
computed from them independently of picker.
"""

from __future__ import annotations

import csv
import itertools
import json
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats

from picker.api import build_problem, load_spec, solve
from picker.core.montecarlo import PartVariation, Simulation, sampled_values
from picker.core.screen import corner_span
from picker.core.search import Designs, Problem, brute_force, search, sort_designs
from picker.errors import SpecError
from picker.parts.pairs import pair_table
from picker.parts.series import expand
from picker.parts.table import ValueTable
from picker.tank.board import Parasitics, board_frequency
from picker.tank.colpitts import COLPITTS

STOCK = """id,kind,value,tolerance,dielectric,core,voltage,on_hand,price,price_breaks
C-A,C,1 nF,5 %,C0G,,50 V,5000,0.010,100:0.008;1000:0.005
C-B,C,1.5 nF,5 %,C0G,,50 V,300,0.011,
C-C,C,2.2 nF,2 %,C0G,,100 V,5000,0.020,1000:0.012
C-D,C,3.3 nF,5 %,C0G,,50 V,5000,0.012,
C-E,C,4.7 nF,5 %,X7R,,50 V,5000,0.004,
C-F,C,6.8 nF,10 %,C0G,,50 V,5000,0.009,
C-G,C,10 nF,5 %,C0G,,16 V,5000,0.013,
C-H,C,2.2 nF,5 %,C0G,,50 V,800,0.015,
L-A,L,100 uH,5 %,,ferrite,,5000,0.070,1000:0.050
L-B,L,150 uH,5 %,,ferrite,,5000,0.075,
L-C,L,220 uH,10 %,,ferrite,,400,0.060,
L-D,L,330 uH,5 %,,ferrite,,5000,0.080,
"""

BASE = """title = "buyer test"
topology = "colpitts"
[frequency]
target = "{target}"
window = "{window}"
[feedback]
min = 0.1
max = 1.0
[parasitics]
stray = "10 pF"
[yield]
samples = 2000
seed = 5
candidates = 500
[report]
top = 500
"""


def _stock_rows(path):
    with open(path, newline="") as fh:
        return {r["id"]: r for r in csv.DictReader(fh)}


def _unit_price(row, qty):
    """Unit price by the break rule, from the CSV text (common practice, no source)."""
    price = float(row["price"])
    for part in filter(None, row["price_breaks"].split(";")):
        q, p = part.split(":")
        if qty >= float(q):
            price = float(p)
    return price


def _write(tmp_path, parts, extra="", target="400 kHz", window="±4 %"):
    (tmp_path / "stock.csv").write_text(STOCK, encoding="utf-8")
    p = tmp_path / "spec.toml"
    p.write_text(BASE.format(target=target, window=window) + parts + extra, encoding="utf-8")
    return p


STOCK_PARTS = """[parts.C1]
stock = "stock.csv"
dielectric = "C0G"
[parts.C2]
stock = "stock.csv"
voltage_rating = "25 V"
tolerance = "5 %"
[parts.L]
stock = "stock.csv"
min = "100 uH"
"""


def _thomson(v, stray=10e-12):
    c = v["C1"] * v["C2"] / (v["C1"] + v["C2"]) + stray
    return 1 / (2 * math.pi * math.sqrt(v["L"] * c))


def test_stock_positions_end_to_end(tmp_path):
    spec = load_spec(_write(tmp_path, STOCK_PARTS, "[cost]\nbuild_quantity = 1000\n"))
    rows = _stock_rows(tmp_path / "stock.csv")
    res = solve(spec)
    assert res.status == "ok" and res.candidates
    # every feasible design in the filtered stock, counted independently
    pool = {
        "C1": [r for r in rows.values() if r["kind"] == "C" and r["dielectric"] == "C0G"],
        "C2": [
            r
            for r in rows.values()
            if r["kind"] == "C"
            and float(r["voltage"].split()[0]) >= 25
            and float(r["tolerance"].split()[0]) <= 5
        ],
        "L": [r for r in rows.values() if r["kind"] == "L"],
    }
    unit = {"nF": 1e-9, "uH": 1e-6}
    val = {k: float(r["value"].split()[0]) * unit[r["value"].split()[1]] for k, r in rows.items()}
    expect = 0
    for a, b, c in itertools.product(pool["C1"], pool["C2"], pool["L"]):
        v = {"C1": val[a["id"]], "C2": val[b["id"]], "L": val[c["id"]]}
        if 0.1 <= v["C1"] / v["C2"] <= 1.0 and abs(_thomson(v) / 400e3 - 1) <= 0.04:
            expect += 1
    assert res.feasible == expect == len(res.candidates)
    for c in res.candidates:
        counts: dict[str, int] = {}
        for pos, pp in c.parts.items():
            row = rows[pp.part_id]
            assert row in pool[pos]  # only stock parts that pass the position's filters
            assert pp.source == "stock"
            assert pp.value == pytest.approx(val[pp.part_id], rel=1e-12)
            assert pp.price == pytest.approx(_unit_price(row, 1000), abs=1e-12)
            counts[pp.part_id] = counts.get(pp.part_id, 0) + 1
        assert c.f_nominal_hz == pytest.approx(_thomson(c.values), rel=1e-9)
        cost = c.extra["cost"]
        per_board = sum(_unit_price(rows[i], 1000) for pp in c.parts.values() for i in [pp.part_id])
        assert cost["per_board"] == pytest.approx(per_board, abs=1e-9)
        assert cost["build"] == pytest.approx(1000 * per_board, abs=1e-6)
        short = {
            i: k * 1000 - int(rows[i]["on_hand"])
            for i, k in counts.items()
            if k * 1000 > int(rows[i]["on_hand"])
        }
        assert cost["short"] == short
        assert cost["stock_ok"] == (not short)
    # the shortfall case occurs: C-B (300 on hand) or L-C (400) in some design
    assert any(not c.extra["cost"]["stock_ok"] for c in res.candidates)


def test_stock_json_and_csv_carry_ids_and_cost(tmp_path):
    from picker.report.designs import to_csv, to_json

    spec = load_spec(_write(tmp_path, STOCK_PARTS, "[cost]\nbuild_quantity = 10\n"))
    res = solve(spec, top=3)
    d = json.loads(to_json(res))
    c0 = d["candidates"][0]
    assert c0["parts"]["L"]["part_id"].startswith("L-")
    assert set(c0["cost"]) >= {"per_board", "build", "stock_ok", "short"}
    lines = to_csv(res).splitlines()
    head = lines[0].split(",")
    at = head.index("cost_per_board")  # the cost columns together, in this order
    assert head[at : at + 3] == ["cost_per_board", "cost_build", "stock_ok"]
    row = next(csv.DictReader(lines))  # the csv module: cells may be quoted (RFC 4180)
    assert row["L_part_id"] == c0["parts"]["L"]["part_id"]
    assert float(row["cost_per_board"]) == pytest.approx(c0["cost"]["per_board"])


@pytest.mark.parametrize(
    "parts, key, words",
    [
        ('[parts.C1]\nstock = "stock.csv"\nseries = "E12"\n', "parts.C1.series", "not both"),
        ('[parts.C1]\nstock = "nope.csv"\n', None, "no such file"),
        ('[parts.C1]\nstock = "stock.csv"\nprice = 0.1\n', "parts.C1.price", "stock"),
        ('[parts.C1]\nstock = "stock.csv"\nmin = "1 uF"\n', "parts.C1.stock", "holds no C"),
        (
            '[parts.C1]\nseries = "E6"\nmin = "1 nF"\nmax = "10 nF"\npair_ratio_max = 3\n',
            "parts.C1.pair_ratio_max",
            "parallel = true",
        ),
        (
            '[parts.C1]\nseries = "E6"\nmin = "1 nF"\nmax = "10 nF"\nparallel = "yes"\n',
            "parts.C1.parallel",
            "true or false",
        ),
    ],
)
def test_stock_and_pair_spec_errors(tmp_path, parts, key, words):
    rest = '[parts.C2]\nstock = "stock.csv"\n[parts.L]\nstock = "stock.csv"\n'
    with pytest.raises(SpecError) as err:
        load_spec(_write(tmp_path, parts + rest))
    assert words in err.value.message
    if key is not None:
        assert err.value.key == key


def test_parallel_inductor_and_cost_rank_need_their_keys(tmp_path):
    parts = (
        '[parts.C1]\nstock = "stock.csv"\n[parts.C2]\nstock = "stock.csv"\n'
        '[parts.L]\nseries = "E12"\nmin = "10 uH"\nmax = "1 mH"\nparallel = true\n'
    )
    with pytest.raises(SpecError) as err:
        load_spec(_write(tmp_path, parts))
    assert err.value.key == "parts.L.parallel"
    with pytest.raises(SpecError) as err:
        load_spec(_write(tmp_path, STOCK_PARTS, '[cost]\nrank_by = "cost"\n'))
    assert err.value.key == "cost.rank_by" and "min_yield" in err.value.message


# ---------------------------------------------------------------------------
# cost limit and cost ranking


def test_max_per_board_keeps_exactly_the_designs_within_it(tmp_path):
    # the cost ranking samples boards plainly (binomial interval): compare it with a plain run
    full = solve(load_spec(_write(tmp_path, STOCK_PARTS)), estimator="plain")
    costs = sorted(c.extra["cost"]["per_board"] for c in full.candidates)
    limit = costs[len(costs) // 2]
    res = solve(load_spec(_write(tmp_path, STOCK_PARTS, f"[cost]\nmax_per_board = {limit!r}\n")))
    within = {
        tuple(c.part_ids.values()) for c in full.candidates if c.extra["cost"]["per_board"] <= limit
    }
    assert {tuple(c.part_ids.values()) for c in res.candidates} == within
    assert res.feasible == len(within) < full.feasible
    # too tight a limit: infeasible, the advice names the cheapest design's cost
    res = solve(load_spec(_write(tmp_path, STOCK_PARTS, "[cost]\nmax_per_board = 0.001\n")))
    assert res.status == "infeasible" and not res.candidates
    assert f"{costs[0]:.4g}" in res.advice[0] and "max_per_board" in res.advice[0]


def test_unpriced_designs_cannot_meet_a_cost_limit(tmp_path):
    parts = (
        '[parts.C1]\nseries = "E12"\nmin = "1 nF"\nmax = "10 nF"\nprice = 0.01\n'
        '[parts.C2]\nseries = "E12"\nmin = "1 nF"\nmax = "10 nF"\n'
        '[parts.L]\nstock = "stock.csv"\n'
    )
    res = solve(load_spec(_write(tmp_path, parts, "[cost]\nmax_per_board = 10\n")))
    assert res.status == "infeasible"
    assert "price" in res.advice[0]


def test_rank_by_cost_is_the_cheapest_above_the_floor(tmp_path):
    floor = 0.7
    # the cost ranking samples boards plainly (binomial interval): compare it with a plain run
    full = solve(load_spec(_write(tmp_path, STOCK_PARTS)), estimator="plain")
    ok = [c for c in full.candidates if c.ci_low >= floor]
    assert 3 <= len(ok) < len(full.candidates)  # the floor matters in this scenario
    key = sorted(ok, key=lambda c: (c.extra["cost"]["per_board"], -c.yield_estimate))
    extra = f'[cost]\nrank_by = "cost"\nmin_yield = "{floor * 100:g} %"\n'
    res = solve(load_spec(_write(tmp_path, STOCK_PARTS, extra)), top=3)
    got = [(tuple(c.part_ids.values()), c.extra["cost"]["per_board"]) for c in res.candidates]
    # common random numbers: the same boards for every design, so the yields agree
    want = [(tuple(c.part_ids.values()), c.extra["cost"]["per_board"]) for c in key[:3]]
    assert [g[1] for g in got] == pytest.approx([w[1] for w in want])
    assert all(c.ci_low >= floor for c in res.candidates)
    assert [c.rank for c in res.candidates] == [1, 2, 3]


def test_rank_by_cost_falls_back_with_a_warning(tmp_path):
    extra = '[cost]\nrank_by = "cost"\nmin_yield = "99.99 %"\n'
    res = solve(load_spec(_write(tmp_path, STOCK_PARTS, extra)), top=3)
    assert res.status == "ok" and len(res.candidates) == 3
    assert any("ranked by yield" in w for w in res.warnings)
    ys = [c.yield_estimate for c in res.candidates]
    assert ys == sorted(ys, reverse=True)


def test_rank_by_cost_puts_designs_the_orbit_pushed_below_the_floor_last(tmp_path, monkeypatch):
    # The periodic orbit recounts the reported designs after cost_rank chose them (a
    # saturated design found bursting passes no board): the cheapest design, so
    # recounted, must not stay first as if it met the floor.
    import picker.api.pipeline as pipeline

    floor = 0.7
    extra = f'[cost]\nrank_by = "cost"\nmin_yield = "{floor * 100:g} %"\n'
    spec = load_spec(_write(tmp_path, STOCK_PARTS, extra))
    plain = solve(spec, top=3)
    cheapest = tuple(plain.candidates[0].part_ids.values())

    def orbit_finds_the_cheapest_bursting(spec, sim, designs, u, passed):
        out = passed.copy()
        out[0] = 0  # cost_rank's first design: no board passes
        return np.arange(len(designs)), out

    monkeypatch.setattr(pipeline, "_with_orbits", orbit_finds_the_cheapest_bursting)
    res = solve(spec, top=3)
    ids = [tuple(c.part_ids.values()) for c in res.candidates]
    assert ids[-1] == cheapest and ids[:2] == [
        tuple(c.part_ids.values()) for c in plain.candidates[1:3]
    ]
    assert res.candidates[-1].yield_estimate == 0
    assert any("fell below the yield floor" in w for w in res.warnings)
    assert not any("fell below" in w for w in plain.warnings)


@pytest.mark.parametrize("k", [0, 69, 70, 80, 95, 100])
def test_below_floor_is_the_interval_low_end_of_scipy(k):
    # Wilson (1927) and Clopper-Pearson (1934) low ends as scipy.stats.binomtest gives them
    from picker.buyer.costing import below_floor

    for method in ("wilson", "exact"):
        low = stats.binomtest(k, 100).proportion_ci(0.95, method=method).low
        for floor in (0.6, 0.7):
            got = below_floor(np.array([k]), 100, floor, 0.95, method)
            assert bool(got[0]) == (low < floor)


# ---------------------------------------------------------------------------
# parallel pairs


PAIR_PARTS = """[parts.C1]
series = "E6"
tolerance = "5 %"
min = "1 nF"
max = "10 nF"
{parallel}
[parts.C2]
values = ["22 nF"]
tolerance = "5 %"
[parts.L]
values = ["100 uH"]
tolerance = "5 %"
"""


def test_pairs_reach_values_between_series_steps(tmp_path):
    # C1 = 4.7 nF + 1 nF = 5.7 nF with C2 = 22 nF and L = 100 µH: no E6 value is
    # within 1 % of the C1 this frequency needs (4.7 and 6.8 are the neighbours)
    v = {"C1": 5.7e-9, "C2": 22e-9, "L": 100e-6}
    f0 = _thomson(v)
    single = solve(
        load_spec(
            _write(tmp_path, PAIR_PARTS.format(parallel=""), target=f"{f0:.6f} Hz", window="±0.5 %")
        )
    )
    assert single.status == "infeasible"
    res = solve(
        load_spec(
            _write(
                tmp_path,
                PAIR_PARTS.format(parallel="parallel = true"),
                target=f"{f0:.6f} Hz",
                window="±0.5 %",
            )
        )
    )
    assert res.status == "ok"
    pp = res.candidates[0].parts["C1"]
    assert pp.is_pair
    assert (pp.first_value, pp.second_value) == pytest.approx((4.7e-9, 1.0e-9), rel=1e-12)
    assert pp.value == pytest.approx(5.7e-9, rel=1e-12)
    assert res.candidates[0].f_nominal_hz == pytest.approx(f0, rel=1e-9)
    from picker.report.designs import candidate_dict

    d = candidate_dict(res.candidates[0])["parts"]["C1"]
    assert [x["value"] for x in d["pair"]] == pytest.approx([4.7e-9, 1e-9], rel=1e-12)
    assert d["display"] == "4.7 nF ∥ 1 nF"


def _pair_problem(a, ta, b, tb):
    base = ValueTable(np.array([b, a]), np.array([tb, ta]), "list")  # b < a
    t = pair_table(base, 10.0)
    k = int(
        np.flatnonzero(
            (t.second > 0)
            & np.isclose(t.second, b, rtol=1e-12, atol=0)
            & np.isclose(t.values, a + b, rtol=1e-12, atol=0)
        )[0]
    )
    one = ValueTable(np.array([1e-9]), np.array([0.0]), "list")
    coil = ValueTable(np.array([1e-4]), np.array([0.0]), "list")
    pb = Problem(COLPITTS, {"C1": t, "C2": one, "L": coil}, 1.0, 1e9, 0.0, 1e9)
    d = Designs(
        {"C1": np.array([k]), "C2": np.array([0]), "L": np.array([0])},
        np.array([1.0]),
        np.array([1.0]),
    )
    return pb, d


def test_pair_spread_is_the_sum_of_two_independent_parts():
    a, ta, b, tb = 4.7e-9, 0.05, 1.0e-9, 0.10
    pb, d = _pair_problem(a, ta, b, tb)
    n = 200_000
    u = np.random.default_rng(3).random((n, 4))  # C1, C2, L, C1#2
    sim = Simulation.simple(pb, "uniform")
    assert sim.columns()["C1#2"] == 3
    x = sampled_values(sim, d, u)["C1"][:, 0] - (a + b)
    # closed form: σ² = (a·ta/√3)² + (b·tb/√3)², equal to scipy's trapezoid
    var = (a * ta) ** 2 / 3 + (b * tb) ** 2 / 3
    h1, h2 = a * ta, b * tb
    trap = stats.trapezoid(
        min(h1, h2) / (h1 + h2), max(h1, h2) / (h1 + h2), loc=-(h1 + h2), scale=2 * (h1 + h2)
    )
    assert trap.var() == pytest.approx(var, rel=1e-12)
    # sample variance within 4 standard errors, SE from the fourth moment (scipy)
    se = math.sqrt((trap.moment(4) - var**2) / n)
    assert abs(x.var(ddof=1) - var) < 4 * se
    # the same random column for both parts (fully correlated) would be far off
    assert (h1 + h2) ** 2 / 3 - var > 40 * se
    # and the shape is the trapezoid (KS test, seeded)
    assert stats.kstest(x[:20000], trap.cdf).pvalue > 1e-3


def test_pair_spread_normal_parts_chi_square():
    a, ta, b, tb = 3.3e-9, 0.02, 2.2e-9, 0.05
    pb, d = _pair_problem(a, ta, b, tb)
    n = 50_000
    u = np.random.default_rng(8).random((n, 4))
    sim = Simulation(pb, {p: PartVariation("normal") for p in ("C1", "C2", "L")})
    x = sampled_values(sim, d, u)["C1"][:, 0]
    var = (a * ta / 3) ** 2 + (b * tb / 3) ** 2  # σ = t/3 (99.73 % convention)
    stat = (n - 1) * x.var(ddof=1) / var
    lo, hi = stats.chi2.ppf([1e-6, 1 - 1e-6], n - 1)
    assert lo < stat < hi
    assert abs(x.mean() - (a + b)) < 5 * math.sqrt(var / n)


def test_pair_corners_are_each_parts_corners():
    a, ta, b, tb = 4.7e-9, 0.05, 1.0e-9, 0.10
    pb, d = _pair_problem(a, ta, b, tb)
    lo, hi = corner_span(pb, d)
    fs = []
    for sa, sb in itertools.product((-1, 1), repeat=2):
        v = {"C1": a * (1 + sa * ta) + b * (1 + sb * tb), "C2": 1e-9, "L": 1e-4}
        fs.append(_thomson(v, stray=0.0))
    assert lo[0] == pytest.approx(min(fs), rel=1e-12)
    assert hi[0] == pytest.approx(max(fs), rel=1e-12)


@st.composite
def pair_problems(draw):
    tables, bases = {}, {}
    for p in COLPITTS.positions:
        lo = 10.0 ** (draw(st.integers(-7, -5)) if p == "L" else draw(st.integers(-11, -9)))
        vals = expand(draw(st.sampled_from(["E3", "E6"])), lo, lo * 10 ** draw(st.integers(0, 1)))
        base = ValueTable(vals, np.full(len(vals), 0.05), "E")
        pairs = p != "L" and draw(st.booleans())
        ratio = draw(st.sampled_from([1.0, 3.0, 10.0]))
        tables[p] = pair_table(base, ratio) if pairs else base
        bases[p] = (vals, pairs, ratio)
    pick = {p: tables[p].values[draw(st.integers(0, len(tables[p]) - 1))] for p in tables}
    par = Parasitics(stray=draw(st.sampled_from([0.0, 10e-12])))
    f0 = float(board_frequency(COLPITTS, pick, par)) * draw(st.floats(0.95, 1.05))
    w = draw(st.sampled_from([0.005, 0.02, 0.1]))
    b_lo = draw(st.sampled_from([0.05, 0.2]))
    pb = Problem(COLPITTS, tables, f0 * (1 - w), f0 * (1 + w), b_lo, b_lo * 20, par)
    return pb, bases


def _options(vals, pairs, ratio):
    """Every single part and pair a <= b (b <= ratio·a) of a base list, independently."""
    out = [(float(v), 0.0) for v in vals]
    if pairs:
        for i, j in itertools.combinations_with_replacement(range(len(vals)), 2):
            if vals[j] <= ratio * vals[i] * (1 + 1e-12):
                out.append((float(vals[j]), float(vals[i])))
    return out


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(pair_problems())
def test_search_with_pairs_equals_brute_force_over_parts(case):
    pb, bases = case
    got = sort_designs(pb, search(pb))
    ref = sort_designs(pb, brute_force(pb))
    assert len(got) == len(ref)
    for p in pb.topology.positions:
        np.testing.assert_array_equal(got.idx[p], ref.idx[p])

    # independently: every combination of parts (singles and pairs), totals a + b
    def parts_of(d):
        out = set()
        for r in range(len(d)):
            key = []
            for p in pb.topology.positions:
                t, i = pb.tables[p], d.idx[p][r]
                s = 0.0 if t.second is None else float(t.second[i])
                key.append((float(t.values[i]) - s if s else float(t.values[i]), s))
            out.add(tuple(key))
        return out

    want = set()
    for combo in itertools.product(*(_options(*bases[p]) for p in pb.topology.positions)):
        v = {
            p: np.array([big + small])
            for p, (big, small) in zip(pb.topology.positions, combo, strict=True)
        }
        f = float(board_frequency(COLPITTS, v, pb.parasitics)[0])
        beta = float(v["C1"][0] / v["C2"][0])
        if pb.f_min <= f <= pb.f_max and pb.beta_min <= beta <= pb.beta_max:
            want.add(combo)
    got_parts = parts_of(got)
    assert len(got_parts) == len(got)  # no combination of parts twice
    approx = {tuple((round(a, 22), round(b, 22)) for a, b in k) for k in got_parts}
    assert approx == {tuple((round(a, 22), round(b, 22)) for a, b in k) for k in want}


def test_pair_counts_as_two_parts_in_cost_and_plan(tmp_path):
    parts = (
        '[parts.C1]\nstock = "stock.csv"\nparallel = true\npair_ratio_max = 3\n'
        '[parts.C2]\nstock = "stock.csv"\n[parts.L]\nstock = "stock.csv"\n'
    )
    res = solve(load_spec(_write(tmp_path, parts, "[cost]\nbuild_quantity = 100\n")))
    rows = _stock_rows(tmp_path / "stock.csv")
    pairs = [c for c in res.candidates if c.parts["C1"].is_pair]
    assert pairs
    for c in pairs:
        pp = c.parts["C1"]
        assert pp.value == pytest.approx(pp.first_value + pp.second_value)
        assert pp.first_value >= pp.second_value
        assert pp.first_value <= 3 * pp.second_value * (1 + 1e-12)
        ids = [pp.part_id, pp.second_part_id, c.parts["C2"].part_id, c.parts["L"].part_id]
        want = sum(_unit_price(rows[i], 100) for i in ids)
        assert c.extra["cost"]["per_board"] == pytest.approx(want, abs=1e-9)
        assert c.extra["cost"]["parts_per_board"] == 4
    from picker.api.plan import position_ids
    from picker.buyer.model import ChannelCandidates

    c = pairs[0]
    ids = tuple(position_ids(c.parts[p], p[0], None) for p in ("C1", "C2", "L"))
    ch = ChannelCandidates("a", ("C1", "C2", "L"), (ids,), np.array([0.9]))
    assert sum(ch.counts(0).values()) == 4


def test_build_problem_uses_pair_tables(tmp_path):
    spec = load_spec(_write(tmp_path, PAIR_PARTS.format(parallel="parallel = true")))
    pb = build_problem(spec)
    base = expand("E6", 1e-9, 10e-9)
    n = len(_options(base, True, 10.0))
    assert len(pb.tables["C1"]) == n
    assert np.all(np.diff(pb.tables["C1"].values) >= 0)


def test_stock_only_plan_consolidates_on_stock_ids(tmp_path):
    import shutil
    from pathlib import Path

    from picker.api.plan import run_plan
    from picker.report.plan import plan_dict
    from picker.spec.plan import load_plan

    demo = Path(__file__).resolve().parent.parent / "demo_specs"
    for f in ("plan_sensor_base.toml", "stock_demo.csv"):
        shutil.copy(demo / f, tmp_path / f)
    plan = tmp_path / "plan.toml"
    plan.write_text(
        'base = "plan_sensor_base.toml"\nstock = "stock_demo.csv"\nstock_only = true\n'
        "build_quantity = 100\ncandidates = 30\n"
        '[channels.a]\ntarget = "280 kHz"\n[channels.a.set]\nyield.samples = 1000\n'
        '[channels.b]\ntarget = "390 kHz"\n[channels.b.set]\nyield.samples = 1000\n',
        encoding="utf-8",
    )
    run = run_plan(load_plan(plan), time_limit=10.0, workers=1)
    rows = _stock_rows(tmp_path / "stock_demo.csv")
    assert run.result.status == "optimal"
    for ch in run.channels:
        for cand in ch.result.candidates:
            assert all(pp.source == "stock" and pp.part_id in rows for pp in cand.parts.values())
    d = plan_dict(run)
    assert d["distinct_parts"] == len(d["bom"]) <= d["baseline"]["distinct_parts"]
    for b in d["bom"]:
        row = rows[b["part_id"]]
        assert b["qty_build"] == 100 * b["qty_per_board"] <= int(row["on_hand"])
        assert b["unit_price"] == pytest.approx(_unit_price(row, b["qty_build"]), abs=1e-12)
    assert d["reductions"]["parts_lower_bound"] <= d["distinct_parts"]


def test_evaluate_a_stock_design(tmp_path):
    from picker.api.pipeline import evaluate

    spec = load_spec(_write(tmp_path, STOCK_PARTS, "[cost]\nbuild_quantity = 1000\n"))
    rows = _stock_rows(tmp_path / "stock.csv")
    res = evaluate(spec, {"C1": 2.2e-9, "C2": 4.7e-9, "L": 150e-6})
    c = res.candidates[0]
    # C1: two C0G 2.2 nF parts (C-C 2 %, C-H 5 %); the cheaper at 1000 is C-C (0.012)
    assert c.parts["C1"].part_id == "C-C"
    assert c.parts["C1"].tolerance == pytest.approx(0.02)
    assert c.parts["L"].part_id == "L-B"
    want = sum(_unit_price(rows[i], 1000) for i in ("C-C", "C-E", "L-B"))
    assert c.extra["cost"]["per_board"] == pytest.approx(want, abs=1e-12)
    with pytest.raises(SpecError, match="not in the stock list"):
        evaluate(spec, {"C1": 2.7e-9, "C2": 4.7e-9, "L": 150e-6})
