"""Benchmark: peak memory of a whole solve on the largest spaces the limits accept.

Two specs sit just inside the default limits of ``[search]``:

* **feasible**: a Clapp tank (C1, C2, C3 in E96 over 1 pF-1 µF, L in E24 over
  1-10 µH, 10 MHz ±1.25 %) whose feasible set is close to ``max_designs``
  (5,000,000): the screen and the Monte Carlo see the most designs;
* **outer**: a Clapp tank in E192 over 1 pF-1 mF and 1 nH-10 mH, feedback
  0.01-1, 10 MHz ±0.001 %: its outer grid is close to ``max_combinations``
  (10^9), the longest search accepted (``--quick``: a tenth of it).

Each runs :func:`picker.api.solve` end to end in a fresh process (so the peak is
its own) with the spec's defaults (20,000 boards, 200 designs checked) and
prints the feasible count, the time, the peak memory traced by ``tracemalloc``
(numpy reports its buffers to it) and the process's peak resident set size
(``resource.getrusage``). Figures are printed, never asserted.

A second part (``--samples-max``, also run by default) measures the
resident peak of the command ``picker solve DEMO -f json`` on each bundled
demo spec that has no ``[amplifier]`` (the loaded model is left out: at the
maximum it runs for hours), once at the spec's default samples and once with
``--samples`` at the maximum the spec accepts (10,000,000), each in a fresh
process (its own peak, from ``os.wait4``), side by side in the same run. The
Monte Carlo streams its boards in batches (:class:`picker.core.sampling.RandomRows`),
so the two should be close; the drivers and the histogram use a bounded
subsample of the run (:data:`picker.production.figures.EXTRAS_ROWS` rows). Beside
them, the probe demo with ``--precision`` at a half-width so small it is never
reached (:data:`TINY_PRECISION`: the option accepts any value above 0), so the
top-up runs to ``[yield] max_samples``.

Run: ``python -m picker.bench.memory [--quick] [--samples-max [N]] [--demo NAME]``.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path
from typing import Any

from picker import api
from picker.core.search import estimate_designs
from picker.errors import PickerError
from picker.spec.model import YieldSpec

#: The bundled demo specs (a source checkout's ``demo_specs/``).
DEMOS = Path(__file__).resolve().parents[2] / "demo_specs"


def samples_maximum() -> int:
    """The largest ``[yield] samples`` the spec accepts (its ``le`` bound)."""
    for m in YieldSpec.model_fields["samples"].metadata:
        if hasattr(m, "le"):
            return int(m.le)
    raise RuntimeError("[yield] samples has no upper bound")  # pragma: no cover


def demo_specs(names: list[str] | None = None) -> list[Path]:
    """The demo specs that load on their own and have no ``[amplifier]``."""
    out = []
    for path in sorted(DEMOS.glob("*.toml")):
        if names and path.stem not in names:
            continue
        try:
            spec = api.load_spec(path)
        except (PickerError, ValueError):  # a plan, or a base spec a plan completes
            continue
        if spec.amplifier is None:
            out.append(path)
    return out


#: ``--precision`` for the smallest-precision figure: the option accepts any half-width
#: above 0, and one this small is never reached, so the run goes to ``[yield] max_samples``.
TINY_PRECISION = "0.0001%"


def command_peak(path: Path, samples: int | None, extra: tuple[str, ...] = ()) -> dict[str, Any]:
    """Run ``picker solve PATH -f json [--samples N] [EXTRA]`` in a child; its wall time and
    peak RSS."""
    cmd = [sys.executable, "-m", "picker", "solve", str(path), "-f", "json", *extra]
    if samples is not None:
        cmd += ["--samples", str(samples)]
    t = time.perf_counter()
    child = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(child.pid, 0)  # this child's own rusage
    seconds = time.perf_counter() - t
    err = child.stderr.read().decode() if child.stderr else ""
    child.returncode = os.waitstatus_to_exitcode(status)
    if child.returncode not in (0, 1):
        raise RuntimeError(f"{' '.join(cmd)} exited {child.returncode}: {err.strip()}")
    return {"seconds": seconds, "rss_mb": usage.ru_maxrss / 1024.0}


def samples_table(maximum: int, names: list[str] | None = None) -> None:
    """Print each demo's peak RSS at its default samples beside the one at ``maximum``."""
    print(
        f"picker solve DEMO -f json: peak resident memory, default samples vs --samples {maximum:,}"
    )
    for path in demo_specs(names):
        default = api.load_spec(path).yield_.samples
        a = command_peak(path, None)
        b = command_peak(path, maximum)
        print(
            f"  {path.stem:20s} {default:>9,} samples {a['rss_mb']:6.0f} MB ({a['seconds']:5.1f} s)"
            f"   {maximum:,} samples {b['rss_mb']:6.0f} MB ({b['seconds']:6.1f} s)",
            flush=True,
        )
    probe = DEMOS / "probe_exciter.toml"
    if names is None or probe.stem in names:
        c = command_peak(probe, None, ("--precision", TINY_PRECISION))
        cap = api.load_spec(probe).yield_.max_samples
        print(
            f"  {probe.stem:20s} --precision {TINY_PRECISION} (runs to max_samples, {cap:,} "
            f"boards): {c['rss_mb']:6.0f} MB ({c['seconds']:5.1f} s) (target <= 500 MB)",
            flush=True,
        )


