"""Trimmer sizing, checked by an independent Monte Carlo of the trimmed design.

The independent check draws fresh boards (another seed), tunes each one by
scanning the trimmer's setting over its range and keeping the setting whose
frequency (picker.tank.base, Thomson's formula) is nearest the window centre,
and counts the boards in the window; it shares no code with the sizing beyond
the tank formula. Bounds: binomial standard error of that count.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker.errors import SpecError
from picker.parts.distributions import deviation
from picker.production.trimmer import (
    Trimmer,
    across_need,
    choose_trimmer,
    load_trimmer_table,
    parse_trimmer_table,
    required_range,
    series_need,
    size_trimmer,
    tunable_share,
)
from picker.tank.base import resonant_frequency, series_capacitance
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

E12 = np.array([1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2])  # IEC 60063


def _factors(positions, tol, n, seed):
    u = np.random.default_rng(seed).random((n, len(positions)))
    return {p: 1 + deviation(u[:, j], tol[p])[:, 0] for j, p in enumerate(positions)}


def _tuned_share(topology, nominal, fac, f_min, f_max, trimmer, *, at, fixed, steps=401):
    """Share of boards that some trimmer setting puts in the window (independent scan)."""
    settings = np.linspace(trimmer.c_min, trimmer.c_max, steps)[None, :]
    v = {p: (nominal[p] * fac[p])[:, None] for p in topology.positions}
    if at == "C3":
        v["C3"] = fixed * fac["C3"][:, None] + settings
        f = topology.frequency(v)
    else:
        f = topology.frequency(v, stray=settings)
    centre = 0.5 * (f_min + f_max)
    best = f[np.arange(f.shape[0]), np.argmin(np.abs(f - centre), axis=1)]
    return float(np.mean((best >= f_min) & (best <= f_max)))


def test_shipped_table():
    t = load_trimmer_table()
    ranges = {(round(x.c_min * 1e12, 2), round(x.c_max * 1e12, 2)) for x in t}
    assert {(2, 6), (2, 10), (3, 20), (5, 30), (6, 60)} <= ranges
    spans = [x.span for x in t]
    assert spans == sorted(spans)
    with pytest.raises(SpecError, match="row 3"):
        parse_trimmer_table("min_pf,max_pf\n2,6\n5,x\n")
    with pytest.raises(SpecError, match="header"):
        parse_trimmer_table("2,6\n")


def test_needs_put_boards_on_the_window_edges():
    # Thomson's formula, f = 1/(2π√(LC)): adding need_lo gives f_max, need_hi f_min.
    l = np.array([9e-6, 10e-6, 11e-6])
    c = np.array([20e-12, 25e-12, 30e-12])
    lo, hi, mid = across_need(c, l, 9.9e6, 10.1e6)
    assert_allclose(resonant_frequency(l, c + lo), 10.1e6, rtol=1e-12)
    assert_allclose(resonant_frequency(l, c + hi), 9.9e6, rtol=1e-12)
    assert_allclose(resonant_frequency(l, c + mid), 10.0e6, rtol=1e-12)
    # Clapp: the C3 chain (REFERENCES.md: 1/C_eff = 1/C1 + 1/C2 + 1/C3), fixed 10 pF part
    c12 = series_capacitance(1e-9, 1e-9)
    lo, hi, mid = series_need(np.full(3, c12), 10e-12, l, 9.9e6, 10.1e6, stray=2e-12)
    for need, f in ((lo, 10.1e6), (hi, 9.9e6), (mid, 10e6)):
        ce = series_capacitance(1e-9, 1e-9, 10e-12 + need) + 2e-12
        assert_allclose(resonant_frequency(l, ce), f, rtol=1e-10)


def test_required_range_is_the_narrowest_by_brute_force():
    rng = np.random.default_rng(4)
    centre = rng.normal(10.0, 2.0, 40)
    lo, hi = centre - 0.5, centre + 0.5
    share = 0.9
    a, b = required_range(lo, hi, share)
    k = int(np.ceil(share * lo.size))
    assert np.sum((hi >= a) & (lo <= b)) >= k
    best = min(
        max(bb - aa, 0.0)
        for aa, bb in itertools.product(hi, lo)
        if np.sum((hi >= aa) & (lo <= max(bb, aa))) >= k
    )
    assert_allclose(b - a, best, rtol=1e-12)


def test_choose_trimmer_takes_the_smallest_that_suffices():
    table = (Trimmer(2e-12, 6e-12), Trimmer(3e-12, 20e-12), Trimmer(5e-12, 30e-12))
    lo = np.linspace(4e-12, 15e-12, 1000)
    hi = lo + 0.5e-12
    t, s = choose_trimmer(lo, hi, 0.997, table)
    assert t == table[1] and s >= 0.997
    assert tunable_share(lo, hi, 2e-12, 6e-12) < 0.997
    t, s = choose_trimmer(lo * 3, hi * 3, 0.997, table)
    assert t is None and s < 0.997


def test_clapp_trimmer_at_c3_confirmed_by_a_fresh_monte_carlo():
    nominal = {"C1": 1e-9, "C2": 1e-9, "C3": 27e-12, "L": 10e-6}
    tol = {"C1": 0.05, "C2": 0.05, "C3": 0.05, "L": 0.05}
    f0 = float(CLAPP.frequency(nominal))
    f_min, f_max = f0 * 0.997, f0 * 1.003
    fac = _factors(CLAPP.positions, tol, 20_000, seed=1)
    fixed_only = CLAPP.frequency({p: nominal[p] * fac[p] for p in CLAPP.positions})
    assert np.mean((fixed_only >= f_min) & (fixed_only <= f_max)) < 0.3  # needs a trimmer
    adv = size_trimmer(
        CLAPP, nominal, fac, f_min, f_max, placement="C3", recentre_values=E12 * 1e-12 * 10
    )
    assert adv.trimmer is not None and adv.tunable >= 0.997
    assert adv.fixed_value < 27e-12  # re-centred below the old C3
    a, b = adv.required
    assert adv.trimmer.c_min <= a and b <= adv.trimmer.c_max
    # independent check: fresh boards, each tuned by the best setting in range
    fresh = _factors(CLAPP.positions, tol, 20_000, seed=2)
    got = _tuned_share(
        CLAPP, nominal, fresh, f_min, f_max, adv.trimmer, at="C3", fixed=adv.fixed_value
    )
    se = np.sqrt(0.997 * 0.003 / 20_000)
    assert got >= 0.997 - 3 * se
    # the narrowest required range itself, as a trimmer: the fresh share is 0.997
    # within its binomial error (narrowest: not much more, sufficient: not less)
    exact = Trimmer(*adv.required)
    got = _tuned_share(CLAPP, nominal, fresh, f_min, f_max, exact, at="C3", fixed=adv.fixed_value)
    assert 0.997 - 4 * se <= got <= 0.997 + 4 * se


def test_colpitts_trimmer_across_the_tank_with_recentred_c2():
    nominal = {"C1": 470e-12, "C2": 470e-12, "L": 1e-6}
    tol = {"C1": 0.02, "C2": 0.02, "L": 0.05}
    f0 = float(COLPITTS.frequency(nominal))
    f_min, f_max = f0 * 0.995, f0 * 1.005
    fac = _factors(COLPITTS.positions, tol, 20_000, seed=3)
    e24 = np.array(
        [1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7]
    )  # IEC 60063 E24, up to 4.7
    adv = size_trimmer(
        COLPITTS,
        nominal,
        fac,
        f_min,
        f_max,
        placement="across",
        recentre="C2",
        recentre_values=e24 * 100e-12,
        stray=3e-12,
    )
    assert adv.trimmer is not None and adv.tunable >= 0.997
    assert adv.position == "C2" and adv.fixed_value < 470e-12
    fresh = _factors(COLPITTS.positions, tol, 20_000, seed=4)
    nom = {**nominal, "C2": adv.fixed_value}
    t = Trimmer(adv.trimmer.c_min + 3e-12, adv.trimmer.c_max + 3e-12)  # stray adds to the setting
    got = _tuned_share(COLPITTS, nom, fresh, f_min, f_max, t, at="across", fixed=0.0)
    se = np.sqrt(0.997 * 0.003 / 20_000)
    assert got >= 0.997 - 3 * se
    a, b = adv.required
    got = _tuned_share(
        COLPITTS, nom, fresh, f_min, f_max, Trimmer(a + 3e-12, b + 3e-12), at="across", fixed=0.0
    )
    assert 0.997 - 4 * se <= got <= 0.997 + 4 * se
    # without re-centring the boards need less than nothing: no trimmer can help
    plain = size_trimmer(COLPITTS, nominal, fac, f_min, f_max, stray=3e-12)
    assert plain.trimmer is None and plain.required[0] < 0
