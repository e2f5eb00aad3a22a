"""Make (or check) the large-signal validation set: random designs and ngspice's answers.

The set is reference data for picker's large-signal model
(:func:`picker.circuit.steady.steady_state`): every design holds what is needed to
rebuild picker's own netlist (:func:`picker.circuit.netlist.write_netlist`, the generic
NPN card) and to call the model, and ngspice's transient of that netlist is measured by
:mod:`picker.circuit.waveform` (phase slope, envelope percentiles), which does not use
the model.

Usage::

    python scripts/make_validation.py            # draw, simulate, write tests/validation/large_signal.json
    python scripts/make_validation.py --stats    # the model's accuracy on the committed set (a table)
    python scripts/make_validation.py --check 5  # re-simulate 5 committed designs, compare
    python scripts/make_validation.py --redo d003,d007  # re-simulate two designs in place
    python scripts/make_validation.py --reruns   # how firmly ngspice pins each burster's carrier

The drawing (seeded, :data:`SEED`) covers picker issue 11's ranges: ideal tank frequency
20 kHz–30 MHz (log-uniform); common-emitter Colpitts and Clapp (about 30 % Clapp); supply
5–15 V; collector current 0.2–8 mA (log-uniform) set by the bias divider (emitter at 10–30 %
of the supply, divider current 10–40 base currents); a collector resistor (dropping
2–65 % of the supply above the emitter, log-uniform: that spreads the loop gain) or an RF choke (5–50× L, 0.5–10 ohm);
emitter bypass from none (12 % of draws, and :data:`UNBYPASSED` more designs drawn
unbypassed after the quotas) to 2,000× over-bypassed (ω·R_E·C_E log-uniform in
1–2,000); coupling capacitor 2–200× C1; inductor Q 20–200; C1/C2 0.1–2; tank reactance
ωL 30–1,500 ohm; stray 1–5 pF. For the statistics to mean something, many designs are
marginal: draws are kept by quota on the linear model's start-up margin
(:func:`picker.circuit.oscillation.loaded_response`), so about 4 % sit below 0.3, 12 % at
0.3–0.9, 20 % at 0.9–1.6, 24 % at 1.6–4, 20 % at 4–20 and 20 % above 20. The quotas
choose which random draws are kept; the reference answers come from ngspice alone.

Transient length: :func:`picker.circuit.netlist.transient_plan` — 400 periods plus 20
envelope time constants 2Q/ω (unloaded Q) plus 10 of the slowest bias time constant
(R_E·C_E, the divider with C1 + C2, C_B·R_C), at most 8,000 periods, plus five R_E·C_E of
bias settling; at least 60 steps per period (the trapezoidal rule's frequency warping,
0.09 % there, is undone by :func:`picker.circuit.ngspice.trapezoid_frequency`). A draw
whose plan would need more than :data:`LONGEST` periods (a base divider or C_B·R_C
recovering over tens of thousands of periods: a burst that slow could not be seen) is
left out, so every kept design is observed for at least ten of its slowest bias time
constants. ngspice runs in two processes at a time.

Step confirmation: a transient that bursts or stays unsettled is run again with a step
five times finer (:func:`picker.circuit.ngspice.simulate` with ``confirm``; the trapezoidal
rule does not damp, and at 60 steps per period it can ring on the transistor's switching
and make a steady oscillator burst). Where the two runs disagree (another state, or the
carrier moved by more than 0.1 %) the finer run is the record (where it still bursts or
wanders, a 25 times finer run is checked the same way), and its ``step_refined``
says what the netlist's own step showed. Steady designs and those that do not start are
not re-run.

The other stages (issue 12; ``--stage NAME``, one process at a time with ``--workers 1``):
the bjt ones as :func:`draw` says, the fet ones (common-source, common-drain,
common-gate) as :func:`draw_fet` says: half self-biased n-channel JFETs drawn by IDSS,
pinch-off and λ, half divider-biased enhancement MOSFETs drawn by threshold, KP and λ
(:mod:`picker.circuit.fet`'s square-law card, written into the netlist), over the same
frequencies, supplies, tanks, loads and quotas. ``--tank hartley`` draws Hartley tanks
(:func:`_tank`) instead of Colpitts and Clapp: coupling k uniform in 0.3–0.99, L2/L1
log-uniform in 0.05–2 (L1 across the output), L_eff = L1 + L2 + 2M from the same tank
reactance range, C from the frequency; a draw whose C exceeds a twentieth of the tap
bypass (:data:`picker.tank.hartley.TAP_BYPASS`, so below about 100 kHz few are kept) is
left out. ``--tank hartley-series`` draws the series-capacitor Hartley the same way, the
chain's series capacitance taking the Hartley's C and split into C and C_S with C_S/C
log-uniform in 0.05-1 (a padder smaller than C). L2/L1 plays C1/C2's part: its range
is half the stage's lower C1/C2 bound to its upper one (0.05-2 for the common-emitter and
common-source stages; 0.005-2 for the emitter follower, whose gain gm·R_E is large).
``--stage common-emitter,common-source`` draws each design's stage at random;
``--balanced`` keeps at most an equal share of the designs for each stage (the
emitter-tapped Hartley set: common-collector, common-drain, common-base, common-gate, six
each). ``--clapps N`` adds N Clapp designs of the stage after the
quotas (:func:`clapps`), for a stage whose quota draw kept no Clapp that starts.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.fet import fet_class
from picker.circuit.netlist import transient_plan
from picker.circuit.oscillation import loaded_response
from picker.circuit.reference_spread import drift, wants_rerun
from picker.circuit.stages import stage_of
from picker.circuit.validation import (
    Design,
    accuracy,
    accuracy_table,
    design_to_dict,
    load_reference,
    model_answers,
    rerun_design,
    run_design,
)
from picker.tank import get_topology
from picker.tank.base import Topology
from picker.tank.hartley import TAP_BYPASS

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "tests" / "validation" / "large_signal.json"
SEED = 20261202
COUNT = 128
#: (lowest margin, highest margin, share of the set)
QUOTAS = (
    (0.0, 0.3, 0.04),
    (0.3, 0.9, 0.12),
    (0.9, 1.6, 0.20),
    (1.6, 4.0, 0.24),
    (4.0, 20.0, 0.20),
    (20.0, 1e9, 0.20),
)
#: Draws whose transient would need more periods than this are left out (see below).
LONGEST = 6000
WORKERS = 2
#: Designs with an unbypassed emitter added after the quota draw (:func:`unbypassed`).
UNBYPASSED = 8
#: The fet stages (drawn by :func:`draw_fet`).
FET_STAGES = ("common-source", "common-drain", "common-gate")


def _sig(x: float, digits: int = 3) -> float:
    """``x`` rounded to ``digits`` significant figures (as a part would be marked)."""
    return float(f"{x:.{digits - 1}e}")


def _logu(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _tank(
    rng: np.random.Generator, kind: str, w: float, rho_lo: float = 0.1, rho_hi: float = 2.0
) -> tuple[Topology, dict[str, float], float] | None:
    """The tank's values at ω = ``w``: ``kind`` "colpitts", "clapp", "hartley" or
    "hartley-series"; C1/C2 log-uniform in ``rho_lo``–``rho_hi`` (None where the draw is
    not buildable)."""
    x_l = _logu(rng, 30.0, 1500.0)
    l = _sig(x_l / w)
    stray = _sig(rng.uniform(1e-12, 5e-12), 2)
    if kind in ("hartley", "hartley-series"):
        k = _sig(rng.uniform(0.3, 0.99), 2)
        q = _logu(rng, rho_lo / 2, rho_hi)  # L2/L1, beta's analogue: 0.05-2 by default
        l1 = _sig(l / (1 + q + 2 * k * math.sqrt(q)))
        l2 = _sig(q * l1)
        topo = get_topology(kind).configured(k)
        c = 1.0 / (w * w * float(topo.l_eff({"L1": l1, "L2": l2}))) - stray
        if kind == "hartley-series":
            # the chain's series capacitance c split into C and C_S = u·C:
            # 1/c = 1/C + 1/(u·C), so C = c·(1 + 1/u)
            u = _logu(rng, 0.05, 1.0)
            c_main = c * (1.0 + 1.0 / u)
            if not (5e-12 < u * c_main and c_main <= TAP_BYPASS / 20):
                return None
            return topo, {"L1": l1, "L2": l2, "C": _sig(c_main), "CS": _sig(u * c_main)}, stray
        if not 5e-12 < c <= TAP_BYPASS / 20:
            return None
        return topo, {"L1": l1, "L2": l2, "C": _sig(c)}, stray
    topo = get_topology(kind)
    c_eff = 1.0 / (w * w * l) - stray
    if c_eff <= 5e-12:
        return None
    rho = _logu(rng, rho_lo, rho_hi)  # C1/C2
    if kind == "clapp":
        share = rng.uniform(0.5, 0.9)  # C_eff/C3
        c3 = c_eff / share
        c1 = (1 + rho) * c_eff / (1 - share)
        return topo, {"C1": _sig(c1), "C2": _sig(c1 / rho), "C3": _sig(c3), "L": l}, stray
    c1 = c_eff * (1 + rho)  # C1·C2/(C1 + C2) = C1/(1 + rho) = C_eff with C2 = C1/rho
    return topo, {"C1": _sig(c1), "C2": _sig(c1 / rho), "L": l}, stray


def _kind(rng: np.random.Generator, tank: str) -> str:
    """The tank of one draw: a Hartley, a Clapp (``tank`` "clapp": :func:`clapps`), or a
    Colpitts (70 %) or Clapp (30 %)."""
    if tank in ("hartley", "hartley-series", "clapp"):
        return tank
    return "clapp" if rng.uniform() < 0.3 else "colpitts"


def _c_ref(values: dict[str, float]) -> float:
    """The capacitor the coupling capacitor is scaled to: C1, or a Hartley's C."""
    return values["C1"] if "C1" in values else values["C"]


