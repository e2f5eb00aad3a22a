"""Two workers give the same bytes as one, and every process gives the same bytes.

The Monte Carlo shares its blocks of designs between threads
(picker.core.conditional.conditional_counts); every design's sums run over fixed row
chunks and its own contiguous row, so neither the worker count nor the block layout
can change a bit of the JSON.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from picker import api
from picker.report.designs import to_json

ROOT = Path(__file__).resolve().parents[1]
DEMOS = ["probe_exciter.toml", "production_exciter.toml", "clapp_vfo.toml"]


def _strip_version(text: str) -> str:
    return "\n".join(line for line in text.splitlines() if "picker_version" not in line)


@pytest.mark.parametrize("demo", DEMOS)
def test_one_and_two_workers_give_byte_identical_json(demo):
    spec = api.load_spec(ROOT / "demo_specs" / demo)
    one = to_json(api.solve(spec, workers=1, samples=4096))
    two = to_json(api.solve(spec, workers=2, samples=4096))
    assert one == two
    assert '"estimator": "conditional"' in one


def test_precision_mode_is_identical_across_workers():
    spec = api.load_spec(ROOT / "demo_specs" / "probe_exciter.toml")
    runs = [to_json(api.solve(spec, workers=w, precision=0.002, top=3)) for w in (1, 2)]
    assert runs[0] == runs[1]


def test_json_is_identical_across_processes_and_worker_counts():
    spec_path = ROOT / "demo_specs" / "probe_exciter.toml"
    cmd = [sys.executable, "-m", "picker", "solve", str(spec_path), "-f", "json"]
    a = subprocess.run(cmd, capture_output=True, text=True, check=True, timeout=300).stdout
    b = subprocess.run(cmd, capture_output=True, text=True, check=True, timeout=300).stdout
    assert a == b
    here = to_json(api.solve(api.load_spec(spec_path), workers=1))
    assert _strip_version(here) == _strip_version(a)
