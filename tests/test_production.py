"""End-to-end checks of the production view through solve/evaluate and the CLI.

Outside references: Thomson's formula f = 1/(2π√(LC)) and the rectangular
distribution (GUM, JCGM 100:2008, 4.3.7) for a closed-form yield over
temperature; the EIA-198 class-2 envelope (X7R ±15 %, X5R rated to 85 °C) and
the C0G class-1 figure (0 ± 30 ppm/°C) for the drift classes; the Wilson
interval (scipy.stats.binomtest) for the precision rule. Monte Carlo bounds
are four binomial standard errors unless said otherwise.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

import numpy as np
import pytest

from picker import api
from picker.cli.main import main
from picker.errors import SpecError
from picker.parts.drift import drift_factor, get_material
from picker.report.designs import to_json
from picker.tank.base import TWO_PI
from picker.tank.colpitts import COLPITTS

DEMO = Path(__file__).resolve().parent.parent / "demo_specs" / "production_exciter.toml"

BASE = {
    "topology": "colpitts",
    "frequency": {"target": "965 kHz", "window": "±2 %"},
    "feedback": {"min": 0.05, "max": 1.0},
    "parts": {
        "C1": {"values": ["1 nF"], "tolerance": "2 %"},
        "C2": {"values": ["4.7 nF"], "tolerance": "2 %"},
        "L": {"values": ["33 uH"], "tolerance": "5 %"},
    },
    "yield": {"samples": 8000, "seed": 3},
}
DESIGN = {"C1": 1e-9, "C2": 4.7e-9, "L": 33e-6}


def spec_with(parts=None, yield_=None, frequency=None, file=None):
    d = copy.deepcopy(BASE)
    for p, extra in (parts or {}).items():
        d["parts"][p].update(extra)
    d["yield"].update(yield_ or {})
    d["frequency"].update(frequency or {})
    return api.spec_from_dict(d, file=file)


def four_se(p: float, n: int) -> float:
    return 4 * np.sqrt(max(p * (1 - p), 1.0 / n) / n)


# ---------------------------------------------------------------- spec keys


@pytest.mark.parametrize(
    ("parts", "yield_", "key"),
    [
        ({"C1": {"dielectric": "X9Q"}}, {}, "parts.C1.dielectric"),
        ({"C1": {"core": "ferrite"}}, {}, "parts.C1.core"),
        ({"L": {"dielectric": "C0G"}}, {}, "parts.L.dielectric"),
        ({"C1": {"tempco": "30 pF"}}, {}, "parts.C1.tempco"),
        ({"C1": {"tempco_spread": "30 ppm/°C"}}, {}, "parts.C1.tempco_spread"),
        ({"C1": {"dielectric": "X7R", "tempco": "30 ppm/°C"}}, {}, "parts.C1.tempco"),
        ({"C1": {"distribution": "graded"}}, {}, "parts.C1.grade"),
        ({"C1": {"distribution": "graded", "grade": "3 %"}}, {}, "parts.C1.grade"),
        ({"C1": {"grade": "1 %"}}, {}, "parts.C1.grade"),
        ({"C1": {"distribution": "empirical"}}, {}, "parts.C1.distribution"),
        ({"C1": {"prices": {"fast": 0.1}}}, {}, "parts.C1.prices.fast"),
        ({"C1": {"prices": {"5 %": -1}}}, {}, "parts.C1.prices.5 %"),
        ({}, {"temperature": ["85 °C", "-40 °C"]}, "yield.temperature"),
        ({}, {"temperature": ["-40 °C", "85 kHz"]}, "yield.temperature"),
        ({}, {"temperature_points": 1}, "yield.temperature_points"),
        ({}, {"precision": "70 %"}, "yield.precision"),
        ({}, {"sampling": "halton"}, "yield.sampling"),
        ({}, {"target": "120 %"}, "yield.target"),
        ({}, {"trimmer": "C3"}, "yield.trimmer"),
        ({}, {"trimmer_share": "100 %"}, "yield.trimmer_share"),
        ({}, {"max_samples": 1000}, "yield.max_samples"),
        ({}, {"distribution": "empirical"}, "yield.distribution"),
        ({}, {"temprature": ["0 °C", "50 °C"]}, "yield.temprature"),
    ],
)
def test_bad_production_keys_name_the_key(parts, yield_, key):
    with pytest.raises(SpecError) as exc:
        spec_with(parts, yield_, file="s.toml")
    assert exc.value.key == key
    assert exc.value.one_line().startswith(f"s.toml: {key}: ")


def test_production_keys_parse_to_si():
    s = spec_with(
        {
            "C1": {"dielectric": "np0", "prices": {"2 %": 0.05, "G": 0.06, "C0G": 0.07}},
            "C2": {"dielectric": "X7R", "distribution": "graded", "grade": "1 %"},
            "L": {"core": "ferrite", "tempco": "+150 ppm/°C", "tempco_spread": "50 ppm/°C"},
        },
        {
            "temperature": ["-40 °C", "358.15 K"],
            "precision": "0.5 %",
            "target": "99 %",
            "sampling": "Sobol",
            "trimmer_share": "99 %",
        },
    )
    c1, c2, ll = s.parts["C1"], s.parts["C2"], s.parts["L"]
    assert c1.dielectric == "C0G"  # NP0 is C0G (EIA-198 class 1)
    assert dict(c1.prices) == {0.02: 0.06, "C0G": 0.07}  # "2 %" and letter G are one key
    assert c2.distribution == "graded" and c2.grade == pytest.approx(0.01)
    assert ll.dielectric == "ferrite"
    assert ll.tempco == pytest.approx(150e-6) and ll.tempco_spread == pytest.approx(50e-6)
    ys = s.yield_
    assert ys.temperature == pytest.approx((-40.0, 85.0))  # 358.15 K = 85 °C (SI Brochure)
    assert ys.precision == pytest.approx(0.005) and ys.target == pytest.approx(0.99)
    assert ys.sampling == "sobol" and ys.trimmer_share == pytest.approx(0.99)


# ---------------------------------------------------------------- temperature


def test_yield_over_temperature_matches_closed_form():
    # Only L varies (C1, C2 at 1 ppm, whose effect is below 1e-6), +300 ppm/°C exact:
    # L(T) = L0(1+d)(1+α(T-25)), d ~ U(-t, t). With Thomson's formula a board passes at
    # every temperature iff d lies in the intersection of the windows at the range ends.
    t, alpha = 0.05, 300e-6
    s = spec_with(
        {
            "C1": {"tolerance": "1 ppm"},
            "C2": {"tolerance": "1 ppm"},
            "L": {"tempco": "+300 ppm/°C"},
        },
        {"temperature": ["-40 °C", "85 °C"], "samples": 20000},
    )
    c = api.evaluate(s, DESIGN).candidates[0]
    k = DESIGN["L"] * float(COLPITTS.c_eff(DESIGN))
    lc_lo = 1 / (TWO_PI * s.frequency.f_max) ** 2
    lc_hi = 1 / (TWO_PI * s.frequency.f_min) ** 2

    def share(lo, hi):
        return max(0.0, min(hi, t) - max(lo, -t)) / (2 * t)

    at25 = share(lc_lo / k - 1, lc_hi / k - 1)
    over = share(lc_lo / (k * (1 + alpha * -65)) - 1, lc_hi / (k * (1 + alpha * 60)) - 1)
    yt = c.extra["yield_over_temperature"]
    n = c.yield_.samples
    assert abs(yt["at_25c"]["estimate"] - at25) < four_se(at25, n)
    assert abs(c.yield_.estimate - over) < four_se(over, n)
    # the headline yield is the conditional estimate (L integrated out); the production view
    # counts passing boards plainly: the same boards, so the same count of passing boards
    assert yt["over_range"]["passed"] == c.yield_.passed
    assert over < at25 - 0.05  # the drift costs a visible share, so the check has teeth


def test_drifting_design_loses_yield_and_a_steady_one_does_not():
    rng_ = {"temperature": ["-40 °C", "85 °C"]}
    x7r = api.evaluate(spec_with({"C1": {"dielectric": "X7R"}}, rng_), DESIGN).candidates[0]
    yt = x7r.extra["yield_over_temperature"]
    assert yt["over_range"]["passed"] < yt["at_25c"]["passed"]
    # each single temperature is at least as good as all of them together
    assert min(yt["yield_at_temperature"]) >= yt["over_range"]["estimate"]
    assert 25.0 in yt["temperatures_c"] and -40.0 in yt["temperatures_c"]
    tiny = {"dielectric": "C0G", "tempco": "0.0001 ppm/°C"}  # max shift ~1e-8: no board moves
    steady = spec_with({"C1": tiny, "C2": tiny, "L": {"tempco": "0.0001 ppm/°C"}}, rng_)
    c = api.evaluate(steady, DESIGN).candidates[0]
    yt = c.extra["yield_over_temperature"]
    assert yt["over_range"]["passed"] == yt["at_25c"]["passed"]
    # without a range the dielectric is not simulated and a warning says so
    r = api.evaluate(spec_with({"C1": {"dielectric": "X7R"}}), DESIGN)
    assert "yield_over_temperature" not in r.candidates[0].extra
    assert any("parts.C1" in w and "not simulated" in w for w in r.warnings)


def test_temperature_outside_rating_is_a_warning_in_json():
    # X5R: EIA-198 code 5 = +85 °C upper limit; C0G is rated to 125 °C
    s = spec_with(
        {"C1": {"dielectric": "C0G"}, "C2": {"dielectric": "X5R"}},
        {"temperature": ["0 °C", "105 °C"], "samples": 2000},
    )
    d = json.loads(to_json(api.evaluate(s, DESIGN)))
    assert len(d["warnings"]) == 1
    assert d["warnings"][0].startswith("parts.C2: X5R is rated up to 85 °C")


# ---------------------------------------------------------------- drivers, buy tighter


def test_drivers_sum_to_one_and_agree_with_monte_carlo():
    s = spec_with(
        {"C2": {"dielectric": "X7R"}, "L": {"core": "ferrite"}},
        {"temperature": ["-20 °C", "70 °C"], "samples": 20000},
    )
    c = api.evaluate(s, DESIGN).candidates[0]
    fo, mc = c.extra["drivers"], c.extra["drivers_mc"]["shares"]
    assert set(fo) == {"C1", "C2", "L", "temperature"} == set(mc)
    assert sum(fo.values()) == pytest.approx(1.0, abs=1e-12)
    assert sum(mc.values()) == pytest.approx(1.0, abs=1e-12)
    # first order against the regression on 20,000 boards: sampling error of a share
    # of var(ln f) is about 1 % here; 0.03 is the bound (R² near 1 shows linearity)
    assert c.extra["drivers_mc"]["r2"] > 0.99
    for k in fo:
        assert abs(fo[k] - mc[k]) < 0.03
    assert max(fo, key=fo.get) == "L"  # S_L = -1/2 with the widest tolerance


def test_buy_tighter_ranks_the_dominant_change_first():
    # Colpitts S_L = -1/2 (REFERENCES.md): a 20 % inductor swamps 1 % capacitors
    s = spec_with(
        {
            "C1": {"tolerance": "1 %"},
            "C2": {"tolerance": "1 %"},
            "L": {"tolerance": "20 %", "prices": {"20 %": 0.1, "10 %": 0.16}},
        }
    )
    ch = api.evaluate(s, DESIGN).candidates[0].extra["tighter"]
    assert (ch[0]["position"], ch[0]["from"], ch[0]["to"]) == ("L", 0.2, 0.1)
    assert ch[0]["gain"] > 0.1 and ch[0]["extra_cost_per_board"] == pytest.approx(0.06)
    assert all(a["gain"] >= b["gain"] for a, b in zip(ch, ch[1:], strict=False))
    # X7R (EIA ±15 %) at C1, which carries -½·C2/(C1+C2) = -0.41 of ln f: the swap to
    # C0G must beat any tolerance step of the 1 % parts
    s = spec_with(
        {
            "C1": {"dielectric": "X7R", "tolerance": "1 %", "prices": {"X7R": 0.01, "C0G": 0.03}},
            "C2": {"dielectric": "C0G", "tolerance": "1 %"},
            "L": {"tolerance": "1 %"},
        },
        {"temperature": ["-40 °C", "85 °C"]},
    )
    ch = api.evaluate(s, DESIGN).candidates[0].extra["tighter"]
    assert (ch[0]["position"], ch[0]["kind"], ch[0]["to"]) == ("C1", "material", "C0G")
    assert ch[0]["extra_cost_per_board"] == pytest.approx(0.02)


# ---------------------------------------------------------------- demo, trimmer


@pytest.fixture(scope="module")
def demo():
    r = api.solve(api.load_spec(DEMO))
    return r, json.loads(to_json(r))


def test_demo_shows_the_production_view(demo):
    r, d = demo
    best = d["candidates"][0]
    for key in (
        "drivers",
        "drivers_mc",
        "yield_over_temperature",
        "tighter",
        "tighter_plan",
        "trimmer",
    ):
        assert key in best
    mats = {p: v["material"] for p, v in d["monte_carlo"]["parts"].items()}
    assert mats == {"C1": "C0G", "C2": "X7R", "L": "ferrite"}
    assert best["yield"]["estimate"] < 0.99  # short of the spec's target
    assert best["yield"]["estimate"] < best["yield_over_temperature"]["at_25c"]["estimate"]
    plan = best["tighter_plan"]
    assert plan["reaches_target"] and plan["yield"] >= 0.99
    assert "tighter" in d["candidates"][2] and "tighter" not in d["candidates"][3]
    assert d["warnings"] == []  # -40..85 °C is inside every part's rating


def test_demo_trimmer_confirmed_by_fresh_boards(demo):
    # Independent check: new boards (another seed), each tuned by brute force over
    # 600 settings of the recommended trimmer, must stay in the window at every
    # check temperature for at least the asked share (less 3 binomial SE).
    r, d = demo
    tr = d["candidates"][0]["trimmer"]
    assert tr["trimmer"] is not None and tr["tunable"] >= tr["share"]
    best = r.candidates[0]
    nominal = {p: pp.value for p, pp in best.parts.items()}
    nominal[tr["recentre"]["position"]] = tr["recentre"]["to"]
    spec = r.spec
    temps = np.asarray(tr["temperatures_c"])
    n = 6000
    rng = np.random.default_rng(2024)
    vals = {}
    for p in COLPITTS.positions:
        dev = best.parts[p].tolerance * (2 * rng.random(n) - 1)  # uniform ±t (GUM 4.3.7)
        part = spec.parts[p]
        mat = get_material(part.dielectric)
        if part.tempco is not None:
            mat = type(mat)(**{**mat.__dict__, "tempco": part.tempco, "spread": part.tempco_spread})
        vals[p] = nominal[p] * (1 + dev)[None, :] * (1 + drift_factor(mat, temps, rng.random(n)))
    settings = np.linspace(tr["trimmer"]["min_f"], tr["trimmer"]["max_f"], 600)
    stray = spec.parasitics.stray
    ok_all = np.ones((len(settings), n), dtype=bool)
    for i in range(len(temps)):
        ce = COLPITTS.c_series({p: v[i] for p, v in vals.items()}) + stray
        f = 1 / (TWO_PI * np.sqrt(vals["L"][i][None, :] * (ce[None, :] + settings[:, None])))
        ok_all &= (f >= spec.frequency.f_min) & (f <= spec.frequency.f_max)
    share = ok_all.any(axis=0).mean()
    assert share >= tr["share"] - 3 * np.sqrt(tr["share"] * (1 - tr["share"]) / n)
    # and without a trimmer the re-centred design alone is far from that
    assert ok_all[0].mean() < 0.5


def test_no_trimmer_or_plan_when_the_target_is_met():
    s = spec_with({}, {"target": "50 %", "temperature": ["0 °C", "50 °C"], "samples": 2000})
    c = api.evaluate(s, DESIGN).candidates[0]
    assert c.yield_.estimate >= 0.5
    assert "trimmer" not in c.extra and "tighter_plan" not in c.extra
    s = spec_with({}, {"target": "99.9 %", "trimmer": "none", "samples": 2000})
    c = api.evaluate(s, DESIGN).candidates[0]
    assert "trimmer" not in c.extra and "tighter_plan" in c.extra


# ---------------------------------------------------------------- sampling, precision


def test_sobol_path_is_deterministic_and_power_of_two():
    s = spec_with({}, {"sampling": "sobol", "samples": 3000})
    a = to_json(api.evaluate(s, DESIGN))
    b = to_json(api.evaluate(s, DESIGN))
    assert a == b
    d = json.loads(a)
    assert d["monte_carlo"]["samples"] == 4096 == d["candidates"][0]["yield"]["samples"]
    assert d["monte_carlo"]["samples_requested"] == 3000
    plain = json.loads(to_json(api.evaluate(spec_with({}, {"samples": 4096}), DESIGN)))
    assert plain["candidates"][0]["yield"]["passed"] != d["candidates"][0]["yield"]["passed"]


@pytest.mark.parametrize("sampling", ["random", "sobol"])
def test_precision_mode_stops_at_the_requested_half_width(sampling):
    seen = []
    s = spec_with({}, {"samples": 1000, "sampling": sampling})
    # the yields are conditional Monte Carlo estimates (picker.core.conditional), whose
    # normal interval is several times narrower than a binomial one: 0.1 % needs more
    # than the first 1,000 boards here
    r = api.solve(s, precision=0.001, progress=lambda n, cap, hw: seen.append((n, hw)))
    assert r.production["converged"] is True and len(seen) >= 2
    assert all(hw > 0.001 for _, hw in seen[:-1]) and seen[-1][1] <= 0.001
    for c in r.candidates:
        assert c.yield_.samples == r.samples == seen[-1][0]
        assert c.yield_.estimator == "conditional"
        assert (c.yield_.ci_high - c.yield_.ci_low) / 2 <= 0.001 + 1e-12
    # the same spec and seed give the same run
    again = api.solve(s, precision=0.001)
    assert to_json(again) == to_json(r)
    # a cap below what the precision needs: stop at the cap, not converged
    capped = api.solve(spec_with({}, {"samples": 1000, "max_samples": 3000}), precision=0.0001)
    assert capped.production["converged"] is False
    assert capped.samples == 3000 or (sampling == "sobol" and capped.samples <= 3000)


# ---------------------------------------------------------------- lots


def _write_lot(path: Path, values_nf) -> None:
    path.write_text("serial,value\n" + "".join(f"{i},{v} nF\n" for i, v in enumerate(values_nf)))


def test_lot_is_read_relative_to_the_spec_and_checked(tmp_path):
    rng = np.random.default_rng(9)
    _write_lot(tmp_path / "c1_lot.csv", np.round(1.0 + 0.01 * rng.standard_normal(200), 4))
    spec_file = tmp_path / "s.toml"
    s = spec_with({"C1": {"lot": "c1_lot.csv"}}, file=str(spec_file))
    r = api.evaluate(s, DESIGN)
    mc = r.production["parts"]["C1"]
    assert mc == {"distribution": "empirical", "lot_size": 200}
    # a lot of another value (median 1.2 nF for a 1 nF part at 2 %) is refused
    _write_lot(tmp_path / "wrong.csv", [1.2] * 30)
    with pytest.raises(SpecError, match="lot median") as exc:
        spec_with({"C1": {"lot": "wrong.csv"}}, file=str(spec_file))
    assert "wrong.csv" in exc.value.one_line()
    with pytest.raises(SpecError) as exc:
        spec_with({"C1": {"lot": "missing.csv"}}, file=str(spec_file))
    assert exc.value.key == "parts.C1.lot"
    with pytest.raises(SpecError) as exc:  # the lot belongs to 1 nF parts
        api.evaluate(s, {**DESIGN, "C1": 1.2e-9})
    assert exc.value.key == "parts.C1.lot"


# ---------------------------------------------------------------- CLI


def test_cli_plot_writes_pngs_and_keeps_existing(tmp_path, capsys):
    out = tmp_path / "plots"
    args = [
        "evaluate",
        str(DEMO),
        "--set",
        "C1=560p",
        "--set",
        "C2=2.2n",
        "--set",
        "L=56u",
        "--samples",
        "2000",
        "-f",
        "json",
    ]
    with pytest.raises(SystemExit) as exc:
        main([*args, "--plot", str(out)])
    assert exc.value.code == 0
    with_plot = capsys.readouterr().out
    names = sorted(p.name for p in out.iterdir())
    assert names == ["drivers.png", "histogram.png", "yield_vs_tolerance.png"]
    for p in out.iterdir():
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and p.stat().st_size > 10_000
    with pytest.raises(SystemExit) as exc:
        main([*args])
    assert capsys.readouterr().out == with_plot  # plots do not change the JSON
    with pytest.raises(SystemExit) as exc:
        main([*args, "--plot", str(out)])
    assert exc.value.code == 2
    assert "--force" in capsys.readouterr().err
    with pytest.raises(SystemExit) as exc:
        main([*args, "--plot", str(out), "--force"])
    assert exc.value.code == 0


@pytest.mark.parametrize(
    ("option", "value"), [("--precision", "lots"), ("--precision", "80%"), ("--sampling", "grid")]
)
def test_cli_bad_production_options(option, value, capsys):
    with pytest.raises(SystemExit) as exc:
        main(["solve", str(DEMO), option, value])
    assert exc.value.code == 2
    err = capsys.readouterr().err
    assert err.startswith("picker: error:") and option in err and err.count("\n") == 1


def test_drift_aware_screen_tracks_monte_carlo_and_keeps_the_top(demo):
    # The screen integrates the dominant drifting part's curve variate (Gauss-Legendre)
    # and keeps the others as variance; against the all-temperature Monte Carlo of every
    # feasible design of the demo it must be close (0.05; it is 0.030, and the
    # per-temperature minimum it replaced was 0.163 off), and with only 3 designs checked first the top-up must
    # still find the Monte Carlo's own best 5 (ranked on the very same boards).
    from picker.core.montecarlo import count_passing
    from picker.core.ranking import rank_order
    from picker.core.screen import screen_yield
    from picker.core.search import search

    r, _ = demo
    spec = r.spec
    problem = api.build_problem(spec)
    designs = search(problem)
    sim = api.simulation_of(spec, problem)
    u = api.random_inputs(spec, sim, spec.yield_.samples, spec.yield_.seed)
    passed = count_passing(sim, designs, u)
    mc = passed / u.shape[0]
    assert np.max(np.abs(screen_yield(sim, designs) - mc)) < 0.05
    # solve ranks by the conditional estimate (picker.core.conditional) on the same boards
    from picker.core.conditional import conditional_counts
    from picker.core.ranking import estimate_order

    est = conditional_counts(sim, designs, u).mean()
    truth = estimate_order(est, designs.f_nominal, spec.frequency.target)[:5]
    assert len(rank_order(passed, designs.f_nominal, spec.frequency.target)) == len(designs)
    few = api.solve(spec, candidates=3, top=5)
    got = [tuple(c.values.values()) for c in few.candidates]
    want = [
        tuple(
            float(problem.tables[p].values[designs.idx[p][i]]) for p in problem.topology.positions
        )
        for i in truth
    ]
    assert got == want


def test_trimmer_advice_on_stock_positions_recentres_to_a_stock_value(tmp_path):
    # A stock-only spec whose yield target is missed: the trimmer advice re-centres a part,
    # and a stock position may only move to what the shelf holds (one part, or a parallel
    # pair where the spec allows it). Read independently from the stock CSV. Before the
    # fix this valid spec ended with "expected a series name ... got None" (exit 2).
    import csv
    import itertools
    import shutil
    import tomllib

    from picker.units import parse_quantity

    demo = DEMO.parent
    shutil.copy(demo / "stock_demo.csv", tmp_path / "stock_demo.csv")
    data = tomllib.loads((demo / "buyer_exciter.toml").read_text(encoding="utf-8"))
    data["yield"]["target"] = "99.99 %"
    spec = api.spec_from_dict(data, file=str(tmp_path / "buyer.toml"))
    best = api.solve(spec, top=1).candidates[0]
    advice = best.extra["trimmer"]
    with open(demo / "stock_demo.csv", encoding="utf-8", newline="") as fh:
        caps = sorted(
            {parse_quantity(r["value"], "F") for r in csv.DictReader(fh) if r["kind"] == "C"}
        )
    pairs = {a + b for a, b in itertools.combinations_with_replacement(caps, 2)}
    moved = advice["recentre"]
    assert moved["position"] in ("C1", "C2")
    shelf = set(caps) | (pairs if moved["position"] == "C1" else set())  # C1 may be a pair
    assert any(abs(moved["to"] / v - 1) < 1e-9 for v in shelf)


# ---------------------------------------------------------------- worst case, cost, stray, ties


def _thomson_colpitts(c1, c2, l_h, stray=0.0):
    """Thomson's formula with the Colpitts series pair (Sedra & Smith) and a stray across it."""
    return 1.0 / (2 * np.pi * np.sqrt(l_h * (c1 * c2 / (c1 + c2) + stray)))


