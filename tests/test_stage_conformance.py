"""Every registered amplifier stage against outside references (iterates the registry).

A new stage needs no change here: it is checked by

- its idealised form (:meth:`Stage.ideal_params`: no input conductance, no device
  capacitance, infinite output resistance, ideal load R in the high-Q limit) against
  the textbook frequency of the Colpitts and Clapp oscillators, written out below from
  the book rather than from the project's tank code, with the margin there equal to
  gm·R over the gain the stage says it needs (:meth:`Stage.required_gain`, whose own
  textbook form each stage's test file checks);
- its fast closed-form loop gain against the generic nodal solver (a stacked
  ``numpy.linalg.solve`` of the modified-nodal-analysis matrix built from the
  stamps), for its typical design (:meth:`Stage.typical_params`) with loss,
  coupling and emitter parts;
- the netlist of its typical design, run by ngspice in batch mode: it parses, no
  node floats (each node joins at least two elements and ngspice reports no
  floating node, missing DC path or singular matrix), it oscillates, and at the
  frequency of the loaded model.
"""

from __future__ import annotations

import math
import re
import warnings
from collections import Counter

import numpy as np
import pytest
from numpy.testing import assert_allclose

from picker.circuit.netlist import write_netlist
from picker.circuit.network import loop_gain, loop_gain_matrix
from picker.circuit.ngspice import ngspice_path, simulate
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import (
    STAGES,
    Stage,
    default_stage,
    device_kinds,
    get_stage,
    stage_names,
    stage_of,
)
from picker.circuit.steady import steady_state
from picker.errors import SolverError
from picker.tank import TOPOLOGIES
from picker.tank.clapp import CLAPP
from picker.tank.colpitts import COLPITTS

EVERY_STAGE = [pytest.param(s, id=s.name) for s in STAGES.values()]
EVERY_TOPOLOGY = [pytest.param(t, id=t.name) for t in TOPOLOGIES.values()]
# Every (stage, tank) pair: the spec accepts each.
MODELLED_PAIRS = [
    pytest.param(s, t, id=f"{t.name}-{s.name}")
    for t in TOPOLOGIES.values()
    for s in STAGES.values()
]
TWO_PI = 2 * math.pi


def test_registry_lists_the_stages_once_each_with_one_default_per_device():
    assert stage_names() == tuple(STAGES) and len(STAGES) >= 2
    assert {"common-emitter", "common-source"} <= set(STAGES)
    for name, stage in STAGES.items():
        assert get_stage(name) is stage and type(stage)() is stage  # stateless singleton
        assert re.fullmatch(r"[a-z]+(-[a-z]+)*", name)  # trade names, hyphenated
    for kind in device_kinds():
        defaults = [s for s in STAGES.values() if s.device == kind and s.default_for_device]
        assert len(defaults) == 1 and default_stage(kind) is defaults[0]
    with pytest.raises(ValueError, match="common-emitter, common-source"):
        get_stage("common-collector-x")


# The idealised stage with a lossless tank, its load R far above the tank's reactances (the
# high-Q limit; a stage whose load sits across C1 is exact at any R, one whose load sits
# across the inductor, as the common-base stage's, reaches its textbook form only there):
# R = 1 GΩ, gm·R of order ten.
R_IDEAL = 1e9


@pytest.mark.parametrize("stage", EVERY_STAGE)
def test_ideal_stage_with_colpitts_starts_at_its_stated_gain_at_the_tank_frequency(
    stage: Stage,
):
    # Sedra & Smith, Microelectronic Circuits, Colpitts section: the ideal tank's frequency
    # ω0 = 1/√(L·C1C2/(C1+C2)) is where the loop gain's phase is zero, and the loop gain is
    # linear in gm, so the margin is gm·R over the gain the stage needs (required_gain, its
    # textbook form checked in the stage's own test file: gm·R ≥ C2/C1 for the
    # common-emitter, common-source and common-collector stages, (C1+C2)²/(C1·C2) for the
    # common-base one)
    rng = np.random.default_rng(17)
    c1 = rng.uniform(100e-12, 10e-9, (6, 4))
    c2 = rng.uniform(100e-12, 10e-9, (6, 4))
    l_ = rng.uniform(1e-6, 1e-3, (6, 4))
    gm_r = 30.0
    params = stage.ideal_params(gm_r / R_IDEAL, R_IDEAL)
    assert stage_of(params) is stage
    values = {"C1": c1, "C2": c2, "L": l_}
    res = loaded_response(COLPITTS, values, 0.0, params)
    f0 = 1 / (TWO_PI * np.sqrt(l_ * c1 * c2 / (c1 + c2)))
    assert_allclose(res.f_hz, f0, rtol=1e-9)  # root finder tolerance 1e-11, margin for rounding
    need = np.asarray(stage.required_gain(COLPITTS, values))
    assert need.shape == c1.shape and np.all(need > 0)
    assert_allclose(res.margin, gm_r / need, rtol=1e-9)
    # the edge: gm·R = the gain it needs gives a loop gain of 1
    edge = {"C1": 1e-9, "C2": 3.3e-9, "L": 22e-6}
    g_edge = float(stage.required_gain(COLPITTS, edge))
    at_edge = loaded_response(COLPITTS, edge, 0.0, stage.ideal_params(g_edge / R_IDEAL, R_IDEAL))
    assert_allclose(at_edge.margin, 1.0, rtol=1e-9)


