"""Results as plain data: the JSON object, one row per design, a short text and HTML view.

:func:`result_dict` is the JSON layout (``picker solve --format json``) and
``SolveResult.to_dict()``; :func:`design_rows` is one row per design, numbers as
numbers with the unit in the column name (``C1_F``, ``f_nominal_Hz``), for
``SolveResult.to_dataframe()``; :func:`summary_text` and :func:`summary_html`
are the short ``repr`` and the notebook view. No file is written here.

Ties: two designs whose yield intervals overlap are not told apart by the
boards simulated (:func:`tied_with_previous`); the rank of such a design is
marked ``=`` in the tables and a note says so. Overlapping intervals are the
usual conservative reading (common practice, no source).
"""

from __future__ import annotations

import html
import math
from typing import TYPE_CHECKING, Any

from picker import __version__
from picker.units import format_percent, format_quantity, json_number

if TYPE_CHECKING:  # the result types import this module
    from picker.api.results import Candidate, PartPick, SolveResult

__all__ = [
    "candidate_dict",
    "buyer_view",
    "design_columns",
    "design_rows",
    "part_text",
    "rank_text",
    "result_dict",
    "summary_html",
    "summary_text",
    "tied_with_previous",
    "ties",
]


def part_text(pp: PartPick) -> str:
    """A position's value as shown: "4.7 nF", or "4.7 nF ∥ 1 nF" for a parallel pair."""
    if pp.is_pair:
        return (
            f"{format_quantity(pp.first_value, pp.unit)} ∥ "
            f"{format_quantity(pp.second_value, pp.unit)}"
        )
    return format_quantity(pp.value, pp.unit)


def candidate_dict(c: Candidate) -> dict:
    """One design as the JSON writes it."""
    parts = {}
    for p, pp in c.parts.items():
        parts[p] = {
            "value": pp.value,
            "display": part_text(pp),
            "series": pp.source,
            "tolerance": pp.tolerance,
        }
        if pp.part_id:
            parts[p]["part_id"] = pp.part_id
        if math.isfinite(pp.price):
            parts[p]["price"] = pp.price
        if pp.is_pair:  # value is the total; the two parts, larger first
            parts[p]["pair"] = [
                {"value": pp.first_value, "part_id": pp.part_id or None, "tolerance": pp.tolerance},
                {
                    "value": pp.second_value,
                    "part_id": pp.second_part_id or None,
                    "tolerance": pp.second_tolerance,
                },
            ]
    return {
        "rank": c.rank,
        "parts": parts,
        "f_nominal_hz": c.f_nominal_hz,
        "error": c.error,
        "feedback_fraction": c.feedback_fraction,
        "in_window": c.in_window,
        "feedback_ok": c.feedback_ok,
        "yield": c.yield_.as_dict(),
        "screen_yield": c.screen_yield,
        "worst_case": {"f_low_hz": c.f_worst_low_hz, "f_high_hz": c.f_worst_high_hz},
        "sensitivities": c.sensitivities,
        **c.extra,
    }


def result_dict(r: SolveResult) -> dict:
    """The whole result as the JSON writes it (same keys, same order)."""
    s = r.spec
    out: dict[str, Any] = {
        "picker_version": __version__,
        "title": s.title,
        "topology": s.topology,
        "status": r.status,
        "window": {
            "target_hz": s.frequency.target,
            "f_min_hz": s.frequency.f_min,
            "f_max_hz": s.frequency.f_max,
        },
        "feedback_window": {"min": s.feedback.min, "max": s.feedback.max},
        "search": {
            "space_size": r.space_size,
            "feasible": r.feasible,
            "screened": r.screened,
            **({"ties": r.ties} if r.ties else {}),
        },
        "monte_carlo": {
            "samples": r.samples,
            "seed": r.seed,
            "distribution": r.distribution,
            "confidence": s.yield_.confidence,
            "ci_method": s.yield_.ci_method,
            **r.production,
        },
        "warnings": list(r.warnings),
        "candidates": [candidate_dict(c) for c in r.candidates],
    }
    if s.cost.currency:  # the prices' currency beside them, only when the spec says it
        for d in out["candidates"]:
            if "cost" in d:
                d["cost"] = {**d["cost"], "currency": s.cost.currency}
    if r.status != "ok":
        out["misses"] = [
            {
                "parts": {p: {"value": v} for p, v in m.values.items()},
                "f_nominal_hz": m.f_nominal_hz,
                "feedback_fraction": m.feedback_fraction,
                "failed": m.failed,
            }
            for m in r.misses
        ]
        out["advice"] = list(r.advice)
    return out


# ---------------------------------------------------------------- ties


