"""When nothing is feasible: the nearest misses and what to relax.

Two relaxed searches tell the designer which constraint binds:

* the frequency window is widened step by step (feedback window kept) until
  designs appear: those closest to the window are the frequency misses, and
  the widening they need is the advice;
* the feedback window is dropped (frequency window kept): designs found are
  feedback misses, and the beta range they need is the advice.

A denser series is suggested for every position whose series has one.
"""

from __future__ import annotations

import numpy as np

from picker import series as series_mod
from picker.search import Problem, search
from picker.units import format_percent

_MISSES = 5


def _miss(problem, designs, sel, failed_fn):
    from picker.api import Miss

    out = []
    for i in sel:
        vals = {p: float(problem.tables[p].values[designs.idx[p][i]]) for p in designs.idx}
        f = float(designs.f_nominal[i])
        b = float(designs.beta[i])
        out.append(Miss(vals, f, b, failed_fn(f, b)))
    return out


def explain_infeasible(spec, problem: Problem):
    """Nearest misses (list of Miss) and advice lines for an infeasible spec."""
    misses = []
    advice = []
    f_lo, f_hi = problem.f_min, problem.f_max
    centre = np.sqrt(f_lo * f_hi)
    half = np.log(f_hi / centre)

    def freq_failed(f, b):
        if f < f_lo:
            return f"frequency {format_percent(1 - f / f_lo)} below the window"
        return f"frequency {format_percent(f / f_hi - 1)} above the window"

    k = 1.0
    while half * k < np.log(2.0):
        k *= 2.0
        lo, hi = centre * np.exp(-half * k), centre * np.exp(half * k)
        relaxed = Problem(
            problem.topology,
            problem.tables,
            lo,
            hi,
            problem.beta_min,
            problem.beta_max,
            problem.parasitics,
        )
        d = search(relaxed, max_designs=2_000_000)
        if len(d):
            dist = np.abs(np.log(d.f_nominal / centre))
            sel = np.lexsort((np.arange(len(d)), dist))[:_MISSES]
            misses += _miss(problem, d, sel, freq_failed)
            need = float(np.max(np.abs(d.f_nominal[sel[:1]] / spec.frequency.target - 1)))
            advice.append(
                f"widen the frequency window to about ±{format_percent(need * 1.01)} "
                "(the closest design in the feedback window)"
            )
            break
    relaxed = Problem(problem.topology, problem.tables, f_lo, f_hi, 1e-12, 1e12, problem.parasitics)
    d = search(relaxed, max_designs=2_000_000)
    if len(d):
        b = d.beta
        dist = np.where(
            b < problem.beta_min, np.log(problem.beta_min / b), np.log(b / problem.beta_max)
        )
        sel = np.lexsort((np.arange(len(d)), dist))[:_MISSES]

        def beta_failed(f, beta):
            side = "below" if beta < problem.beta_min else "above"
            return f"feedback fraction {beta:.3g} {side} the window {problem.beta_min:g}..{problem.beta_max:g}"

        misses += _miss(problem, d, sel, beta_failed)
        bb = float(b[sel[0]])
        lo_b, hi_b = min(problem.beta_min, bb), max(problem.beta_max, bb)
        advice.append(f"widen the feedback window to {lo_b:.3g}..{hi_b:.3g}")
    for pos, part in spec.parts.items():
        if part.series:
            denser = series_mod.denser(part.series)
            if denser:
                advice.append(f"use a denser series for {pos} ({denser} instead of {part.series})")
    if not misses:
        advice.append("widen the part ranges: no combination comes near the target")
    return misses, advice
