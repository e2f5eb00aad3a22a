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


def check_output(
    path: str | Path,
    *,
    force: bool = False,
    inputs: Iterable[str | Path] = (),
    key: str = "--output",
) -> Path:
    """Refuse an output path before any work is done (the checks of :func:`atomic_write`).

    Raises SpecError (exit status 2) for a path that is one of ``inputs``, an
    existing file without ``force``, a directory, a missing folder, or a name
    the system refuses (too long, no permission). Returns the resolved path.
    """
    p = Path(path)
    try:
        target = p.resolve()
        for i in inputs:
            try:
                same = Path(i).resolve() == target
            except OSError:
                continue
            if same:
                raise SpecError("refusing to write over an input file", file=str(p), key=key)
        if p.is_dir():
            raise SpecError("expected a file name, got a directory", file=str(p), key=key)
        if p.exists() and not force:
            raise SpecError("the file exists; pass --force to replace it", file=str(p), key=key)
        if not target.parent.is_dir():
            raise SpecError("the folder does not exist", file=str(p), key=key)
    except OSError as exc:
        raise SpecError(
            f"cannot write here ({exc.strerror or exc})", file=str(p), key=key
        ) from None
    return target


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
    over an existing file unless ``force`` is given (:func:`check_output`).
    A failure while writing (disk full, permission) is a SpecError too, and
    leaves neither the temporary file nor a half-written output behind.
    """
    p = Path(path)
    target = check_output(p, force=force, inputs=inputs, key=key)
    mode = "wb" if isinstance(data, bytes) else "w"
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=target.parent)
    except OSError as exc:
        raise SpecError(
            f"cannot write here ({exc.strerror or exc})", file=str(p), key=key
        ) from None
    try:
        with os.fdopen(
            fd, mode, **({} if mode == "wb" else {"encoding": "utf-8", "newline": ""})
        ) as fh:
            fh.write(data)
        os.replace(tmp, target)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise SpecError(
                f"cannot write the file ({exc.strerror or exc})", file=str(p), key=key
            ) from None
        raise
    return p