@pytest.mark.parametrize("stage", EVERY_STAGE)
def test_ideal_stage_with_clapp_starts_at_the_three_reactance_frequency(stage: Stage):
    # Clapp, Proc. IRE 36 (1948): f = 1/(2π√(L·Cs)), 1/Cs = 1/C1 + 1/C2 + 1/C3. The general
    # three-reactance oscillator (Sedra & Smith, LC oscillators; attribution [memory]):
    # X1 across the output, X2 across the input, X3 between them oscillates at
    # X1 + X2 + X3 = 0; C3 only changes X3, so the gain needed is the Colpitts one of C1, C2.
    v = {"C1": 1e-9, "C2": 2.2e-9, "C3": 100e-12, "L": 10e-6}
    gm_r = 30.0
    res = loaded_response(CLAPP, v, 0.0, stage.ideal_params(gm_r / R_IDEAL, R_IDEAL))
    cs = 1 / (1 / v["C1"] + 1 / v["C2"] + 1 / v["C3"])
    assert_allclose(res.f_hz, 1 / (TWO_PI * math.sqrt(v["L"] * cs)), rtol=1e-9)
    need = stage.required_gain(CLAPP, v)
    assert_allclose(res.margin, gm_r / need, rtol=1e-9)
    pair = {"C1": v["C1"], "C2": v["C2"], "L": v["L"]}
    assert_allclose(need, stage.required_gain(COLPITTS, pair), rtol=1e-12)


@pytest.mark.parametrize(("stage", "topology"), MODELLED_PAIRS)
def test_closed_form_matches_the_generic_nodal_solver(stage, topology):
    # Reference: numpy.linalg.solve on the nodal matrix stamped element by element.
    # Values spread about the topology's typical tank (Topology.typical), by a factor 1/3..3.
    rng = np.random.default_rng(23)
    n = 40
    v = {p: x * 3.0 ** rng.uniform(-1, 1, n) for p, x in topology.typical.items()}
    f = rng.uniform(0.3e6, 10e6, n)
    params = stage.typical_params()
    fast = loop_gain(topology, v, 2e-12, params, f)
    full = loop_gain_matrix(topology, v, 2e-12, params, f)
    assert_allclose(fast, full, rtol=1e-9, atol=1e-12)  # both exact; LAPACK rounding only


def _nodes(netlist: str) -> Counter[str]:
    """How many elements meet at each node (SPICE element lines only)."""
    count: Counter[str] = Counter()
    for line in netlist.splitlines()[1:]:
        words = line.split()
        if not words or words[0][0] in "*.":
            continue
        kind = words[0][0].upper()
        terminals = 4 if kind == "M" else 3 if kind == "Q" else 2
        count.update({w.lower() for w in words[1 : 1 + terminals]})
    return count


def _steady(topology, values, params):
    with warnings.catch_warnings():
        # the start-up pole search divides by a return ratio of zero where the pole pair
        # meets the real axis
        warnings.simplefilter("ignore", RuntimeWarning)
        return steady_state(topology, values, 3e-12, params)


def _tank_for(stage, topology, params) -> dict[str, float]:
    """The topology's typical tank (about 1.3 MHz); a coupled tank's with the coil's input
    section cut (L2 × q, L1 = L_eff − L2 at the typical tank's k = 0, so f stays) to the
    first q of 1, 0.5, 0.3, 0.2, 0.1 where the linear start-up margin is at most 5: the
    emitter follower's gain gm·R_E is some hundred, and on the typical Hartley tank
    (margin 29) it squegs in ngspice, its bursts' envelope relaxing at about 4 kHz."""
    values = dict(topology.typical)
    if not topology.coupled:
        return values
    out, inp = topology.feedback_pair
    total = values[out] + values[inp]
    for q in (1.0, 0.5, 0.3, 0.2, 0.1):
        trial = {**values, inp: values[inp] * q, out: total - values[inp] * q}
        if float(loaded_response(topology, trial, 3e-12, params).margin) <= 5:
            return trial
    raise AssertionError(f"{stage.name} on {topology.name}: no q brings the margin to 5")


