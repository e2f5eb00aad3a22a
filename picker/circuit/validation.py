"""The large-signal model against ngspice: reference designs, their transients, the statistics.

A *reference design* is everything needed to rebuild picker's netlist and to call
:func:`picker.circuit.steady.steady_state`: the topology's name, the board values, the
stray capacitance and the :class:`picker.circuit.amplifier.AmplifierParams` fields. Its
*reference answer* is what ngspice's transient of that netlist shows, measured by
:mod:`picker.circuit.waveform` (written without the model). The committed set lives in
``tests/validation/large_signal.json`` and is made by ``scripts/make_validation.py``.

:func:`accuracy` compares the model with the reference answers and gives the figures
picker issue 11 sets targets for:

* frequency: over designs that oscillate in ngspice, the share within 2 % and the
  median and worst error (a design the model says does not start counts as a miss);
* start-up: the share of all designs where "starts" agrees with ngspice;
* bursting: precision and recall of the model's ``bursting`` against ngspice's state;
* amplitude: over designs steady in ngspice, the share within ±30 % (peak at the tank
  top, half the peak-to-peak);
* Clapp: the worst frequency error over Clapp designs that oscillate.

Beside the share within 2 % over every design that oscillates, the same share over the
designs whose reference is *settled*: ngspice's reading holds within 1 % when the record
is run again at a finer step, by another method and read over each half of its tail
(:mod:`picker.circuit.reference_spread`). It is not one of issue 11's targets; it says
which misses are the model's and which are the reference's.

And the frequency targets once more over every design that oscillates, each reference
taken as the *span* of ngspice's own readings of it (its record and its reruns): a model
figure inside the span agrees with ngspice as well as ngspice agrees with itself, and
the 2 % is counted from the span's nearer end
(:func:`picker.circuit.reference_spread.span_error`). For a steady record not run
again the span is its one reading, so the figure is the plain one.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, fields, replace
from pathlib import Path
from typing import Any

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.burst_carrier import distorted, network_carriers, run_bursts, run_hint
from picker.circuit.fet import FetCard
from picker.circuit.netlist import transient_plan, write_netlist
from picker.circuit.network import Network
from picker.circuit.ngspice import simulate, step_note
from picker.circuit.nominal_orbit import board_orbits
from picker.circuit.reference_spread import SETTLED, drift, rerun, span_error, wants_rerun
from picker.circuit.steady import steady_state
from picker.files import read_text
from picker.tank import get_topology
from picker.tank.base import Topology

__all__ = [
    "Accuracy",
    "Design",
    "ModelAnswer",
    "accuracy",
    "accuracy_table",
    "design_from_dict",
    "design_to_dict",
    "load_reference",
    "model_answer",
    "model_answers",
    "rerun_design",
    "run_design",
]

#: The AmplifierParams fields a reference design records (the device card is the default).
_PARAM_FIELDS = tuple(f.name for f in fields(AmplifierParams) if f.name != "device")


@dataclass(frozen=True)
class Design:
    """One reference design: ``topology`` name, board ``values`` (F, H), ``stray`` (F),
    the amplifier ``params``, an ``id`` and the tank's ``coupling`` (a Hartley's k; 0
    for the others)."""

    id: str
    topology: str
    values: dict[str, float]
    stray: float
    params: AmplifierParams
    coupling: float = 0.0

    @property
    def topo(self) -> Topology:
        """The registered topology, configured with the design's coupling."""
        topo = get_topology(self.topology)
        return topo.configured(self.coupling) if self.coupling else topo


def design_to_dict(d: Design) -> dict[str, Any]:
    """JSON-ready form of a design (every AmplifierParams field but the bjt's device card;
    a fet's card as its fields; ``coupling`` only where it is not 0)."""
    p = asdict(d.params)
    out = {
        "id": d.id,
        "topology": d.topology,
        "values": dict(d.values),
        "stray": d.stray,
        "params": {k: p[k] for k in _PARAM_FIELDS},
    }
    if d.coupling:
        out["coupling"] = d.coupling
    return out


