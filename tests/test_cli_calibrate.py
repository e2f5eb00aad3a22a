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
        (("--topology", "armstrong"), "--topology", "armstrong"),
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


# --------------------------------------------------------------------------- large batches


def write_many(path: Path, n: int) -> Path:
    """``n`` invented units with known parasitics, written as plain SI numbers."""
    rng = np.random.default_rng(23)
    c1 = rng.choice([1.0, 1.5, 2.2], n) * 1e-9 * (1 + 0.02 * rng.uniform(-1, 1, n))
    c2 = rng.choice([4.7, 6.8, 10.0], n) * 1e-9 * (1 + 0.02 * rng.uniform(-1, 1, n))
    lv = rng.choice([150.0, 220.0, 330.0], n) * 1e-6
    par = topo_mod.Parasitics(stray=15e-12, l_scale=0.97)
    f = topo_mod.board_frequency(COLPITTS, {"C1": c1, "C2": c2, "L": lv}, par)
    f = f * (1 + 100e-6 * rng.standard_normal(n))
    rows = ["unit,C1,C2,L,frequency"] + [
        f"U{i},{float(c1[i])!r},{float(c2[i])!r},{float(lv[i])!r},{float(f[i])!r}" for i in range(n)
    ]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_a_large_batch_is_summarised_in_a_bounded_table(tmp_path):
    """Issue: a table row per unit made a million-unit file take gigabytes.

    Past 50 units the table shows a summary and the 10 largest residuals,
    whatever the batch size; ``--every-unit`` lists every unit.
    (Time and memory on 200,000 units: ``python scripts/bench_calibrate.py``.)
    """
    from picker.report.calibration import TABLE_UNITS, WORST_UNITS

    small = run(write_many(tmp_path / "s.csv", 400), "--topology", "colpitts")
    big = run(write_many(tmp_path / "b.csv", 4000), "--topology", "colpitts")
    assert small.exit_code == 0 and big.exit_code == 0, big.output
    n_small, n_big = small.output.count("\n"), big.output.count("\n")
    assert n_small < 60 and n_big < 60  # bounded: about as many lines for 400 as for 4,000
    assert "4,000 units" in big.output and "--every-unit" in big.output
    body = [line for line in big.output.splitlines() if line.startswith("│ U")]
    assert len(body) == WORST_UNITS < TABLE_UNITS
    full = run(tmp_path / "b.csv", "--topology", "colpitts", "--every-unit")
    assert full.exit_code == 0
    listed = {line.split()[0] for line in full.output.splitlines() if line.startswith("U")}
    assert listed == {f"U{i}" for i in range(4000)}


def test_streamed_json_is_the_json_of_the_whole_result(tmp_path):
    import dataclasses
    import io

    from picker.report.calibration import to_json, write_json

    m = load_measurements(write_many(tmp_path / "u.csv", 300), COLPITTS)
    res = fit_parasitics(COLPITTS, m.values, m.frequency, unit_ids=m.unit_ids, select=True)
    # an id with a quote, a backslash, a non-ASCII letter and markup must be escaped alike
    res = dataclasses.replace(res, unit_ids=('a"\\µ[/x]', *res.unit_ids[1:]))
    buf = io.StringIO()
    write_json(res, buf, source="u.csv", rows=m.rows)
    assert buf.getvalue() == to_json(res, source="u.csv", rows=m.rows)
    assert len(json.loads(buf.getvalue())["residuals"]) == 300


@pytest.mark.parametrize(
    ("cells", "column", "what"),
    [
        ("1n,2n,10u,1e308", "frequency", "between 1 mHz and 100 GHz"),
        ("1n,2n,10u,inf", "frequency", "frequency"),
        ("1n,2n,10u,1e-9", "frequency", "between 1 mHz and 100 GHz"),
        ("1e300,2n,10u,1MHz", "C1", "between"),
    ],
)
def test_values_beyond_physical_ranges_are_one_line_errors(tmp_path, capsys, cells, column, what):
    """Issue: 1e308 Hz was accepted (+inf ppm, a RuntimeWarning). Now exit 2, one line."""
    from picker.cli.main import main

    bad = tmp_path / "bad.csv"
    bad.write_text(f"unit,C1,C2,L,frequency\nU1,{cells}\n", encoding="utf-8")
    with pytest.raises(SystemExit) as exit_info:
        main(["calibrate", str(bad), "--topology", "colpitts"])
    assert exit_info.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and str(bad) in err and f"row 2, column {column}" in err
    assert what in err


@pytest.mark.parametrize(
    ("extra", "cell", "column"),
    [
        ("frequency_sigma", "1e-300", "frequency_sigma"),  # finer than any frequency standard
        ("frequency_sigma", "2MHz", "frequency_sigma"),  # beyond the frequency itself
        ("weight", "1e300", "weight"),
        ("weight", "1e-300", "weight"),
    ],
)
def test_sigma_and_weight_are_bounded(tmp_path, extra, cell, column):
    bad = tmp_path / "bad.csv"
    bad.write_text(
        f"unit,C1,C2,L,frequency,{extra}\nU1,1n,2n,10u,1MHz,{cell}\nU2,1n,2.2n,10u,1MHz,1\n",
        encoding="utf-8",
    )
    res = run(bad, "--topology", "colpitts")
    assert isinstance(res.exception, SpecError)
    assert res.exception.key == f"row 2, column {column}"


