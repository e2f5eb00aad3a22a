"""Benchmark of ``--verify`` (prints figures; run ``python -m picker.bench.verify``).

Solves a demo spec (timed: the reference measured in the same run, so that a figure taken
on a busy machine can be read against it), then times
:func:`picker.api.verify.verify_result` on its top designs at nominal and at the two
tolerance corners ``--repeat`` times: the model for every board in one vectorised call,
picker's netlists, the ngspice transients in two parallel processes, the waveform
measurement. With ``--compare`` it also times the same boards with the transient length
used before (:func:`picker.circuit.netlist.transient_plan`, the validation set's length).
Each figure is printed with the load average over the last minute at its end (the machine
may be shared), and with the CPU seconds of ngspice and of this process, which the load
does not change much.

Target (picker issue 11): the top 5 at nominal and two corners in at most 20 s on 2 cores.
Needs ngspice on PATH. The default spec is ``demo_specs/colpitts_bjt.toml`` (an invented
4.9 MHz marker oscillator).
"""

from __future__ import annotations

import argparse
import os
import resource
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

from picker.api import load_spec, solve
from picker.api.problem import parasitics_of
from picker.api.verify import corner_values, verify_result
from picker.circuit.netlist import transient_plan, write_netlist
from picker.circuit.ngspice import simulate
from picker.circuit.verify import WORKERS
from picker.tank.board import board_values

DEMO = Path(__file__).resolve().parents[2] / "demo_specs" / "colpitts_bjt.toml"


def _cpu() -> tuple[float, float]:
    """CPU seconds (user + system) of finished child processes (ngspice) and of this one."""
    ch = resource.getrusage(resource.RUSAGE_CHILDREN)
    me = resource.getrusage(resource.RUSAGE_SELF)
    return ch.ru_utime + ch.ru_stime, me.ru_utime + me.ru_stime


def _timed(fn: Callable[[], Any]) -> tuple[Any, float, float, float, float]:
    """``fn()`` and its wall seconds, ngspice CPU s, own CPU s, and the load average after."""
    cpu0 = _cpu()
    start = time.perf_counter()
    out = fn()
    wall = time.perf_counter() - start
    ngspice, here = (b - a for a, b in zip(cpu0, _cpu(), strict=True))
    return out, wall, ngspice, here, os.getloadavg()[0]


def _old_plan(result: Any, count: int) -> int:
    """The same boards with the length used before (transient_plan); returns the periods."""
    spec = result.spec
    topo, par = spec.topo, parasitics_of(spec)
    params = spec.amplifier.to_params(spec.parts)
    jobs = []
    for c in result.candidates[:count]:
        for vals in (c.values, corner_values(c, -1), corner_values(c, +1)):
            board = board_values(topo, vals, par)
            plan = transient_plan(topo, board, float(par.stray), params)
            text = write_netlist(topo, board, float(par.stray), params, cycles=plan.cycles)
            jobs.append((plan, text))

    def run(job: Any) -> None:
        plan, text = job
        simulate(text, f_hint=plan.f0, tail_start=plan.tail_start, t_kick=plan.t_kick)

    with ThreadPoolExecutor(max_workers=WORKERS) as pool:
        list(pool.map(run, jobs))
    return sum(plan.cycles for plan, _ in jobs)


def main(spec_path: Path = DEMO, count: int = 5, repeat: int = 3, compare: bool = False) -> float:
    """Print the timing of ``--verify`` on the top ``count`` designs; return the best wall s."""
    spec = load_spec(spec_path)
    result, wall, _, here, load = _timed(lambda: solve(spec, top=count))
    print(
        f"reference: picker solve {spec_path.name} (no --verify): {wall:.1f} s wall, "
        f"{here:.1f} s CPU (load average {load:.1f})"
    )
    best = float("inf")
    for k in range(repeat):
        checks, wall, ngspice, here, load = _timed(lambda: verify_result(result, count=count))
        best = min(best, wall)
        boards = [b for c in checks for b in c.boards]
        cycles = sum(b.cycles for b in boards)
        print(
            f"run {k + 1}: --verify of the top {len(checks)} at nominal and two corners: "
            f"{len(boards)} transients ({cycles:,} carrier periods), {WORKERS} processes: "
            f"{wall:.1f} s wall (target <= 20 s on 2 cores; load average {load:.1f}); CPU: "
            f"ngspice {ngspice:.1f} s, model and measurement {here:.1f} s; on two free cores "
            f"about {max(ngspice / 2, (ngspice + here) / 2):.1f} s"
        )
        if k == 0:
            for c in checks:
                print(f"  design {c.rank}: {c.verdict}")
    if compare:
        cycles, wall, ngspice, here, load = _timed(lambda: _old_plan(result, count))
        print(
            f"before (transient_plan's length): {cycles:,} carrier periods, {wall:.1f} s wall "
            f"(load average {load:.1f}); CPU: ngspice {ngspice:.1f} s, measurement {here:.1f} s"
        )
    return best


def cli() -> None:
    ap = argparse.ArgumentParser(prog="python -m picker.bench.verify", description=__doc__)
    ap.add_argument("spec", nargs="?", type=Path, default=DEMO, help="spec with [amplifier]")
    ap.add_argument("--top", type=int, default=5, help="designs to check (default 5)")
    ap.add_argument("--repeat", type=int, default=3, help="timed runs (default 3)")
    ap.add_argument(
        "--compare", action="store_true", help="also time the length used before (reference)"
    )
    args = ap.parse_args()
    main(args.spec, args.top, args.repeat, args.compare)


if __name__ == "__main__":
    cli()
