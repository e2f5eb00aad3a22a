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
from picker.circuit.netlist import transient_plan
from picker.circuit.oscillation import loaded_response
from picker.circuit.stages import stage_of
from picker.circuit.validation import (
    Design,
    accuracy,
    accuracy_table,
    design_to_dict,
    load_reference,
    model_answers,
    run_design,
)
from picker.tank import get_topology

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


def _sig(x: float, digits: int = 3) -> float:
    """``x`` rounded to ``digits`` significant figures (as a part would be marked)."""
    return float(f"{x:.{digits - 1}e}")


def _logu(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def draw(
    rng: np.random.Generator,
    index: int,
    *,
    bypass: bool = True,
    prefix: str = "d",
    stage: str = "common-emitter",
) -> Design | None:
    """One random design over issue 11's ranges (None where the draw is not buildable);
    ``bypass`` False leaves the emitter unbypassed; its id is ``prefix`` and ``index``.

    ``stage`` (issue 12) draws the same ranges for another bjt stage: the
    common-collector one has no collector load and no emitter bypass, and its C1/C2
    reaches down to 0.01 (the follower's gain gm·R_E = V_E/V_T is large, so only a
    small C1/C2 makes it marginal); the common-base one has no emitter bypass and its
    base bypassed by C_base = 20–200× C2."""
    clapp = rng.uniform() < 0.3
    topo = get_topology("clapp" if clapp else "colpitts")
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
    x_l = _logu(rng, 30.0, 1500.0)
    l = _sig(x_l / w)
    stray = _sig(rng.uniform(1e-12, 5e-12), 2)
    c_eff = 1.0 / (w * w * l) - stray
    if c_eff <= 5e-12:
        return None
    rho = _logu(rng, 0.01 if stage == "common-collector" else 0.1, 2.0)  # C1/C2
    if clapp:
        share = rng.uniform(0.5, 0.9)  # C_eff/C3
        c3 = c_eff / share
        c1 = (1 + rho) * c_eff / (1 - share)
        values = {"C1": _sig(c1), "C2": _sig(c1 / rho), "C3": _sig(c3), "L": l}
    else:
        c1 = c_eff * (1 + rho)  # C1·C2/(C1 + C2) = C1/(1 + rho) = C_eff with C2 = C1/rho
        values = {"C1": _sig(c1), "C2": _sig(c1 / rho), "L": l}
    choke = rng.uniform() < 0.3
    if stage == "common-collector":
        load: dict[str, float] = {}
    elif choke:
        load = {"l_choke": _sig(l * _logu(rng, 5.0, 50.0)), "r_choke": _sig(_logu(rng, 0.5, 10))}
    else:
        drop = _logu(rng, 0.02, 0.65) * (vcc - ve)  # across R_C: sets the gain gm·R_C
        load = {"r_c": _sig(drop / ic)}
    c_e = None
    if rng.uniform() >= 0.12:
        c_e = _sig(_logu(rng, 1.0, 2000.0) / (w * r_e))
    if not bypass or stage != "common-emitter":
        c_e = None
    if stage == "common-base":
        load["c_base"] = _sig(values["C2"] * _logu(rng, 20.0, 200.0))
    params = AmplifierParams(
        stage=stage,
        vcc=vcc,
        r_b1=r_b1,
        r_b2=r_b2,
        r_e=r_e,
        c_e=c_e,
        c_block=_sig(values["C1"] * _logu(rng, 2.0, 200.0)),
        inductor_q=_sig(_logu(rng, 20.0, 200.0), 2),
        **load,
    )
    return Design(f"{prefix}{index:03d}", topo.name, values, stray, params)


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


def settling_cycles(d: Design) -> float:
    """The stage's bias settling before the transient (:meth:`Stage.settling_time`) in
    periods of the ideal tank: a common-base stage's bypassed base (R_th·C_base) or a
    follower's blocking capacitor (R_th·C_B) can need far more than the plan's periods.
    (A common-emitter draw the plan resolves always passes: its settling, five R_E·C_E,
    is half of the plan's ten bias time constants.)"""
    f0 = float(d.topo.frequency(d.values, d.stray))
    return stage_of(d.params).settling_time(d.params) * f0


def select(
    seed: int = SEED, count: int = COUNT, prefix: str = "d", stage: str = "common-emitter"
) -> list[Design]:
    """``count`` seeded draws of ``stage``, kept by quota on the linear model's start-up
    margin."""
    rng = np.random.default_rng(seed)
    want = [round(share * count) for *_, share in QUOTAS]
    want[-1] += count - sum(want)
    have = [0] * len(QUOTAS)
    out: list[Design] = []
    tries = 0
    while len(out) < count:
        tries += 1
        if tries > 200 * count:
            raise RuntimeError("the quotas cannot be filled; widen the ranges")
        d = draw(rng, len(out), prefix=prefix, stage=stage)
        if (
            d is None
            or not transient_plan(d.topo, d.values, d.stray, d.params, max_cycles=LONGEST).resolved
            or settling_cycles(d) > LONGEST
        ):
            continue
        m = float(loaded_response(d.topo, d.values, d.stray, d.params).margin)
        for k, (lo, hi, _) in enumerate(QUOTAS):
            if lo <= m < hi and have[k] < want[k]:
                have[k] += 1
                out.append(d)
                break
    return out


def simulate_all(designs: list[Design], workers: int = WORKERS) -> list[dict[str, object]]:
    """ngspice's answer for each design, ``workers`` processes at a time."""
    with ThreadPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(run_design, designs))


