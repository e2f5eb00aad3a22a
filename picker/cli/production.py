"""Command-line helpers of the production view: options, progress bar, plot files (edge).

``solve`` and ``evaluate`` take ``--precision 0.5%``, ``--sampling
random|sobol`` and ``--plot DIR``. The progress bar (rich) goes to stderr,
only when stderr is a terminal and only once a run has taken about a second,
so JSON on stdout, files and test runs never see it. Plots are written
through a temporary file in the target folder and a rename, and existing
files are kept unless ``--force`` is given.
"""

from __future__ import annotations

import contextlib
import os
import sys
import time
from collections.abc import Iterator
from pathlib import Path

from picker.errors import SpecError

#: File names written into the ``--plot`` folder.
PLOT_FILES = ("histogram.png", "yield_vs_tolerance.png", "drivers.png")

#: Seconds a run must take before the progress bar appears.
BAR_DELAY = 1.0


def parse_precision(text: str | None) -> float | None:
    """``--precision 0.5%`` -> 0.005 (a CI half-width above 0 and at most 50 %)."""
    if text is None:
        return None
    from picker.units import parse_fraction

    x = parse_fraction(text, key="--precision")
    if not 0 < x <= 0.5:
        raise SpecError(
            f"expected a half-width above 0 and at most 50 %, e.g. '0.5%'; got {text!r}",
            key="--precision",
        )
    return x


def parse_sampling(text: str | None) -> str | None:
    if text is None:
        return None
    w = text.strip().lower()
    if w not in ("random", "sobol"):
        raise SpecError(f"expected random or sobol; got {text!r}", key="--sampling")
    return w


@contextlib.contextmanager
def progress_bar(precision: float | None = None, stream=None) -> Iterator[object]:
    """A ``progress(samples, cap, half_width)`` callback drawing a rich bar, or ``None``.

    ``None`` when ``stream`` (default stderr) is not a terminal. The bar goes
    away once the batches are done: ``half_width <= precision`` or the cap.
    """
    stream = sys.stderr if stream is None else stream
    if not (hasattr(stream, "isatty") and stream.isatty()):
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    start = time.monotonic()
    prog = Progress(
        TextColumn("Monte Carlo"),
        BarColumn(),
        TextColumn("{task.completed:,.0f} of at most {task.total:,.0f} boards"),
        TextColumn("CI ±{task.fields[half]}"),
        TimeElapsedColumn(),
        console=Console(file=stream),
        transient=True,
    )
    state: dict = {}

    def update(samples: int, cap: int, half: float) -> None:
        if "task" not in state:
            if time.monotonic() - start < BAR_DELAY:
                return
            prog.start()
            state["task"] = prog.add_task("mc", total=cap, half="")
        prog.update(state["task"], completed=samples, half=f"{half:.2%}")
        if samples >= cap or (precision is not None and half <= precision):
            prog.stop()
            state["done"] = True

    try:
        yield update
    finally:
        if "task" in state and "done" not in state:
            prog.stop()


def _title(result) -> str:
    c = result.candidates[0]
    parts = ", ".join(f"{p} {format_value(pp.value, pp.unit)}" for p, pp in c.parts.items())
    return parts


def format_value(value: float, unit: str) -> str:
    from picker.units import format_quantity

    return format_quantity(value, unit)


def check_plot_folder(directory: Path, *, force: bool = False, inputs=()) -> list[Path]:
    """Refuse a --plot folder before any work: a file, an existing PNG without
    ``force``, a PNG that is one of ``inputs``. Returns the PNG paths."""
    from picker.files import check_output

    d = Path(directory)
    if d.exists() and not d.is_dir():
        raise SpecError("expected a folder for the plots, got a file", file=str(d), key="--plot")
    targets = [d / name for name in PLOT_FILES]
    if d.is_dir():
        for t in targets:
            check_output(t, force=force, inputs=inputs, key="--plot")
    return targets


def write_plots(result, directory: Path, *, force: bool = False, inputs=()) -> list[Path]:
    """Write the histogram, yield-vs-tolerance and driver PNGs of the best design.

    Raises
    ------
    SpecError
        ``directory`` is a file, a PNG exists and ``force`` is not given, a PNG
        would replace one of ``inputs``, the folder cannot be made or written,
        or the result holds no design.
    """
    from picker.report import plots

    d = Path(directory)
    targets = check_plot_folder(d, force=force, inputs=inputs)
    if not result.candidates or result.plot_data is None:
        raise SpecError("no design to plot", key="--plot")
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SpecError(
            f"cannot make the folder ({exc.strerror or exc})", file=str(d), key="--plot"
        ) from None
    pd = result.plot_data
    title = _title(result)
    temp = pd["temperature_c"]
    rng = result.spec.yield_.temperature
    where = f" at {temp:g} °C" if rng is not None else ""
    over = f" ({rng[0]:g} °C .. {rng[1]:g} °C)" if rng is not None else ""
    draw = {
        "histogram.png": lambda p: plots.plot_histogram(
            pd["frequencies"], pd["f_min"], pd["f_max"], pd["target"], p,
            title=f"Monte Carlo frequency spread{where}: {title}",
        ),
        "yield_vs_tolerance.png": lambda p: plots.plot_yield_vs_tolerance(
            pd["sweep"], p, title=f"Yield{over} against tolerance class: {title}",
            current=pd["tolerances"],
        ),
        "drivers.png": lambda p: plots.plot_drivers(
            pd["drivers"], p, title=f"What drives the frequency spread: {title}",
            confirm=pd["drivers_mc"],
        ),
    }  # fmt: skip
    written = []
    for t in targets:
        tmp = d / f".{t.stem}.{os.getpid()}.tmp.png"  # same folder: the rename is atomic
        try:
            draw[t.name](tmp)
            os.replace(tmp, t)
        except BaseException as exc:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            if isinstance(exc, OSError):
                raise SpecError(
                    f"cannot write the file ({exc.strerror or exc})", file=str(t), key="--plot"
                ) from None
            raise
        written.append(t)
    return written
