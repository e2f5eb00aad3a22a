"""Benchmark of ``--verify`` (prints figures; run ``python -m picker.bench.verify``).

Solves a demo spec (not timed), then times :func:`picker.api.verify.verify_result` on its
top designs at nominal and at the two tolerance corners: picker's netlists, the ngspice
transients in two parallel processes, the waveform measurement and the model beside each.
Target (picker issue 11): the top 5 at nominal and two corners in at most 20 s on 2 cores.
Needs ngspice on PATH. The default spec is ``demo_specs/colpitts_bjt.toml`` (an invented
4.9 MHz marker oscillator).
"""

from __future__ import annotations

import argparse
import os
import resource
import time
from pathlib import Path

from picker.api import load_spec, solve
from picker.api.verify import verify_result

DEMO = Path(__file__).resolve().parents[2] / "demo_specs" / "colpitts_bjt.toml"


def _cpu() -> tuple[float, float]:
    """CPU seconds (user + system) of finished child processes (ngspice) and of this one."""
    ch = resource.getrusage(resource.RUSAGE_CHILDREN)
    me = resource.getrusage(resource.RUSAGE_SELF)
    return ch.ru_utime + ch.ru_stime, me.ru_utime + me.ru_stime


def main(spec_path: Path = DEMO, count: int = 5) -> float:
    """Print the timing of ``--verify`` on the top ``count`` designs; return the seconds."""
    spec = load_spec(spec_path)
    result = solve(spec, top=count)
    cpu0 = _cpu()
    start = time.perf_counter()
    checks = verify_result(result, count=count)
    seconds = time.perf_counter() - start
    ngspice, here = (b - a for a, b in zip(cpu0, _cpu(), strict=True))
    boards = [b for c in checks for b in c.boards]
    cycles = sum(b.cycles for b in boards)
    load = os.getloadavg()[0]
    print(
        f"--verify of the top {len(checks)} of {spec_path.name} at nominal and two corners: "
        f"{len(boards)} transients ({cycles:,} carrier periods in all), 2 processes: "
        f"{seconds:.1f} s wall (target <= 20 s on 2 cores; load average {load:.1f})"
    )
    print(
        f"  CPU: ngspice {ngspice:.1f} s, measurement and model {here:.1f} s; on two free "
        f"cores about {max(ngspice / 2, (ngspice + here) / 2):.1f} s"
    )
    for c in checks:
        print(f"  design {c.rank}: {c.verdict}")
    return seconds


def cli() -> None:
    ap = argparse.ArgumentParser(prog="python -m picker.bench.verify", description=__doc__)
    ap.add_argument("spec", nargs="?", type=Path, default=DEMO, help="spec with [amplifier]")
    ap.add_argument("--top", type=int, default=5, help="designs to check (default 5)")
    args = ap.parse_args()
    main(args.spec, args.top)


if __name__ == "__main__":
    cli()