def design_from_dict(d: Mapping[str, Any]) -> Design:
    """The inverse of :func:`design_to_dict`."""
    kw = {k: d["params"][k] for k in _PARAM_FIELDS if k in d["params"]}
    if kw.get("fet") is not None:
        kw["fet"] = FetCard(**kw["fet"])
    params = AmplifierParams(**kw)
    values = {k: float(v) for k, v in d["values"].items()}
    coupling = float(d.get("coupling", 0.0))
    return Design(str(d["id"]), str(d["topology"]), values, float(d["stray"]), params, coupling)


def run_design(d: Design, *, timeout: float = 120.0, confirm: bool = False) -> dict[str, Any]:
    """ngspice's answer for one design: the netlist's transient (length from
    :func:`picker.circuit.netlist.transient_plan`) measured at the tank top.

    With ``confirm`` (``scripts/make_validation.py``), a burst or an unsettled envelope is
    confirmed at a finer step (:func:`picker.circuit.ngspice.simulate`); where the finer
    run disagrees it is the answer, with ``step_refined`` saying what the netlist's own
    step showed (:func:`picker.circuit.ngspice.step_note`)."""
    topo = d.topo
    plan = transient_plan(topo, d.values, d.stray, d.params)
    text = write_netlist(topo, d.values, d.stray, d.params, title=d.id, cycles=plan.cycles)
    sim = simulate(
        text,
        timeout=timeout,
        f_hint=plan.f0,
        tail_start=plan.tail_start,
        t_kick=plan.t_kick,
        confirm=confirm,
    )
    return {
        **step_note(sim),
        **sim.waveform.to_dict(),
        "cycles": plan.cycles,
        "tstop_s": plan.tstop,
        "t_kick_s": plan.t_kick,
        "tail_start_s": plan.tail_start,
        "warnings": list(sim.warnings),
    }


def rerun_design(d: Design, *, timeout: float = 120.0) -> dict[str, Any]:
    """The record's netlist run again at a finer step and by Gear's method, each read
    over the tail and its halves (:func:`picker.circuit.reference_spread.rerun`)."""
    plan = transient_plan(d.topo, d.values, d.stray, d.params)
    text = write_netlist(d.topo, d.values, d.stray, d.params, title=d.id, cycles=plan.cycles)
    return rerun(
        text, f_hint=plan.f0, tail_start=plan.tail_start, t_kick=plan.t_kick, timeout=timeout
    )


def load_reference(path: Path) -> tuple[list[Design], list[dict[str, Any]]]:
    """The designs and ngspice's answers of a reference file (as written by
    ``scripts/make_validation.py``)."""
    data = json.loads(read_text(path, what="a reference file (JSON)"))
    designs = [design_from_dict(r["design"]) for r in data["designs"]]
    answers = [dict(r["ngspice"]) for r in data["designs"]]
    return designs, answers


@dataclass(frozen=True)
class ModelAnswer:
    """The model's answer for one design (floats, NaN where not defined); where its runs
    from rest split (:attr:`picker.circuit.burst_carrier.BurstCarrier.split`), the range
    of their carriers, ``f_low_hz`` to ``f_high_hz`` (NaN elsewhere); its start-up time,
    s (the describing function's, or where the design takes its run from rest, the
    run's, read as ngspice's record is)."""

    starts: bool
    bursting: bool
    f_hz: float
    f_ideal_hz: float
    amplitude_v: float
    margin: float
    f_low_hz: float = math.nan
    f_high_hz: float = math.nan
    startup_time_s: float = math.nan


def model_answer(d: Design) -> ModelAnswer:
    """:func:`model_answers` of one design."""
    return model_answers([d])[0]


