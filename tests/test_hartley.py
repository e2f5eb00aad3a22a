"""The Hartley tank against its textbook formulas and independent circuit solutions.

References:

- Sedra & Smith, *Microelectronic Circuits*, LC-tuned oscillators (the Hartley
  oscillator): ω0 = 1/√((L1 + L2)·C) and gm·R ≥ L1/L2 for uncoupled coils.
- Hayt & Kemmerly, *Engineering Circuit Analysis*, magnetically coupled circuits:
  M = k·√(L1·L2); coils in series aiding add to L1 + L2 + 2M.
- Desoer & Kuh, *Basic Circuit Theory* (1969), state equations: the coupled
  inductors' state matrix, solved here with scipy.linalg for k from 0 to 0.99.

Every reference below is written out in the test, not imported from picker.
"""

from __future__ import annotations

import json
import math
import pickle
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.linalg import eigvals
from scipy.optimize import brentq

from picker.api import spec_from_dict
from picker.circuit.netlist import write_netlist
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import STAGES, Stage
from picker.errors import SpecError
from picker.tank import get_topology
from picker.tank.board import Parasitics, board_frequency
from picker.tank.hartley import HARTLEY, TAP_BYPASS, tapped_inductor

COUPLINGS = np.linspace(0.0, 0.99, 12)
TWO_PI = 2 * math.pi


def _state_matrix_frequency(l1: float, l2: float, c: float, k: float) -> float:
    """ω/2π of C across L1 and L2 in series aiding, the tap grounded, by eigenvalues.

    Nodes t (top of L1) and b (bottom of L2), C between them; L1 carries i1 from t to
    ground (dot at t), L2 carries i2 from ground to b (dot at ground), so both currents
    enter a dot and the inductance matrix is [[L1, M], [M, L2]] with M = k·√(L1·L2)
    (Hayt & Kemmerly). Desoer & Kuh's state equations C_n·dv/dt = −A·i,
    L_m·di/dt = Aᵀ·v as the pencil (J, B); the node pair (t, b) has no capacitance to
    ground, so B is singular and two eigenvalues are infinite; the finite ones are ±jω.
    """
    m = k * math.sqrt(l1 * l2)
    cn = c * np.array([[1.0, -1.0], [-1.0, 1.0]])
    a = np.array([[1.0, 0.0], [0.0, -1.0]])  # i1 leaves t, i2 enters b
    lm = np.array([[l1, m], [m, l2]])
    j = np.block([[np.zeros((2, 2)), -a], [a.T, np.zeros((2, 2))]])
    b = np.block([[cn, np.zeros((2, 2))], [np.zeros((2, 2)), lm]])
    lam = eigvals(j, b)
    lam = lam[np.isfinite(lam) & (np.abs(lam) < 1e14)]
    return float(np.max(np.abs(lam.imag)) / TWO_PI)


@pytest.mark.parametrize("k", COUPLINGS)
def test_frequency_equals_coupled_inductor_eigenvalues(k: float):
    topo = HARTLEY.configured(k)
    rng = np.random.default_rng(int(k * 100))
    for _ in range(20):
        l1, l2 = 10 ** rng.uniform(-7, -3, 2)
        c = 10 ** rng.uniform(-12, -8)
        ref = _state_matrix_frequency(l1, l2, c, k)
        assert_allclose(topo.frequency({"L1": l1, "L2": l2, "C": c}), ref, rtol=1e-9)
        # Hayt & Kemmerly's series-aiding sum written out, for the same numbers
        l_eff = l1 + l2 + 2 * k * math.sqrt(l1 * l2)
        assert_allclose(ref, 1 / (TWO_PI * math.sqrt(l_eff * c)), rtol=1e-9)


def test_uncoupled_matches_sedra_smith():
    # ω0 = 1/√((L1 + L2)·C): 10 µH + 4.7 µH with 1 nF
    v = {"L1": 10e-6, "L2": 4.7e-6, "C": 1e-9}
    assert_allclose(HARTLEY.frequency(v), 1 / (TWO_PI * math.sqrt(14.7e-6 * 1e-9)), rtol=1e-14)
    assert_allclose(HARTLEY.beta(v), 4.7 / 10, rtol=1e-14)


