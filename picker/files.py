"""Files in and out: the one bounded reader, atomic writes that never clobber input, CSV guards.

Every loader reads its file with :func:`read_text`, so a missing file, a
directory, a FIFO or device, a file over :data:`MAX_INPUT_BYTES`, a symbolic
link loop, an unreadable file or bytes that are not UTF-8 become one-line
:class:`~picker.errors.SpecError` naming the file (exit status 2). A leading
UTF-8 byte-order mark is dropped for every kind of file.

Every output goes through :func:`check_output` before the run and
:func:`atomic_write` after it: never over a file the command reads (same device
and inode, so links and ``..`` paths count), never over anything but a regular
file, never over an existing file without ``force`` (an exclusive link, not a
check then a rename), with the mode the umask gives (an existing file's mode
under ``force``). Temporary files still open are listed in :data:`TEMPORARIES`
so an interrupted command removes them (:func:`remove_temporaries`).
"""

from __future__ import annotations

import csv
import errno
import io
import os
import stat
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path

from picker.errors import SpecError

#: Largest input file read, in bytes (64 MiB): a stock list of about a million
#: parts; more is a mistake (``/dev/zero``, a disk image), refused before reading.
MAX_INPUT_BYTES = 64 * 1024 * 1024

#: Temporary files being written right now; removed by :func:`remove_temporaries`.
TEMPORARIES: set[str] = set()

_BOM = b"\xef\xbb\xbf"


