"""Benchmark: `picker calibrate` on a large invented measurements file (time and peak memory).

Writes N invented Colpitts units (default 200,000; known parasitics plus
100 ppm of scatter, plain SI numbers) to a temporary folder, runs
``picker calibrate FILE --topology colpitts`` (table, then JSON) in a child
process each, and prints the wall time, the child's peak resident memory and
the number of output lines. A benchmark that prints figures, not a test.

    python scripts/bench_calibrate.py [N]
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def write_units(path: Path, n: int) -> None:
    rng = np.random.default_rng(3)
    c1 = rng.choice([1.0, 1.5, 2.2], n) * 1e-9 * (1 + 0.02 * rng.uniform(-1, 1, n))
    c2 = rng.choice([4.7, 6.8, 10.0], n) * 1e-9 * (1 + 0.02 * rng.uniform(-1, 1, n))
    lv = rng.choice([150.0, 220.0, 330.0], n) * 1e-6
    cs = c1 * c2 / (c1 + c2) + 15e-12  # stray 15 pF, l_scale 0.97 (invented)
    f = 1 / (2 * np.pi * np.sqrt(lv * 0.97 * cs)) * (1 + 1e-4 * rng.standard_normal(n))
    with path.open("w", encoding="utf-8") as fh:
        fh.write("unit,C1,C2,L,frequency\n")
        for i in range(n):
            fh.write(f"U{i},{c1[i]:.6g},{c2[i]:.6g},{lv[i]:.6g},{f[i]:.9g}\n")


def run(args: list[str], folder: Path) -> tuple[float, float, int]:
    """Wall time (s), peak RSS (MB) of that one child (os.wait4) and its output lines."""
    out_path = folder / "out.txt"
    t0 = time.perf_counter()
    with out_path.open("wb") as out:
        proc = subprocess.Popen([sys.executable, "-m", "picker", *args], stdout=out)
        _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"picker exited {proc.returncode}")
    lines = out_path.read_bytes().count(b"\n")
    return wall, usage.ru_maxrss / 1024, lines  # ru_maxrss is in KiB on Linux


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 200_000
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "units.csv"
        write_units(path, n)
        size = path.stat().st_size / 1e6
        print(f"calibrate {n:,} units ({size:.1f} MB CSV), 2-core machine")
        for label, extra in (("table", []), ("json ", ["--format", "json"])):
            args = ["calibrate", str(path), "--topology", "colpitts", *extra]
            wall, peak, lines = run(args, Path(tmp))
            print(f"  {label}  {wall:6.1f} s  peak RSS {peak:6.0f} MB  {lines:,} lines out")


if __name__ == "__main__":
    main()