def model_answers(designs: Sequence[Design]) -> list[ModelAnswer]:
    """The answer of the pipeline's model for each design, as ``solve`` reports it for a
    candidate at its nominal values: :func:`picker.circuit.steady.steady_state`, and where
    it finds the transistor saturated (on a Hartley tank and an emitter follower, where it
    starts), the periodic orbit of the design's own netlist
    (:func:`picker.circuit.nominal_orbit.board_orbits`: its frequency, amplitude and
    Floquet verdict; the saturated designs are shot in one batch). Where the model calls
    a design that starts bursting, the orbit (or the steady state) is one the board never
    holds: its carrier and amplitude are those of its own circuit run from rest and
    measured as ngspice's record is (:func:`picker.circuit.burst_carrier.network_carriers`).
    Where that run, measured as the record is, does not burst (it settles, or its
    envelope wanders without gaps: "steady" or "unsettled", which ngspice's records count
    as not bursting too), the verdict is the run's, not bursting: the orbit's
    instability (or the collapse of the short start-up run) said only that the board
    does not hold that orbit, not that it bursts. The common-base set's cb003 is the case: its tank-mode orbit is unstable because the collector choke's mode
    (23.4 kHz) invades it, and the two modes lock 5:1 into a waveform that repeats at the
    choke mode's period (ngspice: steady; the run: +0.37 %, no gaps). ``solve`` and
    ``evaluate`` do not make the run (tens of seconds a design) and keep the orbit's
    verdict (README, "Circuit-aware model"). A run that shows no carrier (it failed, or
    collapsed and stays quiet: cs002 of the common-source set) is not taken. A design that
    starts but has no steady solution (its start-up pole pair meets the real axis: a
    relaxation, six designs of the series-capacitor Hartley set) gets the same run, scaled
    by the tank's ideal frequency, and its state is the run's; so does a design whose
    orbit shooting did not converge (its figures would be the describing function's),
    keeping the start-up run's verdict (:func:`picker.circuit.burst_carrier.run_hint`).
    So does a design the describing function calls steady with a waveform far from a sine
    and no orbit shot (:func:`picker.circuit.burst_carrier.distorted`: the held-out set's
    h010, called steady at +12 % where ngspice's board bursts); its verdict is the run's."""
    nets = [Network.build(d.topo, d.values, d.stray, d.params) for d in designs]
    orbits = board_orbits(nets)
    out = []
    warped = []  # the describing function outside its premise (burst_carrier.distorted)
    for d, orb in zip(designs, orbits, strict=True):
        topo = d.topo
        st = steady_state(topo, d.values, d.stray, d.params)
        starts = bool(np.asarray(st.starts))
        o = orb[0]
        warped.append(
            distorted(o is not None, starts, bool(np.asarray(st.bursting)), st.harmonics_dbc)
        )
        out.append(
            ModelAnswer(
                starts=starts,
                bursting=(bool(np.asarray(st.bursting)) if o is None else o.bursting) and starts,
                f_hz=float(np.asarray(st.f_hz)) if o is None else o.f_hz,
                f_ideal_hz=float(topo.frequency(d.values, d.stray)),
                amplitude_v=float(np.asarray(st.amplitude_v)) if o is None else o.amplitude_v,
                margin=float(np.asarray(st.margin)),
                startup_time_s=float(np.asarray(st.startup_time_s)),
            )
        )
    converged = [orb[0] is None or orb[0].converged for orb in orbits]
    hints = [
        run_hint(a.starts, a.bursting, a.f_hz, a.f_ideal_hz, converged=c, warped=w)
        for a, c, w in zip(out, converged, warped, strict=True)
    ]
    runs = network_carriers(
        nets,
        [h is not None for h in hints],
        [h or 0.0 for h in hints],
        [not math.isfinite(a.f_hz) for a in out],
    )
    for k, r in enumerate(runs):
        if r is not None and math.isfinite(r.f_hz):
            out[k] = replace(
                out[k],
                f_hz=r.f_hz,
                amplitude_v=r.amplitude_v,
                bursting=run_bursts(
                    out[k].bursting, not math.isfinite(out[k].f_hz), r, warped=warped[k]
                ),
                f_low_hz=r.f_low_hz if r.split else math.nan,
                f_high_hz=r.f_high_hz if r.split else math.nan,
                startup_time_s=r.startup_time_s,
            )
    return out