def test_worst_case_over_the_range_is_the_corner_of_tolerance_and_drift():
    # Linear tempcos α0 ± spread (explicit, so the reference needs no material table):
    # each part's value lies in x(1 ± t)(1 + [α0 − s, α0 + s]·ΔT); f falls with every
    # part value, so its extremes are all parts low and all parts high, at a range end.
    parts = {
        "C1": {"tempco": "+100 ppm/°C", "tempco_spread": "50 ppm/°C"},
        "C2": {"tempco": "-200 ppm/°C", "tempco_spread": "100 ppm/°C"},
        "L": {"tempco": "+300 ppm/°C", "tempco_spread": "100 ppm/°C"},
    }
    s = spec_with(parts, {"temperature": ["-40 °C", "85 °C"], "samples": 2000})
    c = api.evaluate(s, DESIGN).candidates[0]
    tol = {"C1": 0.02, "C2": 0.02, "L": 0.05}
    alpha = {"C1": (50e-6, 150e-6), "C2": (-300e-6, -100e-6), "L": (200e-6, 400e-6)}
    lows, highs = [], []
    for dt in (-65.0, 60.0, 0.0):  # the range ends and 25 °C
        drift = {p: sorted(a * dt for a in alpha[p]) for p in alpha}
        small = {p: DESIGN[p] * (1 - tol[p]) * (1 + drift[p][0]) for p in DESIGN}
        big = {p: DESIGN[p] * (1 + tol[p]) * (1 + drift[p][1]) for p in DESIGN}
        highs.append(_thomson_colpitts(small["C1"], small["C2"], small["L"]))
        lows.append(_thomson_colpitts(big["C1"], big["C2"], big["L"]))
    wc = c.extra["worst_case_over_range"]
    assert wc["range_c"] == [-40.0, 85.0]
    # both from closed forms in float64: agreement to rounding
    assert wc["f_low_hz"] == pytest.approx(min(lows), rel=1e-12)
    assert wc["f_high_hz"] == pytest.approx(max(highs), rel=1e-12)
    # at 25 °C alone the span is narrower, and both are labelled in the text output
    assert c.f_worst_low_hz > wc["f_low_hz"] and c.f_worst_high_hz < wc["f_high_hz"]