# --------------------------------------------------------------------------- --into


def test_into_writes_a_spec_that_loads_solves_and_carries_the_fit(tmp_path):
    """Issue: the fragment could not be appended to a spec (TOML refuses a second table)."""
    from picker.api import load_spec, solve

    spec = tmp_path / "probe.toml"
    spec.write_text(SPEC.read_text(encoding="utf-8"), encoding="utf-8")
    before = spec.read_bytes()
    new = tmp_path / "probe_calibrated.toml"
    res = run(DEMO, "--into", spec, "-o", new)
    assert res.exit_code == 0, res.output
    assert spec.read_bytes() == before  # the input spec is never changed
    text = new.read_text(encoding="utf-8")
    assert text.count("[parasitics]") == 1
    # every line of the original outside [parasitics] is kept as written, comments included
    kept = [ln for ln in SPEC.read_text(encoding="utf-8").splitlines() if "stray" not in ln]
    assert all(ln in text.splitlines() for ln in kept)
    merged = load_spec(new)
    m = load_measurements(DEMO, COLPITTS)
    fit = fit_parasitics(
        COLPITTS,
        m.values,
        m.frequency,
        fit=("stray", "l_scale", "c2_shunt"),
        select=True,
        fixed={"stray": 15e-12},
    )
    for p in fit.parameters:
        # fitted values written to 4 significant digits (capacitance) and 6 (l_scale);
        # held ones keep the spec's own values
        want = p.estimate if p.fitted else getattr(load_spec(SPEC).parasitics, p.name)
        assert_allclose(getattr(merged.parasitics, p.name), want, rtol=5e-4)
    result = solve(merged, top=3, samples=2000)
    assert result.candidates
    # an existing output is refused without --force, and the spec itself always
    again = run(DEMO, "--into", spec, "-o", new)
    assert isinstance(again.exception, SpecError) and "--force" in str(again.exception)
    assert run(DEMO, "--into", spec, "-o", new, "--force").exit_code == 0
    over = run(DEMO, "--into", spec, "-o", spec, "--force")
    assert isinstance(over.exception, SpecError) and "input" in str(over.exception)
    assert spec.read_bytes() == before


def test_into_a_spec_without_parasitics_appends_the_table(tmp_path):
    from picker.spec.load import load_spec

    text = SPEC.read_text(encoding="utf-8").replace('[parasitics]\nstray = "15 pF"\n', "")
    assert "[parasitics]" not in text
    spec = tmp_path / "bare.toml"
    spec.write_bytes(text.replace("\n", "\r\n").encode())  # CRLF kept as the spec has it
    new = tmp_path / "new.toml"
    res = run(DEMO, "--into", spec, "-o", new, "--fit", "stray,l_scale")
    assert res.exit_code == 0, res.output
    raw = new.read_bytes()
    assert b"\r\n[parasitics]\r\n" in raw and b"\n" not in raw.replace(b"\r\n", b"")
    assert load_spec(new).parasitics.stray > 0


@pytest.mark.parametrize(
    ("args", "key"),
    [
        (("--into", str(SPEC)), "-o"),
        (("--topology", "colpitts", "-o", "x.toml"), "--into"),
    ],
)
def test_into_and_output_go_together(tmp_path, args, key):
    res = run(DEMO, *args)
    assert isinstance(res.exception, SpecError) and res.exception.key == key


def test_into_refuses_a_spec_whose_parasitics_are_not_a_table(tmp_path):
    text = (
        SPEC.read_text(encoding="utf-8")
        .replace('[parasitics]\nstray = "15 pF"\n', "")
        .replace(
            'topology = "colpitts"\n', 'topology = "colpitts"\nparasitics = { stray = "15 pF" }\n'
        )
    )
    spec = tmp_path / "inline.toml"
    spec.write_text(text, encoding="utf-8")
    new = tmp_path / "new.toml"
    res = run(DEMO, "--into", spec, "-o", new)
    assert isinstance(res.exception, SpecError) and res.exception.key == "-o"
    assert "would not load" in res.exception.message and not new.exists()


def test_unit_ids_are_never_read_as_markup(tmp_path):
    """Issue: a unit id such as ``[/x]`` crashed the table (rich markup)."""
    csv = write_units(tmp_path / "u.csv", outlier=True)
    text = csv.read_text(encoding="utf-8").replace("B1,", "[/x],").replace("B5,", "[bold]B5,")
    csv.write_text(text, encoding="utf-8")
    res = run(csv, "--topology", "colpitts")
    assert res.exit_code == 0, res.output
    assert "[/x]" in res.output and "[bold]B5 (outlier)" in res.output
