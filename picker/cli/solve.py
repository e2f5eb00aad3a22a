"""``picker solve``, ``evaluate``, ``series`` and ``bench``: plain command functions.

:mod:`picker.cli.main` registers them on the app. The pipeline (numpy, scipy,
pydantic) and the plots (matplotlib) are imported inside the commands, so that
``picker --help`` and a bad option stay fast.
"""

from __future__ import annotations

import io
import json
import sys
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING

import typer
from rich.console import Console

from picker.cli.options import (
    check_format,
    parse_assignments,
    parse_precision,
    parse_sampling,
    progress_bar,
    spec_inputs,
    unit_of,
)
from picker.errors import InfeasibleError, SpecError
from picker.files import atomic_write, check_output

if TYPE_CHECKING:  # the api pulls in numpy, scipy and pydantic: not at start-up
    from picker.api.results import SolveResult

__all__ = ["bench", "evaluate", "series_cmd", "solve"]


def _check_outputs(output: Path | None, plot: Path | None, force: bool, spec: Path) -> None:
    """Refuse a bad --output or --plot before the (slow) run, not after it."""
    if output is not None:
        check_output(output, force=force, inputs=spec_inputs(spec))
    if plot is not None:
        from picker.report.plots import check_plot_folder  # matplotlib: only for --plot

        check_plot_folder(plot, force=force, inputs=spec_inputs(spec))


def _emit(
    result: SolveResult, fmt: str, output: Path | None, force: bool, inputs: Iterable[Path]
) -> None:
    """Write the result as ``fmt`` to ``output``, or to stdout."""
    from picker.report import designs as report

    if fmt == "json":
        text = report.to_json(result)
    elif fmt == "csv":
        text = report.to_csv(result)
    else:
        text = None
    if output is not None:
        if text is None:
            buf = Console(record=True, width=160, file=io.StringIO())
            report.print_table(result, buf)
            text = buf.export_text()
        atomic_write(output, text, force=force, inputs=inputs)
        return
    if text is not None:
        sys.stdout.write(text)
    else:
        con = Console()
        report.print_table(result, con if con.is_terminal else Console(width=200))


def solve(
    spec: Path = typer.Argument(..., help="Spec file (TOML)."),
    format: str = typer.Option("table", "--format", "-f", help="table, json or csv."),
    top: int | None = typer.Option(
        None, "--top", min=1, max=10_000, help="How many designs to show."
    ),
    samples: int | None = typer.Option(
        None, "--samples", min=100, max=10_000_000, help="Monte Carlo boards per design."
    ),
    seed: int | None = typer.Option(None, "--seed", min=0, max=2**63 - 1, help="Random seed."),
    candidates: int | None = typer.Option(
        None,
        "--candidates",
        min=1,
        max=100_000,
        help="Designs the Monte Carlo pass checks (after the screen).",
    ),
    output: Path | None = typer.Option(None, "--output", "-o", help="Write to this file instead."),
    force: bool = typer.Option(False, "--force", help="Replace an existing output file."),
    precision: str | None = typer.Option(
        None, "--precision", help="Run until each yield's CI half-width is this, e.g. 0.5%."
    ),
    sampling: str | None = typer.Option(None, "--sampling", help="random or sobol."),
    plot: Path | None = typer.Option(
        None, "--plot", help="Write PNG plots of the best design into this folder."
    ),
) -> None:
    """Search every standard-value design in the window and rank them by yield."""
    from picker import api

    fmt = check_format(format)
    prec, samp = parse_precision(precision), parse_sampling(sampling)
    _check_outputs(output, plot, force, spec)
    s = api.load_spec(spec)
    with progress_bar(prec or s.yield_.precision) as progress:
        result = api.solve(
            s,
            top=top,
            samples=samples,
            seed=seed,
            candidates=candidates,
            precision=prec,
            sampling=samp,
            progress=progress,
            plot_data=plot is not None,
        )
    if plot is not None and result.status == "ok":
        from picker.report.plots import write_plots

        write_plots(result, plot, force=force, inputs=spec_inputs(spec))
    _emit(result, fmt, output, force, spec_inputs(spec))
    if result.status != "ok":
        raise typer.Exit(1)