@pytest.mark.ngspice
@pytest.mark.parametrize(("stage", "topology"), MODELLED_PAIRS)
def test_typical_netlist_runs_in_ngspice_with_no_floating_node(stage, topology):
    try:
        ngspice_path()
    except SolverError as exc:
        pytest.fail(f"{exc} (these tests do not skip; CI installs ngspice)")
    params = stage.typical_params()
    values = _tank_for(stage, topology, params)
    text = write_netlist(topology, values, 3e-12, params, title=f"{stage.name} {topology.name}")
    dangling = [node for node, k in _nodes(text).items() if k < 2 and node != "0"]
    assert dangling == []  # every node joins at least two elements
    sim = simulate(text)
    assert sim.warnings == ()  # ngspice: no floating node, DC path, singular matrix
    assert sim.oscillating
    if not topology.coupled:
        model = float(loaded_response(topology, values, 3e-12, params).f_hz)
        # ngspice transient (≥ 60 steps per period, frequency from ~90 periods) against the
        # loaded model; 2 % as in tests/test_ngspice.py
        assert abs(sim.frequency_hz / model - 1) < 0.02
        return
    # a Hartley: the large-signal model (the describing function), as its coils pass the
    # device's harmonics to the control terminal and move the carrier off the start-up
    # pole (the common-gate stage on the typical tank, margin 3.7: 2.7 % below it). Its
    # bursting verdict must be ngspice's (bursting or wandering), and the carrier within
    # 2 % of its frequency (measured: within 1.8 % on every pair; most of these typical
    # Hartleys burst in ngspice, and the model says so)
    st = _steady(topology, values, params)
    assert bool(st.starts)
    assert bool(st.bursting) == (sim.waveform.state in ("bursting", "unsettled"))
    assert abs(sim.frequency_hz / float(st.f_hz) - 1) < 0.02


# The bias-network options each stage models (Stage.options), by their typical designs
# (Stage.typical_variants): the same closed-form and ngspice checks as above.
VARIANT_PAIRS = [
    pytest.param(s, t, name, id=f"{t.name}-{s.name}-{name}")
    for t in (COLPITTS, CLAPP)
    for s in STAGES.values()
    for name in s.typical_variants()
]


def test_every_stage_option_has_a_typical_variant():
    for stage in STAGES.values():
        assert set(stage.options) <= {"collector-feedback", "emitter-split", "stopper", "p-type"}
        names = " ".join(stage.typical_variants())
        for option in stage.options:
            assert option.split("-")[0] in names, (stage.name, option)


@pytest.mark.parametrize(("stage", "topology", "variant"), VARIANT_PAIRS)
def test_variant_closed_form_matches_the_generic_nodal_solver(stage, topology, variant):
    rng = np.random.default_rng(29)
    n = 40
    v = {p: x * 3.0 ** rng.uniform(-1, 1, n) for p, x in topology.typical.items()}
    f = rng.uniform(0.3e6, 10e6, n)
    params = stage.typical_variants()[variant]
    fast = loop_gain(topology, v, 2e-12, params, f)
    full = loop_gain_matrix(topology, v, 2e-12, params, f)
    assert_allclose(fast, full, rtol=1e-9, atol=1e-12)


@pytest.mark.ngspice
@pytest.mark.parametrize(("stage", "topology", "variant"), VARIANT_PAIRS)
def test_variant_netlist_runs_in_ngspice_at_the_model_frequency(stage, topology, variant):
    try:
        ngspice_path()
    except SolverError as exc:
        pytest.fail(f"{exc} (these tests do not skip; CI installs ngspice)")
    values = dict(topology.typical)
    params = stage.typical_variants()[variant]
    text = write_netlist(topology, values, 3e-12, params, title=f"{stage.name} {variant}")
    dangling = [node for node, k in _nodes(text).items() if k < 2 and node != "0"]
    assert dangling == []
    sim = simulate(text)
    assert sim.warnings == ()
    # the large-signal model against the transient: a base resistor of megohms squegs
    # with the Clapp tank (its slow bias loop) and the model says so; the transient then
    # does not run steady at the tank's frequency (the waveform measurement may lock on
    # the squegging itself); the steady ones at the loaded model's frequency
    steady = steady_state(topology, {k: np.array([x]) for k, x in values.items()}, 3e-12, params)
    model = loaded_response(topology, values, 3e-12, params)
    on_f = abs(sim.frequency_hz / float(model.f_hz) - 1) < 0.02
    if bool(steady.bursting[0]):
        assert not (sim.waveform.state == "steady" and on_f)
        return
    assert bool(steady.starts[0]) and sim.waveform.state == "steady"
    assert on_f  # ngspice transient against the loaded model, 2 %