@dataclass(frozen=True)
class Accuracy:
    """The figures of :func:`accuracy` (shares are fractions; errors are relative).

    ``clapp_worst_unburst`` is the Clapp figure over the Clapps ngspice does not record as
    bursting (``clapp_unburst`` of them). A burster's carrier in the model is read from
    its own circuit run from rest (:mod:`picker.circuit.burst_carrier`), and bursts are
    sensitive to rounding: the same code read the main set's d098 +1.36 % on one machine
    and -0.09 % on another (d087 within 0.21 % and +0.53 %), and a kick 10⁻⁹ larger moves
    d087's reading from +0.53 to +0.82 %. The model now takes the median of seven runs
    whose kicks differ by parts per million (:data:`picker.circuit.burst_carrier.KICKS`):
    d098 +0.25 % and d087 +0.30 % on the second machine, but with every kick larger by
    10⁻⁹ d087's median read +0.54 % (``python -m picker.bench.burst``). So the Clapp
    target over the bursters is not a figure one machine's run can settle to 0.5 %; the
    one over the others is.

    ``split`` counts the designs whose runs from rest split (their carriers span more
    than :data:`picker.circuit.burst_carrier.SPLIT`, so the model gives a range, not one
    figure), and ``split_covered`` those of them whose ngspice carrier lies within 2 % of
    that range (the frequency target's tolerance, taken at both ends). The shares above
    still score the median run.

    ``freq_within_2pct_span`` and ``freq_median_span`` score the same model figure
    against the span of ngspice's own readings of each record (its reading and those of
    its reruns, :func:`picker.circuit.reference_spread.span_error`): the frequency
    target over every design that oscillates, with each reference taken with the
    uncertainty ngspice shows for it. Where every record is settled or was not run
    again, the span is within 1 % of the record's reading.

    ``startup_time_within_30pct`` and ``startup_time_median_error`` compare the model's
    start-up time with the record's (:attr:`ModelAnswer.startup_time_s`: the describing
    function's, or the run from rest's where the design takes one) over the ``timed``
    designs where both have one (the record has none where the envelope is there before
    the kick, a relaxation's first pulse; the run from rest has none where its envelope
    never settles to a level it then reaches). No target of issue 11 covers it; ±30 % is
    the amplitude's tolerance, taken here too (a choice of the project, no source).
    """

    designs: int
    oscillating: int
    freq_within_2pct: float
    freq_median_error: float
    freq_worst_error: float
    startup_right: float
    burst_precision: float
    burst_recall: float
    bursting: int
    amplitude_within_30pct: float
    steady: int
    settled: int
    freq_within_2pct_settled: float
    freq_median_settled: float
    clapp_worst_error: float
    clapp_oscillating: int
    clapp_worst_unburst: float
    clapp_unburst: int
    ideal_closer: int
    split: int = 0
    split_covered: int = 0
    freq_within_2pct_span: float = math.nan
    freq_median_span: float = math.nan
    timed: int = 0
    startup_time_within_30pct: float = math.nan
    startup_time_median_error: float = math.nan


def _ratio(num: int, den: int) -> float:
    return num / den if den else math.nan