def _c_base_ref(values: dict[str, float]) -> float:
    """The capacitor a base (gate) bypass is scaled to: C2, or a Hartley's C."""
    return values["C2"] if "C2" in values else values["C"]


def _design(
    index: int,
    prefix: str,
    topo: Topology,
    values: dict[str, float],
    stray: float,
    params: AmplifierParams,
) -> Design:
    return Design(f"{prefix}{index:03d}", topo.name, values, stray, params, float(topo.coupling))


def draw(
    rng: np.random.Generator,
    index: int,
    *,
    bypass: bool = True,
    prefix: str = "d",
    stage: str = "common-emitter",
    tank: str = "colpitts",
) -> Design | None:
    """One random design over issue 11's ranges (None where the draw is not buildable);
    ``bypass`` False leaves the emitter unbypassed; its id is ``prefix`` and ``index``.

    ``stage`` (issue 12) draws the same ranges for another bjt stage: the
    common-collector one has no collector load and no emitter bypass, and its C1/C2
    reaches down to 0.01 (the follower's gain gm·R_E = V_E/V_T is large, so only a
    small C1/C2 makes it marginal); the common-base one has no emitter bypass and its
    base bypassed by C_base = 20–200× C2. A fet stage is drawn by :func:`draw_fet`;
    ``tank`` "hartley" draws a Hartley tank (:func:`_tank`) in place of the Colpitts
    or Clapp."""
    if stage in FET_STAGES:
        return draw_fet(rng, index, prefix=prefix, stage=stage, tank=tank)
    kind = _kind(rng, tank)
    f0 = _logu(rng, 20e3, 30e6)
    w = 2 * math.pi * f0
    vcc = _sig(rng.uniform(5.0, 15.0), 2)
    ic = _logu(rng, 0.2e-3, 8e-3)
    ve = max(rng.uniform(0.10, 0.30) * vcc, 0.5)
    r_e = _sig(ve / ic)
    vb = ve + 0.65  # a silicon V_BE, common practice, no source
    ib = ic / 150.0  # the generic NPN's BF
    i_div = ib * rng.uniform(10.0, 40.0)
    r_b2 = _sig(vb / i_div)
    r_b1 = _sig((vcc - vb) / (i_div + ib))
    got = _tank(rng, kind, w, 0.01 if stage == "common-collector" else 0.1)
    if got is None:
        return None
    topo, values, stray = got
    choke = rng.uniform() < 0.3
    if stage == "common-collector":
        load: dict[str, float] = {}
    elif choke:
        load = {
            "l_choke": _sig(_inductance(values) * _logu(rng, 5.0, 50.0)),
            "r_choke": _sig(_logu(rng, 0.5, 10)),
        }
    else:
        drop = _logu(rng, 0.02, 0.65) * (vcc - ve)  # across R_C: sets the gain gm·R_C
        load = {"r_c": _sig(drop / ic)}
    c_e = None
    if rng.uniform() >= 0.12:
        c_e = _sig(_logu(rng, 1.0, 2000.0) / (w * r_e))
    if not bypass or stage != "common-emitter":
        c_e = None
    if stage == "common-base":
        load["c_base"] = _sig(_c_base_ref(values) * _logu(rng, 20.0, 200.0))
    params = AmplifierParams(
        stage=stage,
        vcc=vcc,
        r_b1=r_b1,
        r_b2=r_b2,
        r_e=r_e,
        c_e=c_e,
        c_block=_sig(_c_ref(values) * _logu(rng, 2.0, 200.0)),
        inductor_q=_sig(_logu(rng, 20.0, 200.0), 2),
        **load,
    )
    return _design(index, prefix, topo, values, stray, params)


