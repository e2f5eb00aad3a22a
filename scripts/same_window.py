"""A validation design's circuit run from rest by the model and by ngspice, read over the same windows.

A burster's carrier reading depends on the part of the run it is read over (picker's
``picker.circuit.reference_spread``). This puts the model's own run of a design
(``picker.circuit.burst_carrier.waveform_from_rest``: its circuit from the netlist's
kick, trapezoidal rule at 128 steps a period of the ideal tank frequency) beside
ngspice's transient of picker's netlist of the same design and length, and reads both
with ``picker.circuit.waveform.measure`` over the same windows (parts of the model's run,
each run timed from its kick). Where the tank top is a pulse train, it also
prints the median interval between the pulses' falling edges (crossings of halfway
between the median and the minimum), which is the spacing of the comb of lines a carrier
reading picks one of.

Usage::

    python scripts/same_window.py tests/validation/tank_hartley_series.json hs008 [ID ...]
        [--periods 1000]

Takes about two minutes of CPU per design at 1000 periods (the model's run; ngspice
about a second).
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np

from picker.circuit.burst_carrier import RELAX_STEPS, waveform_from_rest
from picker.circuit.netlist import write_netlist
from picker.circuit.network import Network
from picker.circuit.ngspice import transient
from picker.circuit.validation import load_reference
from picker.circuit.waveform import measure

#: The windows, as fractions of the model's run (both runs timed from their kicks).
WINDOWS = ((0.1, 0.4), (0.1, 0.5), (0.2, 0.5), (0.3, 0.7), (0.1, 0.9), (0.2, 1.0), (0.5, 1.0))


def pulse_interval(t: np.ndarray, v: np.ndarray) -> float:
    """Median time between falling crossings of halfway from the median down to the
    minimum, over the run after its first tenth, s (NaN with fewer than three)."""
    keep = t > 0.1 * t[-1]
    t, v = t[keep], v[keep]
    below = v < 0.5 * (np.median(v) + v.min())
    edges = t[1:][below[1:] & ~below[:-1]]
    return float(np.median(np.diff(edges))) if edges.size >= 3 else float("nan")


def kick_delay(netlist: str) -> float:
    """The start-up kick's delay in picker's netlist (its IKICK pulse), s."""
    for line in netlist.splitlines():
        if line.startswith("IKICK"):
            return float(line.split("PULSE(", 1)[1].split()[2])
    raise ValueError("the netlist has no start-up kick")


def _read(t: np.ndarray, v: np.ndarray, f0: float, a: float, b: float, span: float) -> str:
    sel = (t >= a * span) & (t <= b * span)
    got = measure(t[sel] - t[sel][0], v[sel], f_hint=f0, tail_start=0.0)
    return f"{got.state:9} {got.f_hz / 1e3:9.2f} kHz"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    ap.add_argument("path", type=Path, help="a validation set (tests/validation/*.json)")
    ap.add_argument("ids", nargs="+", help="design ids of that set")
    ap.add_argument("--periods", type=int, default=1000, help="run length, tank periods")
    args = ap.parse_args(argv)
    designs, answers = load_reference(args.path)
    by_id = {d.id: (d, a) for d, a in zip(designs, answers, strict=True)}
    for did in args.ids:
        if did not in by_id:
            print(f"same_window.py: {args.path}: no design {did!r}", file=sys.stderr)
            return 2
        d, rec = by_id[did]
        f0 = float(d.topo.frequency(d.values, d.stray))
        net = Network.build(d.topo, d.values, d.stray, d.params)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            tm, vm = waveform_from_rest(net, f0, args.periods, steps=RELAX_STEPS)
        netlist = write_netlist(
            d.topo, d.values, d.stray, d.params, title=d.id, cycles=args.periods
        )
        run = transient(netlist, timeout=600.0)
        tn = run.time - kick_delay(netlist)
        print(
            f"{did}: ideal tank {f0 / 1e3:.2f} kHz, record {rec['state']} at "
            f"{(rec['f_hz'] or float('nan')) / 1e3:.2f} kHz; {args.periods} periods"
        )
        for a, b in WINDOWS:
            print(
                f"  {a:.2f}-{b:.2f}  model {_read(tm, vm, f0, a, b, tm[-1])} | "
                f"ngspice {_read(tn, run.v, f0, a, b, tm[-1])}"
            )
        pm, pn = pulse_interval(tm, vm), pulse_interval(tn, run.v)
        print(
            f"  pulse interval, median: model {pm * 1e6:.3f} us, ngspice {pn * 1e6:.3f} us "
            f"({pm / pn - 1:+.2%})"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
