"""Tests for picker.parts.series against IEC 60063:2015 (values as quoted in REFERENCES.md).

Sources: IEC 60063:2015 preferred-number tables (E3..E24 typed below from the
standard's lists in REFERENCES.md); the standard's rule that E48/E96/E192 equal
round(10^(i/N), 2) except E192 index 185 = 9.20; the E24 departures from
round(10^(i/24), 1) at i = 10..16 and 22. The tolerance pairing is a
convention (REFERENCES.md), E3's is common practice, no source.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_array_equal

from picker.errors import SpecError
from picker.parts import series
from picker.parts.series import (
    SERIES_NAMES,
    default_tolerance,
    denser,
    expand,
    is_member,
    nearest,
    neighbours,
    series_values,
)
from picker.units import format_quantity, parse_quantity

# IEC 60063:2015, one decade of each two-digit series (REFERENCES.md).
IEC_E3 = [1.0, 2.2, 4.7]
IEC_E6 = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8]
IEC_E12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]
# rows of twelve, as the standard prints them (fmt: skip, else one value a line)
IEC_E24 = [
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
    3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
]  # fmt: skip


def _formula(n: int, i: int, places: int) -> float:
    """round(10^(i/n), places), computed independently of series_data/make_series.py."""
    return round(10 ** (i / n), places)


@pytest.mark.parametrize(
    ("name", "expected"), [("E3", IEC_E3), ("E6", IEC_E6), ("E12", IEC_E12), ("E24", IEC_E24)]
)
def test_two_digit_tables_equal_iec_60063(name, expected):
    # IEC 60063:2015 lists; exact equality: both sides are the floats of the same decimals.
    assert_array_equal(series_values(name), np.array(expected))


def test_subsampling_of_e24():
    # IEC 60063:2015: E12 is every 2nd E24 value, E6 every 4th, E3 every 8th.
    e24 = series_values("E24")
    assert_array_equal(series_values("E12"), e24[::2])
    assert_array_equal(series_values("E6"), e24[::4])
    assert_array_equal(series_values("E3"), e24[::8])


def test_e24_formula_breaks_exactly_where_the_standard_says():
    # IEC 60063:2015 (REFERENCES.md): E24 departs from round(10^(i/24), 1) at i = 10..16 and 22.
    e24 = series_values("E24")
    formula = np.array([_formula(24, i, 1) for i in range(24)])
    differs = np.flatnonzero(~np.isclose(e24, formula, rtol=0, atol=1e-9)).tolist()
    assert differs == [10, 11, 12, 13, 14, 15, 16, 22]
    assert_array_equal(formula[10:17], [2.6, 2.9, 3.2, 3.5, 3.8, 4.2, 4.6])
    assert formula[22] == 8.3


@pytest.mark.parametrize("n", [48, 96, 192])
def test_three_digit_tables_follow_formula(n):
    # IEC 60063:2015: E48/E96/E192 = round(10^(i/N), 2), except E192 index 185 = 9.20.
    values = series_values(f"E{n}")
    assert values.shape == (n,)
    formula = np.array([_formula(n, i, 2) for i in range(n)])
    # atol 1e-9: both sides are the floats nearest to two-decimal numbers.
    differs = np.flatnonzero(~np.isclose(values, formula, rtol=0, atol=1e-9)).tolist()
    if n == 192:
        assert differs == [185]
        assert values[185] == 9.20
        assert formula[185] == 9.19
    else:
        assert differs == []


def test_three_digit_nesting():
    # IEC 60063:2015: E96 is every 2nd E192 value, E48 every 2nd E96 value.
    assert_array_equal(series_values("E96"), series_values("E192")[::2])
    assert_array_equal(series_values("E48"), series_values("E96")[::2])


def test_series_sorted_in_one_decade():
    for name in SERIES_NAMES:
        v = series_values(name)
        assert v[0] == 1.0 and v[-1] < 10.0
        assert np.all(np.diff(v) > 0)
        assert v.size == int(name[1:])


def test_name_lookup_case_insensitive_and_errors():
    assert_array_equal(series_values("e24"), series_values("E24"))
    assert_array_equal(series_values(" E6 "), series_values("E6"))
    with pytest.raises(SpecError) as info:
        series_values("E25")
    for name in SERIES_NAMES:
        assert name in str(info.value)
    with pytest.raises(SpecError):
        expand("X7R", 1e-9, 1e-8, key="parts.C1.series")
    with pytest.raises(SpecError):
        series_values(24)  # type: ignore[arg-type]


def test_expand_counts_and_inclusive_ends():
    # 1 pF .. 1 µF in E24: six decades of 24 values plus the closing 1 µF.
    v = expand("E24", 1e-12, 1e-6)
    assert v.size == 6 * 24 + 1
    assert v[0] == 1e-12 and v[-1] == 1e-6
    assert np.all(np.diff(v) > 0)
    # "100 pF" as parsed text includes 100 pF itself, even with rounding noise on the ends.
    lo = parse_quantity("100 pF", "F")
    assert_array_equal(expand("E12", lo, lo), [100e-12])
    assert_array_equal(expand("E12", 100e-12 * (1 + 1e-12), 100e-12 * (1 - 1e-12)), [100e-12])
    assert expand("E12", 4.8e-9, 5.5e-9).size == 0
    # E6 over exactly one decade: 6 values plus the upper end.
    assert_array_equal(expand("E6", 1e3, 1e4), [1e3, 1.5e3, 2.2e3, 3.3e3, 4.7e3, 6.8e3, 1e4])


def _significant_digits(text: str) -> int:
    """Significant digits in a decimal text such as '4.7', '100', '9.2e-09'."""
    mantissa = text.lower().split("e")[0].lstrip("-")
    return len(mantissa.replace(".", "").strip("0"))


def test_expand_values_have_no_float_noise():
    # Every value is the float nearest to its decimal text: repr() (the shortest
    # text that round-trips) then has no more digits than the series has.
    v = expand("E24", 1e-12, 1e-6)
    for x in v:
        assert _significant_digits(repr(float(x))) <= 2, repr(x)
        text = format_quantity(x, "F")
        assert _significant_digits(text.split()[0]) <= 2, text
        assert parse_quantity(text, "F") == x  # exact round trip
    assert 4.7e-9 in v.tolist() and 9.1e-7 in v.tolist()
    v192 = expand("E192", 1e-15, 1e3)
    assert v192.size == 18 * 192 + 1
    assert 9.2e-9 in v192.tolist() and 9.19e-9 not in v192.tolist()
    for x in v192:
        assert _significant_digits(repr(float(x))) <= 3, repr(x)
    # Far outside the exact-power-of-ten range the decimal-text fallback is used.
    tiny = expand("E12", 1e-25, 1e-24)
    assert all(_significant_digits(repr(float(x))) <= 2 for x in tiny)
    assert tiny.size == 13


@pytest.mark.parametrize(
    ("lo", "hi"), [(0, 1e-9), (-1e-9, 1e-9), (1e-9, math.inf), (math.nan, 1), (2e-9, 1e-9)]
)
def test_expand_bad_ranges(lo, hi):
    with pytest.raises(SpecError) as info:
        expand("E12", lo, hi, key="parts.C1.range")
    assert info.value.key == "parts.C1.range"


def test_expand_refuses_absurd_range():
    with pytest.raises(SpecError, match="decades"):
        expand("E12", 1e-30, 1e30)


def test_membership():
    assert is_member("E12", 4.7e-9)
    assert is_member("E12", 10e-9)
    assert not is_member("E12", 5.1e-9)
    assert is_member("E24", 5.1e-9)
    assert is_member("E192", 9.20e3) and not is_member("E192", 9.19e3)
    assert not is_member("E24", 0.0) and not is_member("E24", -4.7) and not is_member("E24", np.nan)
    assert is_member("E24", 4.7e-9 * (1 + 1e-8))
    assert not is_member("E24", 4.7e-9 * (1 + 1e-4))
    got = is_member("E6", np.array([[1.5, 1.6], [68e-12, 1e6]]))
    assert_array_equal(got, [[True, False], [True, True]])
    # Every expanded value is a member, in every series.
    for name in SERIES_NAMES:
        assert np.all(is_member(name, expand(name, 1e-15, 1e9)))
    # Nesting E12 ⊂ E24 but E24 ⊄ E48 (IEC 60063:2015: the three-digit series are separate).
    assert np.all(is_member("E24", series_values("E12")))
    assert not np.all(is_member("E48", series_values("E24")))


def test_nearest_examples():
    assert nearest("E12", 5.0e-9) == 4.7e-9
    assert nearest("E12", 9.5e3) == 10e3  # across a decade
    assert nearest("E12", 1.05) == 1.0
    gm = math.sqrt(4.7 * 5.6)  # tie in log distance goes to the lower value
    assert nearest("E12", gm * (1 + 1e-9)) == 5.6
    assert nearest("E12", gm * (1 - 1e-9)) == 4.7
    assert nearest("E24", 4.7e-9) == 4.7e-9
    with pytest.raises(SpecError):
        nearest("E12", 0.0)


@settings(max_examples=200, deadline=None)
@given(
    x=st.floats(min_value=1e-14, max_value=1e2),
    name=st.sampled_from(SERIES_NAMES),
)
def test_nearest_and_neighbours_against_brute_force(x, name):
    values = expand(name, x / 100, x * 100)
    dist = np.abs(np.log(values / x))
    best = nearest(name, x)
    assert is_member(name, best)
    assert abs(math.log(best / x)) <= dist.min() + 1e-12
    below, above = neighbours(name, x)
    assert below < x < above or (below < x * (1 + 1e-9) and above > x * (1 - 1e-9))
    assert below == values[values < x * (1 - 1e-9)].max()
    assert above == values[values > x * (1 + 1e-9)].min()


def test_neighbours_examples():
    assert neighbours("E12", 4.7e-9) == (3.9e-9, 5.6e-9)
    assert neighbours("E24", 5.0e-9) == (4.7e-9, 5.1e-9)
    assert neighbours("E12", 1e-9) == (8.2e-10, 1.2e-9)


@settings(max_examples=300, deadline=None)
@given(i=st.integers(0, 191), k=st.integers(-15, 2), unit=st.sampled_from(["F", "H", "Hz"]))
def test_e192_format_parse_round_trip(i, k, unit):
    # Random E192 values across 1e-15 .. 1e3.
    value = float(series_values("E192")[i]) * 10.0**k
    back = parse_quantity(format_quantity(value, unit), unit)
    assert math.isclose(back, value, rel_tol=1e-9)


def test_default_tolerances():
    # Customary pairing (REFERENCES.md; a convention, not part of IEC 60063:2015).
    expected = {"E6": 0.20, "E12": 0.10, "E24": 0.05, "E48": 0.02, "E96": 0.01, "E192": 0.005}
    for name, tol in expected.items():
        assert default_tolerance(name) == tol
    assert default_tolerance("e3") == 0.20  # common practice, no source


def test_denser():
    chain = [denser(n) for n in SERIES_NAMES]
    assert chain == ["E6", "E12", "E24", "E48", "E96", "E192", None]
    assert denser("e12") == "E24"


def test_data_dir_found():
    d = series.data_dir()
    assert (d / "E24.csv").is_file()
    assert "IEC 60063:2015" in (d / "E24.csv").read_text(encoding="utf-8")


def test_tables_load_from_wheel_layout(tmp_path):
    # The wheel maps series_data/ to picker/series_data (pyproject force-include);
    # rebuild that layout without the top-level copy and load a table from it.
    import shutil
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent  # the source checkout
    installed = Path(series.__file__).resolve().parents[1]  # source tree or site-packages
    pkg = tmp_path / "picker"
    (pkg / "parts").mkdir(parents=True)
    (pkg / "__init__.py").write_text("", encoding="utf-8")  # only the modules series needs
    (pkg / "parts" / "__init__.py").write_text("", encoding="utf-8")
    for module in ("errors.py", "parts/series.py"):
        shutil.copy(installed / module, pkg / module)
    shutil.copytree(root / "series_data", pkg / "series_data")
    code = (
        "from picker.parts import series; d = series.data_dir(); "
        "print(d); print(series.series_values('E192')[185], series.default_tolerance('E96'))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code],
        cwd=tmp_path,
        env={"PYTHONPATH": str(tmp_path), "PATH": ""},
        capture_output=True,
        text=True,
        check=True,
    ).stdout.split("\n")
    assert Path(out[0]) == pkg / "series_data"
    assert out[1] == "9.2 0.01"
