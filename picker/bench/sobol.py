"""Benchmark: yield error of plain random vs scrambled Sobol sampling at equal samples.

Run: ``python -m picker.bench.sobol``. Known-answer cases as in
tests/test_sampling.py: (1) one uniform ±5 % input, closed-form yield 0.70;
(2) two uniform ±5 % inputs (L and C), yield from scipy.integrate.quad;
(3) a Colpitts tank, L, C1, C2 uniform ±5 %, yield from nested scipy.integrate.quad
with the integrand's kinks given (the L integral in closed form). Prints the RMS error over repetitions and the time per run.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import integrate

from picker.core.sampling import compare_methods

T = 0.05


def main() -> None:
    """Print the RMS errors of the module docstring's three cases."""
    a, b = -0.03, 0.04

    def one(u: np.ndarray) -> np.ndarray:
        d = T * (2 * u[:, 0] - 1)
        return (d >= a) & (d <= b)

    z_lo, z_hi = 0.97, 1.04

    def cond(x: float) -> float:
        lo, hi = max(z_lo / (1 + x) - 1, -T), min(z_hi / (1 + x) - 1, T)
        return max(hi - lo, 0.0) / (2 * T)

    two_exact, _ = integrate.quad(lambda x: cond(x) / (2 * T), -T, T, limit=200, epsabs=1e-13)

    def two(u: np.ndarray) -> np.ndarray:
        d = T * (2 * u - 1)
        z = (1 + d[:, 0]) * (1 + d[:, 1])
        return (z >= z_lo) & (z <= z_hi)

    def three(u: np.ndarray) -> np.ndarray:
        d = T * (2 * u - 1)
        c1, c2, ll = 1 + d[:, 0], 4 * (1 + d[:, 1]), 1 + d[:, 2]
        x = ll * c1 * c2 / (c1 + c2) / 0.8  # relative L·C_eff
        return (x >= 0.96) & (x <= 1.03)

    def cond3(d2: float, d1: float) -> float:
        # innermost over L in closed form: L must lie in [0.96, 1.03]·0.8/Cs
        cs = (1 + d1) * 4 * (1 + d2) / ((1 + d1) + 4 * (1 + d2))
        lo, hi = max(0.96 * 0.8 / cs - 1, -T), min(1.03 * 0.8 / cs - 1, T)
        return max(hi - lo, 0.0) / (2 * T) / (2 * T) ** 2

    def kinks(d1: float) -> list[float]:
        # d2 where an L limit meets ±T: Cs = c with c = 0.8·{0.96, 1.03}/(1 ± T), and
        # Cs = 4(1+d1)(1+d2)/((1+d1) + 4(1+d2)) solved for d2
        pts = []
        for c in (0.8 * z / (1 + s) for z in (0.96, 1.03) for s in (-T, T)):
            if 1 + d1 > c:
                d2 = c * (1 + d1) / (4 * (1 + d1 - c)) - 1
                if -T < d2 < T:
                    pts.append(d2)
        return sorted(pts)

    def inner(d1: float) -> float:
        # nested quad with the kinks given: dblquad alone stalls near 1e-4 on them
        return integrate.quad(
            cond3, -T, T, args=(d1,), points=kinks(d1) or None, epsabs=1e-13, limit=200
        )[0]

    ref3, _ = integrate.quad(inner, -T, T, epsabs=1e-12, limit=400)
    ns = [2**10, 2**12, 2**14, 2**16]
    for name, ind, exact, k in (
        ("1 input, closed form", one, (b - a) / (2 * T), 1),
        ("2 inputs, quad", two, two_exact, 2),
        ("Colpitts L, C1, C2, nested quad", three, ref3, 3),
    ):
        t0 = time.perf_counter()
        r = compare_methods(ind, exact, k, ns, reps=20, seed=1)
        dt = time.perf_counter() - t0
        print(f"{name}: exact yield {exact:.6f}  ({dt:.2f} s for 2 x 20 x {len(ns)} runs)")
        print("       n    rms(random)    rms(sobol)   ratio")
        for n, er, es in zip(r["n"], r["random"], r["sobol"], strict=True):
            print(f"  {n:6d}    {er:.2e}       {es:.2e}    {er / es:6.1f}")


if __name__ == "__main__":
    argparse.ArgumentParser(
        prog="python -m picker.bench.sobol",
        description="Yield error of random against Sobol sampling.",
    ).parse_args()
    main()
