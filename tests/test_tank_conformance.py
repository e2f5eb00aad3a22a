"""Every registered topology against outside references (runs over the registry).

A topology added to :mod:`picker.tank` is tested here without any change:

- the exact search equals a brute-force enumeration on small random spaces
  (hypothesis);
- its sensitivities equal central finite differences of ln f;
- its frequency equals the eigenvalues of the LC state matrix of its own
  SPICE netlist (``Topology.netlist_lines``), computed with scipy.linalg;
- its feedback fraction equals the voltage ratio of its own netlist driven at
  its output end at the tank frequency.

A topology with coupled inductors is checked at couplings 0, 0.5 and 0.99.
Values are drawn per position by its unit, so nothing here names a position.
"""

from __future__ import annotations

import itertools
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.linalg import eigvals

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

REGISTERED = list(TOPOLOGIES.values())
ALL = [
    t.configured(k) if k else t for t in REGISTERED for k in ((0, 0.5, 0.99) if t.coupled else (0,))
]
IDS = [f"{t.name}-k{t.coupling:g}" if t.coupled else t.name for t in ALL]
SERIES = ["E3", "E6", "E12", "E24"]


def test_registry_holds_colpitts_and_clapp_in_order():
    assert list(TOPOLOGIES)[:2] == ["colpitts", "clapp"]
    for name, topo in TOPOLOGIES.items():
        assert get_topology(f" {name.upper()} ") is topo
        assert type(topo)() is topo  # one instance per topology


@pytest.mark.parametrize("topo", ALL, ids=IDS)
def test_declared_facts_are_consistent(topo: Topology):
    assert set(topo.positions) == {*topo.capacitors, *topo.inductors}
    assert topo.inductor in topo.inductors
    assert len(set(topo.positions)) == len(topo.positions)
    assert set(topo.feedback_pair) <= set(topo.positions)
    assert set(topo.shunt_targets().values()) <= set(topo.capacitors) & set(topo.feedback_pair)
    assert {topo.unit(p) for p in topo.capacitors} == {"F"}
    assert {topo.unit(p) for p in topo.inductors} == {"H"}
    with pytest.raises(KeyError):
        topo.unit("X9")
    assert topo.trimmer_position is None or topo.trimmer_position in topo.capacitors
    for p in topo.solvable():
        assert p in topo.positions and p not in topo.feedback_pair


# ---------------------------------------------------------------- frequency by eigenvalues


def _round6(x: float) -> float:
    """``x`` to the 6 significant digits a netlist line carries, so the netlist is exact."""
    return float(f"{x:.6g}")


def _elements(topo: Topology, values: dict, par: Parasitics) -> list[tuple[str, str, str, float]]:
    """The lossless netlist's element lines as (name, a, b, value), shunts added."""
    board = {p: values[p] * (par.l_scale if p in topo.inductors else 1.0) for p in values}
    lines = topo.netlist_lines(board, par.stray, 0.0, {}, "out", "in")
    elements = [(name, a, b, float(v)) for name, a, b, v in (ln.split() for ln in lines)]
    for name, p in shunt_positions(topo).items():
        a, b = next((x[1], x[2]) for x in elements if x[0] == p)
        elements.append((name, a, b, getattr(par, name)))
    return elements


def _matrices(elements: list[tuple[str, str, str, float]]) -> tuple[list[str], Any, Any, Any]:
    """Nodes, nodal capacitance matrix C_n, inductor incidence A and inductance matrix L_m.

    Every capacitor is stamped between its two nodes; inductor j carries its current
    from its first node to its second (A[node, j] = ±1); a SPICE ``K`` line couples two
    inductors with M = k·√(L_i·L_j) in L_m (dots at each inductor's first node, SPICE
    convention).
    """
    nodes = sorted(
        {n for name, a, b, _ in elements if name[0].upper() != "K" for n in (a, b)} - {"0"}
    )
    k = {n: i for i, n in enumerate(nodes)}
    inductors = [e for e in elements if e[0].upper().startswith("L")]
    j_of = {e[0]: j for j, e in enumerate(inductors)}
    cn = np.zeros((len(nodes), len(nodes)))
    inc = np.zeros((len(nodes), len(inductors)))
    lm = np.diag([e[3] for e in inductors])
    for name, a, b, v in elements:
        kind = name[0].upper()
        if kind == "L":
            for node, sign in ((a, 1.0), (b, -1.0)):
                if node != "0":
                    inc[k[node], j_of[name]] = sign
        elif kind == "K":
            i, j = j_of[a], j_of[b]
            lm[i, j] = lm[j, i] = v * np.sqrt(lm[i, i] * lm[j, j])
        elif kind == "R":  # a DC hold (the series Hartley's): open at the carrier
            assert v >= 1e8, f"a lossless tank has no {name} but a DC hold"
        else:
            assert kind == "C", f"a lossless tank has no {name}"
            for x, y, sign in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
                if x != "0" and y != "0":
                    cn[k[x], k[y]] += sign * v
    return nodes, cn, inc, lm