def _main_ok(argv):
    try:
        main(argv)
    except SystemExit as exc:
        assert not exc.code


def test_worst_case_spans_are_labelled_in_the_table(capsys):
    _main_ok(["solve", str(DEMO), "--samples", "2000", "--top", "2"])
    out = capsys.readouterr().out
    assert "worst case at 25 °C" in out
    assert "at 25 °C;" in out and "over -40 °C .. 85 °C" in out


def test_cost_per_board_from_prices_alone():
    # every part priced only through `prices` (per tolerance class): the cost per
    # board is the sum of the chosen classes' prices, typed here from the spec
    parts = {
        "C1": {"prices": {"2 %": 0.07, "1 %": 0.12}},
        "C2": {"prices": {"2 %": 0.02, "5 %": 0.01}},
        "L": {"prices": {"5 %": 0.30, "2 %": 0.55}},
    }
    c = api.evaluate(spec_with(parts, {"samples": 1000}), DESIGN).candidates[0]
    assert c.extra["cost"]["per_board"] == pytest.approx(0.07 + 0.02 + 0.30, abs=1e-9)
    # a class without a price: the cost stays unknown, never a guess
    parts["L"] = {"prices": {"2 %": 0.55}}
    c = api.evaluate(spec_with(parts, {"samples": 1000}), DESIGN).candidates[0]
    assert c.extra["cost"]["per_board"] is None


