"""Run a netlist through ngspice in batch mode and measure frequency and amplitude.

ngspice (the Debian/Ubuntu package ``ngspice``) is run as a subprocess with
``-b`` on a copy of the netlist that gains a ``.control`` block writing the
tank-top voltage with ``wrdata``. The frequency comes from the rising
crossings of the mean level over the settled tail (the last 30 % of the run,
linear interpolation between samples); the amplitude is half the peak-to-peak
voltage over the last 10 %. This module runs a program and reads files, so it
belongs to the edge layer; it raises :class:`picker.errors.SolverError` with a
one-line message when ngspice is missing, fails or times out.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from picker.errors import SolverError

WARNING_PATTERNS = ("floating", "no dc path", "singular matrix", "timestep too small")


@dataclass(frozen=True)
class SimulationResult:
    """What the transient simulation showed.

    ``frequency_hz`` is NaN when the tail has fewer than three rising crossings.
    ``amplitude_v`` is the peak AC voltage at the probed node over the last 10 % of the
    run; ``early_amplitude_v`` the same over 40-50 % of the run, so that
    ``oscillating`` (tail amplitude ≥ 1 mV and at least 0.8 of the earlier one) tells a
    sustained oscillation from a decaying kick. ``meas`` holds ngspice's own ``.meas``
    results; ``warnings`` the lines of its output that mention a floating node, a missing
    DC path, a singular matrix or a too-small time step.
    """

    frequency_hz: float
    amplitude_v: float
    early_amplitude_v: float
    oscillating: bool
    meas: dict[str, float]
    warnings: tuple[str, ...]
    node: str


def ngspice_path() -> str:
    """Path of the ngspice executable, or a SolverError saying how to get it."""
    exe = shutil.which("ngspice")
    if exe is None:
        raise SolverError(
            "ngspice is not installed or not on PATH; install it (Debian/Ubuntu: "
            "apt-get install ngspice) to use simulate"
        )
    return exe


def tail_frequency(time: np.ndarray, v: np.ndarray, start: float) -> float:
    """Mean frequency from rising crossings of the mean of ``v`` for ``time >= start``."""
    sel = time >= start
    t, x = time[sel], v[sel]
    if t.size < 4:
        return float("nan")
    x = x - x.mean()
    i = np.nonzero((x[:-1] < 0) & (x[1:] >= 0))[0]
    if i.size < 3:
        return float("nan")
    tc = t[i] - x[i] * (t[i + 1] - t[i]) / (x[i + 1] - x[i])
    return float((tc.size - 1) / (tc[-1] - tc[0]))


def _peak(time: np.ndarray, v: np.ndarray, lo: float, hi: float) -> float:
    """Half the peak-to-peak of ``v`` over lo <= time <= hi (0.0 where no sample)."""
    sel = (time >= lo) & (time <= hi)
    if not np.any(sel):
        return 0.0
    return float(0.5 * (v[sel].max() - v[sel].min()))


def simulate(netlist: str, *, node: str = "t", timeout: float = 60.0) -> SimulationResult:
    """Run ``netlist`` (text ending in ``.end``) in ngspice and measure ``v(node)``.

    Raises
    ------
    SolverError
        ngspice missing, exiting with an error, timing out, or writing no data.
    """
    exe = ngspice_path()
    with tempfile.TemporaryDirectory(prefix="picker-ngspice-") as tmp:
        out = Path(tmp) / "wave.txt"
        body = netlist.rstrip()
        if not body.lower().endswith(".end"):
            raise SolverError("the netlist does not end with .end")
        deck = body[: -len(".end")] + (
            f".control\nset wr_singlescale\nrun\nwrdata {out} v({node})\nquit\n.endc\n.end\n"
        )
        cir = Path(tmp) / "deck.cir"
        cir.write_text(deck, encoding="utf-8")
        try:
            proc = subprocess.run(
                [exe, "-b", str(cir)],
                capture_output=True,
                text=True,
                timeout=timeout,
                cwd=tmp,
                check=False,
            )
        except subprocess.TimeoutExpired:
            raise SolverError(f"ngspice did not finish within {timeout:g} s") from None
        text = proc.stdout + "\n" + proc.stderr
        if proc.returncode != 0 or not out.exists():
            last = " | ".join(line.strip() for line in text.strip().splitlines()[-3:])
            raise SolverError(f"ngspice failed (exit {proc.returncode}): {last}")
        data = np.loadtxt(out, ndmin=2)
    time, v = data[:, 0], data[:, 1]
    tstop = float(time[-1])
    meas = {}
    for m in re.finditer(r"^\s*(\w+)\s*=\s*([-+0-9.eE]+)", proc.stdout, flags=re.MULTILINE):
        try:
            meas[m.group(1).lower()] = float(m.group(2))
        except ValueError:
            continue
    warnings = tuple(
        line.strip()
        for line in text.splitlines()
        if any(p in line.lower() for p in WARNING_PATTERNS)
    )
    amp = _peak(time, v, 0.9 * tstop, tstop)
    early = _peak(time, v, 0.4 * tstop, 0.5 * tstop)
    freq = tail_frequency(time, v, 0.7 * tstop)
    osc = bool(amp >= 1e-3 and amp >= 0.8 * early and np.isfinite(freq))
    return SimulationResult(
        frequency_hz=freq,
        amplitude_v=amp,
        early_amplitude_v=early,
        oscillating=osc,
        meas=meas,
        warnings=warnings,
        node=node,
    )