def accuracy(
    topologies: Sequence[str], model: Sequence[ModelAnswer], sim: Sequence[Mapping[str, Any]]
) -> Accuracy:
    """Compare the model's answers with ngspice's (``sim``: the ``ngspice`` records of the
    reference file: ``state``, ``f_hz``, ``amplitude_v``), design by design."""
    if not len(topologies) == len(model) == len(sim):
        raise ValueError("expected one topology, model answer and ngspice answer per design")
    states = [str(s["state"]) for s in sim]
    osc = [s != "none" for s in states]
    errors = []
    settled = []
    spans = []  # the errors against the span of ngspice's readings
    clapp = []
    clapp_unburst = []  # the Clapps ngspice does not record as bursting
    ideal_closer = split = covered = 0
    timing = []  # start-up time errors where both the model and the record have one
    for topo, m, s, o in zip(topologies, model, sim, osc, strict=True):
        if not o:
            continue
        f_sim = float(s["f_hz"])
        t_sim = s.get("startup_time_s")
        if m.starts and t_sim is not None and math.isfinite(m.startup_time_s):
            if t_sim > 0 and m.startup_time_s > 0:
                timing.append(abs(m.startup_time_s / float(t_sim) - 1.0))
        if m.starts and math.isfinite(m.f_low_hz):
            split += 1
            covered += m.f_low_hz / 1.02 <= f_sim <= m.f_high_hz * 1.02
        err = abs(m.f_hz / f_sim - 1.0) if m.starts and math.isfinite(m.f_hz) else math.inf
        errors.append(err)
        spans.append(span_error(m.f_hz, s) if m.starts else math.inf)
        # a record not run again (steady, its two steps agreed) counts as settled; one
        # that wants a rerun and has none does not
        if not wants_rerun(s) or drift(s) <= SETTLED:
            settled.append(err)
        if topo == "clapp":
            clapp.append(err)
            if s["state"] != "bursting":
                clapp_unburst.append(err)
        if abs(m.f_ideal_hz / f_sim - 1.0) < err:
            ideal_closer += 1
    e = np.array(errors)
    et = np.array(timing)
    es = np.array(settled)
    esp = np.array(spans)
    right = sum(m.starts == o for m, o in zip(model, osc, strict=True))
    sim_burst = [s == "bursting" for s in states]
    tp = sum(m.bursting and b for m, b in zip(model, sim_burst, strict=True))
    fp = sum(m.bursting and not b for m, b in zip(model, sim_burst, strict=True))
    fn = sum(b and not m.bursting for m, b in zip(model, sim_burst, strict=True))
    amp_ok = steady = 0
    for m, s, st in zip(model, sim, states, strict=True):
        if st != "steady":
            continue
        steady += 1
        a_sim = float(s["amplitude_v"])
        if m.starts and abs(m.amplitude_v / a_sim - 1.0) <= 0.30:
            amp_ok += 1
    return Accuracy(
        designs=len(sim),
        oscillating=int(e.size),
        freq_within_2pct=_ratio(int(np.count_nonzero(e <= 0.02)), int(e.size)),
        freq_median_error=float(np.median(e)) if e.size else math.nan,
        freq_worst_error=float(e.max()) if e.size else math.nan,
        startup_right=_ratio(int(right), len(sim)),
        burst_precision=_ratio(int(tp), int(tp + fp)),
        burst_recall=_ratio(int(tp), int(tp + fn)),
        bursting=int(sum(sim_burst)),
        amplitude_within_30pct=_ratio(amp_ok, steady),
        steady=steady,
        settled=int(es.size),
        freq_within_2pct_settled=_ratio(int(np.count_nonzero(es <= 0.02)), int(es.size)),
        freq_median_settled=float(np.median(es)) if es.size else math.nan,
        clapp_worst_error=max(clapp) if clapp else math.nan,
        clapp_oscillating=len(clapp),
        clapp_worst_unburst=max(clapp_unburst) if clapp_unburst else math.nan,
        clapp_unburst=len(clapp_unburst),
        ideal_closer=ideal_closer,
        split=split,
        split_covered=covered,
        freq_within_2pct_span=_ratio(int(np.count_nonzero(esp <= 0.02)), int(esp.size)),
        freq_median_span=float(np.median(esp)) if esp.size else math.nan,
        timed=int(et.size),
        startup_time_within_30pct=_ratio(int(np.count_nonzero(et <= 0.30)), int(et.size)),
        startup_time_median_error=float(np.median(et)) if et.size else math.nan,
    )