def _inductance(values: dict[str, float]) -> float:
    """The tank's inductance a choke is scaled to: L, or a Hartley's L1 + L2."""
    return values["L"] if "L" in values else values["L1"] + values["L2"]


def draw_fet(
    rng: np.random.Generator,
    index: int,
    *,
    prefix: str = "d",
    stage: str = "common-source",
    tank: str = "colpitts",
) -> Design | None:
    """One random design of a fet ``stage`` (None where the draw is not buildable).

    Half the draws are n-channel JFETs (:func:`picker.circuit.fet.fet_class`
    "generic-njfet" with IDSS 2–30 mA log-uniform, pinch-off −0.8 to −6 V, λ
    0.002–0.03 /V log-uniform), self-biased: the gate at 0 V through a gate resistor
    of 100 kΩ–2.2 MΩ (tied straight to ground in the common-gate stage) and R_S set
    for I_D = 10–70 % of IDSS (Shockley's law, V_GS = V_P·(1 − √(I_D/IDSS))); half are
    enhancement MOSFETs ("generic-nmos" with threshold 0.8–3 V, KP 0.02–0.5 A/V², λ
    0.005–0.05 /V), biased by a gate divider of Thevenin resistance 10–470 kΩ for
    I_D = 0.5–10 mA with the source at 10–30 % of the supply. The capacitances are the
    class's. The rest follows :func:`draw`: the drain load of the common-source and
    common-gate stages (a resistor dropping 2–65 % of the supply above the source, or a
    choke), the source bypass of the common-source stage, the gate bypass C_base =
    20–200× C2 of a divider-biased common-gate stage; no drain load in the follower
    (common-drain), whose C1/C2 reaches from 0.01 (a MOSFET's gm·R_S is large) to 4 (a
    self-biased JFET's gm·R_S = 2·(1 − √(I_D/IDSS))/√(I_D/IDSS) is 0.4–3); the
    common-gate stage's C1/C2 is 0.3–3 (its gain must exceed (C1 + C2)²/(C1·C2), at
    least 4, which C1/C2 far from 1 raises beyond what a fet's gm·R_D gives). Draws whose
    solved bias leaves less than 0.5 V between V_DS and the triode edge are left out.
    """
    kind = _kind(rng, tank)
    f0 = _logu(rng, 20e3, 30e6)
    w = 2 * math.pi * f0
    vcc = _sig(rng.uniform(5.0, 15.0), 2)
    gate: dict[str, float | None]
    if rng.uniform() < 0.5:
        idss = _sig(_logu(rng, 2e-3, 30e-3), 2)
        vp = -_sig(rng.uniform(0.8, 6.0), 2)
        card = fet_class("generic-njfet", idss=idss, vto=vp, lam=_sig(_logu(rng, 0.002, 0.03), 2))
        ratio = rng.uniform(0.1, 0.7)  # I_D/IDSS
        i_d = ratio * idss
        v_s = -vp * (1.0 - math.sqrt(ratio))  # Shockley's law (picker.circuit.fet, F1)
        r_g = _sig(_logu(rng, 100e3, 2.2e6), 2)
        gate = {"r_b1": None, "r_b2": None if stage == "common-gate" else r_g}
    else:
        vt = _sig(rng.uniform(0.8, 3.0), 2)
        kp = _sig(_logu(rng, 0.02, 0.5), 2)
        card = fet_class("generic-nmos", vto=vt, kp=kp, lam=_sig(_logu(rng, 0.005, 0.05), 2))
        i_d = _logu(rng, 0.5e-3, 10e-3)
        v_s = max(rng.uniform(0.10, 0.30) * vcc, 0.3)
        v_g = v_s + vt + math.sqrt(i_d / card.k)
        r_th = _logu(rng, 10e3, 470e3)
        if v_g >= 0.9 * vcc:
            return None
        gate = {"r_b1": _sig(r_th * vcc / v_g), "r_b2": _sig(r_th * vcc / (vcc - v_g))}
    r_s = _sig(v_s / i_d)
    rho_lo, rho_hi = {"common-drain": (0.01, 4.0), "common-gate": (0.3, 3.0)}.get(stage, (0.1, 2.0))
    got = _tank(rng, kind, w, rho_lo, rho_hi)
    if got is None:
        return None
    topo, values, stray = got
    load: dict[str, float | None] = {}
    if stage != "common-drain":
        if rng.uniform() < 0.3:
            load = {
                "l_choke": _sig(_inductance(values) * _logu(rng, 5.0, 50.0)),
                "r_choke": _sig(_logu(rng, 0.5, 10)),
            }
        else:
            load = {"r_c": _sig(_logu(rng, 0.02, 0.65) * max(vcc - v_s, 0.0) / i_d)}
    c_e = _sig(_logu(rng, 1.0, 2000.0) / (w * r_s)) if rng.uniform() >= 0.12 else None
    if stage != "common-source":
        c_e = None
    if stage == "common-gate" and gate["r_b1"] is not None:
        load["c_base"] = _sig(_c_base_ref(values) * _logu(rng, 20.0, 200.0))
    params = AmplifierParams(
        kind="fet",
        stage=stage,
        vcc=vcc,
        r_e=r_s,
        c_e=c_e,
        c_block=_sig(_c_ref(values) * _logu(rng, 2.0, 200.0)),
        inductor_q=_sig(_logu(rng, 20.0, 200.0), 2),
        fet=card,
        **gate,
        **load,
    )
    try:
        fb = stage_of(params).fet_bias(params)  # type: ignore[attr-defined]
    except ValueError:  # cut off
        return None
    if fb is None or fb.vds - fb.u < 0.5:
        return None
    return _design(index, prefix, topo, values, stray, params)


