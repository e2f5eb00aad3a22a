"""Benchmark: what the production view costs in a solve.

Run: ``python -m picker.bench.production``. An invented E96/E24 space at two
windows and the two demo specs, each solved
at 25 °C only and with ``temperature = ["-40 °C", "85 °C"]`` (5 points, plus
25 °C: 6 check temperatures) and mixed dielectrics, with the production
extras (drivers, buy-tighter, plan, trimmer); and a precision run. Prints wall
times (best of ``REPEAT``), the designs checked and the boards simulated.
Figures vary with machine load.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path
from typing import Any

from picker.api import SolveResult, load_spec, solve, spec_from_dict
from picker.spec.model import Spec

ROOT = Path(__file__).resolve().parents[2]  # the checkout: picker/bench/ is two down
REPEAT = 3

DRIFT: dict[str, Any] = {
    "parts": {
        "C1": {"dielectric": "C0G"},
        "C2": {"dielectric": "X7R"},
        "L": {"core": "ferrite"},
    },
    "yield": {"temperature": ["-40 °C", "85 °C"], "temperature_points": 5, "target": "99 %"},
}


def _time(spec: Spec, **kw: Any) -> tuple[float, SolveResult]:
    """Best wall time of ``REPEAT`` solves, and the last result."""
    best = float("inf")
    for _ in range(REPEAT):
        t0 = time.perf_counter()
        result = solve(spec, **kw)
        best = min(best, time.perf_counter() - t0)
    return best, result


#: A larger invented space: C1, C2 in E96 and L in E24 at 1 MHz (window set in main).
LARGE: dict[str, Any] = {
    "topology": "colpitts",
    "frequency": {"target": "1 MHz", "window": "±3 %"},
    "feedback": {"min": 0.05, "max": 1.0},
    "parts": {
        "C1": {"series": "E96", "min": "100 pF", "max": "100 nF"},
        "C2": {"series": "E96", "min": "100 pF", "max": "100 nF"},
        "L": {"series": "E24", "tolerance": "2 %", "min": "1 uH", "max": "1 mH"},
    },
    "yield": {"samples": 20000, "seed": 1},
}


def main() -> None:
    """Print the figures of the module docstring."""
    for window in ("±1 %", "±3 %"):
        base = {**LARGE, "frequency": {**LARGE["frequency"], "window": window}}
        t_plain, r_plain = _time(spec_from_dict(base))
        d = {
            **base,
            "parts": {p: {**v, **DRIFT["parts"][p]} for p, v in base["parts"].items()},
            "yield": {**base["yield"], **DRIFT["yield"]},
        }
        t_drift, r_drift = _time(spec_from_dict(d))
        print(
            f"E96/E24 space at 1 MHz {window}, {r_plain.space_size:,} combinations, "
            f"{r_plain.feasible:,} feasible"
        )
        print(
            f"  25 °C only                 {t_plain * 1000:8.1f} ms  "
            f"({r_plain.screened:,} Monte Carlo checked x {r_plain.samples:,} boards, "
            f"best yield {r_plain.candidates[0].yield_.estimate:.1%})"
        )
        temps = r_drift.production.get("temperatures_c", [])
        print(
            f"  -40..85 °C, {len(temps)} temperatures {t_drift * 1000:8.1f} ms  "
            f"({r_drift.screened:,} checked x {r_drift.samples:,} boards, with extras, "
            f"best yield {r_drift.candidates[0].yield_.estimate:.1%})"
        )
    cases = [
        ("probe exciter (E12, 310 kHz)", ROOT / "demo_specs" / "probe_exciter.toml"),
        ("production exciter (1 MHz)", ROOT / "demo_specs" / "production_exciter.toml"),
    ]
    for name, path in cases:
        # 25 °C only: the same spec with its temperature range removed (drift not simulated)
        plain = load_spec(path, overrides={"yield": {"temperature": None}})
        t_plain, r_plain = _time(plain)
        t_drift, r_drift = _time(load_spec(path, overrides=DRIFT))
        print(f"{name}: {r_drift.feasible:,} feasible designs")
        print(
            f"  25 °C only                 {t_plain * 1000:8.1f} ms  "
            f"({r_plain.screened:,} Monte Carlo checked x {r_plain.samples:,} boards)"
        )
        temps = r_drift.production.get("temperatures_c", [])
        print(
            f"  -40..85 °C, {len(temps)} temperatures {t_drift * 1000:8.1f} ms  "
            f"({r_drift.screened:,} checked x {r_drift.samples:,} boards, with extras)"
        )
    spec = load_spec(ROOT / "demo_specs" / "production_exciter.toml")
    for prec in (0.005, 0.002):
        t, r = _time(spec, precision=prec)
        print(
            f"production exciter, precision ±{prec:.1%}: {t * 1000:8.1f} ms, "
            f"{r.samples:,} boards per design, converged {r.production['converged']}"
        )


if __name__ == "__main__":
    argparse.ArgumentParser(
        prog="python -m picker.bench.production",
        description="What the production view costs in a solve.",
    ).parse_args()
    main()
