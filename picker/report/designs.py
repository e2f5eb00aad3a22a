"""Render results: JSON (one object), CSV (one row per design) and a rich table.

JSON layout (ARCHITECTURE.md; names are stable, new fields may be added):
``candidates`` best first, each with ``parts.<pos>.value`` in SI units,
``series``, ``tolerance``; ``f_nominal_hz``; ``feedback_fraction``;
``yield.estimate/ci_low/ci_high/samples``. No timings or dates go into JSON,
so the same spec and seed give byte-identical output.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Sequence

from rich.console import Console
from rich.table import Table

from picker.api.export import (  # the JSON layout lives with the results (to_dict)
    candidate_dict,  # noqa: F401  (re-exported: report.plan, tests)
    part_text,
    rank_text,
    result_dict,
    ties,
)
from picker.api.results import Candidate, PartPick, SolveResult
from picker.files import csv_safe
from picker.report.production import print_production
from picker.units import format_percent, format_quantity


def to_json(r: SolveResult) -> str:
    return json.dumps(result_dict(r), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def to_csv(r: SolveResult) -> str:
    positions = r.spec.topo.positions
    loaded = r.spec.amplifier is not None
    buyer = _has_buyer_view(r)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(
        [
            "rank",
            *positions,
            *(f"{p}_value" for p in positions),
            "f_nominal_hz",
            "error",
            "feedback_fraction",
            "yield",
            "yield_ci_low",
            "yield_ci_high",
            "samples",
            "f_worst_low_hz",
            "f_worst_high_hz",
            *(_LOADED_CSV if loaded else ()),
            *(_buyer_csv_header(positions) if buyer else ()),
        ]
    )
    for c in r.candidates:
        more = [_csv_num(c.extra.get(k)) for k in _LOADED_CSV] if loaded else []
        more += _buyer_csv_row(c, positions) if buyer else []
        w.writerow(
            [c.rank]
            + [csv_safe(part_text(c.parts[p])) for p in positions]
            + [repr(c.parts[p].value) for p in positions]
            + [
                repr(c.f_nominal_hz),
                repr(c.error),
                repr(c.feedback_fraction),
                repr(c.yield_.estimate),
                repr(c.yield_.ci_low),
                repr(c.yield_.ci_high),
                c.yield_.samples,
                repr(c.f_worst_low_hz),
                repr(c.f_worst_high_hz),
            ]
            + more
        )
    return buf.getvalue()


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


def _has_buyer_view(r: SolveResult) -> bool:
    """Part ids or prices to show: a stock position or a priced design."""
    return any(pp.part_id for c in r.candidates for pp in c.parts.values()) or any(
        _cost_of(c) is not None for c in r.candidates
    )


def _cost_of(c: Candidate) -> float | None:
    return (c.extra.get("cost") or {}).get("per_board")


def _buyer_csv_header(positions: Sequence[str]) -> list[str]:
    return [f"{p}_part_id" for p in positions] + ["cost_per_board", "cost_build", "stock_ok"]


def _buyer_csv_row(c: Candidate, positions: Sequence[str]) -> list[str]:
    """Part ids ("A+B" for a pair), cost per board, build cost and stock sufficiency."""
    ids = []
    for p in positions:
        pp = c.parts[p]
        ids.append(csv_safe(pp.part_id + (f"+{pp.second_part_id}" if pp.second_part_id else "")))
    cost = c.extra.get("cost") or {}
    ok = cost.get("stock_ok")
    return ids + [
        _csv_num(cost.get("per_board")),
        _csv_num(cost.get("build")),
        "" if ok is None else str(bool(ok)).lower(),
    ]


#: CSV columns added when the spec has an [amplifier] section (circuit-aware model).
_LOADED_CSV = ("f_loaded_hz", "startup_margin", "startup_margin_worst")


def _csv_num(x: float | None) -> str:
    return "" if x is None else repr(float(x))


def _span(c: Candidate, target: float) -> str:
    lo = c.f_worst_low_hz / target - 1
    hi = c.f_worst_high_hz / target - 1
    return f"{lo * 100:+.2f} %..{hi * 100:+.2f} %"


def _loaded_freqs(c: Candidate) -> tuple[str, str]:
    fl = c.extra.get("f_loaded_hz")
    return (
        format_quantity(c.f_nominal_hz, "Hz", digits=6),
        "none" if fl is None else format_quantity(fl, "Hz", digits=6),
    )


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
        "f loaded: the loaded model (transistor, bias network, losses); error is against "
        "the loaded frequency. margin: loop gain at start-up, nominal (worst board)."
    )
    if not seen:
        return
    console.print("Cautions (circuit model):")
    for text, ranks in seen.items():
        which = ", ".join(f"#{k}" for k in ranks)
        console.print(f"  - {which}: {text}", markup=False, highlight=False)


def print_table(r: SolveResult, console: Console) -> None:
    s = r.spec
    f = s.frequency
    console.print(
        f"[bold]{s.title or 'picker'}[/bold]  {s.topology}, target "
        f"{format_quantity(f.target, 'Hz', digits=6)}, window "
        f"{format_quantity(f.f_min, 'Hz', digits=6)} .. {format_quantity(f.f_max, 'Hz', digits=6)}, "
        f"feedback {s.feedback.min:g}..{s.feedback.max:g}"
    )
    if r.status != "ok":
        near = " Nearest misses:" if r.misses else ""
        console.print(f"[bold red]No design meets the spec.[/bold red]{near}")
        t = Table(show_lines=False)
        for p in s.topo.positions:
            t.add_column(p, justify="right")
        t.add_column("f nominal", justify="right")
        t.add_column("beta", justify="right")
        t.add_column("fails")
        for m in r.misses:
            t.add_row(
                *(format_quantity(m.values[p], s.topo.unit(p)) for p in s.topo.positions),
                format_quantity(m.f_nominal_hz, "Hz", digits=5),
                f"{m.feedback_fraction:.3g}",
                m.failed,
            )
        if r.misses:
            console.print(t)
        console.print("What to relax:")
        for a in r.advice:
            console.print(f"  - {a}")
        return
    console.print(
        f"searched {r.space_size:,} combinations exactly: {r.feasible:,} feasible, "
        f"{r.screened:,} Monte Carlo checked with {r.samples:,} boards each "
        f"({r.distribution}, seed {r.seed})"
    )
    t = Table(show_lines=False, pad_edge=False)
    t.add_column("#", justify="right")
    for p in s.topo.positions:
        t.add_column(p, justify="right")
    loaded = s.amplifier is not None
    if loaded:
        t.add_column("f ideal", justify="right")
        t.add_column("f loaded", justify="right")
    else:
        t.add_column("f nominal", justify="right")
    t.add_column("error", justify="right")
    t.add_column("beta", justify="right")
    if loaded:
        t.add_column("margin (worst)", justify="right")
    t.add_column(f"yield ({s.yield_.confidence:.0%} CI)", justify="right")
    t.add_column("worst case at 25 °C", justify="right")
    priced = any(_cost_of(c) is not None for c in r.candidates)
    if priced:
        t.add_column("cost/board", justify="right")
    tie = ties(r)
    for c, tied in zip(r.candidates, tie, strict=True):
        t.add_row(
            rank_text(c.rank, tied),
            *(_table_part(c.parts[p]) for p in s.topo.positions),
            *(_loaded_freqs(c) if loaded else (format_quantity(c.f_nominal_hz, "Hz", digits=6),)),
            f"{c.error * 100:+.3f} %",
            f"{c.feedback_fraction:.3f}" + ("" if c.feedback_ok else " !"),
            *((_margins(c),) if loaded else ()),
            f"{c.yield_.estimate:.1%} ({c.yield_.ci_low:.1%}..{c.yield_.ci_high:.1%})",
            _span(c, f.target),
            *((_cost_cell(c),) if priced else ()),
        )
    for col in t.columns:
        col.no_wrap = True
    console.print(t)
    if any(not c.in_window for c in r.candidates):
        console.print("Note: the nominal frequency lies outside the window.")
    if any(not c.feedback_ok for c in r.candidates):
        console.print("Note: '!' marks a feedback fraction outside the feedback window.")
    if any(tie):
        console.print(
            "Note: '=' marks a design whose yield interval overlaps the one ranked above it: "
            "these boards do not tell the two apart."
        )
    if loaded:
        _print_cautions(r, console)
    print_production(r, console)
