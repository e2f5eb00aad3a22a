"""Every command on every demo spec prints what the golden files recorded.

The goldens (``tests/goldens/``, written by ``scripts/make_goldens.py``) were
recorded before the staged-layout redesign; a refactoring that moves code must
leave them byte-identical (the version field and CP-SAT's wall-clock time
aside). A change meant to alter output regenerates them in the same commit and
says why. Plausible bugs caught: an import moved to the wrong module, a
position hard-coded differently in two places, a changed default or rounding.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
_spec = importlib.util.spec_from_file_location("make_goldens", ROOT / "scripts" / "make_goldens.py")
assert _spec is not None and _spec.loader is not None
goldens = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(goldens)


@pytest.mark.parametrize("name", goldens.names())
def test_golden(name: str) -> None:
    expected = (goldens.GOLDEN / name).read_text(encoding="utf-8")
    assert goldens.run(name) == expected
