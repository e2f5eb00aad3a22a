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
from rich.table import Table

from picker import __version__
from picker.api.plan import PlanRun
from picker.buyer.model import PlanSummary
from picker.report.bom import bom_rows, plan_designators, plan_stocks
from picker.report.designs import candidate_dict
from picker.report.text import plain
from picker.units import format_percent, format_quantity

__all__ = ["plan_dict", "print_table"]


def _num(x: float | None) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def _summary(s: PlanSummary) -> dict[str, Any]:
    return {
        "choice": dict(s.choice),
        "distinct_parts": s.distinct_parts,
        "cost": _num(round(s.cost, 9)),
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
        "cost": _num(round(r.plan.cost, 9)) if r.plan else None,
        "objective": dict(r.objective),
        "bounds": dict(r.bounds),
        "saving": {k: v if k == "parts" else _num(round(v, 9)) for k, v in r.saving.items()},
        "baseline": _summary(r.baseline),
        "eligible_candidates": dict(r.eligible),
        # no timings in JSON (same plan, same bytes)
        "reductions": {k: v for k, v in r.reductions.items() if not k.endswith("_seconds")},
        "channels": channels,
        "bom": (
            bom_rows(r.plan.bom, designators=plan_designators(run), stocks=plan_stocks(run))
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
    return out


def print_table(run: PlanRun, con: Console) -> None:
    """Print the plan: the head line, one row per channel, the BOM and the saving."""
    r = run.result
    ps = run.plan.spec
    head = f"{ps.title or run.plan.path.name}: {len(run.channels)} channels, "
    head += f"{ps.build_quantity} boards, priorities {' > '.join(r.priorities)}"
    con.print(plain(head), highlight=False)
    if r.plan is None:
        con.print(plain(f"status: {r.status}: {r.binding}"), highlight=False)
        return
    gap = ""
    if r.status != "optimal":
        gap = " (gap " + ", ".join(f"{k} {v:g}" for k, v in r.gap.items()) + ")"
    con.print(f"status: {r.status}{gap}, solver {r.solve_seconds:.2f} s")
    t = Table("channel", "pick", "parts", "f nominal", "yield (CI)")
    for ch in run.channels:
        j = r.plan.choice[ch.name]
        c = ch.result.candidates[j]
        parts = ", ".join(
            f"{pos}={format_quantity(c.parts[pos].value, c.parts[pos].unit)} "
            f"[{'+'.join(ch.candidates.parts[j][k])}]"
            for k, pos in enumerate(ch.candidates.positions)
        )
        y = f"{format_percent(c.yield_estimate)} ({format_percent(c.ci_low)}–{format_percent(c.ci_high)})"
        t.add_row(
            plain(ch.name), f"#{j + 1}", plain(parts), format_quantity(c.f_nominal_hz, "Hz"), y
        )
    con.print(t)
    b = Table("part", "value", "tol", "per board", "build", "unit", "extended", "on hand")
    for line in r.plan.bom:
        unit = {"C": "F", "L": "H"}.get(line.kind)
        b.add_row(
            plain(line.part_id),
            format_quantity(line.value, unit) if unit and math.isfinite(line.value) else "",
            format_percent(line.tol) if math.isfinite(line.tol) else "",
            str(line.qty_per_board),
            str(line.qty_build),
            f"{line.unit_price:.4f}" if math.isfinite(line.unit_price) else "?",
            f"{line.extended_price:.2f}" if math.isfinite(line.extended_price) else "?",
            "" if math.isinf(line.on_hand) else f"{line.on_hand:g}",
        )
    con.print(b)
    base, plan, s = r.baseline, r.plan, r.saving
    con.print(
        f"distinct parts {plan.distinct_parts} (each channel's best alone: {base.distinct_parts}); "
        f"build cost {plan.cost:.2f} (alone: {base.cost:.2f}"
        + ("" if base.stock_ok else ", short of stock")
        + f"); yield given up {s['yield_loss']:.4f} summed over channels"
    )
    if plan.unpriced:
        con.print(
            plain(f"no price for {len(plan.unpriced)} part(s): {', '.join(plan.unpriced)}"),
            highlight=False,
        )
