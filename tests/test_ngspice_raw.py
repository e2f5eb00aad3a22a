"""Reading ngspice's binary raw file (:func:`picker.circuit.ngspice.read_raw`).

References: the raw file layout of the ngspice manual (a text header of ``Key: value``
lines ending in ``Binary:``, then each point's variables as 8-byte floats, time first),
and, for a file ngspice itself writes, the textbook step response of an RC low-pass,
v(t) = V·(1 − e^(−t/RC)) (any circuits text, e.g. Hayt & Kemmerly, *Engineering
Circuit Analysis*, first-order circuits).
"""

from __future__ import annotations

import numpy as np
import pytest

from picker.circuit.ngspice import read_raw, transient
from picker.errors import SolverError


def _raw(rows: np.ndarray, flags: str = "real") -> bytes:
    head = (
        "Title: hand-made\nDate: today\nPlotname: Transient Analysis\n"
        f"Flags: {flags}\nNo. Variables: {rows.shape[1]}\nNo. Points: {rows.shape[0]}\n"
        "Variables:\n\t0\ttime\ttime\n\t1\tv(t)\tvoltage\nBinary:\n"
    )
    return head.encode("ascii") + rows.astype(np.float64).tobytes()


def test_a_hand_made_raw_file_reads_back() -> None:
    rows = np.column_stack([np.linspace(0, 1e-6, 7), np.sin(np.arange(7.0))])
    np.testing.assert_array_equal(read_raw(_raw(rows)), rows)


@pytest.mark.parametrize(
    "bad",
    [
        b"Title: x\nNo. Variables: 2\n",  # no binary section
        b"Title: x\nBinary:\n" + bytes(16),  # no counts
        _raw(np.zeros((4, 2)))[:-8],  # one value short
        _raw(np.zeros((4, 2)), flags="complex"),  # an AC analysis, not a transient
    ],
)
def test_a_broken_raw_file_is_a_solver_error(bad: bytes) -> None:
    with pytest.raises(SolverError):
        read_raw(bad)


@pytest.mark.ngspice
def test_ngspice_rc_step_matches_the_textbook_response() -> None:
    # 1 kohm, 1 nF: RC = 1 us; a 1 V step at t = 0 (the source starts at 0 for the
    # operating point, then rises in 1 ns)
    deck = "\n".join(
        [
            "rc step",
            "V1 in 0 PULSE(0 1 0 1n 1n 1 2)",
            "R1 in t 1k",
            "C1 t 0 1n",
            ".tran 10n 5u 0 10n",
            ".end",
        ]
    )
    run = transient(deck)
    late = run.time > 50e-9  # past the 1 ns rise, where the ideal step is a fair model
    ideal = 1.0 - np.exp(-(run.time[late] - 0.5e-9) / 1e-6)
    # tolerance: the trapezoidal rule at a 10 ns step on a 1 us time constant is good to
    # about (h/τ)²/12 ≈ 1e-5 relative; 1e-3 V leaves room for ngspice's tolerances
    np.testing.assert_allclose(run.v[late], ideal, atol=1e-3)
    assert run.time[-1] == pytest.approx(5e-6, rel=1e-6)