@pytest.mark.parametrize("k", [0.0, 0.3, 0.9])
def test_feedback_bounds_invert_beta(k: float):
    topo = HARTLEY.configured(k)
    l1 = np.array([1e-6, 22e-6, 470e-6])
    lo, hi = topo.feedback_bounds(l1, 0.1, 0.6)
    assert_allclose(topo.beta({"L1": l1, "L2": lo}), 0.1, rtol=1e-12)
    assert_allclose(topo.beta({"L1": l1, "L2": hi}), 0.6, rtol=1e-12)
    m = k * np.sqrt(l1 * hi)
    assert_allclose((hi + m) / (l1 + m), 0.6, rtol=1e-12)  # (L2 + M)/(L1 + M) written out


def test_tapped_inductor_maps_to_two_sections():
    # turns-squared sections of one coil: L1/L2 = ((1 − t)/t)², and in series aiding they
    # add back to the total (Hayt & Kemmerly)
    for k in (0.0, 0.5, 0.99):
        l1, l2 = tapped_inductor(10e-6, 0.25, k)
        assert_allclose(l1 / l2, (0.75 / 0.25) ** 2, rtol=1e-12)
        assert_allclose(l1 + l2 + 2 * k * math.sqrt(l1 * l2), 10e-6, rtol=1e-12)
    with pytest.raises(ValueError, match="tap fraction"):
        tapped_inductor(10e-6, 1.0, 0.5)


def test_configured_instances_are_one_per_coupling_and_pickle():
    assert get_topology("hartley") is HARTLEY and HARTLEY.coupling == 0.0
    a = HARTLEY.configured(0.4)
    assert a is HARTLEY.configured(0.4) and a.coupling == 0.4 and a is not HARTLEY
    assert pickle.loads(pickle.dumps(a)) is a
    assert HARTLEY.configured(0.0) is HARTLEY
    with pytest.raises(ValueError, match="coupling"):
        HARTLEY.configured(1.0)
    with pytest.raises(ValueError, match="one inductor"):
        get_topology("colpitts").configured(0.2)


def test_l_scale_scales_both_coils():
    # an inductance scale multiplies L1, L2 and so M: f falls as 1/√scale
    v = {"L1": 10e-6, "L2": 4.7e-6, "C": 1e-9}
    topo = HARTLEY.configured(0.5)
    f = board_frequency(topo, v, Parasitics(l_scale=1.21))
    assert_allclose(f, topo.frequency(v) / 1.1, rtol=1e-14)


def _ideal_loop_gain(w: float, v: dict, k: float, gm: float, r: float) -> complex:
    """Return ratio of an ideal inverting transconductor on the Hartley tank, by nodal
    analysis written here: nodes t (output, R to ground), b (input, unloaded), x (tap,
    to ground through TAP_BYPASS); coils as the inverse of their impedance matrix in the
    frame "both currents into the tap" (dots at t and at x: mutual term −sM), C between
    t and b. The stage draws gm·v_b out of t; a unit test current into t in its place
    returns −gm·v_b into t, so T = −gm·v_b (Bode's return ratio)."""
    s = 1j * w
    m = k * math.sqrt(v["L1"] * v["L2"])
    g = np.linalg.inv(np.array([[s * v["L1"], -s * m], [-s * m, s * v["L2"]]]))
    inc = np.array([[1.0, 0.0], [0.0, 1.0], [-1.0, -1.0]])  # branch (t→x), (b→x)
    y = inc @ g @ inc.T
    y[2, 2] += s * TAP_BYPASS
    yc = s * v["C"]
    y[:2, :2] += yc * np.array([[1.0, -1.0], [-1.0, 1.0]])
    y[0, 0] += 1.0 / r
    x = np.linalg.solve(y, np.array([1.0, 0.0, 0.0]))
    return complex(-gm * x[1])


# The stages whose tank common end is at AC ground (Stage.grounded_common), where the
# coil's tap returns to ground through its bypass; the nodal analysis above (a
# transconductance across L1, sensing L2) is their loop. The followers, common-base and
# common-gate stages take the emitter (source) as the tank's common end, so the tap
# returns to the emitter (test_an_emitter_tapped_stage_returns_the_coils_tap_to_its_emitter);
# their loop is the generic nodal solver's (tests/test_stage_conformance.py) and their
# large-signal model is measured against ngspice on the emitter-tapped Hartley set
# (tests/test_stage_validation.py).
HIGH_Z_INPUT = [s for s in STAGES.values() if s.grounded_common]


