"""The coupling k of a Hartley tank's coils as a spread input of the Monte Carlo.

References (written out here, never imported from picker):

- Hayt & Kemmerly, *Engineering Circuit Analysis*, magnetically coupled circuits:
  M = k·√(L1·L2), L_eff = L1 + L2 + 2M (series aiding); Thomson's f = 1/(2π√(L_eff·C)).
- GUM (JCGM 100:2008) 4.3.7: a rectangular spread over ±t has σ = t/√3; first-order
  propagation var(ln f) ≈ Σ (∂ln f/∂x_i · σ_i)² (GUM 5.1.2).
- An independent Monte Carlo of the same boards (numpy's generator, its own seed).
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest

from picker import api
from picker.errors import SpecError
from picker.tank.hartley import HARTLEY
from picker.tank.hartley_series import SERIES_HARTLEY

TWO_PI = 2 * math.pi


def _f(l1, l2, c, k, stray=0.0):
    """Thomson's formula with the series-aiding coils (Hayt & Kemmerly)."""
    return 1 / (TWO_PI * np.sqrt((l1 + l2 + 2 * k * np.sqrt(l1 * l2)) * (c + stray)))


@pytest.mark.parametrize("topo", [HARTLEY, SERIES_HARTLEY], ids=lambda t: t.name)
def test_coupling_sensitivity_matches_central_differences(topo):
    rng = np.random.default_rng(41)
    h = 1e-6
    for _ in range(20):
        k = float(rng.uniform(0.0 + h, 0.99 - h))
        v = {p: float(10 ** rng.uniform(-7, -3)) for p in topo.inductors}
        v.update({p: float(10 ** rng.uniform(-11, -8)) for p in topo.capacitors})
        c = 1 / sum(1 / v[p] for p in topo.capacitors)
        num = (np.log(_f(v["L1"], v["L2"], c, k + h)) - np.log(_f(v["L1"], v["L2"], c, k - h))) / (
            2 * h
        )
        got = topo.configured(k).coupling_sensitivity(v)
        assert got == pytest.approx(num, abs=1e-8)
        # a board's own k (the Monte Carlo's key) overrides the tank's
        assert topo.configured(0.5).frequency({**v, "coupling": k}) == pytest.approx(
            _f(v["L1"], v["L2"], c, k), rel=1e-12
        )


BASE = {
    "topology": "hartley",
    "frequency": {"target": "2.245 MHz", "window": "±1.5 %"},
    "feedback": {"min": 0.1, "max": 0.9},
    "parts": {
        "L1": {"values": ["10 uH"], "tolerance": "2 %"},
        "L2": {"values": ["3.3 uH"], "tolerance": "2 %"},
        "C": {"values": ["300 pF"], "tolerance": "1 %"},
    },
    "tank": {"coupling": 0.3, "coupling_tolerance": 0.08},
    "yield": {"samples": 20000, "seed": 5},
}
DESIGN = {"L1": 10e-6, "L2": 3.3e-6, "C": 300e-12}


def test_coupling_spread_is_sampled_per_board_and_propagates_to_first_order():
    s = api.spec_from_dict(BASE)
    got = api.evaluate(s, DESIGN).candidates[0]
    # independent Monte Carlo: parts uniform ±t, k uniform in 0.3 ± 0.08
    rng = np.random.default_rng(2024)
    n = 400_000
    l1 = 10e-6 * (1 + rng.uniform(-0.02, 0.02, n))
    l2 = 3.3e-6 * (1 + rng.uniform(-0.02, 0.02, n))
    c = 300e-12 * (1 + rng.uniform(-0.01, 0.01, n))
    k = 0.3 + rng.uniform(-0.08, 0.08, n)
    f = _f(l1, l2, c, k)
    ref = float(np.mean((f >= s.frequency.f_min) & (f <= s.frequency.f_max)))
    se = math.sqrt(ref * (1 - ref) / got.yield_.samples)
    assert 0.2 < ref < 0.95  # the spread of k matters here
    assert abs(got.yield_.estimate - ref) < 4 * se + 0.002
    # the same boards with one k for all yield visibly more
    fixed = copy.deepcopy(BASE)
    fixed["tank"] = {"coupling": 0.3}
    one_k = api.evaluate(api.spec_from_dict(fixed), DESIGN).candidates[0]
    assert one_k.yield_.estimate > got.yield_.estimate + 0.05
    # first order (GUM 5.1.2): S_k = ∂ln f/∂k = −√(L1·L2)/L_eff, σ_k = 0.08/√3; the
    # coils' S = −½·(L_i + M)/L_eff, C's −½, each σ = t/√3
    m = 0.3 * math.sqrt(10e-6 * 3.3e-6)
    le = 10e-6 + 3.3e-6 + 2 * m
    terms = {
        "L1": (-0.5 * (10e-6 + m) / le * 0.02) ** 2 / 3,
        "L2": (-0.5 * (3.3e-6 + m) / le * 0.02) ** 2 / 3,
        "C": (-0.5 * 0.01) ** 2 / 3,
        "coupling": (-math.sqrt(10e-6 * 3.3e-6) / le * 0.08) ** 2 / 3,
    }
    share = terms["coupling"] / sum(terms.values())
    assert got.extra["drivers"]["coupling"] == pytest.approx(share, rel=1e-9)
    # ... and the simulated boards' own regression agrees (the spread of ln f grows by
    # what k's sensitivity predicts)
    assert abs(got.extra["drivers_mc"]["shares"]["coupling"] - share) < 0.01
    # the worst case has k at its corners too: low f at parts high and k = 0.38
    lo_ref = _f(10e-6 * 1.02, 3.3e-6 * 1.02, 300e-12 * 1.01, 0.38)
    hi_ref = _f(10e-6 * 0.98, 3.3e-6 * 0.98, 300e-12 * 0.99, 0.22)
    assert got.f_worst_low_hz == pytest.approx(lo_ref, rel=1e-12)
    assert got.f_worst_high_hz == pytest.approx(hi_ref, rel=1e-12)


