"""Files in and out: the one reader, atomic writes that never clobber input, CSV cell guard.

Every loader reads its file with :func:`read_text`, so a missing file, a
directory, an unreadable file or bytes that are not UTF-8 become one-line
:class:`~picker.errors.SpecError` naming the file (exit status 2).
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable
from pathlib import Path

from picker.errors import SpecError


def read_text(
    path: str | os.PathLike[str],
    *,
    what: str,
    key: str | None = None,
    encoding: str = "utf-8",
    missing: str = "no such file",
    directory: str = "expected {what}, got a directory",
    unreadable: str = "cannot read the file ({strerror})",
    undecodable: str = "expected UTF-8 text; byte {start} is not",
) -> str:
    """Read a whole text file; every fault is a one-line SpecError naming the file.

    Parameters
    ----------
    path:
        The file; named in messages as given (``str(path)``).
    what:
        What the file should be, for the messages ("a spec file").
    key:
        The key or location named beside the file, if any.
    encoding:
        ``"utf-8"``, or ``"utf-8-sig"`` to drop a leading byte-order mark (CSV
        files saved by spreadsheets carry one). No newline translation is done.
    missing, directory, unreadable, undecodable:
        The wording of each fault: no such file, a directory, any other
        operating-system error, bytes that are not UTF-8. Each is formatted
        with ``what``, ``strerror`` (the system's reason), ``reason`` and
        ``start`` (the decoder's reason and the offset of the bad byte).

    Returns
    -------
    str
        The decoded text.
    """
    name = str(path)

    def fault(template: str, **fields: object) -> SpecError:
        return SpecError(template.format(what=what, **fields), file=name, key=key)

    try:
        raw = Path(path).read_bytes()
    except FileNotFoundError as exc:
        raise fault(missing, strerror=exc.strerror) from None
    except IsADirectoryError as exc:
        raise fault(directory, strerror=exc.strerror) from None
    except OSError as exc:
        raise fault(unreadable, strerror=exc.strerror) from None
    try:
        return raw.decode(encoding)
    except UnicodeDecodeError as exc:
        raise fault(undecodable, reason=exc.reason, start=exc.start) from None


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
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=target.parent)
    except OSError as exc:
        raise SpecError(
            f"cannot write here ({exc.strerror or exc})", file=str(p), key=key
        ) from None
    try:
        if isinstance(data, bytes):
            with os.fdopen(fd, "wb") as fb:
                fb.write(data)
        else:
            with os.fdopen(fd, "w", encoding="utf-8", newline="") as ft:
                ft.write(data)
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
