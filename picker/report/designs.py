"""Render results: JSON (one object), CSV (one row per design) and a rich table.

JSON layout (ARCHITECTURE.md; names are stable, new fields may be added):
``candidates`` best first, each with ``parts.<pos>.value`` in SI units,
``series``, ``tolerance``; ``f_nominal_hz``; ``feedback_fraction``;
``yield.estimate/ci_low/ci_high/samples``. No timings or dates go into JSON,
so the same spec and seed give byte-identical output.
"""

from __future__ import annotations

import io
import json

from rich.console import Console
from rich.text import Text

from picker.api.export import (  # the JSON layout lives with the results (to_dict)
    candidate_dict,  # noqa: F401  (re-exported: report.plan, tests)
    design_rows,
    rank_text,
    result_dict,
    ties,
)
from picker.api.export import design_columns as design_columns_of
from picker.api.results import Candidate, PartPick, SolveResult
from picker.report.csvfile import csv_text
from picker.report.production import print_production
from picker.report.text import Col, pct, pct_range, plain, print_fitted, signed_pct
from picker.units import format_percent, format_quantity


def to_json(r: SolveResult) -> str:
    return json.dumps(result_dict(r), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def to_csv(r: SolveResult) -> str:
    """The results CSV: one row per design, the same columns and rows as the
    notebook's DataFrame (:func:`picker.api.export.design_columns`)."""
    return csv_text(design_columns_of(r), design_rows(r))


def _table_part(pp: PartPick) -> str:
    """Table cell of a position: "4.7 nF 5 %", "4.7 nF ∥ 1 nF 5 %" or "... 5 % ∥ 1 nF 2 %"."""
    tol = format_percent(pp.tolerance)
    if not pp.is_pair:
        return f"{format_quantity(pp.value, pp.unit)} {tol}"
    a = format_quantity(pp.first_value, pp.unit)
    b = format_quantity(pp.second_value, pp.unit)
    tol2 = format_percent(pp.second_tolerance)
    return f"{a} ∥ {b} {tol}" if tol2 == tol else f"{a} {tol} ∥ {b} {tol2}"


def _cost_cell(c: Candidate) -> str:
    cost = c.extra.get("cost") or {}
    x = cost.get("per_board")
    if x is None:
        return "?"
    return f"{x:.4g}" + ("" if cost.get("stock_ok", True) else " short")


def _cost_of(c: Candidate) -> float | None:
    return (c.extra.get("cost") or {}).get("per_board")


def _span(c: Candidate, target: float) -> str:
    lo = c.f_worst_low_hz / target - 1
    hi = c.f_worst_high_hz / target - 1
    return f"{signed_pct(lo)}..{signed_pct(hi)}"


def run_verdict(c: Candidate) -> str:
    """The run verdict of the large-signal model: "steady", "bursting", "no steady state"
    or "no start"."""
    ls = c.extra.get("large_signal") or {}
    return ls.get("envelope") or "no start"


def _margins(c: Candidate) -> str:
    m, w = c.extra.get("startup_margin"), c.extra.get("startup_margin_worst")
    return f"{m:.2f} ({w:.2f})"


def _print_cautions(r: SolveResult, console: Console) -> None:
    """Circuit-model cautions under the table: each text once, with the ranks it applies to."""
    seen: dict[str, list[int]] = {}
    for c in r.candidates:
        for text in c.extra.get("cautions", ()):
            seen.setdefault(text, []).append(c.rank)
    console.print(
        "f loaded: the steady frequency of the loaded model (transistor, bias network, "
        "losses); error is against it (against f ideal where there is none). runs: steady, "
        "bursting or no steady state (large-signal model); only "
        "boards that start and run steady count towards yield. margin: loop gain at "
        "start-up, nominal (worst board).",
        markup=False,
        highlight=False,
    )
    if not seen:
        return
    console.print("Cautions (circuit model):")
    for text, ranks in seen.items():
        which = ", ".join(f"#{k}" for k in ranks)
        console.print(plain(f"  - {which}: {text}"), highlight=False)


def design_columns(r: SolveResult) -> list[Col]:
    """The ranked table's columns, essential first (rank, values, yield), the
    others by priority: the interval, frequency, cost, error, margin, beta, span.

    Data-driven: a new figure is one more :class:`Col` here (or appended by a
    caller), and :func:`picker.report.text.print_fitted` stacks what does not fit.
    """
    s = r.spec
    cs = r.candidates
    conf = f"{s.yield_.confidence * 100:g} %"
    cols = [
        Col("#", [rank_text(c.rank, t) for c, t in zip(cs, ties(r), strict=True)], essential=True)
    ]
    cols += [
        Col(p, [plain(_table_part(c.parts[p])) for c in cs], essential=True)
        for p in s.topo.positions
    ]
    cols.append(Col("yield", [pct(c.yield_.estimate) for c in cs], essential=True))
    cols.append(
        Col(f"{conf} CI", [pct_range(c.yield_.ci_low, c.yield_.ci_high) for c in cs], priority=1)
    )
    loaded = s.amplifier is not None
    if loaded:
        cols.append(Col("f ideal", [_hz(c.f_nominal_hz) for c in cs], priority=4))
        cols.append(
            Col(
                "f loaded",
                [
                    "none" if c.extra.get("f_loaded_hz") is None else _hz(c.extra["f_loaded_hz"])
                    for c in cs
                ],
                priority=2,
            )
        )
        cols.append(Col("runs", [run_verdict(c) for c in cs], priority=2))
    else:
        cols.append(Col("f nominal", [_hz(c.f_nominal_hz) for c in cs], priority=2))
    if any(_cost_of(c) is not None for c in cs):
        cur = r.spec.cost.currency
        head = f"cost/board ({cur})" if cur else "cost/board"
        cols.append(Col(head, [_cost_cell(c) for c in cs], priority=2))
    cols.append(Col("error", [signed_pct(c.error, 3) for c in cs], priority=3))
    if loaded:
        cols.append(Col("margin (worst)", [_margins(c) for c in cs], priority=3))
    cols.append(
        Col(
            "beta",
            [f"{c.feedback_fraction:.3f}" + ("" if c.feedback_ok else " !") for c in cs],
            priority=4,
        )
    )
    cols.append(Col("worst case at 25 °C", [_span(c, s.frequency.target) for c in cs], priority=5))
    return cols


def _hz(x: float) -> str:
    return format_quantity(x, "Hz", digits=6)


def print_header(r: SolveResult, console: Console) -> None:
    """The spec's title (user text: never markup) and its window, one paragraph."""
    s = r.spec
    f = s.frequency
    head = Text()
    head.append_text(plain(s.title or "picker", style="bold"))
    head.append(
        f"  {s.topology}, target {_hz(f.target)}, window {_hz(f.f_min)} .. {_hz(f.f_max)}, "
        f"feedback {s.feedback.min:g}..{s.feedback.max:g}"
    )
    console.print(head, overflow="fold")


def _print_misses(r: SolveResult, console: Console) -> None:
    s = r.spec
    near = " Nearest misses:" if r.misses else ""
    console.print(Text("No design meets the spec.", style="bold red") + Text(near))
    ms = r.misses
    cols = [Col("#", [str(i) for i in range(1, len(ms) + 1)], essential=True)]
    cols += [
        Col(p, [format_quantity(m.values[p], s.topo.unit(p)) for m in ms], essential=True)
        for p in s.topo.positions
    ]
    cols.append(Col("fails", [plain(m.failed) for m in ms], justify="left", essential=True))
    cols.append(
        Col("f nominal", [format_quantity(m.f_nominal_hz, "Hz", digits=5) for m in ms], priority=1)
    )
    cols.append(Col("beta", [f"{m.feedback_fraction:.3g}" for m in ms], priority=2))
    if ms:
        print_fitted(console, cols)
    console.print("What to relax:")
    for a in r.advice:
        console.print(plain(f"  - {a}"), highlight=False)


def print_table(r: SolveResult, console: Console) -> None:
    """The ranked designs as a table fitted to the console, then the production view."""
    s = r.spec
    print_header(r, console)
    if r.status != "ok":
        _print_misses(r, console)
        return
    console.print(
        f"searched {r.space_size:,} combinations exactly: {r.feasible:,} feasible, "
        f"{r.screened:,} Monte Carlo checked with {r.samples:,} boards each "
        f"({r.distribution}, seed {r.seed})",
        markup=False,
        highlight=False,
    )
    print_fitted(console, design_columns(r))
    out = [c for c in r.candidates if not c.in_window]
    none = [c for c in out if r.spec.amplifier is not None and c.extra.get("f_loaded_hz") is None]
    if len(out) > len(none):
        console.print("Note: the nominal frequency lies outside the window.")
    if none:
        console.print(
            "Note: a design with no loaded frequency (it does not start, or the model finds "
            "no steady state) counts as outside the window."
        )
    if any(not c.feedback_ok for c in r.candidates):
        console.print("Note: '!' marks a feedback fraction outside the feedback window.")
    if any(ties(r)):
        console.print(
            "Note: '=' marks a design whose yield interval overlaps the one ranked above it: "
            "these boards do not tell the two apart.",
            markup=False,
            highlight=False,
        )
    if r.ties.get("count"):  # the top-up's stop rule (picker.core.ranking.TIE_RULE)
        console.print(
            f"Note: {r.ties['count']:,} more designs were not checked in full: their upper "
            f"values cannot beat the estimate of the design ranked {len(r.candidates)} by more "
            f"than its interval half-width ({format_percent(r.ties['resolution'])}), so they "
            "can only tie with it.",
            markup=False,
            highlight=False,
        )
    if s.amplifier is not None:
        _print_cautions(r, console)
    print_production(r, console)


def table_text(r: SolveResult, width: int | None = 100) -> str:
    """The table as plain text (no colour), ``width`` columns wide (100 when None)."""
    buf = Console(
        record=True,
        width=width or 100,
        file=io.StringIO(),
        color_system=None,
        highlight=False,
    )
    print_table(r, buf)
    return buf.export_text()