def test_default_is_no_spread_and_bad_keys_are_one_line():
    d = copy.deepcopy(BASE)
    d["tank"] = {"coupling": 0.3}
    assert api.spec_from_dict(d).tank.coupling_tolerance == 0.0
    cases = [
        ({"coupling": 0.05, "coupling_tolerance": 0.08}, "tank.coupling_tolerance"),
        ({"coupling": 0.95, "coupling_tolerance": 0.08}, "tank.coupling_tolerance"),
        ({"coupling": 0.3, "coupling_tolerance": -0.01}, "tank.coupling_tolerance"),
        ({"coupling": 0.3, "coupling_tolerance": "2 %"}, "tank.coupling_tolerance"),
    ]
    for tank, key in cases:
        d["tank"] = tank
        with pytest.raises(SpecError) as info:
            api.spec_from_dict(d)
        assert key in str(info.value) and "\n" not in str(info.value)
    colpitts = {
        **BASE,
        "topology": "colpitts",
        "parts": {"C1": BASE["parts"]["C"], "C2": BASE["parts"]["C"], "L": BASE["parts"]["L1"]},
        "tank": {"coupling_tolerance": 0.02},
    }
    with pytest.raises(SpecError, match="tank.coupling_tolerance.*one inductor"):
        api.spec_from_dict(colpitts)


# ---------------------------------------------------------------- the tapped-coil form

TAPPED = {
    "topology": "hartley",
    "frequency": {"target": "2.3265 MHz", "window": "±1.2 %"},
    "feedback": {"min": 0.05, "max": 0.9},
    "parts": {"C": {"values": ["390 pF"], "tolerance": "1 %"}, "L1": {"q": 80}},
    "tank": {"coupling": 0.4, "tapped_coil": "12 uH", "tap": 0.25, "coil_tolerance": "3 %"},
    "yield": {"samples": 20000, "seed": 8},
}


def _sections(total: float, t: float, k: float) -> tuple[float, float]:
    """Turns-squared sections of one coil (inductance ∝ N², from memory): L1 = a·(1 − t)²,
    L2 = a·t², M = k·a·t·(1 − t), and L1 + L2 + 2M = the whole coil."""
    a = total / ((1 - t) ** 2 + t**2 + 2 * k * t * (1 - t))
    return a * (1 - t) ** 2, a * t**2


def test_tapped_coil_expands_into_its_two_sections_moving_together():
    s = api.spec_from_dict(TAPPED)
    l1, l2 = _sections(12e-6, 0.25, 0.4)
    assert s.parts["L1"].values == (pytest.approx(l1, rel=1e-12),)
    assert s.parts["L2"].values == (pytest.approx(l2, rel=1e-12),)
    assert s.parts["L1"].tolerance == pytest.approx(0.03) and s.parts["L1"].q == 80
    assert l1 + l2 + 2 * 0.4 * math.sqrt(l1 * l2) == pytest.approx(12e-6, rel=1e-12)
    got = api.evaluate(s, {"L1": l1, "L2": l2, "C": 390e-12}).candidates[0]
    # independent Monte Carlo: the whole coil one part (both sections by one factor), C ±1 %
    rng = np.random.default_rng(77)
    n = 400_000
    g = 1 + rng.uniform(-0.03, 0.03, n)
    c = 390e-12 * (1 + rng.uniform(-0.01, 0.01, n))
    f = _f(l1 * g, l2 * g, c, 0.4)
    ref = float(np.mean((f >= s.frequency.f_min) & (f <= s.frequency.f_max)))
    # the sections drawn apart would yield visibly more (their spreads partly cancel)
    g2 = 1 + rng.uniform(-0.03, 0.03, n)
    f_apart = _f(l1 * g, l2 * g2, c, 0.4)
    apart = float(np.mean((f_apart >= s.frequency.f_min) & (f_apart <= s.frequency.f_max)))
    se = math.sqrt(ref * (1 - ref) / got.yield_.samples)
    assert apart > ref + 10 * se
    assert abs(got.yield_.estimate - ref) < 4 * se + 0.002
    # first order: the coil is one input named L1, S = −½ (f ∝ coil^(−1/2)), C's −½
    share = (0.5 * 0.03) ** 2 / ((0.5 * 0.03) ** 2 + (0.5 * 0.01) ** 2)
    assert got.extra["drivers"]["L1"] == pytest.approx(share, rel=1e-9)
    assert got.extra["drivers"]["L2"] == 0.0
    assert abs(got.extra["drivers_mc"]["shares"]["L1"] - share) < 0.01


