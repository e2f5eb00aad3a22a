"""``picker calibrate``: output formats, safe writing, the spec fragment and errors.

The command is registered on a bare typer app here, so these tests do not
depend on the rest of the CLI; the last test goes through ``picker.cli.main.main``
for the exit status.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
import typer
from numpy.testing import assert_allclose
from typer.testing import CliRunner

from picker.calibration.fit import fit_parasitics
from picker.calibration.measurements import load_measurements
from picker.cli.calibrate import calibrate_cmd
from picker.errors import SpecError
from picker.tank import board as topo_mod
from picker.tank.colpitts import COLPITTS

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_specs" / "bench_units.csv"
SPEC = ROOT / "demo_specs" / "probe_exciter.toml"


def make_app() -> typer.Typer:
    app = typer.Typer()
    app.command("calibrate")(calibrate_cmd)

    @app.callback()
    def _root() -> None:  # keeps "calibrate" a named sub-command
        pass

    return app


def run(*args: str):
    return CliRunner().invoke(make_app(), ["calibrate", *map(str, args)])


def write_units(path: Path, outlier: bool = False) -> Path:
    """A small invented batch with known parasitics, written as a CSV."""
    rng = np.random.default_rng(17)
    c1 = np.array([1.0, 1.5, 2.2, 3.3, 4.7, 1.0, 2.2, 4.7, 1.5, 3.3, 6.8, 2.2]) * 1e-9
    c2 = np.array([2.2, 4.7, 10, 3.3, 6.8, 10, 2.2, 4.7, 6.8, 10, 4.7, 3.3]) * 1e-9
    lv = np.array([47, 33, 22, 47, 22, 33, 47, 22, 33, 47, 22, 33]) * 1e-6
    par = topo_mod.Parasitics(stray=12e-12, c2_shunt=35e-12, l_scale=0.98)
    f = topo_mod.board_frequency(COLPITTS, {"C1": c1, "C2": c2, "L": lv}, par)
    f = f * (1 + 100e-6 * rng.standard_normal(f.size))
    if outlier:
        f[4] *= 1.003
    rows = ["unit,C1,C2,L,frequency"]
    rows += [
        f"B{i + 1},{float(c1[i])!r},{float(c2[i])!r},{float(lv[i])!r},{float(f[i])!r}"
        for i in range(f.size)
    ]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_json_output_matches_the_core_fit_and_is_deterministic(tmp_path):
    csv = write_units(tmp_path / "u.csv")
    a = run(csv, "--topology", "colpitts", "--format", "json")
    b = run(csv, "--topology", "colpitts", "--format", "json")
    assert a.exit_code == 0, a.output
    assert a.output == b.output  # byte-identical
    d = json.loads(a.output)
    assert set(d["parameters"]) == {"stray", "c1_shunt", "c2_shunt", "l_scale"}
    m = load_measurements(csv, COLPITTS)
    core = fit_parasitics(COLPITTS, m.values, m.frequency, unit_ids=m.unit_ids)
    for k in core.fitted:
        p = core.parameter(k)
        got = d["parameters"][k]
        assert_allclose(
            [got["estimate"], got["ci_low"], got["ci_high"]],
            [p.estimate, p.ci_low, p.ci_high],
            rtol=1e-12,
        )
    assert d["parameters"]["stray"]["unit"] == "F" and d["parameters"]["l_scale"]["unit"] == "1"
    assert d["parameters"]["c1_shunt"]["std_error"] is None  # held, not fitted
    assert d["identifiable"] is True and d["outliers"] == []
    assert [r["unit"] for r in d["residuals"]] == list(m.unit_ids)
    assert [r["row"] for r in d["residuals"]] == list(range(2, 14))
    r0 = d["residuals"][0]
    assert_allclose(r0["residual_hz"], r0["f_measured_hz"] - r0["f_fitted_hz"], rtol=1e-9)


def test_table_names_the_outlier_and_robust_option(tmp_path):
    csv = write_units(tmp_path / "u.csv", outlier=True)
    res = run(csv, "--topology", "colpitts")
    assert res.exit_code == 0, res.output
    assert "B5 (outlier)" in res.output and "stray" in res.output
    res = run(csv, "--topology", "colpitts", "--robust", "huber", "--format", "json")
    d = json.loads(res.output)
    assert d["loss"] == "huber" and d["outliers"] == ["B5"]
    assert d["f_scale"] > 0


def test_fragment_is_accepted_by_the_spec_loader(tmp_path):
    from picker.spec.load import load_spec

    frag = tmp_path / "board.toml"
    res = run(DEMO, "--spec", SPEC, "--fit", "stray,l_scale", "--fragment", frag)
    assert res.exit_code == 0, res.output
    section = tomllib.loads(frag.read_text(encoding="utf-8"))["parasitics"]
    assert set(section) == {"stray", "c1_shunt", "c2_shunt", "l_scale"}
    spec = load_spec(SPEC, overrides={"parasitics": section})
    m = load_measurements(DEMO, COLPITTS)
    core = fit_parasitics(COLPITTS, m.values, m.frequency, fit=("stray", "l_scale"))
    # written to 4 significant digits (capacitance) and 6 (l_scale)
    assert_allclose(spec.parasitics.stray, core.parameter("stray").estimate, rtol=5e-4)
    assert_allclose(spec.parasitics.l_scale, core.parameter("l_scale").estimate, rtol=1e-6)
    assert "bench_units.csv" in frag.read_text(encoding="utf-8")


def test_files_are_never_overwritten_without_force_nor_the_input(tmp_path):
    csv = write_units(tmp_path / "u.csv")
    frag = tmp_path / "f.toml"
    frag.write_text("keep me\n", encoding="utf-8")
    res = run(csv, "--topology", "colpitts", "--fragment", frag)
    assert isinstance(res.exception, SpecError) and "--force" in str(res.exception)
    assert frag.read_text(encoding="utf-8") == "keep me\n"
    assert run(csv, "--topology", "colpitts", "--fragment", frag, "--force").exit_code == 0
    assert frag.read_text(encoding="utf-8").startswith("# Board parasitics")
    before = csv.read_bytes()
    res = run(csv, "--topology", "colpitts", "--fragment", csv, "--force")
    assert isinstance(res.exception, SpecError) and "input" in str(res.exception)
    assert csv.read_bytes() == before
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]  # no temp left behind


def test_plot_is_a_png(tmp_path):
    csv = write_units(tmp_path / "u.csv", outlier=True)
    png = tmp_path / "r.png"
    res = run(csv, "--topology", "colpitts", "--plot", png)
    assert res.exit_code == 0, res.output
    data = png.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000


@pytest.mark.parametrize(
    ("args", "key", "what"),
    [
        ((), "--topology", "say which tank"),
        (("--topology", "hartley"), "--topology", "hartley"),
        (("--topology", "colpitts", "--fit", "stray,strays"), "--fit", "strays"),
        (("--topology", "colpitts", "--robust", "cauchy"), "--robust", "cauchy"),
        (("--topology", "colpitts", "--format", "csv"), "--format", "csv"),
        (("--topology", "clapp", "--spec", str(SPEC)), "--topology", "disagrees"),
    ],
)
def test_bad_options_are_spec_errors(tmp_path, args, key, what):
    csv = write_units(tmp_path / "u.csv")
    res = run(csv, *args)
    assert isinstance(res.exception, SpecError), res.output
    assert res.exception.key == key and what in res.exception.message


def test_picker_main_exits_2_with_one_line(tmp_path, capsys):
    cli = pytest.importorskip("picker.cli.main")  # the lead's CLI wires calibrate in
    bad = tmp_path / "bad.csv"
    bad.write_text("unit,C1,C2,L,frequency\nU1,4n7,10 uH,100u,250k\n", encoding="utf-8")
    with pytest.raises(SystemExit) as exit_info:
        cli.main(["calibrate", str(bad), "--topology", "colpitts"])
    assert exit_info.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "row 2, column C2" in err


def test_calibrated_spec_recentres_the_solve():
    """Feeding the fragment back into the spec moves the picks onto the real board.

    The demo board's chokes run about 3 % under their marking, so designs picked
    with l_scale = 1 land near √(1/0.97) − 1 ≈ +1.5 % high on the board (derived,
    first order); after calibration the picks should land on the target.
    """
    from picker.api import load_spec, solve

    m = load_measurements(DEMO, COLPITTS)
    fit = fit_parasitics(COLPITTS, m.values, m.frequency, fit=("stray", "l_scale"))
    from picker.report.calibration import fragment_toml

    section = tomllib.loads(fragment_toml(fit))["parasitics"]
    before = load_spec(SPEC)
    after = load_spec(SPEC, overrides={"parasitics": section})
    board = topo_mod.Parasitics(**{k: float(getattr(after.parasitics, k)) for k in section})
    target = after.frequency.target

    def offsets(spec):
        res = solve(spec, top=10, samples=2000)
        return np.array(
            [
                topo_mod.board_frequency(COLPITTS, c.values, board) / target - 1
                for c in res.candidates
            ]
        )

    old, new = offsets(before), offsets(after)
    assert 0.008 < old.mean() < 0.02  # uncalibrated picks run high on the real board
    assert abs(new.mean()) < 0.003 and np.abs(new).max() < 0.03  # centred, inside ±3 %