def tied_with_previous(candidates: list[Candidate]) -> list[bool]:
    """Per design (best first): does its yield interval overlap the one ranked above it?

    The first design is never tied with "the one above". Two intervals
    [a_lo, a_hi] and [b_lo, b_hi] overlap when a_lo <= b_hi and b_lo <= a_hi.
    """
    out = [False] * len(candidates)
    for k in range(1, len(candidates)):
        a, b = candidates[k - 1].yield_, candidates[k].yield_
        out[k] = a.ci_low <= b.ci_high and b.ci_low <= a.ci_high
    return out


def ties(r: SolveResult) -> list[bool]:
    """:func:`tied_with_previous` of a result ranked by yield; none when ranked by cost
    (``[cost] rank_by = "cost"`` orders designs by price, not by yield)."""
    if r.spec.cost.rank_by == "cost":
        return [False] * len(r.candidates)
    return tied_with_previous(r.candidates)


def rank_text(rank: int, tied: bool) -> str:
    """The rank as a table shows it: ``3``, or ``=3`` when tied with the design above."""
    return f"={rank}" if tied else str(rank)


# ---------------------------------------------------------------- rows


#: Columns of the loaded model (with an ``[amplifier]`` section), as the results CSV names them.
LOADED_COLUMNS = ("f_loaded_hz", "startup_margin", "startup_margin_worst")


def buyer_view(r: SolveResult) -> bool:
    """Part ids or prices to show: a stock position or a priced design."""
    return any(pp.part_id for c in r.candidates for pp in c.parts.values()) or any(
        (c.extra.get("cost") or {}).get("per_board") is not None for c in r.candidates
    )


def _material(r: SolveResult, p: str, part_id: str) -> str:
    """Dielectric (capacitor) or core (inductor): the stock list's column for a stock
    part, else the spec's key ("" when unknown)."""
    part = r.spec.parts[p]
    st = part.stock_list
    if part_id and st is not None and part_id in st.index:
        return str(st.material[st.index[part_id]])
    return part.dielectric or ""


def _stock_value(r: SolveResult, p: str, part_id: str, value: float) -> float:
    """The stock list's value of ``part_id`` (a pair's first part is otherwise its
    total minus its partner, with float noise), else ``value``."""
    st = r.spec.parts[p].stock_list
    if part_id and st is not None and part_id in st.index:
        return float(st.value[st.index[part_id]])
    return value


def design_columns(r: SolveResult) -> list[str]:
    """Column names of :func:`design_rows`: the unit of every number in its name.

    The results CSV's layout (``picker solve -f csv``): per position its value
    (``C1_F``, a pair's total), tolerance (a fraction), dielectric (``_core`` for
    an inductor), part id and price, and for a ``parallel`` position the two
    parts; then the design's figures, the loaded model's with an ``[amplifier]``,
    cost where there are prices or stock parts. Two more close the row:
    ``tied_with_previous`` (:func:`ties`) and, with a temperature range, the
    worst case over it (``f_worst_low_range_Hz``, ``f_worst_high_range_Hz``).
    """
    topo = r.spec.topo
    head = ["rank"]
    for p in topo.positions:
        u = topo.unit(p)
        mat = "core" if u == "H" else "dielectric"
        head += [f"{p}_{u}", f"{p}_tolerance", f"{p}_{mat}", f"{p}_part_id", f"{p}_price"]
        if r.spec.parts[p].parallel:
            head += [f"{p}_first_{u}", f"{p}_second_{u}", f"{p}_second_tolerance"]
            head += [f"{p}_second_part_id"]
    head += [
        "f_nominal_Hz",
        "error",
        "feedback_fraction",
        "yield",
        "yield_ci_low",
        "yield_ci_high",
        "confidence",
        "samples",
        "f_worst_low_Hz",
        "f_worst_high_Hz",
        "warnings",
    ]
    if r.spec.amplifier is not None:
        head += list(LOADED_COLUMNS)
    if buyer_view(r):
        head += ["cost_per_board", "cost_build", "stock_ok"]
    head.append("tied_with_previous")
    if r.spec.yield_.temperature is not None:
        head += ["f_worst_low_range_Hz", "f_worst_high_range_Hz"]
    return head


