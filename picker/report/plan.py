"""Render a solved multi-oscillator plan: the JSON object and the rich tables.

Edge module, the report side of ``picker consolidate``. JSON keys: ``status``,
``distinct_parts``, ``objective``, ``bounds``, ``saving``, ``baseline``,
``channels`` (each with ``name``, ``candidate`` (0-based index in the channel's
ranking), ``parts.<pos>.value`` (SI), ``parts.<pos>.part_id``,
``yield.estimate``, ``yield.ci_low``, ``yield.ci_high``), ``bom``, ``binding``,
``reductions`` (candidate counts after each exact reduction, the proven
fewest-parts bound; :mod:`picker.buyer.reductions`). No timing is put in the
JSON, so the same plan gives the same bytes.
"""

from __future__ import annotations

import math
from typing import Any

from rich.console import Console
from rich.text import Text

from picker import __version__
from picker.api.plan import PlanRun
from picker.buyer.model import PlanSummary
from picker.report.bom import bom_rows, plan_currency, plan_designators, plan_stocks
from picker.report.designs import candidate_dict
from picker.report.text import Col, pct, pct_range, plain, print_fitted
from picker.units import format_percent, format_quantity, json_number

__all__ = ["plan_dict", "print_table"]


def _summary(s: PlanSummary) -> dict[str, Any]:
    return {
        "choice": dict(s.choice),
        "distinct_parts": s.distinct_parts,
        "cost": json_number(round(s.cost, 9)),
        "yield_loss": s.yield_loss,
        "stock_ok": s.stock_ok,
        "unpriced_parts": list(s.unpriced),
    }


def plan_dict(run: PlanRun) -> dict[str, Any]:
    """The JSON-ready result of a plan run."""
    r = run.result
    ps = run.plan.spec
    channels: list[dict[str, Any]] = []
    out = {
        "picker_version": __version__,
        "title": ps.title,
        "status": r.status,
        "binding": r.binding,
        "build_quantity": ps.build_quantity,
        "priorities": list(r.priorities),
        "distinct_parts": r.plan.distinct_parts if r.plan else None,
        "cost": json_number(round(r.plan.cost, 9)) if r.plan else None,
        "objective": dict(r.objective),
        "bounds": dict(r.bounds),
        "saving": {k: v if k == "parts" else json_number(round(v, 9)) for k, v in r.saving.items()},
        "baseline": _summary(r.baseline),
        "eligible_candidates": dict(r.eligible),
        # no timings in JSON (same plan, same bytes)
        "reductions": {k: v for k, v in r.reductions.items() if not k.endswith("_seconds")},
        "channels": channels,
        "bom": (
            bom_rows(
                r.plan.bom,
                designators=plan_designators(run),
                stocks=plan_stocks(run),
                currency=plan_currency(run),
            )
            if r.plan
            else []
        ),
    }
    for ch in run.channels:
        entry: dict[str, Any] = {
            "name": ch.name,
            "candidate": None,
            "min_yield": ch.candidates.min_yield,
        }
        if r.plan is not None:
            j = r.plan.choice[ch.name]
            d = candidate_dict(ch.result.candidates[j])
            for k, pos in enumerate(ch.candidates.positions):
                ids = ch.candidates.parts[j][k]
                d["parts"][pos]["part_id"] = ids[0] if len(ids) == 1 else list(ids)
            entry.update({"candidate": j, **d})
        channels.append(entry)
    if plan_currency(run):  # only when said, so plans without one keep their bytes
        out["currency"] = plan_currency(run)
    return out


def print_table(run: PlanRun, con: Console) -> None:
    """Print the plan: the head line, one row per channel, the BOM and the saving."""
    r = run.result
    ps = run.plan.spec
    con.print(plain(ps.title or run.plan.path.name), highlight=False)
    con.print(
        f"{len(run.channels)} channels, {ps.build_quantity} boards, "
        f"priorities {' > '.join(r.priorities)}",
        highlight=False,
    )
    if r.plan is None:
        con.print(plain(f"status: {r.status}: {r.binding}"), highlight=False)
        return
    gap = ""
    if r.status != "optimal":
        gap = " (gap " + ", ".join(f"{k} {v:g}" for k, v in r.gap.items()) + ")"
    con.print(f"status: {r.status}{gap}, solver {r.solve_seconds:.2f} s")
    positions = list(dict.fromkeys(pos for ch in run.channels for pos in ch.candidates.positions))
    cols = [
        Col("channel", justify="left"),
        *(Col(pos, justify="left", essential=True) for pos in positions),
        Col("yield (CI)", essential=True),
        Col("pick", priority=1),
        Col("f nominal", priority=2),
    ]
    for ch in run.channels:
        j = r.plan.choice[ch.name]
        c = ch.result.candidates[j]
        placed = {
            pos: f"{format_quantity(c.parts[pos].value, c.parts[pos].unit)} "
            f"[{'+'.join(ch.candidates.parts[j][k])}]"
            for k, pos in enumerate(ch.candidates.positions)
        }
        cols[0].cells.append(plain(ch.name))
        for i, pos in enumerate(positions):
            cols[1 + i].cells.append(plain(placed.get(pos, "")))
        cols[-3].cells.append(f"{pct(c.yield_estimate)} ({pct_range(c.ci_low, c.ci_high)})")
        cols[-2].cells.append(f"#{j + 1}")
        cols[-1].cells.append(format_quantity(c.f_nominal_hz, "Hz"))
    print_fitted(con, cols)
    cur = plan_currency(run)
    money = f" ({cur})" if cur else ""
    bom = [
        Col("part", justify="left"),
        Col("value", essential=True),
        Col("build", essential=True),
        Col(f"extended{money}", essential=True),
        Col("tol", priority=1),
        Col("per board", priority=2),
        Col(f"unit{money}", priority=3),
        Col("on hand", priority=4),
    ]
    for line in r.plan.bom:
        unit = {"C": "F", "L": "H"}.get(line.kind)
        cells: list[str | Text] = [
            plain(line.part_id),
            format_quantity(line.value, unit) if unit and math.isfinite(line.value) else "",
            str(line.qty_build),
            f"{line.extended_price:.2f}" if math.isfinite(line.extended_price) else "?",
            format_percent(line.tol) if math.isfinite(line.tol) else "",
            str(line.qty_per_board),
            f"{line.unit_price:.4f}" if math.isfinite(line.unit_price) else "?",
            "" if math.isinf(line.on_hand) else f"{line.on_hand:g}",
        ]
        for col, cell in zip(bom, cells, strict=True):
            col.cells.append(cell)
    print_fitted(con, bom)
    base, plan, s = r.baseline, r.plan, r.saving
    con.print(
        f"distinct parts {plan.distinct_parts} (each channel's best alone: {base.distinct_parts})"
    )
    con.print(
        f"build cost {plan.cost:.2f}{' ' + cur if cur else ''} (alone: {base.cost:.2f}"
        + ("" if base.stock_ok else ", short of stock")
        + ")"
    )
    con.print(f"yield given up {s['yield_loss'] * 100:.1f} pp summed over channels")
    if plan.unpriced:
        con.print(
            plain(f"no price for {len(plan.unpriced)} part(s): {', '.join(plan.unpriced)}"),
            highlight=False,
        )
