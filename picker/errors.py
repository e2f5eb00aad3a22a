"""The package's exception family.

The CLI maps each type to an exit status: ``SpecError`` (bad input) -> 2,
``InfeasibleError`` (valid input, nothing meets it) -> 1, ``SolverError`` -> 3.
Every error carries a one-line message that names where the fault is
(file, key or row) and what was expected.
"""

from __future__ import annotations


class PickerError(Exception):
    """Base of every error picker raises on purpose."""


class SpecError(PickerError, ValueError):
    """Bad user input: a spec, stock list, measurement file or command-line value.

    Parameters
    ----------
    message:
        What was expected and what was given, in one line.
    file:
        The file the value came from (``None`` for a command-line value).
    key:
        Key path (``parts.C1.tolerance``) or location (``row 12, column value``).
    """

    def __init__(self, message: str, *, file: str | None = None, key: str | None = None) -> None:
        self.message = message
        self.file = file
        self.key = key
        super().__init__(self.one_line())

    def one_line(self) -> str:
        where = ": ".join(x for x in (self.file, self.key) if x)
        text = f"{where}: {self.message}" if where else self.message
        return " ".join(text.split())  # never more than one line

    def located(self, *, file: str | None = None, key: str | None = None) -> SpecError:
        """Return a copy with the file and/or key filled in where they were unknown."""
        k = self.key
        if key and k:
            k = f"{key}.{k}"
        elif key:
            k = key
        return SpecError(self.message, file=self.file or file, key=k)


class InfeasibleError(PickerError):
    """The input is valid but no design meets it."""


class SolverError(PickerError, RuntimeError):
    """An optimiser or external simulator failed in a way the input did not cause."""


class KeyedError(ValueError):
    """A ValueError that knows which sub-key of a table it belongs to.

    Raised inside the spec's validators, where pydantic expects a ValueError;
    the spec loader turns it into a :class:`SpecError` whose key path ends in
    ``key`` (``parts.C1`` + ``tolerance``).
    """

    def __init__(self, key: str, message: str) -> None:
        self.key = key
        self.message = message
        super().__init__(f"@{key}@{message}")
