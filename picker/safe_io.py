"""Safe output: atomic writes that never clobber input or existing files, CSV cell guard."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable
from pathlib import Path

from picker.errors import SpecError

#: First characters that make a spreadsheet read a cell as a formula
#: (OWASP, "CSV Injection"; common practice).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r", "\n")


def csv_safe(cell: object) -> str:
    """Neutralise a text cell a spreadsheet would run as a formula (prefix a quote).

    Plain numbers (including negative ones such as "-0.5") are left alone:
    a spreadsheet reads them as numbers, not formulas.
    """
    text = "" if cell is None else str(cell)
    if text.startswith(_FORMULA_START):
        try:
            float(text)
        except ValueError:
            return "'" + text
    return text


def atomic_write(
    path: str | Path,
    data: str | bytes,
    *,
    force: bool = False,
    inputs: Iterable[str | Path] = (),
    key: str = "--output",
) -> Path:
    """Write ``data`` to ``path`` through a temporary file and a rename.

    Refuses (SpecError, exit status 2) to write over any of ``inputs``, and
    over an existing file unless ``force`` is given.
    """
    p = Path(path)
    target = p.resolve()
    for i in inputs:
        try:
            if Path(i).resolve() == target:
                raise SpecError("refusing to write over an input file", file=str(p), key=key)
        except OSError:
            continue
    if p.exists() and not force:
        raise SpecError("the file exists; pass --force to replace it", file=str(p), key=key)
    if p.exists() and p.is_dir():
        raise SpecError("expected a file name, got a directory", file=str(p), key=key)
    parent = target.parent
    if not parent.is_dir():
        raise SpecError("the folder does not exist", file=str(p), key=key)
    mode = "wb" if isinstance(data, bytes) else "w"
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=parent)
    try:
        with os.fdopen(
            fd, mode, **({} if mode == "wb" else {"encoding": "utf-8", "newline": ""})
        ) as fh:
            fh.write(data)
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return p
