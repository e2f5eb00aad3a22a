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
from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np

from picker.api.results import Miss
from picker.core.search import Designs, Problem, search
from picker.errors import SpecError
from picker.parts import series as series_mod
from picker.spec.model import Spec
from picker.tank.board import board_frequency
from picker.units import format_percent, format_quantity

if TYPE_CHECKING:
    from picker.circuit.loaded_search import LoadedSearch

__all__ = ["explain_infeasible", "explain_loaded_infeasible", "reach", "unreachable"]

_MISSES = 5


def reach(problem: Problem) -> tuple[float, float]:
    """Lowest and highest nominal frequency any combination of the value tables gives, Hz.

    The tank frequency falls as any capacitor or the inductor grows (Thomson's
    formula, f = 1/(2π√(L·C_eff)), with C_eff rising in every capacitor), so
    the extremes are every part at its largest and every part at its smallest
    value. The feedback window is ignored: it can only narrow the range.
    """
    tabs = problem.tables
    lows = {p: tabs[p].values[:1] for p in problem.topology.positions}
    highs = {p: tabs[p].values[-1:] for p in problem.topology.positions}
    f_hi = float(board_frequency(problem.topology, lows, problem.parasitics)[0])
    f_lo = float(board_frequency(problem.topology, highs, problem.parasitics)[0])
    return f_lo, f_hi


def unreachable(problem: Problem) -> str | None:
    """Advice when no combination of the part ranges can reach the window at all, or None."""
    f_lo, f_hi = reach(problem)
    names = ", ".join(problem.topology.positions)
    if f_hi < problem.f_min:
        return (
            f"the part ranges cannot reach the window: the highest frequency any combination "
            f"gives is {format_quantity(f_hi, 'Hz')} (every part at its minimum), below "
            f"{format_quantity(problem.f_min, 'Hz')}; lower the minimum of {names} (or the stray)"
        )
    if f_lo > problem.f_max:
        return (
            f"the part ranges cannot reach the window: the lowest frequency any combination "
            f"gives is {format_quantity(f_lo, 'Hz')} (every part at its maximum), above "
            f"{format_quantity(problem.f_max, 'Hz')}; raise the maximum of {names}"
        )
    return None


def _miss(
    problem: Problem,
    designs: Designs,
    sel: np.ndarray,
    failed_fn: Callable[[float, float], str],
) -> list[Miss]:
    """The designs ``sel`` of ``designs`` as misses, each with what it fails."""
    out = []
    for i in sel:
        vals = {p: float(problem.tables[p].values[designs.idx[p][i]]) for p in designs.idx}
        f = float(designs.f_nominal[i])
        b = float(designs.beta[i])
        out.append(Miss(vals, f, b, failed_fn(f, b)))
    return out


def _search_or_none(problem: Problem, max_designs: int = 2_000_000) -> Designs:
    """A relaxed search, or empty designs when it would be too large to run (no misses)."""
    try:
        return search(problem, max_designs=max_designs)
    except SpecError:
        empty = np.zeros(0, dtype=np.int32)
        return Designs({p: empty for p in problem.topology.positions}, np.zeros(0), np.zeros(0))


def explain_infeasible(spec: Spec, problem: Problem) -> tuple[list[Miss], list[str]]:
    """Nearest misses (list of Miss) and advice lines for an infeasible spec."""
    if (why := unreachable(problem)) is not None:
        return [], [why]  # no relaxation of the windows can help
    misses: list[Miss] = []
    advice: list[str] = []
    f_lo, f_hi = problem.f_min, problem.f_max
    centre = np.sqrt(f_lo * f_hi)
    half = np.log(f_hi / centre)

    def freq_failed(f: float, b: float) -> str:
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

        def beta_failed(f: float, beta: float) -> str:
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