def design_rows(r: SolveResult) -> list[list[Any]]:
    """One row per design (best first) in the order of :func:`design_columns`.

    Numbers as floats and ints in SI units (F, H, Hz), fractions for tolerance,
    error and yield (0.05 = 5 %), text as text, None where a figure is unknown;
    ``warnings`` joins the run's warnings with "; " (the same on every row).
    """
    topo = r.spec.topo
    buyer = buyer_view(r)
    warn = "; ".join(r.warnings)
    over = r.spec.yield_.temperature is not None
    rows: list[list[Any]] = []
    for c, tied in zip(r.candidates, ties(r), strict=True):
        row: list[Any] = [c.rank]
        for p in topo.positions:
            pp = c.parts[p]
            row += [pp.value, pp.tolerance, _material(r, p, pp.part_id), pp.part_id]
            row.append(json_number(pp.price))
            if r.spec.parts[p].parallel:
                row += (
                    [
                        _stock_value(r, p, pp.part_id, pp.first_value),
                        pp.second_value,
                        pp.second_tolerance,
                        pp.second_part_id,
                    ]
                    if pp.is_pair
                    else [pp.value, None, None, ""]
                )
        row += [
            c.f_nominal_hz,
            c.error,
            c.feedback_fraction,
            c.yield_.estimate,
            c.yield_.ci_low,
            c.yield_.ci_high,
            r.spec.yield_.confidence,
            c.yield_.samples,
            c.f_worst_low_hz,
            c.f_worst_high_hz,
            warn,
        ]
        if r.spec.amplifier is not None:
            row += [c.extra.get(k) for k in LOADED_COLUMNS]
        if buyer:
            cost = c.extra.get("cost") or {}
            ok = cost.get("stock_ok")
            row += [cost.get("per_board"), cost.get("build"), None if ok is None else bool(ok)]
        row.append(tied)
        if over:
            wc = c.extra.get("worst_case_over_range") or {}
            row += [json_number(wc.get("f_low_hz")), json_number(wc.get("f_high_hz"))]
        rows.append(row)
    return rows


# ---------------------------------------------------------------- short views


def _yield_text(c: Candidate) -> str:
    y = c.yield_
    return f"{y.estimate * 100:.1f} % ({y.ci_low * 100:.1f} % – {y.ci_high * 100:.1f} %)"


def _parts_text(c: Candidate) -> str:
    return ", ".join(f"{p} {part_text(pp)}" for p, pp in c.parts.items())


def summary_text(r: SolveResult) -> str:
    """A short ``repr``: status, the number of designs and the best one."""
    title = f" {r.spec.title!r}" if r.spec.title else ""
    if not r.candidates:
        return f"<SolveResult{title} {r.status}: no design, {len(r.misses)} nearest misses>"
    c = r.candidates[0]
    n = len(r.candidates)
    return (
        f"<SolveResult{title} {r.status}: {n} design{'s' if n != 1 else ''}; best "
        f"{_parts_text(c)}, yield {_yield_text(c)} of {r.samples:,} boards>"
    )


def candidate_text(c: Candidate) -> str:
    """A short ``repr`` of one design."""
    return (
        f"<Candidate #{c.rank}: {_parts_text(c)}, f {format_quantity(c.f_nominal_hz, 'Hz', digits=6)}"
        f", yield {_yield_text(c)}>"
    )


def summary_html(r: SolveResult) -> str:
    """The notebook view: a heading and the ranked table (every user text escaped)."""
    e = html.escape
    s = r.spec
    head = (
        f"<p><b>{e(s.title or 'picker')}</b> {e(s.topology)}, target "
        f"{e(format_quantity(s.frequency.target, 'Hz', digits=6))}, window "
        f"{e(format_quantity(s.frequency.f_min, 'Hz', digits=6))} – "
        f"{e(format_quantity(s.frequency.f_max, 'Hz', digits=6))}; status {e(r.status)}</p>"
    )
    if not r.candidates:
        advice = "".join(f"<li>{e(a)}</li>" for a in r.advice)
        return f"<div>{head}<p>No design meets the spec.</p><ul>{advice}</ul></div>"
    positions = s.topo.positions
    tie = ties(r)
    th = "".join(
        f"<th>{e(h)}</th>"
        for h in ("#", *positions, "f nominal", "error", "beta", "yield (CI)", "cost/board")
    )
    body = []
    for c, tied in zip(r.candidates, tie, strict=True):
        cost = (c.extra.get("cost") or {}).get("per_board")
        cells = [
            rank_text(c.rank, tied),
            *(f"{part_text(c.parts[p])} {format_percent(c.parts[p].tolerance)}" for p in positions),
            format_quantity(c.f_nominal_hz, "Hz", digits=6),
            f"{c.error * 100:+.3f} %",
            f"{c.feedback_fraction:.3f}",
            _yield_text(c),
            "—" if cost is None else f"{cost:.4g}",
        ]
        body.append("<tr>" + "".join(f"<td>{e(x)}</td>" for x in cells) + "</tr>")
    note = (
        "<p>= marks a design whose yield interval overlaps the one above it.</p>"
        if any(tie)
        else ""
    )
    return (
        f"<div>{head}<table><thead><tr>{th}</tr></thead><tbody>{''.join(body)}</tbody>"
        f"</table>{note}</div>"
    )
