"""``picker consolidate``: one design per channel of a multi-oscillator plan.

Thin typer command over :mod:`picker.spec.plan` (which solves each channel and calls
:func:`picker.buyer.consolidate.consolidate`) and :mod:`picker.report.bom`. Exit status 0
when a plan is found, 1 when the plan is infeasible (the binding constraint is
printed), 2 for bad input (one line, from :func:`picker.cli.main.main`).

JSON output keys: ``status``, ``distinct_parts``, ``objective``, ``bounds``,
``saving``, ``baseline``, ``channels`` (each with ``name``, ``candidate`` (0-based
index in the channel's ranking), ``parts.<pos>.value`` (SI),
``parts.<pos>.part_id``, ``yield.estimate``, ``yield.ci_low``, ``yield.ci_high``),
``bom``, ``binding``, ``reductions`` (candidate counts after each exact
reduction, the proven fewest-parts bound; :mod:`picker.buyer.reductions`). No timing
is printed in JSON, so the same plan gives the same bytes.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import typer

from picker.errors import SpecError

__all__ = ["plan_dict", "register", "run_consolidate"]


def _num(x):
    return float(x) if x is not None and math.isfinite(x) else None


def _summary(s) -> dict:
    return {
        "choice": dict(s.choice),
        "distinct_parts": s.distinct_parts,
        "cost": _num(round(s.cost, 9)),
        "yield_loss": s.yield_loss,
        "stock_ok": s.stock_ok,
        "unpriced_parts": list(s.unpriced),
    }


def plan_dict(run) -> dict:
    """The JSON-ready result of a plan run."""
    from picker import __version__
    from picker.report.bom import bom_rows
    from picker.report.designs import candidate_dict

    r = run.result
    ps = run.plan.spec
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
        "channels": [],
        "bom": bom_rows(r.plan.bom) if r.plan else [],
    }
    for ch in run.channels:
        entry = {"name": ch.name, "candidate": None, "min_yield": ch.candidates.min_yield}
        if r.plan is not None:
            j = r.plan.choice[ch.name]
            d = candidate_dict(ch.result.candidates[j])
            for k, pos in enumerate(ch.candidates.positions):
                ids = ch.candidates.parts[j][k]
                d["parts"][pos]["part_id"] = ids[0] if len(ids) == 1 else list(ids)
            entry.update({"candidate": j, **d})
        out["channels"].append(entry)
    return out


def _table(run, con) -> None:
    from rich.table import Table

    from picker.units import format_percent, format_quantity

    r = run.result
    ps = run.plan.spec
    head = f"{ps.title or run.plan.path.name}: {len(run.channels)} channels, "
    head += f"{ps.build_quantity} boards, priorities {' > '.join(r.priorities)}"
    con.print(head)
    if r.plan is None:
        con.print(f"status: {r.status}: {r.binding}")
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
        t.add_row(ch.name, f"#{j + 1}", parts, format_quantity(c.f_nominal_hz, "Hz"), y)
    con.print(t)
    b = Table("part", "value", "tol", "per board", "build", "unit", "extended", "on hand")
    for line in r.plan.bom:
        unit = {"C": "F", "L": "H"}.get(line.kind)
        b.add_row(
            line.part_id,
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
        con.print(f"no price for {len(plan.unpriced)} part(s): {', '.join(plan.unpriced)}")


def run_consolidate(
    plan_path: Path,
    *,
    fmt: str = "table",
    bom: Path | None = None,
    force: bool = False,
    time_limit: float | None = None,
    workers: int = 2,
) -> int:
    """Run the command; returns the exit status (0 plan found, 1 infeasible)."""
    from picker.spec.plan import load_plan, run_plan

    f = fmt.strip().lower()
    if f not in ("table", "json"):
        raise SpecError(f"expected table or json; got {fmt!r}", key="--format")
    if time_limit is not None and not (0 < time_limit <= 3600):
        raise SpecError(
            f"expected seconds between 0 and 3600; got {time_limit}", key="--time-limit"
        )
    plan = load_plan(plan_path)
    if bom is not None and bom.suffix.lower() not in (".csv", ".json"):
        raise SpecError(
            f"expected a file name ending in .csv or .json; got {bom.name!r}", key="--bom"
        )
    if bom is not None:  # fail before the (slow) solve, not after it
        if any(bom.resolve() == p.resolve() for p in plan.inputs()):
            raise SpecError("refusing to write over an input file", file=str(bom), key="--bom")
        if bom.exists() and not force:
            raise SpecError(
                "the file exists; pass --force to replace it", file=str(bom), key="--bom"
            )
    run = run_plan(plan, time_limit=time_limit, workers=workers)
    if bom is not None and run.result.plan is not None:
        from picker.report.bom import write_bom

        write_bom(bom, run.result.plan.bom, force=force, inputs=plan.inputs())
    if f == "json":
        text = json.dumps(plan_dict(run), indent=2, ensure_ascii=False, allow_nan=False)
        sys.stdout.write(text + "\n")
    else:
        from rich.console import Console

        con = Console()
        _table(run, con if con.is_terminal else Console(width=200, file=sys.stdout))
    if run.result.status == "unknown":  # the solver ran out of time before any plan
        from picker.errors import SolverError

        limit = time_limit if time_limit is not None else plan.spec.time_limit
        raise SolverError(
            f"{plan_path}: CP-SAT found no plan within the time limit ({limit:g} s); "
            "raise --time-limit or the plan's time_limit"
        )
    return 0 if run.result.plan is not None else 1


def register(app: typer.Typer) -> None:
    """Add the ``consolidate`` command to the picker app."""

    @app.command("consolidate")
    def consolidate_cmd(
        plan: Path = typer.Argument(..., help="Plan file (TOML) listing the channels."),
        format: str = typer.Option("table", "--format", "-f", help="table or json."),
        bom: Path | None = typer.Option(
            None, "--bom", help="Write the BOM to OUT.csv or OUT.json."
        ),
        force: bool = typer.Option(False, "--force", help="Replace an existing BOM file."),
        time_limit: float | None = typer.Option(
            None, "--time-limit", help="Solver seconds (default: the plan's, else 10)."
        ),
    ) -> None:
        """Pick one design per channel so the board needs fewer distinct parts."""
        status = run_consolidate(plan, fmt=format, bom=bom, force=force, time_limit=time_limit)
        if status:
            raise typer.Exit(status)
