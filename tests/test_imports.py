"""The command path imports only what it uses.

``picker --help`` loads none of numpy, scipy, pydantic, matplotlib or ortools;
``picker solve`` (ideal tank, table or JSON) loads no plotting (matplotlib), no CP-SAT
(ortools), no ngspice runner, no module of the loaded model (its amplifier stages,
nodal network, loaded search and figures: only an ``[amplifier]`` section needs them)
and neither scipy.stats nor scipy.optimize (about a
second of imports between them on the benchmark machine): its intervals and quantiles
come from scipy.special (tests/test_montecarlo.py and tests/test_distributions.py
compare them with scipy.stats). Each check runs the command in a fresh interpreter and
lists sys.modules afterwards.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

PROBE = """
import contextlib, io, json, sys
from picker.cli.main import main
sys.argv = ["picker", *json.loads(sys.argv[1])]
out = io.StringIO()
try:
    with contextlib.redirect_stdout(out):
        main()
except SystemExit as exc:
    code = exc.code
print(json.dumps({"code": code, "modules": sorted(sys.modules)}))
"""


def _modules(args: list[str]) -> tuple[int, set[str]]:
    r = subprocess.run(
        [sys.executable, "-c", PROBE, json.dumps(args)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        check=True,
        timeout=300,
    )
    got = json.loads(r.stdout.strip().splitlines()[-1])
    return got["code"], set(got["modules"])


def _loaded(mods: set[str], name: str) -> bool:
    return name in mods or any(m.startswith(name + ".") for m in mods)


def test_help_imports_no_numerics():
    code, mods = _modules(["--help"])
    assert code == 0
    for heavy in ("numpy", "scipy", "pydantic", "matplotlib", "ortools"):
        assert not _loaded(mods, heavy), heavy


@pytest.mark.parametrize("fmt", ["table", "json"])
def test_solve_imports_no_plots_cp_sat_ngspice_or_scipy_stats(fmt):
    code, mods = _modules(["solve", "demo_specs/probe_exciter.toml", "-f", fmt])
    assert code == 0
    assert _loaded(mods, "numpy") and _loaded(mods, "scipy.special")  # it did run
    for heavy in (
        "matplotlib",
        "ortools",
        "scipy.stats",
        "scipy.optimize",
        "picker.circuit.ngspice",
        "picker.report.plots",
        "picker.circuit.stages",
        "picker.circuit.network",
        "picker.circuit.loaded",
        "picker.circuit.loaded_search",
        "picker.circuit.figures",
        "picker.circuit.steady",
    ):
        assert not _loaded(mods, heavy), heavy


def test_an_amplifier_spec_still_checks_its_stage(tmp_path):
    """The other side of the lazy imports: with ``[amplifier]`` the stage registry loads
    and names its stages (a made-up stage is refused with the list of real ones)."""
    text = (ROOT / "demo_specs" / "colpitts_bjt.toml").read_text(encoding="utf-8")
    spec = tmp_path / "bad_stage.toml"
    spec.write_text(text.replace('stage = "common-emitter"', 'stage = "no-such-stage"'))
    r = subprocess.run(
        [sys.executable, "-m", "picker", "solve", str(spec)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=300,
    )
    assert r.returncode == 2
    assert "common-emitter" in r.stderr and "no-such-stage" in r.stderr
