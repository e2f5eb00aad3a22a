"""``picker solve``, ``evaluate``, ``series`` and ``bench``: plain command functions.

:mod:`picker.cli.main` registers them on the app. The pipeline (numpy, scipy,
pydantic) and the plots (matplotlib) are imported inside the commands, so that
``picker --help`` and a bad option stay fast.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Callable, Iterable
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING, Any, NamedTuple

import typer
from rich.console import Console

from picker.cli.options import (
    VERIFY_HELP,
    VERIFY_TOP_HELP,
    check_report,
    command_line,
    note_stock_columns,
    output_format,
    parse_design,
    parse_part_ids,
    parse_precision,
    parse_sampling,
    progress_bar,
    spec_inputs,
    unit_of,
    verify_count,
)
from picker.errors import InfeasibleError, SpecError
from picker.files import atomic_write, check_output

if TYPE_CHECKING:  # the api pulls in numpy, scipy and pydantic: not at start-up
    from picker.api.results import SolveResult
    from picker.spec.model import Spec

__all__ = ["bench", "evaluate", "series_cmd", "solve"]


def _check_outputs(output: Path | None, plot: Path | None, force: bool, spec: Path) -> None:
    """Refuse a bad --output or --plot before the (slow) run, not after it."""
    if output is not None:
        check_output(output, force=force, inputs=spec_inputs(spec))
    if plot is not None:
        from picker.report.plots import check_plot_folder  # matplotlib: only for --plot

        check_plot_folder(plot, force=force, inputs=spec_inputs(spec))


def _wrote(paths: Iterable[Path]) -> None:
    """Say on stderr which files a command wrote (stdout stays the result)."""
    for p in paths:
        sys.stderr.write(f"picker: wrote {p}\n")


_BOM_HELP = (
    "Write the bill of materials of the best design to OUT.csv or OUT.json "
    "(designators, quantities for [cost] build_quantity, prices, the stock list's columns)."
)


def _check_bom(bom: Path | None, force: bool, spec: Path) -> None:
    """Refuse a bad --bom before the run: its extension and its place."""
    if bom is None:
        return
    if bom.suffix.lower() not in (".csv", ".json"):
        raise SpecError(
            f"expected a file name ending in .csv or .json; got {bom.name!r}", key="--bom"
        )
    check_output(bom, force=force, inputs=[spec], key="--bom")


def _check_bom_inputs(bom: Path | None, force: bool, spec: Path, s: Spec) -> None:
    """Once the spec is loaded: the BOM may not replace a stock list it names either."""
    if bom is not None:
        stocks = {str(p.stock_list.source) for p in s.parts.values() if p.stock_list is not None}
        check_output(bom, force=force, inputs=[spec, *map(Path, sorted(stocks))], key="--bom")


def _write_bom(result: SolveResult, bom: Path | None, force: bool, spec: Path) -> None:
    if bom is None or not result.candidates:
        return
    from picker.report.bom import design_bom, design_stocks, write_bom

    lines, places = design_bom(result)
    stocks = design_stocks(result)
    inputs = [spec, *(Path(str(st.source)) for st in stocks)]
    cur = result.spec.cost.currency
    wrote = write_bom(
        bom, lines, designators=places, stocks=stocks, force=force, inputs=inputs, currency=cur
    )
    _wrote([wrote])


def _write_report(
    report: Path | None, result: SolveResult, force: bool, spec: Path, command: str
) -> None:
    """Write the --report page (the command line in its head) and say so on stderr."""
    if report is None:
        return
    from picker.report.html import write_report  # matplotlib: only for --report

    write_report(report, result, inputs=[spec], command=command_line(command, spec), force=force)
    sys.stderr.write(f"picker: wrote {report}\n")


def _verify(
    result: SolveResult, count: int | None
) -> tuple[dict[str, Any], Callable[[int | None], str]] | None:
    """``--verify``: the ngspice check of the top designs (JSON object, and the tables as
    text for a given width)."""
    if count is None or not result.candidates:
        return None
    from picker.cli.circuit import run_verify, verify_dict, verify_text

    checks, seconds = run_verify(result, count)
    return verify_dict(checks, seconds), partial(verify_text, checks, seconds)


def _html_as_report(
    fmt: str | None, output: Path | None, report: Path | None
) -> tuple[Path | None, Path | None, bool]:
    """``-o FILE.html`` is the report (the page ``--report`` writes), in place of the table.

    Returns ``(output, report, html_only)``; a ``--format`` or a ``--report`` beside it
    is a contradiction, refused before the run.
    """
    if output is None or output.suffix.lower() not in (".html", ".htm"):
        return output, report, False
    if fmt is not None:
        raise SpecError(
            f"--format {fmt} contradicts the file name {output.name!r} (an HTML report); drop one",
            key="--format",
        )
    if report is not None:
        raise SpecError("-o FILE.html is the report already; drop --report", key="--report")
    return None, output, True


def _emit(
    result: SolveResult,
    fmt: str,
    output: Path | None,
    force: bool,
    inputs: Iterable[Path],
    verify: tuple[dict[str, Any], Callable[[int | None], str]] | None = None,
) -> None:
    """Write the result as ``fmt`` to ``output``, or to stdout (with ``--verify``'s check:
    under ``ngspice_check`` in JSON, as a table after the table, on stderr beside CSV)."""
    from picker.report import designs as report
    from picker.report.csvfile import BOM

    if fmt == "json":
        text = report.to_json(result)
        if verify is not None:
            data = json.loads(text)
            data["ngspice_check"] = verify[0]
            text = json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    elif fmt == "csv":
        text = report.to_csv(result)
        if verify is not None:
            sys.stderr.write(verify[1](Console(stderr=True).width))
    else:
        text = None
    if output is not None:
        if text is None:
            text = report.table_text(result, width=None)
            if verify is not None:
                text += "\n" + verify[1](None)
        elif fmt == "csv":  # a file: with a byte-order mark, so spreadsheets read UTF-8
            text = BOM + text
        _wrote([atomic_write(output, text, force=force, inputs=inputs)])
        return
    if text is not None:
        sys.stdout.write(text)
    else:
        console = Console(highlight=False)
        report.print_table(result, console)
        if verify is not None:
            sys.stdout.write("\n" + verify[1](console.width))


_FORMAT_HELP = "table, json or csv (default: from the -o file's extension, else table)."
_OUTPUT_HELP = (
    "Write to this file instead of standard output (.json or .csv picks the format; "
    ".html writes the report page)."
)
_FORCE_HELP = "Replace an existing output file or plot."
_SAMPLES_HELP = "Monte Carlo boards per design (default: the spec's [yield] samples)."
_SEED_HELP = "Random seed (default: the spec's [yield] seed); the same seed gives the same output."
_SAMPLING_HELP = "random or sobol (default: the spec's [yield] sampling)."
_REPORT_HELP = "Also write a self-contained HTML report (FILE.html)."

# Options solve and evaluate share (typer reads these as the parameters' defaults).
_SPEC_ARG = typer.Argument(..., metavar="SPEC", help="Spec file (TOML).")
_FORMAT_OPT = typer.Option(None, "--format", "-f", metavar="FORMAT", help=_FORMAT_HELP)
_SAMPLES_OPT = typer.Option(
    None, "--samples", min=100, max=10_000_000, metavar="N", help=_SAMPLES_HELP
)
_SEED_OPT = typer.Option(None, "--seed", min=0, max=2**63 - 1, metavar="N", help=_SEED_HELP)
_OUTPUT_OPT = typer.Option(None, "--output", "-o", metavar="FILE", help=_OUTPUT_HELP)
_FORCE_OPT = typer.Option(False, "--force", help=_FORCE_HELP)
_SAMPLING_OPT = typer.Option(None, "--sampling", metavar="METHOD", help=_SAMPLING_HELP)
_BOM_OPT = typer.Option(None, "--bom", metavar="FILE", help=_BOM_HELP)
_REPORT_OPT = typer.Option(None, "--report", metavar="FILE", help=_REPORT_HELP)
_VERIFY_OPT = typer.Option(False, "--verify", help=VERIFY_HELP)


class _Run(NamedTuple):
    """What solve and evaluate settle from their options before the (slow) run."""

    fmt: str
    output: Path | None
    report: Path | None
    html_only: bool
    precision: float | None
    sampling: str | None


def _before_run(
    spec: Path,
    format: str | None,
    output: Path | None,
    report: Path | None,
    precision: str | None,
    sampling: str | None,
    plot: Path | None,
    bom: Path | None,
    force: bool,
) -> _Run:
    """Read the options and refuse a bad output place before the run, not after it."""
    output, report, html_only = _html_as_report(format, output, report)
    fmt = output_format(format, output)
    prec, samp = parse_precision(precision), parse_sampling(sampling)
    _check_outputs(output, plot, force, spec)
    _check_bom(bom, force, spec)
    check_report(report, force, [spec])
    return _Run(fmt, output, report, html_only, prec, samp)


def _after_run(
    result: SolveResult,
    run: _Run,
    command: str,
    spec: Path,
    plot: Path | None,
    bom: Path | None,
    force: bool,
    vcount: int | None,
) -> None:
    """Write what the run asked for: plots, BOM, report, the --verify check, the result."""
    if plot is not None and result.status == "ok":
        from picker.report.plots import write_plots

        _wrote(write_plots(result, plot, force=force, inputs=spec_inputs(spec)))
    _write_bom(result, bom, force, spec)
    _write_report(run.report, result, force, spec, command)
    checked = _verify(result, vcount)
    if run.html_only:  # -o FILE.html: the page is the output; a --verify table goes to stderr
        if checked is not None:
            sys.stderr.write(checked[1](Console(stderr=True).width))
    else:
        _emit(result, run.fmt, run.output, force, spec_inputs(spec), checked)


def solve(
    spec: Path = _SPEC_ARG,
    format: str | None = _FORMAT_OPT,
    top: int | None = typer.Option(
        None, "--top", min=1, max=10_000, metavar="N", help="How many designs to show."
    ),
    samples: int | None = _SAMPLES_OPT,
    seed: int | None = _SEED_OPT,
    candidates: int | None = typer.Option(
        None,
        "--candidates",
        metavar="N",
        min=1,
        max=100_000,
        help="Designs the Monte Carlo pass checks (after the screen).",
    ),
    output: Path | None = _OUTPUT_OPT,
    force: bool = _FORCE_OPT,
    precision: str | None = typer.Option(
        None,
        "--precision",
        metavar="HALF-WIDTH",
        help="Run until each yield's CI half-width is this, e.g. 0.5%.",
    ),
    sampling: str | None = _SAMPLING_OPT,
    plot: Path | None = typer.Option(
        None,
        "--plot",
        metavar="FOLDER",
        help="Write PNG plots of the best design into this folder.",
    ),
    bom: Path | None = _BOM_OPT,
    report: Path | None = _REPORT_OPT,
    verify: bool = _VERIFY_OPT,
    verify_top: int = typer.Option(
        5, "--verify-top", min=1, max=50, metavar="N", show_default=False, help=VERIFY_TOP_HELP
    ),
) -> None:
    """Search every standard-value design in the window and rank them by yield."""
    from picker import api

    run = _before_run(spec, format, output, report, precision, sampling, plot, bom, force)
    s = api.load_spec(spec)
    _check_bom_inputs(bom, force, spec, s)
    note_stock_columns(part.stock_list for part in s.parts.values())
    vcount = verify_count(verify, verify_top, s)  # before the run, not after
    with progress_bar(run.precision or s.yield_.precision) as progress:
        result = api.solve(
            s,
            top=top,
            samples=samples,
            seed=seed,
            candidates=candidates,
            precision=run.precision,
            sampling=run.sampling,
            progress=progress,
            plot_data=plot is not None or report is not None,
        )
    _after_run(result, run, "solve", spec, plot, bom, force, vcount)
    if result.status != "ok":
        raise typer.Exit(1)


def _tolerances(items: list[str]) -> dict[str, float]:
    """``--tol C1=2%`` (repeat) -> position -> relative tolerance."""
    from picker.units import parse_tolerance

    tols: dict[str, float] = {}
    for item in items:
        pos, eq, text = item.partition("=")
        if not eq or unit_of(pos.strip().upper()) is None:
            raise SpecError(f"expected POSITION=TOLERANCE such as L=5%; got {item!r}", key="--tol")
        tols[pos.strip().upper()] = parse_tolerance(
            text.strip(), key=f"--tol {pos.strip().upper()}"
        )
    return tols


def evaluate(
    spec: Path = _SPEC_ARG,
    set_: list[str] = typer.Option(
        [],
        "--set",
        metavar="POS=VALUE",
        help="A part value, e.g. --set C1=4.7n, or a parallel pair C1=4.7n+3.3n (repeat).",
    ),
    tol: list[str] = typer.Option(
        [],
        "--tol",
        metavar="POS=TOL",
        help="A tolerance, e.g. --tol C1=2%; on a stock position it picks the stock part "
        "of that tolerance (repeat).",
    ),
    part: list[str] = typer.Option(
        [],
        "--part",
        metavar="POS=ID",
        help="A stock part by its id, e.g. --part C1=SB-C005, or C1=ID1+ID2 for a pair; "
        "its value need not be --set (repeat).",
    ),
    format: str | None = _FORMAT_OPT,
    samples: int | None = _SAMPLES_OPT,
    seed: int | None = _SEED_OPT,
    output: Path | None = _OUTPUT_OPT,
    force: bool = _FORCE_OPT,
    precision: str | None = typer.Option(
        None,
        "--precision",
        metavar="HALF-WIDTH",
        help="Run until the yield's CI half-width is this, e.g. 0.5%.",
    ),
    sampling: str | None = _SAMPLING_OPT,
    plot: Path | None = typer.Option(
        None, "--plot", metavar="FOLDER", help="Write PNG plots of the design into this folder."
    ),
    bom: Path | None = _BOM_OPT,
    report: Path | None = _REPORT_OPT,
    verify: bool = _VERIFY_OPT,
) -> None:
    """The same figures as solve for one given design (an existing board)."""
    from picker import api

    run = _before_run(spec, format, output, report, precision, sampling, plot, bom, force)
    values = parse_design(set_, "--set")
    tols = _tolerances(tol)
    ids = parse_part_ids(part, "--part")
    if not values and not ids:
        raise SpecError(
            "expected the design: --set POSITION=VALUE or --part POSITION=ID", key="--set"
        )
    s = api.load_spec(spec)
    _check_bom_inputs(bom, force, spec, s)
    vcount = verify_count(verify, 1, s)  # before the run, not after
    note_stock_columns(part.stock_list for part in s.parts.values())
    with progress_bar(run.precision or s.yield_.precision) as progress:
        result = api.evaluate(
            s,
            values,
            tolerances=tols,
            parts=ids,
            samples=samples,
            seed=seed,
            precision=run.precision,
            sampling=run.sampling,
            progress=progress,
            plot_data=plot is not None or report is not None,
        )
    _after_run(result, run, "evaluate", spec, plot, bom, force, vcount)


def series_cmd(
    name: str = typer.Argument(..., metavar="NAME", help="E3, E6, E12, E24, E48, E96 or E192."),
    min: str = typer.Option(
        "1", "--min", metavar="VALUE", help="Lowest value, e.g. 1n (SI number or engineering text)."
    ),
    max: str = typer.Option("10", "--max", metavar="VALUE", help="Highest value, e.g. 10n."),
    unit: str = typer.Option(
        "F", "--unit", metavar="UNIT", help="F, H or ohm (for display and parsing)."
    ),
    format: str | None = typer.Option(
        None,
        "--format",
        "-f",
        metavar="FORMAT",
        help="table, json or csv (default: from the -o file's extension, else table).",
    ),
    output: Path | None = _OUTPUT_OPT,
    force: bool = _FORCE_OPT,
) -> None:
    """List the values a series holds between --min and --max."""
    from picker.parts import series as series_mod
    from picker.report.csvfile import BOM, csv_text
    from picker.units import format_quantity, parse_quantity

    fmt = output_format(format, output, ("table", "json", "csv"))
    if output is not None:
        check_output(output, force=force, inputs=[])
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
    shown = [format_quantity(float(v), unit) for v in vals]
    if fmt == "json":
        text = (
            json.dumps(
                {
                    "series": series_mod.canonical_name(name),
                    "unit": unit,
                    "values": [float(v) for v in vals],
                    "display": shown,
                },
                indent=2,
                ensure_ascii=False,
            )
            + "\n"
        )
    elif fmt == "csv":
        text = csv_text(
            [f"value_{unit}", "display"], [[float(v), d] for v, d in zip(vals, shown, strict=True)]
        )
    else:
        text = "".join(d + "\n" for d in shown)
    if output is not None:
        _wrote([atomic_write(output, (BOM + text) if fmt == "csv" else text, force=force)])
    else:
        sys.stdout.write(text)


def bench(
    quick: bool = typer.Option(False, "--quick", help="A smaller space, for a fast look."),
) -> None:
    """Print search and Monte Carlo speed figures on this machine."""
    from picker.bench import search as bench_mod

    bench_mod.main(quick=quick)