def test_buying_a_tapped_coil_tighter_tightens_the_whole_coil():
    # The coil is one part: "buy tighter" offers it once (named L1, as the drivers name
    # it), never its section L2 alone, and its next class moves both sections by one
    # factor. Reference: an independent Monte Carlo of the design with the whole coil at
    # the offered tolerance (uniform, as above), C ±1 %.
    s = api.spec_from_dict(TAPPED)
    l1, l2 = _sections(12e-6, 0.25, 0.4)
    got = api.evaluate(s, {"L1": l1, "L2": l2, "C": 390e-12}).candidates[0]
    changes = got.extra["tighter"]
    assert "L2" not in {c["position"] for c in changes}
    coil = next(c for c in changes if c["position"] == "L1" and c["kind"] == "tolerance")
    tol = float(coil["to"])
    assert tol < 0.03
    rng = np.random.default_rng(78)
    n = 400_000
    g = 1 + rng.uniform(-tol, tol, n)
    c = 390e-12 * (1 + rng.uniform(-0.01, 0.01, n))
    f = _f(l1 * g, l2 * g, c, 0.4)
    ref = float(np.mean((f >= s.frequency.f_min) & (f <= s.frequency.f_max)))
    se = math.sqrt(ref * (1 - ref) / got.yield_.samples)
    assert abs(coil["yield_after"] - ref) < 4 * se + 0.002


def test_screen_takes_a_tapped_coil_as_one_part():
    # The first-order screen (GUM 5.1.2; 5.2.2 with r = 1 for the sections, which share one
    # variate): f ∝ (coil·C_eff)^(−1/2), so σ_lnf² = (½σ_coil)² + (½·C/(C + stray)·σ_C)²,
    # σ = t/√3 for a rectangular spread (GUM 4.3.7). Taken apart, the sections' terms
    # would add in quadrature to less.
    from picker.api.problem import build_problem, simulation_of
    from picker.core.screen import sigma_lnf
    from picker.core.search import search

    spec = api.spec_from_dict(
        {
            **TAPPED,
            "parts": {
                **TAPPED["parts"],
                "C": {"values": ["330 pF", "390 pF", "470 pF"], "tolerance": "1 %"},
            },
        }
    )
    problem = build_problem(spec)
    designs = search(problem)
    assert len(designs) >= 1
    c = designs.values(problem)["C"]
    stray = spec.parasitics.stray
    s_c = 0.5 * c / (c + stray)
    want = np.sqrt((0.5 * 0.03 / math.sqrt(3)) ** 2 + (s_c * 0.01 / math.sqrt(3)) ** 2)
    got = sigma_lnf(simulation_of(spec, problem), designs)
    np.testing.assert_allclose(got, want, rtol=1e-9)  # exact arithmetic on both sides


@pytest.mark.parametrize(
    ("tank", "parts", "key"),
    [
        ({"tapped_coil": "12 uH", "tap": 1.2, "coil_tolerance": "3 %"}, {}, "tank.tap"),
        ({"tapped_coil": "12 uH", "coil_tolerance": "3 %"}, {}, "tank.tap"),
        ({"tapped_coil": "12 pF", "tap": 0.3, "coil_tolerance": "3 %"}, {}, "tank.tapped_coil"),
        ({"tapped_coil": "12 uH", "tap": 0.3}, {}, "tank.coil_tolerance"),
        ({"tap": 0.3}, {}, "tank.tap"),
        (
            {"tapped_coil": "12 uH", "tap": 0.3, "coil_tolerance": "3 %"},
            {"L2": {"values": ["1 uH"]}},
            "parts.L2",
        ),
    ],
)
def test_tapped_coil_refusals_are_one_line_naming_the_key(tank, parts, key):
    d = copy.deepcopy(TAPPED)
    d["tank"] = {"coupling": 0.4, **tank}
    d["parts"] = {"C": TAPPED["parts"]["C"], **parts}
    if "tapped_coil" not in tank:  # the sections given as parts, as usual
        d["parts"].update({"L1": {"values": ["9 uH"]}, "L2": {"values": ["1 uH"]}})
    with pytest.raises(SpecError) as info:
        api.spec_from_dict(d)
    assert key in str(info.value) and "\n" not in str(info.value)


def test_tapped_coil_on_a_tank_with_one_inductor_is_refused():
    d = {
        **TAPPED,
        "topology": "colpitts",
        "parts": {"C1": TAPPED["parts"]["C"], "C2": TAPPED["parts"]["C"]},
        "tank": {"tapped_coil": "12 uH", "tap": 0.3, "coil_tolerance": "3 %"},
    }
    with pytest.raises(SpecError, match="tank.tapped_coil.*one inductor"):
        api.spec_from_dict(d)
