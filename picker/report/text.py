"""Text for the terminal: user text made safe, one percentage style, tables that fit.

* :func:`plain` turns any text the user gave (a title, a channel or unit name,
  a part id) into a :class:`rich.text.Text`, which rich never parses as markup,
  with control characters shown escaped (``\\x1b``, ``\\n``), so a title can
  neither restyle the table, crash it, nor send escape sequences to the terminal.
  The work is linear in the text's length.
* :func:`pct` and :func:`pct_range` print fractions as per cent with a space
  before the sign ("60.2 %", "93.1 %–94.6 %"), :func:`points` prints a change of
  a yield in percentage points ("+28.2 pp").
* :func:`print_fitted` prints a table whose columns are chosen by the console's
  width: the essential columns first, then the others by priority; what does
  not fit goes into a further table below, which repeats the key column (the
  rank), so no cell is ever cut short.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

from rich.console import Console
from rich.table import Table
from rich.text import Text

__all__ = [
    "Col",
    "plain",
    "pct",
    "pct_range",
    "points",
    "print_fitted",
    "printable",
    "signed_pct",
    "table_width",
]

# Control characters (Unicode category Cc) and the invisible format characters
# that reorder or hide text (bidirectional overrides, line/paragraph separators),
# mapped to a visible escape: one str.translate pass, linear in the length.
_ESCAPES: dict[int, str] = {
    c: (f"\\x{c:02x}" if c < 0x100 else f"\\u{c:04x}")
    for c in [*range(0x00, 0x20), *range(0x7F, 0xA0), 0x2028, 0x2029]
    + [*range(0x202A, 0x202F), *range(0x2066, 0x206A), 0x200E, 0x200F, 0xFEFF]
}
_ESCAPES.update({0x09: "\\t", 0x0A: "\\n", 0x0D: "\\r"})


def printable(text: object) -> str:
    """``text`` with control and direction-changing characters shown as escapes.

    >>> printable("A\\x1b[31mB\\n")
    'A\\\\x1b[31mB\\\\n'
    """
    return str(text).translate(_ESCAPES)


def plain(text: object, style: str = "") -> Text:
    """User text as a rich Text: never parsed as markup, control characters escaped."""
    return Text(printable(text), style=style)


def pct(x: float, digits: int = 1) -> str:
    """A fraction as per cent with a space: 0.602 -> "60.2 %"."""
    return f"{x * 100:.{digits}f} %"


def pct_range(lo: float, hi: float, digits: int = 1) -> str:
    """An interval of fractions as per cent: "93.1 %–94.6 %"."""
    return f"{pct(lo, digits)}–{pct(hi, digits)}"


def points(x: float, digits: int = 1) -> str:
    """A change of a fraction in percentage points: 0.282 -> "+28.2 pp"."""
    return f"{x * 100:+.{digits}f} pp"


def signed_pct(x: float, digits: int = 2) -> str:
    """A relative change as a signed per cent: 0.001 -> "+0.10 %"."""
    return f"{x * 100:+.{digits}f} %"


@dataclass
class Col:
    """One column of a fitted table.

    ``cells`` are plain strings or Text (user text goes through :func:`plain`);
    ``essential`` columns are placed first, then the others in order of
    ``priority`` (lower first); each goes into the current table while it fits,
    else starts the next one.
    """

    header: str
    cells: list[str | Text] = field(default_factory=list)
    justify: str = "right"
    essential: bool = False
    priority: int = 0

    def width(self) -> int:
        """Widest cell or header, in terminal cells."""
        return max([Text(self.header).cell_len] + [_cell_len(c) for c in self.cells])


def _cell_len(c: str | Text) -> int:
    return c.cell_len if isinstance(c, Text) else Text(c).cell_len


def table_width(widths: Sequence[int]) -> int:
    """Width of a rich table with these column widths: a padding cell on both
    sides of each column (edges padded) and one rule between and around them."""
    return sum(widths) + 3 * len(widths) + 1


def _groups(cols: Sequence[Col], width: int, key: int) -> list[list[int]]:
    """Indices of the columns of each stacked table (key columns repeated in each)."""
    keys = list(range(key))
    rest = [i for i in range(key, len(cols))]
    order = sorted(rest, key=lambda i: (not cols[i].essential, cols[i].priority, i))
    w = [c.width() for c in cols]
    groups: list[list[int]] = []
    current = list(keys)
    for i in order:
        if table_width([w[j] for j in [*current, i]]) <= width or len(current) == len(keys):
            current.append(i)
        else:
            groups.append(current)
            current = [*keys, i]
    groups.append(current)
    return [sorted(g) for g in groups]


def print_fitted(
    console: Console,
    cols: Sequence[Col],
    *,
    key: int = 1,
    width: int | None = None,
    title: str | None = None,
) -> None:
    """Print ``cols`` as one table, or as several stacked ones when the console is narrow.

    The first ``key`` columns (the rank) start every table. On a terminal too
    narrow for even one column beside the key, that column's cells fold onto
    more lines rather than being cut.
    """
    avail = console.width if width is None else width
    n_rows = max((len(c.cells) for c in cols), default=0)
    for g, idx in enumerate(_groups(cols, avail, key)):
        t = Table(pad_edge=True, title=title if g == 0 else None, title_justify="left")
        for i in idx:
            t.add_column(
                cols[i].header,
                justify=cols[i].justify,  # type: ignore[arg-type]
                no_wrap=True,
                overflow="fold",
            )
        for r in range(n_rows):
            t.add_row(*(cols[i].cells[r] if r < len(cols[i].cells) else "" for i in idx))
        console.print(t)