def test_stray_tolerance_is_sampled_per_board():
    # Independent Monte Carlo written here: parts uniform ±t, the stray uniform in
    # 20 pF ± 20 pF (GUM 4.3.7 rectangular), Thomson's formula, the window of the spec.
    d = copy.deepcopy(BASE)
    d["parasitics"] = {"stray": "20 pF", "stray_tolerance": "±20 pF"}
    d["yield"]["samples"] = 20000
    s = api.spec_from_dict(d)
    got = api.evaluate(s, DESIGN).candidates[0]
    rng = np.random.default_rng(123)
    n = 200_000
    c1 = DESIGN["C1"] * (1 + rng.uniform(-0.02, 0.02, n))
    c2 = DESIGN["C2"] * (1 + rng.uniform(-0.02, 0.02, n))
    l_h = DESIGN["L"] * (1 + rng.uniform(-0.05, 0.05, n))
    st = 20e-12 + rng.uniform(-20e-12, 20e-12, n)
    f = _thomson_colpitts(c1, c2, l_h, st)
    ref = float(np.mean((f >= s.frequency.f_min) & (f <= s.frequency.f_max)))
    assert abs(got.yield_.estimate - ref) < four_se(ref, got.yield_.samples)
    # the worst case at 25 °C has the stray at its corners too (0 pF and 40 pF here)
    lo_ref = _thomson_colpitts(1.02e-9, 4.7e-9 * 1.02, 33e-6 * 1.05, 40e-12)
    hi_ref = _thomson_colpitts(0.98e-9, 4.7e-9 * 0.98, 33e-6 * 0.95, 0.0)
    assert got.f_worst_low_hz == pytest.approx(lo_ref, rel=1e-12)
    assert got.f_worst_high_hz == pytest.approx(hi_ref, rel=1e-12)
    # the same spec with one stray for every board yields visibly more
    d["parasitics"] = {"stray": "20 pF"}
    fixed = api.evaluate(api.spec_from_dict(d), DESIGN).candidates[0]
    assert fixed.yield_.estimate > got.yield_.estimate + 0.01  # same boards otherwise
    # the stray is a named driver, first order and Monte Carlo agreeing
    sh, mc = got.extra["drivers"], got.extra["drivers_mc"]["shares"]
    assert sh["stray"] > 0.01 and abs(sh["stray"] - mc["stray"]) < 0.01