@pytest.mark.parametrize("stage", [pytest.param(s, id=s.name) for s in HIGH_Z_INPUT])
@pytest.mark.parametrize("k", [0.0, 0.3, 0.9])
def test_ideal_stage_runs_at_the_tank_frequency_with_gain_gm_r_beta(stage: Stage, k: float):
    # The ideal stage (Stage.ideal_params) on a Hartley tank: the loop's zero-phase
    # frequency and |T| there from the nodal analysis above (brentq on Im T), against the
    # loaded model; both equal ω0 = 1/√(L_eff·C) and gm·R·(L2 + M)/(L1 + M). For k = 0
    # this is Sedra & Smith's start-up condition gm·R ≥ L1/L2.
    v = {"L1": 10e-6, "L2": 3.3e-6, "C": 680e-12}
    gm, r = 0.02, 1500.0
    topo = HARTLEY.configured(k)
    m = k * math.sqrt(v["L1"] * v["L2"])
    w0 = 1 / math.sqrt((v["L1"] + v["L2"] + 2 * m) * v["C"])
    w = brentq(lambda x: _ideal_loop_gain(x, v, k, gm, r).imag, 0.9 * w0, 1.1 * w0, xtol=1e-6)
    t_ref = _ideal_loop_gain(w, v, k, gm, r)
    assert_allclose(w, w0, rtol=1e-9)
    assert_allclose(t_ref.real, gm * r * (v["L2"] + m) / (v["L1"] + m), rtol=1e-9)
    res = loaded_response(topo, v, 0.0, stage.ideal_params(gm, r))
    assert_allclose(res.f_hz, w0 / TWO_PI, rtol=1e-8)
    assert_allclose(res.margin, t_ref.real, rtol=1e-8)
    assert_allclose(stage.required_gain(topo, v), (v["L1"] + m) / (v["L2"] + m), rtol=1e-12)


BASE = {
    "topology": "hartley",
    "frequency": {"target": "3.5 MHz", "window": "±2 %"},
    "feedback": {"min": 0.1, "max": 0.6},
    "parts": {
        "L1": {"series": "E12", "tolerance": "5 %", "min": "1 uH", "max": "47 uH"},
        "L2": {"series": "E12", "tolerance": "5 %", "min": "470 nH", "max": "22 uH"},
        "C": {"series": "E24", "tolerance": "2 %", "min": "22 pF", "max": "2.2 nF"},
    },
    "tank": {"coupling": 0.3},
    "yield": {"samples": 2000, "candidates": 20},
}


def test_spec_sets_the_coupling_and_refuses_what_does_not_apply():
    spec = spec_from_dict(BASE)
    assert spec.topo is HARTLEY.configured(0.3)
    with pytest.raises(SpecError, match="parasitics.c1_shunt"):
        spec_from_dict({**BASE, "parasitics": {"c1_shunt": "2 pF"}})
    with pytest.raises(SpecError, match="tank.coupling"):
        spec_from_dict({**BASE, "tank": {"coupling": 1.2}})
    colpitts = {
        **BASE,
        "topology": "colpitts",
        "parts": {
            "C1": BASE["parts"]["C"],
            "C2": BASE["parts"]["C"],
            "L": BASE["parts"]["L1"],
        },
    }
    with pytest.raises(SpecError, match="one inductor"):
        spec_from_dict(colpitts)


def test_solve_puts_every_design_in_the_window_and_drift_runs():
    from picker.api import solve

    data = {**BASE, "yield": {**BASE["yield"], "temperature": ["-10 °C", "50 °C"]}}
    res = solve(spec_from_dict(data), top=5)
    assert len(res.candidates) == 5
    k = 0.3
    for cand in res.candidates:
        v = cand.values
        m = k * math.sqrt(v["L1"] * v["L2"])
        f = 1 / (TWO_PI * math.sqrt((v["L1"] + v["L2"] + 2 * m) * v["C"]))
        assert abs(f / 3.5e6 - 1) <= 0.02
        assert 0.1 <= (v["L2"] + m) / (v["L1"] + m) <= 0.6
        assert 0.0 < cand.yield_estimate <= 1.0
        assert "yield_over_temperature" in cand.extra


