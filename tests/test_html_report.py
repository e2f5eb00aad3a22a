"""The HTML report (``--report FILE.html``): self-contained, complete, escaped, renders.

Plausible bugs caught: a report that loads a style sheet, font or script from
the network (it would print blank in a clean room); a SHA-256 that is not the
file's (the lot record would not identify the inputs); user text turned into
markup; a page that renders blank in a browser; a report written over an
input or an existing file; a report missing on calibrate or consolidate.

The browser check uses Debian's ``chromium`` (installed by scripts/test.sh, as
ngspice is); these tests fail, never skip, when it is missing.
"""

from __future__ import annotations

import hashlib
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from picker import __version__
from picker.cli.main import main

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_specs"

CHROMIUM_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


def _run(argv: list[str], capsys) -> tuple[int, str, str]:
    try:
        code = main(argv)
    except SystemExit as exc:  # typer's exit
        code = int(exc.code or 0)
    out = capsys.readouterr()
    return int(code or 0), out.out, out.err


def _screenshot(page: Path, tmp: Path) -> Path:
    exe = shutil.which("chromium")
    if exe is None:
        pytest.fail(
            "chromium is not installed (scripts/test.sh installs it; this test does not skip)"
        )
    png = tmp / (page.stem + ".png")
    subprocess.run(
        [
            exe,
            *CHROMIUM_FLAGS,
            f"--user-data-dir={tmp / 'profile'}",
            f"--screenshot={png}",
            "--window-size=1200,2000",
            page.as_uri(),
        ],
        check=False,
        capture_output=True,
        timeout=180,
    )
    assert png.exists(), "chromium wrote no screenshot"
    return png


def _ink(png: Path) -> float:
    """Share of pixels that are not white, read with matplotlib's PNG reader."""
    from matplotlib.image import imread

    a = imread(png)
    rgb = a[..., :3]
    return float((rgb.min(axis=-1) < 0.9).mean())


def _self_contained(page: str) -> None:
    # nothing fetched: no src/href to a network or file URL, no @import, no script
    assert not re.search(r"""(src|href)\s*=\s*["'](?!data:|#)""", page), "an external reference"
    assert "@import" not in page and "<script" not in page.lower()
    assert "<style>" in page and "@media print" in page and "@page" in page


@pytest.fixture(scope="module")
def solve_report(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    spec = tmp / "prod.toml"
    shutil.copy(DEMO / "production_exciter.toml", spec)
    page = tmp / "prod.html"
    try:
        main(["solve", str(spec), "--samples", "4000", "--report", str(page)])
    except SystemExit as exc:
        assert not exc.code
    return spec, page


def test_solve_report_holds_the_lot_record(solve_report) -> None:
    spec, page = solve_report
    text = page.read_text(encoding="utf-8")
    _self_contained(text)
    # FIPS 180-4 SHA-256 of the spec's bytes, computed here with hashlib
    assert hashlib.sha256(spec.read_bytes()).hexdigest() in text
    assert f"picker {__version__}" in text
    assert "seed 5" in text  # the demo's [yield] seed
    assert "window = &quot;±2.5 %&quot;" in text  # the spec text itself, escaped
    for heading in ("Inputs", "Designs", "Production", "Buyer", "Plots"):
        assert f"<h2>{heading}</h2>" in text
    assert text.count("data:image/png;base64,") == 3  # histogram, yield/tolerance, drivers
    assert "worst case -40 .. 85 °C" in text and "worst case 25 °C" in text


@pytest.mark.chromium
def test_solve_report_renders_in_chromium(solve_report, tmp_path) -> None:
    _, page = solve_report
    png = _screenshot(page, tmp_path)
    # a blank page has no ink; a rendered report of text, tables and plots has several per cent
    assert _ink(png) > 0.03


def test_user_text_is_escaped(tmp_path, capsys) -> None:
    spec = tmp_path / "evil.toml"
    src = (DEMO / "tone_source.toml").read_text(encoding="utf-8")
    src = src.replace(
        'title = "Leak detector self-test tone"',
        'title = "<script>alert(1)</script> & <b>bold</b>"',
    )
    spec.write_text(src, encoding="utf-8")
    page = tmp_path / "evil.html"
    code, _, _ = _run(["solve", str(spec), "--samples", "1000", "--report", str(page)], capsys)
    assert code == 0
    text = page.read_text(encoding="utf-8")
    assert "<script>" not in text and "<b>bold</b>" not in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; &lt;b&gt;bold&lt;/b&gt;" in text


def test_report_is_refused_before_the_run(tmp_path, capsys) -> None:
    spec = DEMO / "tone_source.toml"
    code, _, err = _run(["solve", str(spec), "--report", str(tmp_path / "r.pdf")], capsys)
    assert code == 2 and err.count("\n") == 1 and "--report" in err and ".html" in err
    old = tmp_path / "old.html"
    old.write_text("keep me", encoding="utf-8")
    code, _, err = _run(["solve", str(spec), "--report", str(old)], capsys)
    assert code == 2 and "--force" in err
    assert old.read_text(encoding="utf-8") == "keep me"  # nothing the user had is lost
    copy = tmp_path / "spec.html"
    shutil.copy(spec, copy)
    code, _, err = _run(["evaluate", str(copy), "--set", "C1=1u", "--report", str(copy)], capsys)
    assert code == 2 and err.count("\n") == 1


@pytest.mark.chromium
def test_calibrate_evaluate_and_consolidate_write_reports(tmp_path, capsys) -> None:
    cal = tmp_path / "cal.html"
    code, _, _ = _run(
        [
            "calibrate",
            str(DEMO / "bench_units.csv"),
            "--topology",
            "colpitts",
            "--report",
            str(cal),
        ],
        capsys,
    )
    assert code == 0
    ev = tmp_path / "eval.html"
    argv = ["evaluate", str(DEMO / "probe_exciter.toml"), "--samples", "2000"]
    argv += ["--set", "C1=150p", "--set", "C2=330p", "--set", "L=2.2m", "--report", str(ev)]
    code, _, _ = _run(argv, capsys)
    assert code == 0
    plan = tmp_path / "plan.html"
    code, _, _ = _run(["consolidate", str(DEMO / "plan_demo.toml"), "--report", str(plan)], capsys)
    assert code == 0
    for page, files in (
        (cal, [DEMO / "bench_units.csv"]),
        (ev, [DEMO / "probe_exciter.toml"]),
        (plan, [DEMO / "plan_demo.toml", DEMO / "plan_sensor_base.toml", DEMO / "stock_demo.csv"]),
    ):
        text = page.read_text(encoding="utf-8")
        _self_contained(text)
        for f in files:
            assert hashlib.sha256(f.read_bytes()).hexdigest() in text, (page.name, f.name)
        assert _ink(_screenshot(page, tmp_path)) > 0.03, page.name
