"""Shared test helpers: paths to the bundled demo specs and a CLI runner."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_specs"


@pytest.fixture
def run_cli(capsys):
    """Run ``picker`` in-process; returns (exit status, stdout, stderr)."""
    from picker.cli.main import main

    def run(*argv: str):
        try:
            main(list(argv))
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
        out = capsys.readouterr()
        return code, out.out, out.err

    return run


def write_spec(tmp_path: Path, text: str, name: str = "spec.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


PYTHON = sys.executable
