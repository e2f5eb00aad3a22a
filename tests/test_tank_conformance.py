"""Every registered topology against outside references (runs over the registry).

A topology added to :mod:`picker.tank` is tested here without any change:

- the exact search equals a brute-force enumeration on small random spaces
  (hypothesis);
- its sensitivities equal central finite differences of ln f;
- its frequency equals the eigenvalues of the LC state matrix of its own
  SPICE netlist (``Topology.netlist_lines``), computed with scipy.linalg.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.linalg import eigvals, solve

from picker.core.search import Problem, brute_force, search, solve_interval, sort_designs
from picker.parts.series import expand
from picker.parts.table import uniform_table
from picker.tank import TOPOLOGIES, Topology, get_topology
from picker.tank.board import (
    Parasitics,
    board_beta,
    board_frequency,
    board_sensitivities,
    shunt_positions,
)

ALL = list(TOPOLOGIES.values())
IDS = list(TOPOLOGIES)
SERIES = ["E3", "E6", "E12", "E24"]


def test_registry_holds_colpitts_and_clapp_in_order():
    assert IDS[:2] == ["colpitts", "clapp"]
    for name, topo in TOPOLOGIES.items():
        assert get_topology(f" {name.upper()} ") is topo
        assert type(topo)() is topo  # one instance per topology


@pytest.mark.parametrize("topo", ALL, ids=IDS)
def test_declared_facts_are_consistent(topo: Topology):
    assert set(topo.positions) == {*topo.capacitors, topo.inductor}
    assert len(set(topo.positions)) == len(topo.positions)
    assert set(topo.feedback_pair) <= set(topo.capacitors)
    assert {topo.unit(p) for p in topo.capacitors} == {"F"}
    assert topo.unit(topo.inductor) == "H"
    with pytest.raises(KeyError):
        topo.unit("X9")
    assert topo.trimmer_position is None or topo.trimmer_position in topo.capacitors
    for p in topo.solvable():
        assert p in topo.positions and p not in topo.feedback_pair


# ---------------------------------------------------------------- frequency by eigenvalues


def _round6(x: float) -> float:
    """``x`` to the 6 significant digits a netlist line carries, so the netlist is exact."""
    return float(f"{x:.6g}")


def frequency_by_eigenvalues(topo: Topology, values: dict, par: Parasitics) -> float:
    """ω/2π of the lossless tank from the eigenvalues of its state matrix (scipy.linalg).

    The state equations of a linear LC circuit (Desoer & Kuh, *Basic Circuit
    Theory*, 1969, the chapter on state equations), with node voltages v and
    the inductor current i as the state: KCL at every node, C_n·dv/dt = -a·i,
    and KVL around the inductor, L·di/dt = aᵀ·v, where C_n is the nodal
    capacitance matrix (every capacitor stamped between its two nodes) and a
    the inductor's incidence vector. The eigenvalues are ±jω. The circuit is
    the topology's own SPICE netlist (``Topology.netlist_lines``, lossless,
    with the stray where the netlist puts it), read back line by line; each
    shunt is a capacitor in parallel with its feedback-pair capacitor, the
    inductance is times ``l_scale``.
    """
    board = {**values, topo.inductor: values[topo.inductor] * par.l_scale}
    lines = topo.netlist_lines(board, par.stray, 0.0, {}, "out", "in")
    elements = [(name, a, b, float(v)) for name, a, b, v in (ln.split() for ln in lines)]
    for name, p in shunt_positions(topo).items():
        a, b = next((x[1], x[2]) for x in elements if x[0] == p)
        elements.append((name, a, b, getattr(par, name)))
    nodes = sorted({n for _, a, b, _ in elements for n in (a, b)} - {"0"})
    k = {n: i for i, n in enumerate(nodes)}
    cn = np.zeros((len(nodes), len(nodes)))
    inc = np.zeros(len(nodes))
    l_val = 0.0
    for name, a, b, v in elements:
        if name.upper().startswith("L"):
            l_val = v
            for node, sign in ((a, 1.0), (b, -1.0)):  # i flows from a to b through the inductor
                if node != "0":
                    inc[k[node]] = sign
            continue
        assert name.upper().startswith("C"), f"a lossless tank has no {name}"
        for x, y, sign in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
            if x != "0" and y != "0":
                cn[k[x], k[y]] += sign * v
    n = len(nodes)
    state = np.zeros((n + 1, n + 1))
    state[:n, n] = -solve(cn, inc)
    state[n, :n] = inc / l_val
    return float(np.max(np.abs(eigvals(state).imag)) / (2 * np.pi))


@pytest.mark.parametrize("topo", ALL, ids=IDS)
@pytest.mark.parametrize("seed", range(10))
def test_frequency_equals_state_matrix_eigenvalues(topo: Topology, seed: int):
    rng = np.random.default_rng(seed)
    values = {p: _round6(10 ** rng.uniform(-11, -7)) for p in topo.capacitors}
    l_scale = float(rng.uniform(0.9, 1.1))
    values[topo.inductor] = _round6(10 ** rng.uniform(-7, -2)) / l_scale
    par = Parasitics(
        stray=_round6(rng.choice([0.0, 10 ** rng.uniform(-12, -10)])),
        c1_shunt=float(rng.choice([0.0, 10 ** rng.uniform(-12, -10)])),
        c2_shunt=float(rng.choice([0.0, 10 ** rng.uniform(-12, -10)])),
        l_scale=l_scale,
    )
    # eigenvalues of a well-conditioned 3x3 or 4x4 matrix: ~1e-12 relative; 1e-9 is loose
    assert_allclose(
        board_frequency(topo, values, par), frequency_by_eigenvalues(topo, values, par), rtol=1e-9
    )
    ideal = {**values, topo.inductor: _round6(values[topo.inductor])}
    assert_allclose(
        topo.frequency(ideal), frequency_by_eigenvalues(topo, ideal, Parasitics()), rtol=1e-9
    )


# ---------------------------------------------------------------- sensitivities


@pytest.mark.parametrize("topo", ALL, ids=IDS)
def test_sensitivities_match_central_differences(topo: Topology):
    rng = np.random.default_rng(5)
    for par in (
        Parasitics(),
        Parasitics(stray=3e-12, c1_shunt=5e-12, c2_shunt=8e-12, l_scale=1.07),
    ):
        for _ in range(10):
            v = {p: float(10 ** rng.uniform(-11, -8)) for p in topo.capacitors}
            v[topo.inductor] = float(10 ** rng.uniform(-6, -3))
            s = board_sensitivities(topo, v, par)
            assert set(s) == set(topo.positions)
            h = 1e-6
            for p in topo.positions:
                up = dict(v, **{p: v[p] * np.exp(h)})
                dn = dict(v, **{p: v[p] * np.exp(-h)})
                num = (
                    np.log(board_frequency(topo, up, par)) - np.log(board_frequency(topo, dn, par))
                ) / (2 * h)
                # central difference error O(h²) plus round-off ~1e-16/h ≈ 1e-10
                assert_allclose(s[p], num, atol=1e-8)


# ---------------------------------------------------------------- feedback fraction


@pytest.mark.parametrize("topo", ALL, ids=IDS)
def test_beta_is_the_capacitive_divider_ratio(topo: Topology):
    # Sedra & Smith, Colpitts section: the divider returns C_out/C_in of the output voltage
    out, inp = topo.feedback_pair
    v = {p: 1e-9 * (i + 1) for i, p in enumerate(topo.capacitors)}
    v[topo.inductor] = 1e-5
    par = Parasitics(c1_shunt=2e-12, c2_shunt=7e-12)
    assert_allclose(topo.beta(v), v[out] / v[inp], rtol=1e-15)
    assert_allclose(board_beta(topo, v, par), (v[out] + 2e-12) / (v[inp] + 7e-12), rtol=1e-15)


# ---------------------------------------------------------------- the exact search


@st.composite
def problems(draw, topo: Topology):
    tables = {}
    for p in topo.positions:
        s = draw(st.sampled_from(SERIES))
        if topo.unit(p) == "H":
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


def _as_set(d, positions):
    return set(zip(*(d.idx[p].tolist() for p in positions), strict=True))


def _enumerate(problem: Problem) -> set[tuple[int, ...]]:
    """Every index tuple meeting the windows, one combination at a time (no vectorised code)."""
    topo, par = problem.topology, problem.parasitics
    tabs = [problem.tables[p].values for p in topo.positions]
    out = set()
    for combo in itertools.product(*(range(len(t)) for t in tabs)):
        v = {p: float(t[i]) for p, t, i in zip(topo.positions, tabs, combo, strict=True)}
        f = float(board_frequency(topo, v, par))
        b = float(board_beta(topo, v, par))
        if problem.f_min <= f <= problem.f_max and problem.beta_min <= b <= problem.beta_max:
            out.add(combo)
    return out


@pytest.mark.parametrize("topo", ALL, ids=IDS)
def test_search_equals_brute_force(topo: Topology):
    @settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(problems(topo))
    def check(problem):
        fast = sort_designs(problem, search(problem))
        ref = sort_designs(problem, brute_force(problem))
        assert _as_set(fast, topo.positions) == _as_set(ref, topo.positions)
        assert len(fast) == len(ref)
        np.testing.assert_array_equal(fast.f_nominal, ref.f_nominal)

    check()


@pytest.mark.parametrize("topo", ALL, ids=IDS)
def test_search_equals_one_by_one_enumeration(topo: Topology):
    # a scalar loop over the full cube: independent of the vectorised brute_force
    @settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(problems(topo))
    def check(problem):
        if problem.space_size() > 20_000:
            return
        assert _as_set(search(problem), topo.positions) == _enumerate(problem)

    check()


@pytest.mark.parametrize("topo", ALL, ids=IDS)
def test_solved_interval_brackets_the_window(topo: Topology):
    # Thomson's formula inverted: the interval's ends put the board frequency on the window's edges
    rng = np.random.default_rng(11)
    par = Parasitics(stray=4e-12, c1_shunt=3e-12, c2_shunt=9e-12, l_scale=1.05)
    for solved in topo.solvable():
        v = {p: np.array([float(10 ** rng.uniform(-10, -8))]) for p in topo.capacitors}
        v[topo.inductor] = np.array([float(10 ** rng.uniform(-6, -4))])
        f0 = float(board_frequency(topo, v, par)[0])
        tabs = {p: uniform_table(np.array([1.0]), 0.01, "list") for p in topo.positions}
        pb = Problem(topo, tabs, 0.97 * f0, 1.02 * f0, 0.01, 100.0, par)
        others = {p: x for p, x in v.items() if p != solved}
        lo, hi = solve_interval(pb, solved, others)
        assert lo[0] < v[solved][0] < hi[0]
        f_at_lo = board_frequency(topo, {**others, solved: lo}, par)[0]
        f_at_hi = board_frequency(topo, {**others, solved: hi}, par)[0]
        # a larger part lowers f: the small end meets f_max, the large end f_min
        assert_allclose([f_at_lo, f_at_hi], [pb.f_max, pb.f_min], rtol=1e-12)
