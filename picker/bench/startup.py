"""Benchmark of the start-up run from rest (prints figures; ``python -m picker.bench.startup``).

The start-up run (:mod:`picker.circuit.startup_run`, (O3) of
:mod:`picker.circuit.nominal_orbit`) integrates a design's own circuit from its DC point
for a few bias time constants, to see whether the oscillation collapses on its way to a
locally stable orbit (hard squegging). The pipeline takes it on the bjt designs whose
describing function finds the transistor saturated and whose orbit is stable or was not
found. Measured in one run, one core (CPU seconds):

* the start-up runs of the committed validation sets' designs that take it
  (``tests/validation/large_signal.json`` and ``large_signal_holdout.json``), as
  :func:`picker.circuit.nominal_orbit.board_orbits` batches them (by netlist shape): the
  designs that took it, their CPU time inside the run, designs per second;
* the reference: the steady-state harmonic balance
  (:func:`picker.circuit.steady.steady_state`, the fast model every board gets) of the
  same designs, one call per design (each has its own amplifier); the ratio of the two;
* of a demo's top candidates (``solve`` with few boards: the ranking, not the yields'
  precision, is what is asked), how many take the start-up run and its share of the
  nominal orbits' cost for them.

The run is counted by wrapping the function the pipeline calls
(``nominal_orbit.startup_collapses``) for the benchmark's duration; nothing else changes.
"""

from __future__ import annotations

import argparse
import math
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np

from picker import api
from picker.circuit import nominal_orbit
from picker.circuit.loaded import board_state
from picker.circuit.network import Network
from picker.circuit.nominal_orbit import board_orbits, nominal_orbits
from picker.circuit.startup_run import HORIZON
from picker.circuit.steady import steady_state
from picker.circuit.validation import Design, load_reference

ROOT = Path(__file__).resolve().parents[2]  # the checkout: picker/bench/ is two down
SETS = (
    ROOT / "tests" / "validation" / "large_signal.json",
    ROOT / "tests" / "validation" / "large_signal_holdout.json",
)
DEMO = ROOT / "demo_specs" / "colpitts_bjt.toml"


class _Tally:
    """The start-up runs seen while counting: designs, CPU seconds, and each design's
    horizon (s: it tells the designs apart, :func:`_horizon`)."""

    def __init__(self) -> None:
        self.designs = 0
        self.seconds = 0.0
        self.horizons: list[float] = []


@contextmanager
def _counted() -> Iterator[_Tally]:
    """Wrap ``nominal_orbit.startup_collapses`` (the pipeline's call) to time and count."""
    real: Callable[..., Any] = nominal_orbit.startup_collapses
    tally = _Tally()

    def timed(circ: Any, w: np.ndarray, top: np.ndarray, horizon_s: np.ndarray) -> Any:
        t = time.process_time()
        out = real(circ, w, top, horizon_s)
        tally.seconds += time.process_time() - t
        tally.designs += int(np.size(w))
        tally.horizons.extend(float(x) for x in np.ravel(horizon_s))
        return out

    nominal_orbit.startup_collapses = timed  # type: ignore[assignment]
    try:
        yield tally
    finally:
        nominal_orbit.startup_collapses = real  # type: ignore[assignment]


def _designs() -> list[Design]:
    return [d for path in SETS for d in load_reference(path)[0]]


def _horizon(d: Design, st: Any) -> float:
    """The start-up run's horizon of design ``d`` as the pipeline sets it (twice the
    start-up time and HORIZON bias time constants, :mod:`picker.circuit.nominal_orbit`)."""
    tau = Network.build(d.topo, d.values, d.stray, d.params).stage.relaxation_time(d.params)
    return 2.0 * float(np.nan_to_num(np.ravel(st.startup_time_s)[0])) + HORIZON * tau


def validation(designs: list[Design]) -> dict[str, float]:
    """Start-up runs of the validation designs that take them, beside their harmonic balance."""
    nets = [Network.build(d.topo, d.values, d.stray, d.params) for d in designs]
    with _counted() as tally:
        board_orbits(nets)
    # the reference: the harmonic balance of the designs that took the run, one call each
    took = np.array(tally.horizons)
    hb_s, hb_n = 0.0, 0
    for d in designs:
        t = time.process_time()
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            st = steady_state(d.topo, d.values, d.stray, d.params)
        spent = time.process_time() - t
        if took.size and np.any(np.isclose(took, _horizon(d, st), rtol=1e-9, atol=0.0)):
            hb_s, hb_n = hb_s + spent, hb_n + 1
    hb = hb_s / hb_n if hb_n else math.nan
    per = tally.seconds / tally.designs if tally.designs else math.nan
    print(
        f"start-up run on the validation sets: {tally.designs} of {len(designs)} designs take "
        f"it, {tally.seconds:.2f} s CPU, {per:.3f} s per design "
        f"({1 / per if per > 0 else math.nan:.2f} designs/s); steady-state harmonic balance of "
        f"the same {hb_n} designs {hb * 1e3:.1f} ms per design (one call each): the start-up "
        f"run costs {per / hb:,.0f}x the harmonic balance per design"
    )
    return {"designs": tally.designs, "seconds_per_design": per, "hb_seconds_per_design": hb}


def demo(path: Path = DEMO, top: int = 8, samples: int = 400) -> dict[str, float]:
    """How many of a demo's top candidates take the start-up run, and its cost there."""
    spec = api.load_spec(path)
    res = api.solve(spec, top=top, samples=samples)
    pb = api.build_problem(spec)
    params = spec.amplifier.to_params(spec.parts) if spec.amplifier is not None else None
    if params is None or not res.candidates:
        print(f"{path.name}: no amplifier or no candidates; nothing takes the start-up run")
        return {"candidates": len(res.candidates), "designs": 0}
    vals = {p: np.array([c.values[p] for c in res.candidates]) for p in pb.topology.positions}
    t = time.process_time()
    with _counted() as tally:
        got = nominal_orbits(pb.topology, vals, pb.parasitics, params)
    total = time.process_time() - t
    orbits = sum(o is not None for o in got)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        st = board_state(pb.topology, vals, pb.parasitics, params)
    saturated = int(np.sum(np.asarray(st.starts) & np.asarray(st.overdriven)))
    print(
        f"{path.name}, top {len(res.candidates)} candidates: {saturated} saturated by the "
        f"describing function, {orbits} get a nominal orbit, "
        f"{tally.designs} take the start-up run ({tally.seconds:.2f} s CPU, "
        f"{tally.seconds / total if total > 0 else 0:.0%} of the nominal orbits' "
        f"{total:.2f} s)"
    )
    return {"candidates": len(res.candidates), "designs": tally.designs, "seconds": tally.seconds}


def main(paths: tuple[Path, ...] = (DEMO,), top: int = 8, sets: bool = True) -> dict[str, float]:
    """The measurements (the validation sets' unless ``sets`` is False; each demo's top);
    returns the figures."""
    out: dict[str, float] = validation(_designs()) if sets else {}
    for path in paths:
        out[f"demo_designs:{path.name}"] = demo(path, top)["designs"]
    return out


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument(
        "--demo", type=Path, nargs="+", default=[DEMO], help="demo specs whose top is counted"
    )
    ap.add_argument("--top", type=int, default=8, help="candidates of each demo")
    ap.add_argument("--no-sets", action="store_true", help="skip the validation sets")
    a = ap.parse_args()
    main(tuple(a.demo), a.top, not a.no_sets)
