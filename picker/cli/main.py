"""The ``picker`` command: a thin typer client of :mod:`picker.api.solve`.

Exit statuses: 0 designs found; 1 valid spec but nothing meets it; 2 bad
input (one line naming the file, the key, what was expected and what was
given); 3 a solver or simulator failed.
"""

from __future__ import annotations

import importlib
import io
import sys
from pathlib import Path

import typer
from rich.console import Console

from picker.errors import InfeasibleError, PickerError, SolverError, SpecError

app = typer.Typer(
    name="picker",
    help="Pick standard-value parts for LC oscillators and rank designs by Monte Carlo yield.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)

FORMATS = ("table", "json", "csv")


def _check_format(fmt: str, allowed=FORMATS) -> str:
    f = fmt.strip().lower()
    if f not in allowed:
        raise SpecError(f"expected one of {', '.join(allowed)}; got {fmt!r}", key="--format")
    return f


def parse_assignments(items: list[str], key: str, unit_of) -> dict[str, float]:
    """Parse ``POS=VALUE`` pairs (``--set C1=4.7n``) into SI floats."""
    from picker.parts import limits
    from picker.units import parse_quantity

    out: dict[str, float] = {}
    for item in items:
        if "=" not in item:
            raise SpecError(f"expected POSITION=VALUE such as C1=4.7n; got {item!r}", key=key)
        pos, _, text = item.partition("=")
        pos = pos.strip().upper()
        unit = unit_of(pos)
        if unit is None:
            raise SpecError(f"unknown position {pos!r}; expected C1, C2, C3 or L", key=key)
        if pos in out:
            raise SpecError(f"position {pos} given twice", key=key)
        out[pos] = parse_quantity(text.strip(), unit, key=f"{key} {pos}")
        if not out[pos] > 0:
            raise SpecError(f"expected a positive value; got {text!r}", key=f"{key} {pos}")
        if (why := limits.value_problem(out[pos], unit, text.strip())) is not None:
            raise SpecError(f"{why}; got {text!r}", key=f"{key} {pos}")
    return out


def _unit_of(pos: str):
    return {"C1": "F", "C2": "F", "C3": "F", "L": "H"}.get(pos)


def _check_outputs(output: Path | None, plot: Path | None, force: bool, spec: Path) -> None:
    """Refuse a bad --output or --plot before the (slow) run, not after it."""
    from picker.files import check_output

    if output is not None:
        check_output(output, force=force, inputs=[spec])
    if plot is not None:
        from picker.cli.production import check_plot_folder

        check_plot_folder(plot, force=force, inputs=[spec])


def _emit(result, fmt: str, output: Path | None, force: bool, inputs) -> None:
    from picker.report import designs as report

    if fmt == "json":
        text = report.to_json(result)
    elif fmt == "csv":
        text = report.to_csv(result)
    else:
        text = None
    if output is not None:
        from picker.files import atomic_write

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


@app.command()
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
    from picker.api import solve as api
    from picker.cli import production as pc

    fmt = _check_format(format)
    prec, samp = pc.parse_precision(precision), pc.parse_sampling(sampling)
    _check_outputs(output, plot, force, spec)
    s = api.load_spec(spec)
    with pc.progress_bar(prec or s.yield_.precision) as progress:
        result = api.solve(s, top=top, samples=samples, seed=seed, candidates=candidates,
                           precision=prec, sampling=samp, progress=progress,
                           plot_data=plot is not None)  # fmt: skip
    if plot is not None and result.status == "ok":
        pc.write_plots(result, plot, force=force, inputs=[spec])
    _emit(result, fmt, output, force, [spec])
    if result.status != "ok":
        raise typer.Exit(1)


@app.command()
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
    from picker.api import solve as api
    from picker.cli import production as pc
    from picker.units import parse_tolerance

    fmt = _check_format(format)
    prec, samp = pc.parse_precision(precision), pc.parse_sampling(sampling)
    _check_outputs(output, plot, force, spec)
    s = api.load_spec(spec)
    values = parse_assignments(set_, "--set", _unit_of)
    tols = {}
    for item in tol:
        pos, eq, text = item.partition("=")
        if not eq or _unit_of(pos.strip().upper()) is None:
            raise SpecError(f"expected POSITION=TOLERANCE such as L=5%; got {item!r}", key="--tol")
        tols[pos.strip().upper()] = parse_tolerance(
            text.strip(), key=f"--tol {pos.strip().upper()}"
        )
    with pc.progress_bar(prec or s.yield_.precision) as progress:
        result = api.evaluate(s, values, tolerances=tols, samples=samples, seed=seed,
                              precision=prec, sampling=samp, progress=progress,
                              plot_data=plot is not None)  # fmt: skip
    if plot is not None:
        pc.write_plots(result, plot, force=force, inputs=[spec])
    _emit(result, fmt, output, force, [spec])


@app.command("series")
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
    import json

    from picker.parts import series as series_mod
    from picker.units import format_quantity, parse_quantity

    fmt = _check_format(format, ("table", "json"))
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


@app.command()
def bench(
    quick: bool = typer.Option(False, "--quick", help="A smaller space, for a fast look."),
) -> None:
    """Print search and Monte Carlo speed figures on this machine."""
    from picker.bench import search as bench_mod

    bench_mod.main(quick=quick)


def _register_extensions() -> None:
    """Commands that live in their own modules (circuit, calibration, consolidation)."""
    import importlib

    for name in ("picker.cli.circuit", "picker.cli.calibrate", "picker.cli.consolidate"):
        try:
            mod = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:
                continue
            raise
        mod.register(app)


_register_extensions()


def _error(msg: str) -> None:
    sys.stderr.write(f"picker: error: {' '.join(msg.split())}\n")


def _click_exceptions(name: str) -> tuple[type[BaseException], ...]:
    """Exception classes of the click that typer runs on (vendored or not)."""
    found = []
    for mod_name in ("typer._click.exceptions", "click.exceptions"):
        try:
            mod = importlib.import_module(mod_name)
        except ImportError:
            continue
        cls = getattr(mod, name, None)
        if cls is not None and cls not in found:
            found.append(cls)
    return tuple(found)


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the app and map errors to one line and an exit status."""
    no_args = _click_exceptions("NoArgsIsHelpError")
    usage = _click_exceptions("UsageError")
    abort = _click_exceptions("Abort")
    try:
        rv = app(args=argv, prog_name="picker", standalone_mode=False)
    except SpecError as exc:
        _error(exc.one_line())
        sys.exit(2)
    except InfeasibleError as exc:
        _error(str(exc))
        sys.exit(1)
    except SolverError as exc:
        _error(str(exc))
        sys.exit(3)
    except PickerError as exc:
        _error(str(exc))
        sys.exit(2)
    except no_args as exc:
        ctx = getattr(exc, "ctx", None)
        sys.stdout.write((ctx.get_help() + "\n") if ctx else "")
        sys.exit(2)
    except usage as exc:
        _error(exc.format_message())  # type: ignore[attr-defined]
        sys.exit(2)
    except abort:
        _error("aborted")
        sys.exit(130)
    except KeyboardInterrupt:
        _error("interrupted")
        sys.exit(130)
    except BrokenPipeError:
        sys.exit(0)
    sys.exit(rv if isinstance(rv, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    main()