def unbypassed(
    seed: int = SEED + 1, count: int = UNBYPASSED, first: int = COUNT, prefix: str = "d"
) -> list[Design]:
    """``count`` seeded draws with an unbypassed emitter and a linear start-up margin of at
    least 0.3 (the quotas of :func:`select` keep few of them: degeneration lowers the
    margin below the marginal band), numbered from ``first``."""
    rng = np.random.default_rng(seed)
    out: list[Design] = []
    while len(out) < count:
        d = draw(rng, first + len(out), bypass=False, prefix=prefix)
        if (
            d is None
            or not transient_plan(d.topo, d.values, d.stray, d.params, max_cycles=LONGEST).resolved
        ):
            continue
        if float(loaded_response(d.topo, d.values, d.stray, d.params).margin) >= 0.3:
            out.append(d)
    return out


def clapps(
    seed: int, count: int, first: int, prefix: str = "d", stage: str = "common-drain"
) -> list[Design]:
    """``count`` seeded Clapp draws of ``stage`` with a linear start-up margin of at least
    0.3, numbered from ``first`` (as :func:`unbypassed` adds unbypassed ones): a stage
    whose quota draw kept only Clapps below start-up (the common-drain set's three) gets
    Clapps that oscillate, so its Clapp figure has something to measure."""
    rng = np.random.default_rng(seed)
    out: list[Design] = []
    while len(out) < count:
        d = draw(rng, first + len(out), prefix=prefix, stage=stage, tank="clapp")
        if (
            d is None
            or not transient_plan(d.topo, d.values, d.stray, d.params, max_cycles=LONGEST).resolved
            or settling_cycles(d) > LONGEST
        ):
            continue
        if float(loaded_response(d.topo, d.values, d.stray, d.params).margin) >= 0.3:
            out.append(d)
    return out


