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
import re
import sys
import time
from collections.abc import Callable, Iterable, Iterator, Sequence
from pathlib import Path
from typing import IO, TYPE_CHECKING

from picker.errors import SpecError

if TYPE_CHECKING:
    from rich.progress import TaskID

__all__ = [
    "BAR_DELAY",
    "VERIFY_HELP",
    "VERIFY_TOP_HELP",
    "FORMATS",
    "ProgressCallback",
    "check_format",
    "check_report",
    "command_line",
    "note_stock_columns",
    "output_format",
    "parse_assignments",
    "parse_design",
    "parse_part_ids",
    "parse_precision",
    "parse_sampling",
    "progress_bar",
    "spec_inputs",
    "unit_of",
    "verify_count",
]

#: Help of ``--verify`` and ``--verify-top`` (solve, evaluate).
VERIFY_HELP = (
    "Simulate the top designs in ngspice at nominal and at the two tolerance corners that "
    "push the frequency lowest and highest, and compare with the model: carrier, amplitude, "
    "envelope (steady or bursting), start-up time and a verdict per board. Needs an "
    "[amplifier] section and ngspice."
)
VERIFY_TOP_HELP = "How many designs --verify simulates (default 5)."

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


#: The format an output file's extension implies (``-o designs.csv`` writes CSV).
SUFFIX_FORMATS = {".json": "json", ".csv": "csv", ".html": "html"}


def output_format(fmt: str | None, output: object | None, allowed: Sequence[str] = FORMATS) -> str:
    """The output format from ``--format`` and the extension of ``-o FILE``.

    ``.json`` and ``.csv`` imply their format; any other extension (``.txt``, none)
    takes ``--format`` or the table. A ``--format`` that contradicts the extension
    is refused; ``.html`` is the report (``--report FILE.html``), not a format.
    """
    from pathlib import Path

    given = None if fmt is None else check_format(fmt, allowed)
    implied = None if output is None else SUFFIX_FORMATS.get(Path(str(output)).suffix.lower())
    if implied == "html":
        raise SpecError(
            "an HTML file is the report: use --report FILE.html; -o writes table, json or csv",
            key="--output",
        )
    if implied is not None and given is not None and given != implied:
        raise SpecError(
            f"--format {given} contradicts the file name {Path(str(output)).name!r} "
            f"(which means {implied}); drop one or make them agree",
            key="--format",
        )
    return implied or given or allowed[0]


def note_stock_columns(stocks: Iterable[object]) -> None:
    """One line on stderr per stock list with columns picker does not use (they
    are kept and carried to the BOM), each list once."""
    from picker.spec.stock import StockList, unknown_columns_note

    seen: set[str] = set()
    for st in stocks:
        if not isinstance(st, StockList) or str(st.source) in seen:
            continue
        seen.add(str(st.source))
        note = unknown_columns_note(st)
        if note:
            sys.stderr.write(f"picker: note: {note}\n")


def check_report(report: object, force: bool, inputs: Sequence[object]) -> None:
    """Refuse a bad ``--report`` before the run: not .html, an input, or existing without --force."""
    if report is None:
        return
    from pathlib import Path

    from picker.files import check_output

    p = Path(str(report))
    if p.suffix.lower() not in (".html", ".htm"):
        raise SpecError(f"expected a file name ending in .html; got {p.name!r}", key="--report")
    check_output(p, force=force, inputs=[Path(str(i)) for i in inputs], key="--report")


def command_line(*words: object) -> str:
    """``picker`` and the command's words (``picker solve spec.toml``), for a report's head."""
    import shlex

    return shlex.join(["picker", *(str(w) for w in words)])


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


def _position(item: str, key: str, example: str) -> tuple[str, str]:
    """``POS=TEXT`` -> (``POS`` in upper case, ``TEXT``); a SpecError naming ``key``."""
    from picker.tank import all_positions

    if "=" not in item:
        raise SpecError(f"expected POSITION=VALUE such as {example}; got {item!r}", key=key)
    pos, _, text = item.partition("=")
    pos = pos.strip().upper()
    if unit_of(pos) is None:
        *others, last = all_positions()
        raise SpecError(
            f"unknown position {pos!r}; expected {', '.join(others)} or {last}", key=key
        )
    return pos, text.strip()


#: A '+' between two values of a pair: not one right after an exponent's e or E.
_PAIR_SPLIT = re.compile(r"(?<![eE])\+")


def parse_design(items: list[str], key: str = "--set") -> dict[str, float | tuple[float, float]]:
    """``--set C1=4.7n`` or a parallel pair ``--set C1=4.7n+3.3n`` -> SI float or pair."""
    out: dict[str, float | tuple[float, float]] = {}
    for item in items:
        pos, text = _position(item, key, "C1=4.7n or C1=4.7n+3.3n")
        if pos in out:
            raise SpecError(f"position {pos} given twice", key=key)
        # a '+' joins two parts, except a leading sign and an exponent's sign (4.7e+3p)
        body = text.lstrip("+")
        halves = _PAIR_SPLIT.split(body)
        halves[0] = text[: len(text) - len(body)] + halves[0]
        if len(halves) > 2 or any(not h.strip() for h in halves):
            raise SpecError(
                f"expected one value or two joined by '+' such as 4.7n+3.3n; got {text!r}",
                key=f"{key} {pos}",
            )
        vals = [parse_assignments([f"{pos}={h}"], key, unit_of)[pos] for h in halves]
        out[pos] = (vals[0], vals[1]) if len(vals) == 2 else vals[0]
    return out


def parse_part_ids(items: list[str], key: str = "--part") -> dict[str, str]:
    """``--part C1=ID`` (or ``C1=ID1+ID2`` for a pair) -> position -> id text."""
    out: dict[str, str] = {}
    for item in items:
        pos, text = _position(item, key, "C1=CAP-0042")
        if pos in out:
            raise SpecError(f"position {pos} given twice", key=key)
        if not text or any(not t.strip() for t in text.split("+")):
            raise SpecError(f"expected a stock part id; got {text!r}", key=f"{key} {pos}")
        out[pos] = text
    return out


def verify_count(verify: bool, top: int, spec: object) -> int | None:
    """How many designs ``--verify`` checks (None without ``--verify``); a spec with no
    ``[amplifier]`` section is refused (there is no circuit to simulate)."""
    if not verify:
        return None
    if getattr(spec, "amplifier", None) is None:
        raise SpecError(
            "expected an [amplifier] section: --verify simulates the transistor stage",
            key="--verify",
        )
    return top


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
        prog.update(task, completed=samples, half=f"{half * 100:.2f} %")
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