def _kind(mode: int) -> str:
    """What a non-regular file is, in words."""
    if stat.S_ISDIR(mode):
        return "a directory"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _os_reason(exc: OSError) -> str:
    """An operating-system error in words, with the two common ones spelt out."""
    if exc.errno == errno.ELOOP:
        return "a loop of symbolic links"
    if exc.errno in (errno.EACCES, errno.EPERM):
        return "permission denied"
    return str(exc.strerror or exc)


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
    """Read a whole regular text file, bounded; every fault is a one-line SpecError.

    The file is opened without blocking (``O_NONBLOCK``) and checked with
    ``fstat`` before a byte is read, so a FIFO with no writer, a device such as
    ``/dev/zero`` or a directory is refused at once instead of hanging or
    filling memory.

    Parameters
    ----------
    path:
        The file; named in messages as given (``str(path)``).
    what:
        What the file should be, for the messages ("a spec file").
    key:
        The key or location named beside the file, if any.
    encoding:
        ``"utf-8"`` or ``"utf-8-sig"``: the same here, a leading byte-order mark
        is dropped for every file (spreadsheets and some editors write one).
        No newline translation is done.
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
    cap = MAX_INPUT_BYTES

    def fault(template: str, **fields: object) -> SpecError:
        return SpecError(template.format(what=what, **fields), file=name, key=key)

    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError as exc:
        raise fault(missing, strerror=exc.strerror) from None
    except IsADirectoryError as exc:
        raise fault(directory, strerror=exc.strerror) from None
    except OSError as exc:
        raise fault(unreadable, strerror=_os_reason(exc)) from None
    try:
        st = os.fstat(fd)
        if stat.S_ISDIR(st.st_mode):
            raise fault(directory, strerror=os.strerror(errno.EISDIR))
        if not stat.S_ISREG(st.st_mode):
            raise fault(f"expected {{what}} (a regular file); got {_kind(st.st_mode)}")
        if st.st_size > cap:
            raise fault(
                f"expected {{what}} of at most {cap:,} bytes; the file holds {st.st_size:,}"
            )
        chunks: list[bytes] = []
        got = 0
        while got <= cap:
            chunk = os.read(fd, min(1 << 20, cap + 1 - got))
            if not chunk:
                break
            chunks.append(chunk)
            got += len(chunk)
        if got > cap:  # grew while being read
            raise fault(f"expected {{what}} of at most {cap:,} bytes; the file holds more")
        raw = b"".join(chunks)
    except OSError as exc:
        raise fault(unreadable, strerror=_os_reason(exc)) from None
    finally:
        os.close(fd)
    if raw.startswith(_BOM):
        raw = raw[len(_BOM) :]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise fault(undecodable, reason=exc.reason, start=exc.start) from None


def csv_rows(text: str, *, file: str) -> Iterator[list[str]]:
    """``csv.reader`` over ``text``; a cell over the csv module's limit or any other CSV
    fault is a one-line SpecError naming the file and the row (not a ``_csv.Error``).
    """
    reader = csv.reader(io.StringIO(text, newline=""))
    while True:
        try:
            row = next(reader)
        except StopIteration:
            return
        except csv.Error as exc:
            raise csv_fault(exc, file=file, row=reader.line_num) from None
        yield row


def csv_fault(exc: csv.Error, *, file: str, row: int | None = None) -> SpecError:
    """A ``csv.Error`` as a one-line SpecError (the cell-length limit spelt out)."""
    if "field larger than field limit" in str(exc):
        msg = (
            f"expected CSV cells of at most {csv.field_size_limit():,} characters; a cell is longer"
        )
    else:
        msg = f"expected CSV; {exc}"
    return SpecError(msg, file=file, key=None if row is None else f"row {row}")


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


def file_id(path: str | os.PathLike[str]) -> tuple[int, int] | None:
    """``(device, inode)`` of the file ``path`` names (links followed), None if none."""
    try:
        st = os.stat(path)
    except (OSError, ValueError):
        return None
    return st.st_dev, st.st_ino


def check_output(
    path: str | Path,
    *,
    force: bool = False,
    inputs: Iterable[str | Path] = (),
    key: str = "--output",
) -> Path:
    """Refuse an output path before any work is done (the checks of :func:`atomic_write`).

    Raises SpecError (exit status 2) for a path that is one of ``inputs`` (the
    same file by device and inode, or the same resolved path; with or without
    ``force``), anything but a regular file (a directory, device, FIFO), an
    existing file without ``force``, a missing folder, a folder the user may not
    write in, a symbolic link loop, or a name the system refuses. Returns the
    resolved path.
    """
    p = Path(path)

    def refuse(msg: str) -> SpecError:
        return SpecError(msg, file=str(p), key=key)

    try:
        try:
            st: os.stat_result | None = os.stat(p)
        except FileNotFoundError:
            st = None
        target = p.resolve(strict=False)
        ids = {i for i in (file_id(x) for x in inputs) if i is not None}
        resolved = set()
        for x in inputs:
            try:
                resolved.add(Path(x).resolve(strict=False))
            except (OSError, RuntimeError):
                continue
        if (st is not None and (st.st_dev, st.st_ino) in ids) or target in resolved:
            raise refuse("refusing to write over an input file (the command reads it)")
        if st is not None:
            if stat.S_ISDIR(st.st_mode):
                raise refuse("expected a file name, got a directory")
            if not stat.S_ISREG(st.st_mode):
                raise refuse(f"expected a regular file to write; got {_kind(st.st_mode)}")
            if not force:
                raise refuse("the file exists; pass --force to replace it")
        folder = target.parent
        if not folder.is_dir():
            raise refuse("the folder does not exist")
        if not os.access(folder, os.W_OK | os.X_OK):
            raise refuse("cannot write in the folder (permission denied)")
    except OSError as exc:
        raise refuse(f"cannot write here ({_os_reason(exc)})") from None
    except RuntimeError:  # pathlib's own loop detection on older Pythons
        raise refuse("cannot write here (a loop of symbolic links)") from None
    return target


def _umask() -> int:
    """The process's umask (read by setting it and setting it back)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def atomic_write(
    path: str | Path,
    data: str | bytes,
    *,
    force: bool = False,
    inputs: Iterable[str | Path] = (),
    key: str = "--output",
) -> Path:
    """Write ``data`` to ``path`` through a temporary file, then a link or a rename.

    Refuses (SpecError, exit status 2) to write over any of ``inputs`` and over
    anything but a regular file (:func:`check_output`). Without ``force`` the
    temporary file is hard-linked to ``path``, which fails if ``path`` exists by
    then (atomic: two writers cannot both win); with ``force`` it is renamed over
    ``path``. The new file gets the mode the umask gives (0666 less the umask),
    or the replaced file's mode. A failure or an interruption while writing
    leaves neither the temporary file nor a half-written output behind.
    """
    inputs = list(inputs)
    p = Path(path)
    target = check_output(p, force=force, inputs=inputs, key=key)
    try:
        old_mode = stat.S_IMODE(os.stat(target).st_mode)
    except OSError:
        old_mode = None
    mode = (0o666 & ~_umask()) if old_mode is None else old_mode
    tmp = ""
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=target.parent)
        TEMPORARIES.add(tmp)
        with os.fdopen(fd, "wb") as fb:
            os.fchmod(fb.fileno(), mode)
            fb.write(data if isinstance(data, bytes) else data.encode("utf-8"))
        if force:
            check_output(p, force=True, inputs=inputs, key=key)  # not a device by now
            os.replace(tmp, target)
        else:
            try:
                os.link(tmp, target)
            except FileExistsError:
                raise SpecError(
                    "the file exists; pass --force to replace it", file=str(p), key=key
                ) from None
            os.unlink(tmp)
        TEMPORARIES.discard(tmp)
    except BaseException as exc:
        if tmp:
            try:
                os.unlink(tmp)
            except OSError:
                pass
            TEMPORARIES.discard(tmp)
        if isinstance(exc, OSError):
            raise SpecError(
                f"cannot write the file ({_os_reason(exc)})", file=str(p), key=key
            ) from None
        raise
    return p


def remove_temporaries() -> None:
    """Remove every temporary file :func:`atomic_write` is writing (on an interrupt)."""
    for tmp in list(TEMPORARIES):
        try:
            os.unlink(tmp)
        except OSError:
            pass
        TEMPORARIES.discard(tmp)