def settling_cycles(d: Design) -> float:
    """The stage's bias settling before the transient (:meth:`Stage.settling_time`) in
    periods of the ideal tank: a common-base stage's bypassed base (R_th·C_base) or a
    follower's blocking capacitor (R_th·C_B) can need far more than the plan's periods.
    (A common-emitter draw the plan resolves always passes: its settling, five R_E·C_E,
    is half of the plan's ten bias time constants.)"""
    f0 = float(d.topo.frequency(d.values, d.stray))
    return stage_of(d.params).settling_time(d.params) * f0


def select(
    seed: int = SEED,
    count: int = COUNT,
    prefix: str = "d",
    stage: str = "common-emitter",
    tank: str = "colpitts",
    balanced: bool = False,
) -> list[Design]:
    """``count`` seeded draws of ``stage`` (a comma-separated list: each draw picks one
    of them at random) in ``tank`` ("colpitts": Colpitts and Clapp; "hartley"), kept by
    quota on the linear model's start-up margin; ``balanced`` keeps at most
    ceil(count / number of stages) designs of each stage (a stage whose draws the plan
    or the quotas rarely keep still gets its share)."""
    stages = stage.split(",")
    share = math.ceil(count / len(stages)) if balanced else count
    per_stage = dict.fromkeys(stages, 0)
    rng = np.random.default_rng(seed)
    want = [round(share * count) for *_, share in QUOTAS]
    want[-1] += count - sum(want)
    have = [0] * len(QUOTAS)
    out: list[Design] = []
    tries = 0
    while len(out) < count:
        tries += 1
        if tries > 2000 * count:  # the series Hartley keeps about one draw in 26
            raise RuntimeError("the quotas cannot be filled; widen the ranges")
        one = stages[int(rng.integers(len(stages)))] if len(stages) > 1 else stages[0]
        d = draw(rng, len(out), prefix=prefix, stage=one, tank=tank)
        if (
            d is None
            or not transient_plan(d.topo, d.values, d.stray, d.params, max_cycles=LONGEST).resolved
            or settling_cycles(d) > LONGEST
        ):
            continue
        if per_stage[one] >= share:
            continue
        m = float(loaded_response(d.topo, d.values, d.stray, d.params).margin)
        for k, (lo, hi, _) in enumerate(QUOTAS):
            if lo <= m < hi and have[k] < want[k]:
                have[k] += 1
                per_stage[one] += 1
                out.append(d)
                break
    return out


