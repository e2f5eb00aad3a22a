"""The exact search equals brute force (hypothesis property test) and respects its limits."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from picker.core.search import Problem, brute_force, search, sort_designs, uniform_table
from picker.errors import SpecError
from picker.parts.series import expand
from picker.tank.base import CLAPP, COLPITTS, Parasitics, board_frequency

SERIES = ["E3", "E6", "E12", "E24"]


@st.composite
def problems(draw, topo):
    tables = {}
    for p in topo.positions:
        s = draw(st.sampled_from(SERIES))
        if p == "L":
            lo = 10.0 ** draw(st.integers(-7, -4))
        else:
            lo = 10.0 ** draw(st.integers(-12, -9))
        hi = lo * 10.0 ** draw(st.integers(0, 2))
        tables[p] = uniform_table(expand(s, lo, hi), 0.05, s)
    # Centre the window on some combination so the set is often non-empty.
    pick = {p: tables[p].values[draw(st.integers(0, len(tables[p]) - 1))] for p in topo.positions}
    par = Parasitics(
        stray=draw(st.sampled_from([0.0, 2e-12, 47e-12])),
        c1_shunt=draw(st.sampled_from([0.0, 5e-12])),
        c2_shunt=draw(st.sampled_from([0.0, 12e-12])),
        l_scale=draw(st.sampled_from([1.0, 0.93, 1.1])),
    )
    f0 = float(board_frequency(topo, pick, par)) * draw(st.floats(0.9, 1.1))
    w = draw(st.sampled_from([0.001, 0.01, 0.05, 0.2]))
    b_lo = draw(st.sampled_from([0.01, 0.1, 0.3]))
    b_hi = b_lo * draw(st.sampled_from([1.0, 3.0, 10.0, 100.0]))
    return Problem(topo, tables, f0 * (1 - w), f0 * (1 + w), b_lo, b_hi, par)


def _as_set(d):
    return set(zip(*(d.idx[p].tolist() for p in d.idx), strict=True))


@pytest.mark.parametrize("topo", [COLPITTS, CLAPP], ids=["colpitts", "clapp"])
def test_search_equals_brute_force(topo):
    @settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(problems(topo))
    def check(problem):
        fast = sort_designs(problem, search(problem))
        ref = sort_designs(problem, brute_force(problem))
        assert _as_set(fast) == _as_set(ref)
        assert len(fast) == len(ref)
        np.testing.assert_array_equal(fast.f_nominal, ref.f_nominal)

    check()


def test_search_is_not_a_full_cube():
    # A space of 145*145*49 combinations: the search visits only beta-feasible pairs.
    from picker.core.search import estimate_outer

    tabs = {
        "C1": uniform_table(expand("E24", 1e-12, 1e-6), 0.05, "E24"),
        "C2": uniform_table(expand("E24", 1e-12, 1e-6), 0.05, "E24"),
        "L": uniform_table(expand("E12", 1e-7, 1e-3), 0.1, "E12"),
    }
    p = Problem(COLPITTS, tabs, 0.99e6, 1.01e6, 0.2, 0.5, Parasitics())
    outer, solved = estimate_outer(p)
    assert solved == "L"
    assert outer < p.space_size() / 100
    d = search(p)
    assert len(d) > 0 and np.all((d.f_nominal >= 0.99e6) & (d.f_nominal <= 1.01e6))


def test_max_designs_guard_names_the_key():
    tabs = {p: uniform_table(expand("E192", 1e-12, 1e-6), 0.01, "E192") for p in ("C1", "C2")}
    tabs["L"] = uniform_table(expand("E192", 1e-8, 1e-2), 0.01, "E192")
    p = Problem(COLPITTS, tabs, 1e5, 1e7, 0.01, 100.0, Parasitics())
    with pytest.raises(SpecError, match="search.max_designs"):
        search(p, max_designs=1000)