def evaluate(
    spec: Path = typer.Argument(..., help="Spec file (TOML)."),
    set_: list[str] = typer.Option(..., "--set", help="A part value, e.g. --set C1=4.7n (repeat)."),
    tol: list[str] = typer.Option(
        [], "--tol", help="Override a tolerance, e.g. --tol L=5% (repeat)."
    ),
    format: str = typer.Option("table", "--format", "-f", help="table, json or csv."),
    samples: int | None = typer.Option(None, "--samples", min=100, max=10_000_000),
    seed: int | None = typer.Option(None, "--seed", min=0, max=2**63 - 1),
    output: Path | None = typer.Option(None, "--output", "-o"),
    force: bool = typer.Option(False, "--force"),
    precision: str | None = typer.Option(
        None, "--precision", help="Run until the yield's CI half-width is this, e.g. 0.5%."
    ),
    sampling: str | None = typer.Option(None, "--sampling", help="random or sobol."),
    plot: Path | None = typer.Option(
        None, "--plot", help="Write PNG plots of the design into this folder."
    ),
) -> None:
    """The same figures as solve for one given design (an existing board)."""
    from picker import api
    from picker.units import parse_tolerance

    fmt = check_format(format)
    prec, samp = parse_precision(precision), parse_sampling(sampling)
    _check_outputs(output, plot, force, spec)
    s = api.load_spec(spec)
    values = parse_assignments(set_, "--set", unit_of)
    tols = {}
    for item in tol:
        pos, eq, text = item.partition("=")
        if not eq or unit_of(pos.strip().upper()) is None:
            raise SpecError(f"expected POSITION=TOLERANCE such as L=5%; got {item!r}", key="--tol")
        tols[pos.strip().upper()] = parse_tolerance(
            text.strip(), key=f"--tol {pos.strip().upper()}"
        )
    with progress_bar(prec or s.yield_.precision) as progress:
        result = api.evaluate(
            s,
            values,
            tolerances=tols,
            samples=samples,
            seed=seed,
            precision=prec,
            sampling=samp,
            progress=progress,
            plot_data=plot is not None,
        )
    if plot is not None:
        from picker.report.plots import write_plots

        write_plots(result, plot, force=force, inputs=spec_inputs(spec))
    _emit(result, fmt, output, force, spec_inputs(spec))


def series_cmd(
    name: str = typer.Argument(..., help="E3, E6, E12, E24, E48, E96 or E192."),
    min: str = typer.Option(
        "1", "--min", help="Lowest value, e.g. 1n (SI number or engineering text)."
    ),
    max: str = typer.Option("10", "--max", help="Highest value, e.g. 10n."),
    unit: str = typer.Option("F", "--unit", help="F, H or ohm (for display and parsing)."),
    format: str = typer.Option("table", "--format", "-f", help="table or json."),
) -> None:
    """List the values a series holds between --min and --max."""
    from picker.parts import series as series_mod
    from picker.units import format_quantity, parse_quantity

    fmt = check_format(format, ("table", "json"))
    if unit not in ("F", "H", "ohm"):
        raise SpecError(f"expected F, H or ohm; got {unit!r}", key="--unit")
    lo = parse_quantity(min, unit, key="--min")
    hi = parse_quantity(max, unit, key="--max")
    if not 0 < lo <= hi:
        raise SpecError(f"expected 0 < min <= max; got {min!r} and {max!r}", key="--min")
    try:
        series_mod.canonical_name(name)
    except SpecError as exc:
        raise exc.located(key="NAME") from None
    vals = series_mod.expand(name, lo, hi, key="--min/--max")
    if len(vals) == 0:  # a valid range that holds no value: exit status 1, as for solve
        raise InfeasibleError(
            f"no {series_mod.canonical_name(name)} value lies between "
            f"{format_quantity(lo, unit)} and {format_quantity(hi, unit)}"
        )
    if fmt == "json":
        sys.stdout.write(
            json.dumps(
                {
                    "series": series_mod.canonical_name(name),
                    "values": [float(v) for v in vals],
                    "display": [format_quantity(float(v), unit) for v in vals],
                },
                indent=2,
                ensure_ascii=False,
            )
            + "\n"
        )
    else:
        for v in vals:
            sys.stdout.write(format_quantity(float(v), unit) + "\n")


def bench(
    quick: bool = typer.Option(False, "--quick", help="A smaller space, for a fast look."),
) -> None:
    """Print search and Monte Carlo speed figures on this machine."""
    from picker.bench import search as bench_mod

    bench_mod.main(quick=quick)
