"""The exact search visits few combinations and respects its limits.

That it equals brute force, for every registered topology, is
tests/test_tank_conformance.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from picker.core.search import Problem, search
from picker.errors import SpecError
from picker.parts.series import expand
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics
from picker.tank.colpitts import COLPITTS


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
