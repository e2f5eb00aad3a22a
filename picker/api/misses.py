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

import math

import numpy as np

from picker.core.search import Problem, search
from picker.parts import series as series_mod
from picker.units import format_percent

_MISSES = 5


def _miss(problem, designs, sel, failed_fn):
    from picker.api.solve import Miss

    out = []
    for i in sel:
        vals = {p: float(problem.tables[p].values[designs.idx[p][i]]) for p in designs.idx}
        f = float(designs.f_nominal[i])
        b = float(designs.beta[i])
        out.append(Miss(vals, f, b, failed_fn(f, b)))
    return out


def _search_or_none(problem: Problem, max_designs: int = 2_000_000):
    """A relaxed search, or empty designs when it would be too large to run (no misses)."""
    from picker.core.search import Designs
    from picker.errors import SpecError

    try:
        return search(problem, max_designs=max_designs)
    except SpecError:
        empty = np.zeros(0, dtype=np.int32)
        return Designs({p: empty for p in problem.topology.positions}, np.zeros(0), np.zeros(0))


def explain_infeasible(spec, problem: Problem):
    """Nearest misses (list of Miss) and advice lines for an infeasible spec."""
    from picker.parts.limits import unreachable

    if (why := unreachable(problem)) is not None:
        return [], [why]  # no relaxation of the windows can help
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
        d = _search_or_none(relaxed)
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
    d = _search_or_none(relaxed)
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


def explain_loaded_infeasible(spec, problem: Problem, loaded):
    """Misses and advice when no design passes the loaded model (``[amplifier]``).

    ``loaded`` is the :class:`picker.circuit.loaded.LoadedSearch` of the spec's window.
    Designs whose loaded frequency is in the window but whose start-up margin is
    below ``amplifier.min_margin`` are "start-up margin" misses; otherwise the
    window is widened step by step (as for the ideal tank) and the designs closest
    to it by loaded frequency, margin kept, are frequency misses.
    """
    from picker.api.solve import Miss
    from picker.circuit.loaded_search import loaded_search
    from picker.errors import SpecError
    from picker.parts.limits import unreachable

    if (why := unreachable(problem)) is not None:
        return [], [why]  # the ideal tank cannot reach the window: the loaded one neither
    params = spec.amplifier.to_params(spec.parts)
    need = spec.amplifier.min_margin
    misses, advice = [], []

    def rows(designs, f_l, m, failed_fn):
        out = []
        for r in range(len(designs)):
            vals = {p: float(problem.tables[p].values[designs.idx[p][r]]) for p in designs.idx}
            out.append(Miss(vals, float(designs.f_nominal[r]), float(designs.beta[r]),
                            failed_fn(float(f_l[r]), float(m[r]))))  # fmt: skip
        return out

    if len(loaded.low_margin):
        best = float(loaded.low_margin_m[0])
        misses += rows(loaded.low_margin, loaded.low_margin_f, loaded.low_margin_m,
                       lambda f, m: f"start-up margin {m:.3g} below the minimum {need:g}")  # fmt: skip
        gain = "raise the loop gain (more bias current or a larger collector load)"
        if best > 1.0:
            gain += f" or lower amplifier.min_margin to {math.floor(best * 100) / 100:g}"
        else:
            gain += ", or use a better inductor (higher Q): none of them starts at all"
        advice.append(
            f"{loaded.in_window:,} designs run in the window but none starts with a margin of "
            f"{need:g} (best {best:.3g}): {gain}"
        )
    f_lo, f_hi = problem.f_min, problem.f_max
    centre = np.sqrt(f_lo * f_hi)
    half = np.log(f_hi / centre)
    k = 1.0
    while not misses and half * k < np.log(2.0):
        k *= 2.0
        relaxed = Problem(problem.topology, problem.tables, centre * np.exp(-half * k),
                          centre * np.exp(half * k), problem.beta_min, problem.beta_max,
                          problem.parasitics)  # fmt: skip
        try:
            ls = loaded_search(relaxed, params, min_margin=need, max_designs=2_000_000)
        except SpecError:  # too large to explore: no misses from this relaxation
            break
        if len(ls.designs):
            dist = np.abs(np.log(ls.f_loaded / centre))
            sel = np.lexsort((np.arange(len(dist)), dist))[:_MISSES]

            def failed(f, m):
                if f < f_lo:
                    return f"loaded frequency {format_percent(1 - f / f_lo)} below the window"
                return f"loaded frequency {format_percent(f / f_hi - 1)} above the window"

            misses += rows(ls.designs.take(sel), ls.f_loaded[sel], ls.margin[sel], failed)
            need_w = float(np.abs(ls.f_loaded[sel[0]] / spec.frequency.target - 1))
            advice.append(
                f"widen the frequency window to about ±{format_percent(need_w * 1.01)} "
                "(the closest design that starts, by its loaded frequency)"
            )
    for pos, part in spec.parts.items():
        if part.series:
            denser = series_mod.denser(part.series)
            if denser:
                advice.append(f"use a denser series for {pos} ({denser} instead of {part.series})")
    if not misses:
        advice.append(
            "no design near the window starts: widen the part ranges or raise the loop gain"
        )
    return misses, advice