def frequency_by_eigenvalues(topo: Topology, values: dict, par: Parasitics) -> float:
    """ω/2π of the lossless tank from the eigenvalues of its state equations (scipy.linalg).

    The state equations of a linear LC circuit (Desoer & Kuh, *Basic Circuit
    Theory*, 1969, the chapter on state equations), with node voltages v and
    the inductor currents i as the state: KCL at every node, C_n·dv/dt = −A·i,
    and KVL round every inductor, L_m·di/dt = Aᵀ·v. Written as the pencil
    (J, B) with J = [[0, −A], [Aᵀ, 0]], B = diag(C_n, L_m), its finite
    generalised eigenvalues are 0 and ±jω (a node with no capacitance to ground
    gives infinite ones). The circuit is the topology's own SPICE netlist
    (``Topology.netlist_lines``, lossless, with the stray where the netlist puts
    it), read back line by line; each shunt is a capacitor in parallel with its
    feedback-pair capacitor, every inductance is times ``l_scale``.

    The pencil is first equilibrated, (D·J·D, D·B·D) with D = diag(B)^(−1/2), which leaves
    its eigenvalues unchanged (a congruence of both matrices): a chain with a floating
    inner node beside the 100 nF tap bypass (the series-capacitor Hartley) otherwise
    gives the tank's eigenvalue only to ~5e-9. Its infinite eigenvalues (nodes with no
    capacitance of their own to ground) then come out as ~4e12 rad/s or more; the tanks
    drawn here ring below 1e9 rad/s, so those above 1e11 are dropped.
    """
    nodes, cn, inc, lm = _matrices(_elements(topo, values, par))
    n, m = len(nodes), lm.shape[0]
    j = np.zeros((n + m, n + m))
    j[:n, n:] = -inc
    j[n:, :n] = inc.T
    b = np.zeros((n + m, n + m))
    b[:n, :n] = cn
    b[n:, n:] = lm
    diag = np.diag(b)
    d = np.where(diag > 0, 1.0 / np.sqrt(np.where(diag > 0, diag, 1.0)), 1.0)
    lam = eigvals(d[:, None] * j * d[None, :], d[:, None] * b * d[None, :])
    lam = lam[np.isfinite(lam) & (np.abs(lam) < 1e11)]  # ω of any tank here is < 1e9
    return float(np.max(np.abs(lam.imag)) / (2 * np.pi))


def _draw(topo: Topology, rng: np.random.Generator, lo_h: float = -7, hi_h: float = -2) -> dict:
    """Random part values by unit: capacitors 10 pF..100 nF, inductors 10^lo_h..10^hi_h H."""
    return {
        p: _round6(
            10 ** rng.uniform(-11, -7) if topo.unit(p) == "F" else 10 ** rng.uniform(lo_h, hi_h)
        )
        for p in topo.positions
    }


@pytest.mark.parametrize("topo", ALL, ids=IDS)
@pytest.mark.parametrize("seed", range(10))
def test_frequency_equals_state_matrix_eigenvalues(topo: Topology, seed: int):
    rng = np.random.default_rng(seed)
    values = _draw(topo, rng)
    l_scale = float(rng.uniform(0.9, 1.1))
    for p in topo.inductors:
        values[p] = values[p] / l_scale
    par = Parasitics(
        stray=_round6(rng.choice([0.0, 10 ** rng.uniform(-12, -10)])),
        c1_shunt=float(rng.choice([0.0, 10 ** rng.uniform(-12, -10)])),
        c2_shunt=float(rng.choice([0.0, 10 ** rng.uniform(-12, -10)])),
        l_scale=l_scale,
    )
    # eigenvalues of a well-conditioned 3x3 to 6x6 pencil: ~1e-12 relative; 1e-9 is loose
    assert_allclose(
        board_frequency(topo, values, par), frequency_by_eigenvalues(topo, values, par), rtol=1e-9
    )
    ideal = {p: _round6(v) for p, v in values.items()}
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
            v = {
                p: float(
                    10 ** rng.uniform(-11, -8) if topo.unit(p) == "F" else 10 ** rng.uniform(-6, -3)
                )
                for p in topo.positions
            }
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
def test_beta_is_the_netlists_voltage_ratio_at_the_tank_frequency(topo: Topology):
    # Drive the output end of the tank's own netlist with 1 V at the ideal tank frequency,
    # the input end unloaded: v_in = −beta (the divider returns beta of the output with a
    # further 180°; Sedra & Smith, Colpitts section, C1/C2 for a Colpitts). Nodal analysis
    # at s = jω: Y = s·C_n + A·(s·L_m)⁻¹·Aᵀ, solved for every node but the driven one.
    rng = np.random.default_rng(31)
    for _ in range(10):
        v = _draw(topo, rng, -7, -3)
        par = Parasitics(c1_shunt=2e-12, c2_shunt=7e-12)
        nodes, cn, inc, lm = _matrices(_elements(topo, v, par))
        s = 2j * np.pi * float(board_frequency(topo, v, par))
        y = s * cn + inc @ np.linalg.solve(s * lm, inc.T)
        d = nodes.index("out")
        rest = [i for i in range(len(nodes)) if i != d]
        x = np.linalg.solve(y[np.ix_(rest, rest)], -y[rest, d])
        v_in = x[rest.index(nodes.index("in"))]
        assert_allclose(v_in, -float(board_beta(topo, v, par)), rtol=1e-7, atol=1e-9)


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
        v = {
            p: np.array(
                [
                    float(
                        10 ** rng.uniform(-10, -8)
                        if topo.unit(p) == "F"
                        else 10 ** rng.uniform(-6, -4)
                    )
                ]
            )
            for p in topo.positions
        }
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