def simulate_all(designs: list[Design], workers: int = WORKERS) -> list[dict[str, object]]:
    """ngspice's answer for each design, ``workers`` processes at a time."""
    with ThreadPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(confirmed, designs))


def confirmed(d: Design) -> dict[str, object]:
    """ngspice's answer for ``d``, a burst or an unsettled envelope confirmed at a finer
    step (:func:`picker.circuit.validation.run_design` with ``confirm``); a record that
    bursts, wanders or was confirmed at a finer step also gets its reruns
    (:func:`picker.circuit.validation.rerun_design`: how firmly ngspice pins its carrier)."""
    record = run_design(d, confirm=True)
    if wants_rerun(record):
        record["reruns"] = rerun_design(d)
    return record


def reruns(path: Path = OUT, workers: int = WORKERS) -> None:
    """Add the reruns to every record of the set at ``path`` that wants them and has none
    (``workers`` designs at a time); the records themselves stay as they are."""
    data = json.loads(path.read_text(encoding="utf-8"))
    designs, answers = load_reference(path)
    todo = [i for i, a in enumerate(answers) if wants_rerun(a) and "reruns" not in a]
    with ThreadPoolExecutor(max_workers=workers) as pool:
        got = list(pool.map(rerun_design, [designs[i] for i in todo]))
    for i, runs in zip(todo, got, strict=True):
        data["designs"][i]["ngspice"]["reruns"] = runs
        rec = data["designs"][i]["ngspice"]
        rec_drift = drift(rec)
        print(f"{designs[i].id}: {rec['state']} {rec['f_hz']}, reruns within {rec_drift:.2%}")
    path.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def make(
    path: Path = OUT,
    seed: int = SEED,
    count: int = COUNT,
    extra: int = UNBYPASSED,
    prefix: str = "d",
    stage: str = "common-emitter",
    workers: int = WORKERS,
    tank: str = "colpitts",
    extra_clapps: int = 0,
    balanced: bool = False,
) -> None:
    """Draw ``count`` designs of ``stage`` by quota, ``extra`` unbypassed ones (the
    common-emitter stage's) and ``extra_clapps`` Clapps (:func:`clapps`) from ``seed``,
    run them in ngspice and write ``path``."""
    designs = select(seed, count, prefix, stage, tank, balanced)
    if extra:
        designs += unbypassed(seed + 1, extra, count, prefix)
    if extra_clapps:
        designs += clapps(seed + 2, extra_clapps, len(designs), prefix, stage)
    t0 = time.perf_counter()
    answers = simulate_all(designs, workers)
    wall = time.perf_counter() - t0
    records = [
        {"design": design_to_dict(d), "ngspice": a} for d, a in zip(designs, answers, strict=True)
    ]
    states: dict[str, int] = {}
    for a in answers:
        states[str(a["state"])] = states.get(str(a["state"]), 0) + 1
    data = {
        "about": (
            "Reference data for picker's large-signal model: random designs over picker issue "
            "11's ranges and what ngspice's transient of picker's netlist shows, measured by "
            "picker.circuit.waveform. Made by scripts/make_validation.py; do not edit by hand."
        ),
        "seed": seed,
        "count": len(designs),
        "states": dict(sorted(states.items())),
        "designs": records,
    }
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    print(f"wrote {path}: {len(designs)} designs, states {data['states']}")
    print(f"ngspice wall time {wall:.0f} s with {workers} workers")


