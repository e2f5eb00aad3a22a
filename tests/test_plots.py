"""Plots: valid PNG files of sane size (PNG signature and IHDR per ISO/IEC 15948 / RFC 2083)."""

from __future__ import annotations

import re
import struct

import numpy as np
import pytest

from picker.report.plots import plot_drivers, plot_histogram, plot_yield_vs_tolerance

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # RFC 2083, 3.1


def _png_size(path):
    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b"IHDR"  # the first chunk (RFC 2083, 4.1.1)
    width, height = struct.unpack(">II", data[16:24])
    return width, height, len(data)


def _sane(path, min_h=200):
    w, h, n = _png_size(path)
    assert 400 <= w <= 2000 and min_h <= h <= 2000
    assert 5_000 < n < 1_000_000  # a drawn figure, not an empty canvas or a bitmap dump


def test_histogram_png(tmp_path):
    rng = np.random.default_rng(1)
    f = 10e6 * (1 + rng.normal(0, 0.004, 5000))
    p, q = tmp_path / "sub" / "hist.png", tmp_path / "again.png"
    plot_histogram(f, 9.95e6, 10.05e6, 10e6, p, "Clapp 10 MHz")
    assert p.exists()
    _sane(p)
    # same input, same bytes (no time stamp in the file)
    plot_histogram(f, 9.95e6, 10.05e6, 10e6, q, "Clapp 10 MHz")
    assert p.read_bytes() == q.read_bytes()


def test_yield_vs_tolerance_png(tmp_path):
    data = {
        "L": [(0.10, 0.61, 0.60, 0.62), (0.05, 0.80, 0.79, 0.81), (0.02, 0.93, 0.92, 0.94)],
        "C3": [(0.05, 0.80), (0.02, 0.85), (0.01, 0.86)],
    }
    p = tmp_path / "yield.png"
    plot_yield_vs_tolerance(data, p, current={"L": 0.05, "C3": 0.05})
    _sane(p)


def test_drivers_png(tmp_path):
    shares = {"L": 0.62, "C3": 0.2, "C1": 0.01, "C2": 0.01, "temperature": 0.16}
    p = tmp_path / "drivers.png"
    plot_drivers(shares, p, confirm=shares)
    _sane(p)


_PREFIX = {"": 1.0, "k": 1e3, "M": 1e6, "G": 1e9}  # SI prefixes (BIPM SI Brochure, table 7)


def _read_hz(label: str) -> float:
    """A tick label such as "1.025 MHz" read back, written here independently of picker."""
    m = re.fullmatch(r"([0-9.]+)\s*([kMG]?)Hz", label.strip())
    assert m, label
    return float(m.group(1)) * _PREFIX[m.group(2)]


@pytest.mark.parametrize(
    ("f_min", "target", "f_max"),
    [
        (975e3, 1e6, 1.025e6),  # the production demo's ±2.5 % window
        (300.7e3, 310e3, 319.3e3),  # ±3 % at 310 kHz
        (5.3286e6, 5.35e6, 5.3714e6),  # ±0.4 % at 5.35 MHz
    ],
)
def test_histogram_ticks_name_the_window_edges(f_min, target, f_max):
    rng = np.random.default_rng(2)
    f = target * (1 + rng.normal(0, 0.01, 4000))
    fig = plot_histogram(f, f_min, f_max, target)
    ax = fig.axes[0]
    fig.canvas.draw()
    labels = {
        float(t.get_position()[0]): t.get_text() for t in ax.get_xticklabels() if t.get_text()
    }
    # both edges carry a tick whose label reads back as that edge; the target too
    # when the window is wide on the axis (its label is left out where room is short)
    for x in (f_min, target, f_max):
        if x == target and x not in labels:
            continue
        assert x in labels, (x, labels)
        assert _read_hz(labels[x]) == pytest.approx(x, rel=1e-9), labels[x]
    assert len(set(labels.values())) == len(labels)  # labels tell the ticks apart
    # labels do not overlap on the drawn figure
    boxes = sorted(
        (t.get_window_extent() for t in ax.get_xticklabels() if t.get_text()), key=lambda b: b.x0
    )
    assert all(a.x1 <= b.x0 for a, b in zip(boxes, boxes[1:], strict=False))


def test_drivers_of_a_design_where_no_board_oscillates_show_no_bars_but_say_why():
    """The Monte Carlo shares are None where fewer than two boards oscillate
    (picker.production.drivers.regression_fit); the first-order shares are then zero. The
    plot draws no 0.0 % labels and says there is nothing to apportion."""
    shares = {"L": 0.0, "C1": 0.0, "C2": 0.0}
    fig = plot_drivers(shares, confirm={"L": None, "C1": None, "C2": None})
    texts = [t.get_text() for t in fig.axes[0].texts]
    assert not any("%" in t for t in texts)
    assert any("no spread to apportion" in t for t in texts)
    # with shares to show, the labels are back (and a missing MC share is just left out)
    fig = plot_drivers({"L": 0.9, "C1": 0.1, "C2": 0.0}, confirm={"L": 0.88, "C1": None})
    texts = [t.get_text() for t in fig.axes[0].texts]
    assert "90.0 % (MC 88.0 %)" in texts and "10.0 %" in texts


def test_histogram_of_boards_that_never_run_has_no_share_ticks():
    f = np.full(500, np.nan)
    fig = plot_histogram(f, 117e3, 143e3, 130e3)
    ax = fig.axes[0]
    assert list(ax.get_yticks()) == []
    assert any("500 boards do not run steady" in t.get_text() for t in ax.texts)