def make(
    path: Path = OUT,
    seed: int = SEED,
    count: int = COUNT,
    extra: int = UNBYPASSED,
    prefix: str = "d",
    stage: str = "common-emitter",
    workers: int = WORKERS,
) -> None:
    """Draw ``count`` designs of ``stage`` by quota and ``extra`` unbypassed ones (the
    common-emitter stage's) from ``seed``, run them in ngspice and write ``path``."""
    designs = select(seed, count, prefix, stage)
    if extra:
        designs += unbypassed(seed + 1, extra, count, prefix)
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


def check(n: int, path: Path = OUT) -> int:
    """Re-simulate ``n`` committed designs (spread over the set); 1 on a disagreement."""
    designs, answers = load_reference(path)
    picks = np.linspace(0, len(designs) - 1, n).round().astype(int)
    fresh = simulate_all([designs[i] for i in picks])
    bad = 0
    for i, a in zip(picks, fresh, strict=True):
        ref = answers[i]
        same = a["state"] == ref["state"]
        if same and ref["f_hz"] is not None:
            same = abs(float(a["f_hz"]) / float(ref["f_hz"]) - 1) < 1e-4  # type: ignore[arg-type]
        print(f"{designs[i].id}: {ref['state']} -> {a['state']} {'ok' if same else 'DIFFERS'}")
        bad += not same
    return 1 if bad else 0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stats", action="store_true", help="print the model's accuracy table")
    ap.add_argument("--check", type=int, metavar="N", help="re-simulate N committed designs")
    ap.add_argument("--out", type=Path, default=OUT, help="the set's file (default: %(default)s)")
    ap.add_argument("--seed", type=int, default=SEED, help="seed of the drawing")
    ap.add_argument("--count", type=int, default=COUNT, help="designs drawn by quota")
    ap.add_argument("--unbypassed", type=int, default=UNBYPASSED, help="unbypassed designs")
    ap.add_argument("--prefix", default="d", help="prefix of the design ids")
    ap.add_argument("--stage", default="common-emitter", help="the bjt stage drawn (issue 12)")
    ap.add_argument("--workers", type=int, default=WORKERS, help="ngspice processes at a time")
    args = ap.parse_args(argv)
    if args.stats:
        stats(args.out)
        return 0
    if args.check:
        return check(args.check, args.out)
    make(args.out, args.seed, args.count, args.unbypassed, args.prefix, args.stage, args.workers)
    return 0


if __name__ == "__main__":
    sys.exit(main())
