"""A board's figures do not depend on which other boards share its batch (bit for bit).

The search, the Monte Carlo and the tests evaluate boards in batches of any make-up, and
the search's edges are exact comparisons (a margin of exactly ``min_margin`` is kept), so
an iterative solver that stops on the batch's worst element, or a product whose rounding
depends on the batch's size, would make a design pass alone and fail beside others. The
reference is the same model on the board alone (and the batch reversed): the property is
exact equality, so no outside source is needed (common practice, no source).
"""

from __future__ import annotations

from dataclasses import fields

import numpy as np
from amplifiers import BJT

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.oscillation import loaded_response
from picker.circuit.steady import SteadyState, steady_state
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

# Invented amplifiers (typical small-signal values, not check values themselves).
LOSSY = AmplifierParams(
    vcc=9.0, r_c=1500.0, r_b1=68e3, r_b2=10e3, r_e=2200.0, c_e=47e-9, c_block=10e-9, inductor_q=6.0
)


def _colpitts_boards(n: int, seed: int) -> dict[str, np.ndarray]:
    """Random boards over 4.7 pF-4.7 nF and 1 µH-1 mH: device-dominated, heavily loaded,
    typical, some that do not start and some that burst."""
    rng = np.random.default_rng(seed)
    return {
        "C1": 10 ** rng.uniform(-11.3, -8.3, n),
        "C2": 10 ** rng.uniform(-11.3, -8.3, n),
        "L": 10 ** rng.uniform(-6, -3, n),
    }


def _equal(batch: SteadyState, one: SteadyState, i: int) -> list[str]:
    bad = []
    for f in fields(SteadyState):
        a, b = np.asarray(getattr(batch, f.name))[i], np.asarray(getattr(one, f.name))[0]
        if not np.array_equal(a, b, equal_nan=True):
            bad.append(f"{f.name}: {a!r} in the batch, {b!r} alone")
    return bad


def _check(topology, vals, stray, params):
    with np.errstate(all="ignore"):
        batch = steady_state(topology, vals, stray, params)
        rev = steady_state(topology, {p: v[::-1] for p, v in vals.items()}, stray, params)
        lin = loaded_response(topology, vals, stray, params)
        n = len(next(iter(vals.values())))
        starts = int(np.count_nonzero(batch.starts))
        assert 0 < starts < n  # both kinds in the batch, so the batch is mixed
        for i in range(n):
            one_vals = {p: v[i : i + 1] for p, v in vals.items()}
            one = steady_state(topology, one_vals, stray, params)
            assert _equal(batch, one, i) == [], i
            j = n - 1 - i
            assert _equal(rev, one, j) == [], i
            lin_one = loaded_response(topology, one_vals, stray, params)
            assert lin_one.f_hz[0] == lin.f_hz[i] or np.isnan(lin.f_hz[i])
            assert lin_one.margin[0] == lin.margin[i] or np.isnan(lin.margin[i])


def test_colpitts_board_alone_equals_the_same_board_in_a_batch():
    _check(COLPITTS, _colpitts_boards(24, 1), 3e-12, BJT)


def test_lossy_colpitts_board_alone_equals_the_same_board_in_a_batch():
    _check(COLPITTS, _colpitts_boards(16, 2), 2e-12, LOSSY)


def test_clapp_board_alone_equals_the_same_board_in_a_batch():
    rng = np.random.default_rng(4)
    n = 12
    vals = {
        "C1": 10 ** rng.uniform(-10.3, -8.3, n),
        "C2": 10 ** rng.uniform(-10.3, -8.3, n),
        "C3": 10 ** rng.uniform(-11.3, -9.3, n),
        "L": 10 ** rng.uniform(-6, -4, n),
    }
    _check(CLAPP, vals, 3e-12, BJT)
