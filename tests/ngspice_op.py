"""ngspice's operating point (``op``) for the tests: one runner, written apart from picker.

The tests that check a bias point against ngspice run a circuit's element and model lines
through ngspice's ``op`` analysis in batch mode and read the values it prints. This module
is that runner. It finds the binary with picker's ``ngspice_path`` (a PATH lookup) but
writes the deck and reads ngspice's printout itself, so a reference taken here never passes
through picker.circuit.ngspice's reader. Imported by the tests as ``from ngspice_op import
...`` (pytest puts tests/ on the path, as for ``amplifiers``).
"""

from __future__ import annotations

import re
import subprocess
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path

import pytest

from picker.circuit.ngspice import ngspice_path
from picker.errors import SolverError

# ngspice's ``print`` of a scalar vector: ``name = value`` on a line of its own
_PRINTED = re.compile(r"^(\S+) = (\S+)$", flags=re.M)


def need_ngspice() -> str:
    """ngspice's path; a failure (never a skip) where it is missing: CI installs it."""
    try:
        return ngspice_path()
    except SolverError as exc:
        pytest.fail(f"{exc} (these tests do not skip; CI installs ngspice)")


def ngspice_op(
    lines: Iterable[str],
    models: Iterable[str] = (),
    *,
    lets: Mapping[str, str] | None = None,
    prints: Iterable[str] = (),
    title: str = "op",
) -> dict[str, float]:
    """ngspice's operating point of ``lines`` + ``models``: the printed values by name.

    ``lets`` names device quantities to print (``{"icq": "@q1[ic]"}``); ``prints`` are
    plain vectors (``"v(b)"``). The result maps each printed name, as ngspice writes it
    (lower case), to its value; a name ngspice did not print fails the test with its
    error output.
    """
    lets = dict(lets or {})
    names = [*lets, *prints]
    deck = [title, *lines, *models, ".control", "op"]
    deck += [f"let {name} = {expr}" for name, expr in lets.items()]
    deck += ["print " + " ".join(names), ".endc", ".end"]
    with tempfile.TemporaryDirectory(prefix="picker-op-") as tmp:
        cir = Path(tmp) / "op.cir"
        cir.write_text("\n".join(deck) + "\n", encoding="utf-8")
        run = subprocess.run(
            [need_ngspice(), "-b", str(cir)], capture_output=True, text=True, timeout=60
        )
    found = {k: float(v) for k, v in _PRINTED.findall(run.stdout)}
    missing = [n for n in names if n.lower() not in found]
    if missing:
        pytest.fail(f"ngspice's op printed no {missing}: {run.stderr.strip()[-400:]}")
    return found
