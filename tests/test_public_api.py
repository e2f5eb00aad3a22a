"""The public API at the top of the package: explicit, lazy and complete.

Plausible bugs caught: a name listed in ``__all__`` that no longer resolves
after a module moved; ``import picker`` pulling in numpy/scipy/pydantic eagerly
(slow start-up of the command line); ``dir(picker)`` hiding the entry points.
"""

from __future__ import annotations

import subprocess
import sys

import pytest

import picker


@pytest.mark.parametrize("name", [n for n in picker.__all__ if n != "__version__"])
def test_every_public_name_resolves(name: str) -> None:
    obj = getattr(picker, name)
    assert obj is not None
    assert name in dir(picker)


def test_entry_points_are_listed() -> None:
    for name in ("solve", "evaluate", "load_spec", "SolveResult", "SpecError", "InfeasibleError"):
        assert name in dir(picker)
        assert name in picker.__all__


def test_errors_are_the_package_family() -> None:
    assert issubclass(picker.SpecError, picker.PickerError)
    assert issubclass(picker.SpecError, ValueError)  # catchable as the built-in too
    assert issubclass(picker.SolverError, picker.PickerError)


def test_unknown_name_is_an_attribute_error() -> None:
    with pytest.raises(AttributeError, match="no_such_name"):
        picker.no_such_name  # noqa: B018


def test_import_is_lazy() -> None:
    code = (
        "import sys, picker; "
        "print(sorted(m for m in ('numpy', 'scipy', 'pydantic', 'rich', 'typer') "
        "if m in sys.modules))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout
    assert out.strip() == "[]"


def test_solve_from_the_top(tmp_path) -> None:
    spec_file = tmp_path / "s.toml"
    spec_file.write_text(
        'topology = "colpitts"\n[frequency]\ntarget = "1 MHz"\nwindow = "±5 %"\n'
        "[feedback]\nmin = 0.2\nmax = 1.0\n"
        '[parts.C1]\nseries = "E12"\nmin = "100 pF"\nmax = "1 nF"\n'
        '[parts.C2]\nseries = "E12"\nmin = "100 pF"\nmax = "2.2 nF"\n'
        '[parts.L]\nseries = "E12"\nmin = "1 uH"\nmax = "1 mH"\n',
        encoding="utf-8",
    )
    result = picker.solve(picker.load_spec(spec_file))
    assert isinstance(result, picker.SolveResult)
    best = result.candidates[0].values
    # Colpitts, Sedra & Smith: f = 1 / (2π √(L · C1 C2 / (C1 + C2))), within the ±5 % window
    import math

    c = best["C1"] * best["C2"] / (best["C1"] + best["C2"])
    f = 1 / (2 * math.pi * math.sqrt(best["L"] * c))
    assert abs(f / 1e6 - 1) <= 0.05
