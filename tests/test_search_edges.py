"""The window's edges, checked by references written out here (not the search's own check).

The brute-force references in this file enumerate the whole cube with numpy and
apply their own frequency formula and their own edge comparison, so a search
whose pruning *and* whose final check both moved an edge (``>`` for ``>=``, the
lower edge moved by 1 ppm, 5 % more start-up margin than asked) disagrees with
them. Sources: the Colpitts frequency f = 1 / (2π √(L·C1·C2/(C1 + C2))) and
beta = C1/C2 (Sedra & Smith, Microelectronic Circuits, the Colpitts oscillator
section; from memory); the window is closed, f_min <= f <= f_max (README "The
spec"; common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from amplifiers import BJT

from picker.circuit.loaded_search import loaded_search
from picker.circuit.steady import steady_state
from picker.core.montecarlo import Simulation, count_passing
from picker.core.search import Problem, search
from picker.parts.series import expand
from picker.parts.table import uniform_table
from picker.tank.board import Parasitics, board_values
from picker.tank.colpitts import COLPITTS

# Invented small-signal amplifier (typical values, not a check value themselves).


def _tables(c_range=(100e-12, 10e-9), l_range=(10e-6, 1e-3)):
    return {
        "C1": uniform_table(expand("E12", *c_range), 0.05, "E12"),
        "C2": uniform_table(expand("E12", *c_range), 0.05, "E12"),
        "L": uniform_table(expand("E12", *l_range), 0.05, "E12"),
    }


def _cube(tabs):
    """Every (i1, i2, iL) of the cube with its textbook frequency and beta (no parasitics)."""
    n = [len(tabs[p]) for p in ("C1", "C2", "L")]
    i1, i2, il = (g.ravel() for g in np.meshgrid(*[np.arange(k) for k in n], indexing="ij"))
    c1, c2, l = tabs["C1"].values[i1], tabs["C2"].values[i2], tabs["L"].values[il]
    f = 1.0 / (2.0 * math.pi * np.sqrt(l * c1 * c2 / (c1 + c2)))  # Colpitts, textbook
    return (i1, i2, il), f, c1 / c2


def _reference(tabs, f_min, f_max, b_min, b_max):
    (i1, i2, il), f, beta = _cube(tabs)
    ok = (f >= f_min) & (f <= f_max) & (beta >= b_min) & (beta <= b_max)  # closed window
    return set(zip(i1[ok].tolist(), i2[ok].tolist(), il[ok].tolist(), strict=True))


def _keys(d):
    return set(zip(d.idx["C1"].tolist(), d.idx["C2"].tolist(), d.idx["L"].tolist(), strict=True))


@pytest.mark.parametrize("pick", [0.1, 0.37, 0.5, 0.81])
def test_search_equals_an_independent_brute_force_with_edges_just_inside(pick):
    # Edges put 0.5 ppm outside two designs' frequencies: both must be found (a lower edge
    # moved up by 1 ppm, or an upper edge moved down, loses one); 0.5 ppm is far above the
    # 1e-16 rounding by which the textbook formula and the code's may differ.
    tabs = _tables()
    _, f, beta = _cube(tabs)
    inside = np.flatnonzero((beta >= 0.2) & (beta <= 0.8))
    fs = np.sort(f[inside])
    lo_f = fs[int(pick * len(fs))]
    hi_f = fs[int(pick * len(fs)) + 40]
    f_min, f_max = lo_f * (1 - 0.5e-6), hi_f * (1 + 0.5e-6)
    p = Problem(COLPITTS, tabs, f_min, f_max, 0.2, 0.8, Parasitics())
    ref = _reference(tabs, f_min, f_max, 0.2, 0.8)
    assert len(ref) >= 2
    assert _keys(search(p)) == ref


def test_a_design_exactly_on_either_edge_is_kept():
    # The window is closed: f_min = f_max = a design's own frequency keeps that design
    # (catches an edge compared with > instead of >=, in the pruning or the final check).
    tabs = _tables()
    wide = search(Problem(COLPITTS, tabs, 0.9e6, 1.1e6, 0.2, 0.8, Parasitics()))
    assert len(wide) > 10
    for k in (0, len(wide) // 2, len(wide) - 1):
        f0 = float(wide.f_nominal[k])
        key = (int(wide.idx["C1"][k]), int(wide.idx["C2"][k]), int(wide.idx["L"][k]))
        d = search(Problem(COLPITTS, tabs, f0, f0, 0.2, 0.8, Parasitics()))
        assert key in _keys(d)
        # the beta edges too: beta_min = beta_max = the design's own beta
        b0 = float(wide.beta[k])
        d = search(Problem(COLPITTS, tabs, 0.9e6, 1.1e6, b0, b0, Parasitics()))
        assert key in _keys(d)


def test_monte_carlo_counts_a_board_exactly_on_the_edge_as_passing():
    # Zero tolerances: every board is the nominal one, whose frequency is the window's
    # both edges; all pass (catches > for >= in the Monte Carlo window check).
    tabs = {p: uniform_table(t.values, 0.0, "E12") for p, t in _tables().items()}
    wide = search(Problem(COLPITTS, tabs, 0.9e6, 1.1e6, 0.2, 0.8, Parasitics()))
    d = wide.take(np.arange(1))
    f0 = float(d.f_nominal[0])
    p = Problem(COLPITTS, tabs, f0, f0, 0.2, 0.8, Parasitics())
    sim = Simulation.simple(p, "uniform")
    u = np.random.default_rng(1).random((200, 3))
    assert int(count_passing(sim, d, u)[0]) == 200


def _loaded_reference(p):
    """Full cube through the large-signal model (picker.circuit.steady on board values),
    every design whose feedback fraction is in its window (no pre-selection by frequency:
    the steady frequency of a heavily loaded design here runs over 20 % from the linear
    one). Returns (index tuples, margins, mask of designs passing this test's own edge
    checks but the margin: starts, runs steady, steady f in the window, feedback fraction
    in its window)."""
    tabs = p.tables
    (i1, i2, il), _, beta = _cube(tabs)
    vals = {"C1": tabs["C1"].values[i1], "C2": tabs["C2"].values[i2], "L": tabs["L"].values[il]}
    bv = board_values(COLPITTS, vals, p.parasitics)
    sel = (beta >= p.beta_min) & (beta <= p.beta_max)
    m = np.zeros(len(i1))
    f = np.full(len(i1), np.nan)
    runs = np.zeros(len(i1), dtype=bool)
    with np.errstate(all="ignore"):
        st = steady_state(COLPITTS, {k: v[sel] for k, v in bv.items()}, p.parasitics.stray, BJT)
    m[sel], f[sel], runs[sel] = st.margin, st.f_hz, st.starts & ~st.bursting
    ok = runs & (f >= p.f_min) & (f <= p.f_max) & (beta >= p.beta_min) & (beta <= p.beta_max)
    return (i1, i2, il), m, ok


def test_loaded_search_asks_exactly_the_start_up_margin_given():
    # min_margin set to one design's own margin: that design is kept, and the search equals
    # the brute force whose margin check is written out here (catches a search demanding
    # 5 % more start-up margin than asked, and, since that margin is the design's own to
    # the last bit, a margin that moves with the batch the design is evaluated in).
    tabs = _tables(c_range=(47e-12, 4.7e-9), l_range=(10e-6, 1e-3))
    p = Problem(COLPITTS, tabs, 0.97e6, 1.03e6, 0.1, 1.0, Parasitics())
    (i1, i2, il), m, ok0 = _loaded_reference(p)
    margins = np.sort(m[ok0 & np.isfinite(m) & (m > 1.2)])
    assert len(margins) > 20
    min_margin = float(margins[len(margins) // 3])
    ok = ok0 & (m >= min_margin)  # exactly the margin asked, not more
    ref = set(zip(i1[ok].tolist(), i2[ok].tolist(), il[ok].tolist(), strict=True))
    # with 5 % more margin demanded some of these would go: the test has teeth
    assert np.count_nonzero(ok0 & (m >= min_margin) & (m < 1.05 * min_margin)) > 0
    got = loaded_search(p, BJT, min_margin=min_margin)
    assert _keys(got.designs) == ref