def explain_loaded_infeasible(
    spec: Spec, problem: Problem, loaded: LoadedSearch
) -> tuple[list[Miss], list[str]]:
    """Misses and advice when no design passes the loaded model (``[amplifier]``).

    ``loaded`` is the :class:`picker.circuit.loaded.LoadedSearch` of the spec's window.
    Designs whose loaded frequency is in the window but whose start-up margin is
    below ``amplifier.min_margin`` are "start-up margin" misses; otherwise the
    window is widened step by step (as for the ideal tank) and the designs closest
    to it by loaded frequency, margin kept, are frequency misses.
    """
    if (why := unreachable(problem)) is not None:
        return [], [why]  # the ideal tank cannot reach the window: the loaded one neither
    amp = spec.amplifier
    if amp is None:  # no loaded model: the ideal tank's misses
        return explain_infeasible(spec, problem)
    params = amp.to_params(spec.parts)
    need = amp.min_margin
    misses: list[Miss] = []
    advice: list[str] = []

    def rows(
        designs: Designs,
        f_l: np.ndarray,
        m: np.ndarray,
        failed_fn: Callable[[float, float], str],
    ) -> list[Miss]:
        out = []
        for r in range(len(designs)):
            vals = {p: float(problem.tables[p].values[designs.idx[p][r]]) for p in designs.idx}
            out.append(
                Miss(
                    vals,
                    float(designs.f_nominal[r]),
                    float(designs.beta[r]),
                    failed_fn(float(f_l[r]), float(m[r])),
                )
            )
        return out

    if len(loaded.low_margin):
        best = float(loaded.low_margin_m[0])
        misses += rows(
            loaded.low_margin,
            loaded.low_margin_f,
            loaded.low_margin_m,
            lambda f, m: f"start-up margin {m:.3g} below the minimum {need:g}",
        )
        gain = "raise the loop gain (more bias current or a larger collector load)"
        if best > 1.0:
            gain += f" or lower amplifier.min_margin to {math.floor(best * 100) / 100:g}"
        else:
            gain += ", or use a better inductor (higher Q): none of them starts at all"
        advice.append(
            f"{loaded.in_window:,} designs run in the window but none starts with a margin of "
            f"{need:g} (best {best:.3g}): {gain}"
        )
    u, u_f, u_m, u_starts = (
        loaded.unsteady,
        loaded.unsteady_f,
        loaded.unsteady_m,
        loaded.unsteady_starts,
    )
    if u is not None and u_f is not None and u_m is not None and u_starts is not None:
        # the window's designs that pass the small-signal start-up test but burst (or do
        # not start) in the large-signal model, nearest to running steady (lowest margin)
        # first
        def unsteady(what: str) -> Callable[[float, float], str]:
            return lambda f, m: f"start-up margin {m:.3g}, but it {what} in the large-signal model"

        for r, starts in enumerate(u_starts):
            misses += rows(
                u.take(np.array([r])),
                u_f[[r]],
                u_m[[r]],
                unsteady("bursts" if starts else "does not start"),
            )
    if loaded.not_steady:  # the large-signal model's verdict (picker.circuit.steady)
        advice.append(
            f"{loaded.not_steady:,} designs in the window pass the small-signal start-up test "
            "but burst or do not start in the large-signal model: a faster emitter (source) "
            "bypass (a smaller bypass capacitor) or a lower start-up margin steadies them"
        )
    if loaded.over_margin and amp.max_margin is not None:
        advice.append(
            f"{loaded.over_margin:,} designs run steady in the window with a start-up margin "
            f"above amplifier.max_margin ({amp.max_margin:g}): raise it, or lower the loop gain"
        )
    f_lo, f_hi = problem.f_min, problem.f_max
    centre = np.sqrt(f_lo * f_hi)
    half = np.log(f_hi / centre)
    k = 1.0
    # designs in the window that burst or do not start in the large-signal model: the
    # window is reachable and the fault is the stage (advice above), so widening it only
    # repeats the costly large-signal search on more designs of the same stage
    while not misses and not loaded.not_steady and half * k < np.log(2.0):
        k *= 2.0
        relaxed = Problem(
            problem.topology,
            problem.tables,
            centre * np.exp(-half * k),
            centre * np.exp(half * k),
            problem.beta_min,
            problem.beta_max,
            problem.parasitics,
        )
        # the loaded model (its stages import scipy.special): only with an amplifier
        from picker.circuit.loaded_search import loaded_search

        try:
            ls = loaded_search(
                relaxed, params, min_margin=need, max_margin=amp.max_margin, max_designs=2_000_000
            )
        except SpecError:  # too large to explore: no misses from this relaxation
            break
        if len(ls.designs):
            dist = np.abs(np.log(ls.f_loaded / centre))
            sel = np.lexsort((np.arange(len(dist)), dist))[:_MISSES]

            def failed(f: float, m: float) -> str:
                if f < f_lo:
                    return f"loaded frequency {format_percent(1 - f / f_lo)} below the window"
                return f"loaded frequency {format_percent(f / f_hi - 1)} above the window"

            misses += rows(ls.designs.take(sel), ls.f_loaded[sel], ls.margin[sel], failed)
            need_w = float(np.abs(ls.f_loaded[sel[0]] / spec.frequency.target - 1))
            advice.append(
                f"widen the frequency window to about ±{format_percent(need_w * 1.01)} "
                "(the closest design that starts, by its loaded frequency)"
            )
    # denser series bring more designs near the target: no help where the window's only
    # fault is the stage (they burst or do not start in the large-signal model)
    stage_only = loaded.not_steady and not len(loaded.low_margin)
    for pos, part in spec.parts.items():
        if part.series and not stage_only:
            denser = series_mod.denser(part.series)
            if denser:
                advice.append(f"use a denser series for {pos} ({denser} instead of {part.series})")
    if not misses and not loaded.not_steady:
        advice.append(
            "no design near the window starts: widen the part ranges or raise the loop gain"
        )
    return misses, advice