def _spec(case: str, quick: bool) -> dict[str, Any]:
    caps = ("C1", "C2", "C3")
    if case == "feasible":
        parts = {
            c: {"series": "E96", "tolerance": "1 %", "min": "1 pF", "max": "1 uF"} for c in caps
        }
        parts["L"] = {"series": "E24", "tolerance": "5 %", "min": "1 uH", "max": "10 uH"}
        return {
            "title": "largest feasible set",
            "topology": "clapp",
            "frequency": {"target": "10 MHz", "window": "±1.25 %"},
            "feedback": {"min": 0.05, "max": 1.0},
            "parts": parts,
            "parasitics": {"stray": "3 pF"},
        }
    c_max, l_max = ("10 uF", "100 uH") if quick else ("1 mF", "10 mH")
    parts = {c: {"series": "E192", "tolerance": "1 %", "min": "1 pF", "max": c_max} for c in caps}
    parts["L"] = {"series": "E192", "tolerance": "5 %", "min": "1 nH", "max": l_max}
    return {
        "title": "largest outer grid",
        "topology": "clapp",
        "frequency": {"target": "10 MHz", "window": "±0.001 %"},
        "feedback": {"min": 0.01, "max": 1.0},
        "parts": parts,
        "parasitics": {"stray": "3 pF"},
    }


def measure(case: str, quick: bool = False) -> dict[str, Any]:
    """Solve one case in this process; returns its figures (call in a fresh process)."""
    spec = api.spec_from_dict(_spec(case, quick))
    n_outer, _ = estimate_designs(api.build_problem(spec))
    tracemalloc.start()
    t = time.perf_counter()
    result = api.solve(spec)
    seconds = time.perf_counter() - t
    _, traced = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return {
        "case": case,
        "space": result.space_size,
        "outer": n_outer,
        "feasible": result.feasible,
        "limit_designs": spec.search.max_designs,
        "limit_combinations": spec.search.max_combinations,
        "seconds": seconds,
        "traced_mb": traced / 2**20,
        "rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
    }


def main(argv: list[str] | None = None) -> None:
    """Run each case in a child process and print its figures."""
    ap = argparse.ArgumentParser(prog="python -m picker.bench.memory", description=__doc__)
    ap.add_argument("--quick", action="store_true", help="a tenth of the outer grid")
    ap.add_argument("--case", choices=("feasible", "outer"), help=argparse.SUPPRESS)
    ap.add_argument(
        "--samples-max",
        nargs="?",
        type=int,
        const=0,
        default=None,
        metavar="N",
        help="only the demo table, with --samples N (default: the maximum the spec accepts)",
    )
    ap.add_argument("--demo", action="append", help="only this demo (repeatable; file stem)")
    args = ap.parse_args(argv)
    if args.case:  # the child process
        sys.stdout.write(json.dumps(measure(args.case, args.quick)) + "\n")
        return
    if args.samples_max is None:
        _spaces(args.quick)
    samples_table(args.samples_max or samples_maximum(), args.demo)


def _spaces(quick: bool) -> None:
    """The largest spaces the ``[search]`` limits accept (module docstring)."""
    for case in ("feasible", "outer"):
        cmd = [sys.executable, "-m", "picker.bench.memory", "--case", case]
        r = subprocess.run(
            cmd + (["--quick"] if quick else []), capture_output=True, text=True, check=True
        )
        m = json.loads(r.stdout.strip().splitlines()[-1])
        print(
            f"{m['case']:8s} {m['space']:.3g} combinations, outer grid {m['outer']:,} "
            f"(limit {m['limit_combinations']:,}), {m['feasible']:,} feasible "
            f"(limit {m['limit_designs']:,})"
        )
        print(f"  solve end to end            {m['seconds']:8.1f} s")
        print(
            f"  peak memory                 {m['traced_mb']:8.1f} MB traced (numpy and Python), "
            f"{m['rss_mb']:.0f} MB process RSS"
        )


if __name__ == "__main__":  # pragma: no cover
    main()
