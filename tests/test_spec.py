"""Spec validation: every bad value is one line naming file, key, expectation and input."""

from __future__ import annotations

import pytest
from conftest import DEMO, write_spec

from picker.errors import SpecError
from picker.spec.load import load_spec

BASE = """
title = "t"
topology = "colpitts"
[frequency]
target = "250 kHz"
window = "±3 %"
[feedback]
min = 0.1
max = 0.5
[parts.C1]
series = "E12"
tolerance = "5 %"
min = "100 pF"
max = "100 nF"
[parts.C2]
series = "E12"
tolerance = "5 %"
min = "100 pF"
max = "1 uF"
[parts.L]
series = "E6"
tolerance = "10 %"
min = "1 uH"
max = "10 mH"
[parasitics]
stray = "10 pF"
[yield]
samples = 20000
seed = 1
distribution = "uniform"
[report]
top = 10
"""


def test_issue_form_loads_in_si_units(tmp_path):
    s = load_spec(write_spec(tmp_path, BASE))
    assert s.frequency.target == 250e3
    assert s.frequency.f_min == pytest.approx(242.5e3)
    assert s.frequency.f_max == pytest.approx(257.5e3)
    assert s.parts["C1"].min == pytest.approx(100e-12)
    assert s.parts["L"].max == pytest.approx(10e-3)
    assert s.parts["C2"].tolerance == pytest.approx(0.05)
    assert s.parasitics.stray == pytest.approx(10e-12)
    assert s.yield_.samples == 20000


@pytest.mark.parametrize(
    "name", sorted(p.name for p in DEMO.glob("*.toml") if not p.name.startswith("plan"))
)
def test_demo_specs_load(name):
    load_spec(DEMO / name)


def _err(tmp_path, old, new):
    text = BASE.replace(old, new, 1)
    assert text != BASE, f"replacement {old!r} not found"
    with pytest.raises(SpecError) as exc:
        load_spec(write_spec(tmp_path, text))
    msg = str(exc.value)
    assert "\n" not in msg
    assert str(tmp_path / "spec.toml") in msg
    return msg


@pytest.mark.parametrize(
    ("old", "new", "key", "fragment"),
    [
        (
            'tolerance = "5 %"\nmin = "100 pF"\nmax = "100 nF"',
            'tolerance = "five"\nmin = "100 pF"\nmax = "100 nF"',
            "parts.C1.tolerance",
            "five",
        ),
        (
            'min = "100 pF"\nmax = "100 nF"',
            'min = "100 nF"\nmax = "100 pF"',
            "parts.C1",
            "min <= max",
        ),
        ('min = "1 uH"', 'min = "1 uF"', "parts.L.min", "1 uF"),
        ('window = "±3 %"', 'window = "150 %"', "frequency.window", "150 %"),
        ('target = "250 kHz"', 'target = "250 kF"', "frequency.target", "250 kF"),
        ("seed = 1", "sede = 1", "yield.sede", "unknown key"),
        (
            '[parasitics]\nstray = "10 pF"',
            '[parasitics]\nstray = "10 nH"',
            "parasitics.stray",
            "10 nH",
        ),
        (
            'distribution = "uniform"',
            'distribution = "triangular"',
            "yield.distribution",
            "triangular",
        ),
        ('series = "E6"', 'series = "E7"', "parts.L.series", "E7"),
        (
            'min = "1 uH"\nmax = "10 mH"',
            'min = "1.1 uH"\nmax = "1.4 uH"',
            "parts.L",
            "holds no E6 value",
        ),
        ('topology = "colpitts"', 'topology = "armstrong"', "topology", "armstrong"),
        ("min = 0.1\nmax = 0.5", "min = 0.5\nmax = 0.1", "feedback", "min <= max"),
        ("samples = 20000", 'samples = "many"', "yield.samples", "many"),
        ("top = 10", "top = 0", "report.top", "0"),
    ],
)
def test_bad_values_name_key_and_input(tmp_path, old, new, key, fragment):
    msg = _err(tmp_path, old, new)
    assert key in msg
    assert fragment in msg


def test_extra_position_is_an_error(tmp_path):
    msg = _err(
        tmp_path, "[parts.L]", '[parts.C3]\nseries = "E12"\nmin = "1 pF"\nmax = "1 nF"\n[parts.L]'
    )
    assert "parts.C3" in msg and "expected C1, C2, L" in msg


def test_clapp_needs_c3(tmp_path):
    msg = _err(tmp_path, 'topology = "colpitts"', 'topology = "clapp"')
    assert "parts.C3" in msg and "missing" in msg


def test_window_or_edges(tmp_path):
    msg = _err(tmp_path, 'window = "±3 %"', 'window = "±3 %"\nmin = "240 kHz"\nmax = "260 kHz"')
    assert "frequency" in msg and "not both" in msg
    msg = _err(tmp_path, 'window = "±3 %"', 'min = "260 kHz"\nmax = "270 kHz"')
    assert "min < target < max" in msg


def test_bad_toml_and_missing_file(tmp_path):
    with pytest.raises(SpecError, match="not valid TOML"):
        load_spec(write_spec(tmp_path, BASE[:200]))
    with pytest.raises(SpecError, match="no such file"):
        load_spec(tmp_path / "nope.toml")


def test_default_tolerance_from_series(tmp_path):
    text = BASE.replace('series = "E6"\ntolerance = "10 %"', 'series = "E6"')
    s = load_spec(write_spec(tmp_path, text))
    # REFERENCES.md: E6 is customarily paired with 20 %.
    assert s.parts["L"].tolerance == pytest.approx(0.20)


def test_value_list_position(tmp_path):
    text = BASE.replace(
        'series = "E6"\ntolerance = "10 %"\nmin = "1 uH"\nmax = "10 mH"',
        'values = ["100u", "2.2 mH", "330 uH"]\ntolerance = "K"',
    )
    s = load_spec(write_spec(tmp_path, text))
    assert s.parts["L"].values == pytest.approx((100e-6, 330e-6, 2.2e-3))
    assert s.parts["L"].tolerance == pytest.approx(0.10)
