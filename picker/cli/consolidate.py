"""``picker consolidate``: one design per channel of a multi-oscillator plan.

Thin typer command over :mod:`picker.spec.plan` (which solves each channel and calls
:func:`picker.buyer.consolidate.consolidate`), :mod:`picker.report.plan` (the JSON
object and the tables; its docstring lists the JSON keys) and :mod:`picker.report.bom`.
Exit status 0 when a plan is found, 1 when the plan is infeasible (the binding
constraint is printed), 2 for bad input (one line, from :func:`picker.cli.main.main`).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import typer
from rich.console import Console

from picker.cli.options import note_stock_columns
from picker.errors import SolverError, SpecError

__all__ = ["consolidate_cmd", "run_consolidate"]


def run_consolidate(
    plan_path: Path,
    *,
    fmt: str = "table",
    bom: Path | None = None,
    force: bool = False,
    time_limit: float | None = None,
    workers: int = 2,
    report: Path | None = None,
) -> int:
    """Run the command; returns the exit status (0 plan found, 1 infeasible)."""
    # the plan pulls in pydantic, scipy and ortools: imported here, not at start-up
    from picker.api.plan import run_plan
    from picker.report import plan as plan_report
    from picker.report.bom import plan_currency, plan_designators, plan_stocks, write_bom
    from picker.spec.plan import load_plan

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
        from picker.files import check_output

        check_output(bom, force=force, inputs=plan.inputs(), key="--bom")
    if report is not None:  # refused before the (slow) solve
        from picker.cli.options import check_report

        check_report(report, force, plan.inputs())
    run = run_plan(plan, time_limit=time_limit, workers=workers)
    stocks = plan_stocks(run)
    plan_currency(run)  # channel specs in different currencies: refused before any output
    note_stock_columns(stocks)
    if report is not None and run.result.status != "unknown":
        from picker.cli.options import command_line
        from picker.report.html import write_report  # matplotlib: only for --report

        cmd = command_line("consolidate", plan_path)
        write_report(report, run, inputs=plan.inputs(), command=cmd, force=force)
        sys.stderr.write(f"picker: wrote {report}\n")
    if bom is not None and run.result.plan is not None:
        wrote = write_bom(
            bom,
            run.result.plan.bom,
            designators=plan_designators(run),
            stocks=stocks,
            force=force,
            inputs=plan.inputs(),
            currency=plan_currency(run),
        )
        sys.stderr.write(f"picker: wrote {wrote}\n")
    if f == "json":
        text = json.dumps(plan_report.plan_dict(run), indent=2, ensure_ascii=False, allow_nan=False)
        sys.stdout.write(text + "\n")
    else:
        plan_report.print_table(run, Console(highlight=False))
    if run.result.status == "unknown":  # the solver ran out of time before any plan
        limit = time_limit if time_limit is not None else plan.spec.time_limit
        raise SolverError(
            f"{plan_path}: CP-SAT found no plan within the time limit ({limit:g} s); "
            "raise --time-limit or the plan's time_limit"
        )
    return 0 if run.result.plan is not None else 1


def consolidate_cmd(
    plan: Path = typer.Argument(..., metavar="PLAN", help="Plan file (TOML) listing the channels."),
    format: str = typer.Option("table", "--format", "-f", help="table or json (standard output)."),
    bom: Path | None = typer.Option(
        None,
        "--bom",
        metavar="FILE",
        help="Write the bill of materials to OUT.csv or OUT.json (designators, quantities, "
        "prices and the stock list's own columns).",
    ),
    force: bool = typer.Option(False, "--force", help="Replace an existing BOM file."),
    time_limit: float | None = typer.Option(
        None,
        "--time-limit",
        metavar="SECONDS",
        help="Solver seconds (default: the plan's, else 10).",
    ),
    report: Path | None = typer.Option(
        None, "--report", help="Also write a self-contained HTML report (FILE.html)."
    ),
) -> None:
    """Pick one design per channel so the board needs fewer distinct parts."""
    status = run_consolidate(
        plan, fmt=format, bom=bom, force=force, time_limit=time_limit, report=report
    )
    if status:
        raise typer.Exit(status)