def stats(path: Path = OUT) -> None:
    designs, answers = load_reference(path)
    t0 = time.perf_counter()
    model = model_answers(designs)
    wall = time.perf_counter() - t0
    acc = accuracy([d.topology for d in designs], model, answers)
    print(f"steady_state against ngspice on {path} ({wall:.1f} s for the model)")
    print(accuracy_table(acc))


def check(n: int, path: Path = OUT, workers: int = WORKERS) -> int:
    """Re-simulate ``n`` committed designs (spread over the set; ``workers`` ngspice
    processes at a time); 1 on a disagreement."""
    designs, answers = load_reference(path)
    picks = np.linspace(0, len(designs) - 1, n).round().astype(int)
    fresh = simulate_all([designs[i] for i in picks], workers)
    bad = 0
    for i, a in zip(picks, fresh, strict=True):
        ref = answers[i]
        same = a["state"] == ref["state"]
        if same and ref["f_hz"] is not None:
            same = abs(float(a["f_hz"]) / float(ref["f_hz"]) - 1) < 1e-4  # type: ignore[arg-type]
        print(f"{designs[i].id}: {ref['state']} -> {a['state']} {'ok' if same else 'DIFFERS'}")
        bad += not same
    return 1 if bad else 0


def redo(ids: list[str], path: Path = OUT) -> None:
    """Re-simulate the designs ``ids`` of the set at ``path`` (one ngspice process) and
    write their new ngspice records in place; the other records stay as they are."""
    data = json.loads(path.read_text(encoding="utf-8"))
    designs, _ = load_reference(path)
    found = {d.id: i for i, d in enumerate(designs)}
    missing = [i for i in ids if i not in found]
    if missing:
        raise SystemExit(f"{path}: no design {', '.join(missing)}")
    for name in ids:
        i = found[name]
        old = data["designs"][i]["ngspice"]
        new = confirmed(designs[i])
        data["designs"][i]["ngspice"] = new
        note = " (step refined)" if "step_refined" in new else ""
        print(f"{name}: {old['state']} {old['f_hz']} -> {new['state']} {new['f_hz']}{note}")
    states: dict[str, int] = {}
    for r in data["designs"]:
        states[str(r["ngspice"]["state"])] = states.get(str(r["ngspice"]["state"]), 0) + 1
    data["states"] = dict(sorted(states.items()))
    path.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stats", action="store_true", help="print the model's accuracy table")
    ap.add_argument("--check", type=int, metavar="N", help="re-simulate N committed designs")
    ap.add_argument("--out", type=Path, default=OUT, help="the set's file (default: %(default)s)")
    ap.add_argument("--seed", type=int, default=SEED, help="seed of the drawing")
    ap.add_argument("--count", type=int, default=COUNT, help="designs drawn by quota")
    ap.add_argument("--unbypassed", type=int, default=UNBYPASSED, help="unbypassed designs")
    ap.add_argument("--prefix", default="d", help="prefix of the design ids")
    ap.add_argument(
        "--stage",
        default="common-emitter",
        help="the stage drawn, or a comma-separated list of them (issue 12)",
    )
    ap.add_argument(
        "--tank",
        default="colpitts",
        choices=("colpitts", "hartley", "hartley-series"),
        help="colpitts: Colpitts and Clapp; hartley, hartley-series: Hartley tanks (issue 12)",
    )
    ap.add_argument("--workers", type=int, default=WORKERS, help="ngspice processes at a time")
    ap.add_argument(
        "--redo", metavar="IDS", help="re-simulate these designs (comma-separated ids) in place"
    )
    ap.add_argument(
        "--reruns",
        action="store_true",
        help="run each bursting, wandering or step-refined record again (finer step, Gear's "
        "method, each half of the tail) and store the readings",
    )
    ap.add_argument(
        "--clapps", type=int, default=0, help="Clapp designs added after the quotas (issue 12)"
    )
    ap.add_argument(
        "--balanced",
        action="store_true",
        help="with several stages, at most an equal share of the designs for each",
    )
    args = ap.parse_args(argv)
    if args.stats:
        stats(args.out)
        return 0
    if args.check:
        return check(args.check, args.out, args.workers)
    if args.reruns:
        reruns(args.out, args.workers)
        return 0
    if args.redo:
        redo([i.strip() for i in args.redo.split(",") if i.strip()], args.out)
        return 0
    make(
        args.out,
        args.seed,
        args.count,
        args.unbypassed,
        args.prefix,
        args.stage,
        args.workers,
        args.tank,
        args.clapps,
        args.balanced,
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