def test_calibration_recovers_stray_and_l_scale_and_refuses_shunts():
    # Units built from Hayt & Kemmerly's series-aiding sum with a known stray and
    # inductance scale (exact frequencies, written out here): the fit returns them.
    from picker.calibration.fit import fit_parasitics

    k, stray, scale = 0.3, 6e-12, 1.04
    topo = HARTLEY.configured(k)
    rng = np.random.default_rng(9)
    v = {
        "L1": rng.choice([3.9e-6, 4.7e-6, 5.6e-6, 6.8e-6], 12),
        "L2": rng.choice([1.5e-6, 1.8e-6, 2.2e-6], 12),
        "C": rng.choice([150e-12, 220e-12, 330e-12, 470e-12], 12),
    }
    m = k * np.sqrt(v["L1"] * v["L2"])
    f = 1 / (TWO_PI * np.sqrt(scale * (v["L1"] + v["L2"] + 2 * m) * (v["C"] + stray)))
    res = fit_parasitics(topo, v, f, fit=("stray", "l_scale"))
    got = {p.name: p.estimate for p in res.parameters}
    assert_allclose([got["stray"], got["l_scale"]], [stray, scale], rtol=1e-6)
    with pytest.raises(SpecError, match="no c2_shunt"):
        fit_parasitics(topo, v, f, fit=("stray", "c2_shunt"))


@pytest.mark.parametrize("stage", [s.name for s in STAGES.values() if not s.grounded_common])
def test_an_emitter_tapped_stage_returns_the_coils_tap_to_its_emitter(stage):
    # The followers, common-base and common-gate stages take the emitter (source) as the
    # tank's common end: the classic emitter-follower (source-follower) Hartley, whose
    # emitter sits on the coil's tap. The netlist's tap bypass CTAP must end on the
    # transistor's emitter (source), not on ground, and the coils must join the tank's
    # ends for DC (no element shorts the emitter to ground or to the base).
    params = STAGES[stage].typical_params()
    text = write_netlist(HARTLEY, dict(HARTLEY.typical), 3e-12, params, title=stage)
    lines = {ln.split()[0]: ln.split() for ln in text.splitlines() if ln and ln[0] not in "*."}
    device = lines.get("Q1") or lines["M1"]
    emitter = device[3]  # Q: collector base emitter; M: drain gate source bulk
    assert lines["CTAP"][1:3] == ["tap", emitter]
    assert emitter != "0"
    assert float(lines["CTAP"][3]) == TAP_BYPASS
    # the coil's sections run from the tank's ends to the tap (through their loss)
    coil_nodes = {n for name in ("L1", "L2") for n in lines[name][1:3]}
    assert "tap" in coil_nodes and emitter not in coil_nodes


@pytest.mark.parametrize(
    "stage", [s.name for s in STAGES.values() if not s.grounded_common and s.device == "bjt"]
)
def test_spec_takes_a_hartley_tank_on_an_emitter_tapped_stage(tmp_path, stage):
    # The bipolar Hartley demo turned into the follower or the common-base stage: the spec
    # is accepted and solve runs (exit 0, designs found, or 1, none meets the spec, as both
    # do here with the demo's common-emitter bias; 2 would be a refusal).
    demo = Path(__file__).resolve().parents[1] / "demo_specs" / "hartley_beacon.toml"
    text = demo.read_text(encoding="utf-8")
    assert 'stage = "common-emitter"' in text
    lines = []
    # keys these stages refuse on their own account (a follower has no collector load;
    # neither takes an emitter bypass), and the common-base base bypass
    drop = (
        ("stage =", "c_emitter", "r_load")
        if stage == "common-collector"
        else ("stage =", "c_emitter")
    )
    for line in text.splitlines():
        if line.strip().startswith(drop):
            continue
        lines.append(line)
        if line.strip() == "[amplifier]":
            lines.append(f'stage = "{stage}"')
            if stage == "common-base":
                lines.append('c_base = "100 nF"')
    good = tmp_path / "good.toml"
    good.write_text("\n".join(lines) + "\n", encoding="utf-8")
    run = subprocess.run(
        [sys.executable, "-m", "picker", "solve", str(good), "--format", "json"],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert run.returncode in (0, 1), run.stderr
    assert "Traceback" not in run.stderr
    assert json.loads(run.stdout)  # one JSON object (candidates or nearest misses)
