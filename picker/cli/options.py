"""Command-line options shared by the commands: formats, ``POS=VALUE``, precision, sampling.

``solve`` and ``evaluate`` take ``--precision 0.5%`` and ``--sampling
random|sobol``. The progress bar (rich) goes to stderr, only when stderr is a
terminal and only once a run has taken about a second, so JSON on stdout,
files and test runs never see it.

Modules that pull in numpy (:mod:`picker.units`, :mod:`picker.parts.limits`,
:mod:`picker.tank`) and ``rich.progress`` are imported inside the functions that
need them: the command modules import this one at start-up, and ``picker --help``
stays fast.
"""

from __future__ import annotations

import contextlib
import sys
import time
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import IO, TYPE_CHECKING

from picker.errors import SpecError

if TYPE_CHECKING:
    from rich.progress import TaskID

__all__ = [
    "BAR_DELAY",
    "FORMATS",
    "ProgressCallback",
    "check_format",
    "parse_assignments",
    "parse_precision",
    "parse_sampling",
    "progress_bar",
    "spec_inputs",
    "unit_of",
]

#: Output formats of ``solve`` and ``evaluate``.
FORMATS = ("table", "json", "csv")

#: Seconds a run must take before the progress bar appears.
BAR_DELAY = 1.0

#: The ``progress(samples, cap, half_width)`` callback the API's precision batches call.
ProgressCallback = Callable[[int, int, float], None]


def check_format(fmt: str, allowed: Sequence[str] = FORMATS) -> str:
    """``--format`` in lower case; a SpecError naming ``--format`` if not in ``allowed``."""
    f = fmt.strip().lower()
    if f not in allowed:
        raise SpecError(f"expected one of {', '.join(allowed)}; got {fmt!r}", key="--format")
    return f


def unit_of(pos: str) -> str | None:
    """SI unit of a position of any registered topology (``C1`` -> ``F``), None if unknown."""
    from picker.tank import position_unit

    return position_unit(pos)


def parse_assignments(
    items: list[str], key: str, unit_of: Callable[[str], str | None]
) -> dict[str, float]:
    """Parse ``POS=VALUE`` pairs (``--set C1=4.7n``) into SI floats."""
    from picker.parts import limits
    from picker.tank import all_positions
    from picker.units import parse_quantity

    out: dict[str, float] = {}
    for item in items:
        if "=" not in item:
            raise SpecError(f"expected POSITION=VALUE such as C1=4.7n; got {item!r}", key=key)
        pos, _, text = item.partition("=")
        pos = pos.strip().upper()
        unit = unit_of(pos)
        if unit is None:
            *others, last = all_positions()
            raise SpecError(
                f"unknown position {pos!r}; expected {', '.join(others)} or {last}", key=key
            )
        if pos in out:
            raise SpecError(f"position {pos} given twice", key=key)
        out[pos] = parse_quantity(text.strip(), unit, key=f"{key} {pos}")
        if not out[pos] > 0:
            raise SpecError(f"expected a positive value; got {text!r}", key=f"{key} {pos}")
        if (why := limits.value_problem(out[pos], unit, text.strip())) is not None:
            raise SpecError(f"{why}; got {text!r}", key=f"{key} {pos}")
    return out


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
    """``--sampling``: ``random`` or ``sobol`` in lower case, None when not given."""
    if text is None:
        return None
    w = text.strip().lower()
    if w not in ("random", "sobol"):
        raise SpecError(f"expected random or sobol; got {text!r}", key="--sampling")
    return w


@contextlib.contextmanager
def progress_bar(
    precision: float | None = None, stream: IO[str] | None = None
) -> Iterator[ProgressCallback | None]:
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
    task: TaskID | None = None  # made once the run has taken BAR_DELAY
    done = False

    def update(samples: int, cap: int, half: float) -> None:
        nonlocal task, done
        if task is None:
            if time.monotonic() - start < BAR_DELAY:
                return
            prog.start()
            task = prog.add_task("mc", total=cap, half="")
        prog.update(task, completed=samples, half=f"{half:.2%}")
        if samples >= cap or (precision is not None and half <= precision):
            prog.stop()
            done = True

    try:
        yield update
    finally:
        if task is not None and not done:
            prog.stop()


def spec_inputs(spec: Path) -> list[Path]:
    """The spec and every file it names (stock lists, lot files): no output may be one.

    Read from the TOML without validating it (:func:`picker.spec.load.input_files`),
    so a command checks its outputs against all of them before the run.
    """
    from picker.spec.load import input_files  # pydantic: not at start-up

    return input_files(spec)
