"""Plots: valid PNG files of sane size (PNG signature and IHDR per ISO/IEC 15948 / RFC 2083)."""

from __future__ import annotations

import struct

import numpy as np

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
    p = plot_histogram(f, 9.95e6, 10.05e6, 10e6, tmp_path / "sub" / "hist.png", "Clapp 10 MHz")
    assert p.exists()
    _sane(p)
    # same input, same bytes (no time stamp in the file)
    q = plot_histogram(f, 9.95e6, 10.05e6, 10e6, tmp_path / "again.png", "Clapp 10 MHz")
    assert p.read_bytes() == q.read_bytes()


def test_yield_vs_tolerance_png(tmp_path):
    data = {
        "L": [(0.10, 0.61, 0.60, 0.62), (0.05, 0.80, 0.79, 0.81), (0.02, 0.93, 0.92, 0.94)],
        "C3": [(0.05, 0.80), (0.02, 0.85), (0.01, 0.86)],
    }
    p = plot_yield_vs_tolerance(data, tmp_path / "yield.png", current={"L": 0.05, "C3": 0.05})
    _sane(p)


def test_drivers_png(tmp_path):
    shares = {"L": 0.62, "C3": 0.2, "C1": 0.01, "C2": 0.01, "temperature": 0.16}
    p = plot_drivers(shares, tmp_path / "drivers.png", confirm=shares)
    _sane(p)
