"""The designs single tests are about, pinned with their ngspice records.

``tests/validation/pinned.json`` holds them, copied from the validation sets they were
drawn in (its ``about`` says when and from which commit), so a set can be redrawn
without changing what a test looks at. The statistics tests read the sets themselves.
"""

from __future__ import annotations

from functools import cache
from pathlib import Path
from typing import Any

from picker.circuit.validation import Design, load_reference

PINNED = Path(__file__).parent / "validation" / "pinned.json"


@cache
def _all() -> dict[str, tuple[Design, dict[str, Any]]]:
    designs, answers = load_reference(PINNED)
    return {d.id: (d, a) for d, a in zip(designs, answers, strict=True)}


def pinned(ident: str) -> tuple[Design, dict[str, Any]]:
    """The pinned design ``ident`` (e.g. "d015") and its ngspice record."""
    return _all()[ident]