def test_stray_tolerance_keys_are_checked():
    d = copy.deepcopy(BASE)
    d["parasitics"] = {"stray": "5 pF", "stray_tolerance": "6 pF"}
    with pytest.raises(SpecError, match="parasitics.stray_tolerance"):
        api.spec_from_dict(d)
    d["parasitics"] = {"stray": "5 pF", "stray_tolerance": "2 uH"}
    with pytest.raises(SpecError, match="parasitics.stray_tolerance"):
        api.spec_from_dict(d)


def test_ties_are_overlapping_intervals_and_marked(capsys):
    from picker.api.export import tied_with_previous
    from picker.core.montecarlo import YieldEstimate

    def cand(lo, hi):
        y = YieldEstimate((lo + hi) / 2, lo, hi, 1000, 500, 0.95, "wilson", 1)
        return type("C", (), {"yield_": y})()

    # [0.80, 0.90] overlaps [0.85, 0.95]; [0.70, 0.79] does not touch [0.80, 0.90]
    got = tied_with_previous([cand(0.85, 0.95), cand(0.80, 0.90), cand(0.70, 0.79)])
    assert got == [False, True, False]
    # the production demo's top designs lie within each other's intervals at 2,000 boards
    _main_ok(["solve", str(DEMO), "--samples", "2000", "--top", "3"])
    out = capsys.readouterr().out
    assert "'=' marks a design whose yield interval overlaps" in out
    assert any(line.lstrip("│ ").startswith("=2") for line in out.splitlines())
