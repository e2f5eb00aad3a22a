"""The ``picker`` command: a thin typer client of :mod:`picker.api`.

Exit statuses: 0 designs found; 1 valid spec but nothing meets it; 2 bad
input (one line naming the file, the key, what was expected and what was
given); 3 a solver or simulator failed.

Every command is a plain function in its own module (:mod:`picker.cli.solve`,
:mod:`picker.cli.circuit`, :mod:`picker.cli.calibrate`,
:mod:`picker.cli.consolidate`), registered on the app below.
"""

from __future__ import annotations

import signal
import sys
from types import FrameType, ModuleType

import typer

from picker.cli import calibrate, circuit, consolidate
from picker.cli.solve import bench, evaluate, series_cmd, solve
from picker.errors import InfeasibleError, PickerError, SolverError, SpecError
from picker.files import remove_temporaries

app = typer.Typer(
    name="picker",
    help="Pick standard-value parts for LC oscillators and rank designs by Monte Carlo yield.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    context_settings={"help_option_names": ["-h", "--help"]},
)


def _version(value: bool) -> None:
    """``picker --version``: print the version and stop."""
    if value:
        from picker import __version__

        sys.stdout.write(f"picker {__version__}\n")
        raise typer.Exit(0)


@app.callback()
def _main(
    version: bool = typer.Option(
        False,
        "--version",
        "-V",
        callback=_version,
        is_eager=True,
        help="Print picker's version and exit.",
    ),
) -> None:
    """Pick standard-value parts for LC oscillators and rank designs by Monte Carlo yield."""


app.command()(solve)
app.command()(evaluate)
app.command("series")(series_cmd)
app.command()(bench)
app.command("netlist")(circuit.netlist)
app.command("simulate")(circuit.simulate)
app.command("calibrate")(calibrate.calibrate_cmd)
app.command("consolidate")(consolidate.consolidate_cmd)

# The click that typer runs on: vendored as typer._click by newer typer, the click
# package under older typer (pyproject asks typer>=0.12); both are looked in.
_CLICK: list[ModuleType] = []
try:
    from typer._click import exceptions as _vendored_click
except ImportError:  # pragma: no cover - older typer
    pass
else:
    _CLICK.append(_vendored_click)
try:
    from click import exceptions as _click
except ImportError:  # newer typer does not need the click package
    pass
else:  # pragma: no cover - older typer
    _CLICK.append(_click)


def _error(msg: str) -> None:
    sys.stderr.write(f"picker: error: {' '.join(msg.split())}\n")


def _click_exceptions(name: str) -> tuple[type[BaseException], ...]:
    """Exception classes of the click that typer runs on (vendored or not)."""
    found: list[type[BaseException]] = []
    for mod in _CLICK:
        cls = getattr(mod, name, None)
        if cls is not None and cls not in found:
            found.append(cls)
    return tuple(found)


class Interrupted(BaseException):
    """Ctrl-C, SIGTERM or SIGHUP: not an ``Exception``, so nothing on the way catches it."""


#: Signals that stop a run: each removes the temporary files and exits 130.
STOP_SIGNALS = tuple(
    getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, name)
)


def _stop(signum: int, frame: FrameType | None) -> None:
    raise Interrupted(signum)


def main(argv: list[str] | None = None) -> None:
    """Entry point: run the app and map errors to one line and an exit status.

    Ctrl-C, SIGTERM and SIGHUP stop the run: the writers' ``finally`` clauses and
    :func:`picker.files.remove_temporaries` remove every temporary file, one line
    ("interrupted") goes to stderr and the exit status is 130.
    """
    previous = {}
    try:
        for sig in STOP_SIGNALS:
            if signal.getsignal(sig) is not signal.SIG_IGN:  # nohup's ignored SIGHUP stays so
                previous[sig] = signal.signal(sig, _stop)
    except ValueError:  # not the main thread (an embedding program): leave its handlers
        pass
    try:
        _run(argv)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def _run(argv: list[str] | None) -> None:
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
    except (KeyboardInterrupt, Interrupted):
        remove_temporaries()
        _error("interrupted")
        sys.exit(130)
    except BrokenPipeError:
        sys.exit(0)
    sys.exit(rv if isinstance(rv, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    main()