#: The targets of picker issue 11 (figure, comparison, value).
TARGETS: dict[str, tuple[str, float]] = {
    "freq_within_2pct": (">=", 0.95),
    "freq_median_error": ("<=", 0.003),
    "startup_right": (">=", 0.98),
    "burst_precision": (">=", 0.8),
    "burst_recall": (">=", 0.8),
    "amplitude_within_30pct": (">=", 0.90),
    "clapp_worst_error": ("<=", 0.005),
    # the frequency targets again, each reference taken as the span of ngspice's readings
    "freq_within_2pct_span": (">=", 0.95),
    "freq_median_span": ("<=", 0.003),
}


def meets(acc: Accuracy, name: str) -> bool:
    """Whether figure ``name`` of ``acc`` meets its target in :data:`TARGETS`."""
    op, target = TARGETS[name]
    x = float(getattr(acc, name))
    if not math.isfinite(x):
        return False
    return x >= target if op == ">=" else x <= target


def accuracy_table(acc: Accuracy) -> str:
    """The figures as a plain-text table (figure, measured, target, met)."""

    def pct(x: float) -> str:
        return "-" if not math.isfinite(x) else f"{100 * x:.1f} %"

    def num(x: float) -> str:
        return "-" if not math.isfinite(x) else f"{x:.2f}"

    rows = [
        (
            f"frequency within 2 % ({acc.oscillating} oscillating)",
            pct(acc.freq_within_2pct),
            "freq_within_2pct",
        ),
        ("frequency error, median", pct(acc.freq_median_error), "freq_median_error"),
        ("frequency error, worst", pct(acc.freq_worst_error), None),
        (
            f"within 2 %, settled references ({acc.settled})",
            pct(acc.freq_within_2pct_settled),
            None,
        ),
        ("frequency error, median, settled", pct(acc.freq_median_settled), None),
        ("within 2 % of ngspice's span", pct(acc.freq_within_2pct_span), "freq_within_2pct_span"),
        ("frequency error to that span, median", pct(acc.freq_median_span), "freq_median_span"),
        (f"start-up right ({acc.designs} designs)", pct(acc.startup_right), "startup_right"),
        (
            f"bursting precision ({acc.bursting} burst in ngspice)",
            num(acc.burst_precision),
            "burst_precision",
        ),
        ("bursting recall", num(acc.burst_recall), "burst_recall"),
        (
            f"amplitude within ±30 % ({acc.steady} steady)",
            pct(acc.amplitude_within_30pct),
            "amplitude_within_30pct",
        ),
        (
            f"start-up time within ±30 % ({acc.timed} timed)",
            pct(acc.startup_time_within_30pct),
            None,
        ),
        ("start-up time error, median", pct(acc.startup_time_median_error), None),
        (
            f"Clapp worst frequency error ({acc.clapp_oscillating})",
            pct(acc.clapp_worst_error),
            "clapp_worst_error",
        ),
        (
            f"Clapp worst, bursters left out ({acc.clapp_unburst})",
            pct(acc.clapp_worst_unburst),
            None,
        ),
        ("ideal formula closer than the model", str(acc.ideal_closer), None),
    ]
    if acc.split:
        # printed only where a set has such designs, so other sets' tables read as before
        rows.append(
            (
                f"runs split, ngspice within 2 % of range ({acc.split})",
                str(acc.split_covered),
                None,
            )
        )
    lines = [f"{'figure':48} {'measured':>10} {'target':>10}  met"]
    for label, value, key in rows:
        if key is None:
            lines.append(f"{label:48} {value:>10} {'':>10}")
            continue
        op, target = TARGETS[key]
        shown = num(target) if key.startswith("burst") else pct(target)
        lines.append(
            f"{label:48} {value:>10} {op + ' ' + shown:>10}  {'yes' if meets(acc, key) else 'no'}"
        )
    return "\n".join(lines)
