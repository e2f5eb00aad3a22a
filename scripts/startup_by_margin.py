"""The describing function's start-up time against ngspice's records, by start-up margin.

Over every committed validation set (``tests/validation/*.json`` but the mode studies and
the pinned records), the designs the describing function
(``picker.circuit.steady.steady_state``) calls steady with a frequency, a waveform not far
from a sine (``picker.circuit.burst_carrier.distorted``) and a start-up time, and that
ngspice records steady with a start-up time. These are the designs whose start-up time
``solve`` and ``evaluate`` report from the describing function (a burster's, or a
distorted design's, comes from its run from rest in ``simulate`` and the validation). It
prints the share within ±30 % of the record's start-up time, the median error and the
median ratio (model / ngspice), by margin band and on either side of the overdrive
caution's threshold (``picker.circuit.amplitude.OVERDRIVE_MARGIN``).

Usage::

    python scripts/startup_by_margin.py [--json OUT]

About 40 s of CPU.
"""

from __future__ import annotations

import argparse
import json
import math
import warnings
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from picker.circuit.amplitude import OVERDRIVE_MARGIN
from picker.circuit.burst_carrier import distorted
from picker.circuit.steady import steady_state
from picker.circuit.validation import load_reference

ROOT = Path(__file__).resolve().parent.parent
SKIP = ("mode_study", "pinned")
BANDS = ((1.0, 3.0), (3.0, 6.0), (6.0, 20.0), (20.0, math.inf))


@dataclass(frozen=True)
class Timed:
    """A design timed both ways: its set and id, stage, start-up margin, the describing
    function's start-up time and the record's, s."""

    set: str
    id: str
    stage: str
    margin: float
    model_s: float
    ngspice_s: float


def timed_designs() -> list[Timed]:
    """Every design timed both ways (module docstring), set by set."""
    rows: list[Timed] = []
    for path in sorted((ROOT / "tests" / "validation").glob("*.json")):
        if any(s in path.stem for s in SKIP):
            continue
        designs, records = load_reference(path)
        for d, rec in zip(designs, records, strict=True):
            st = steady_state(d.topo, d.values, d.stray, d.params)
            if not bool(np.asarray(st.starts)) or bool(np.asarray(st.bursting)):
                continue
            if not math.isfinite(float(np.asarray(st.f_hz))):
                continue
            if distorted(False, True, False, st.harmonics_dbc):
                continue
            model = float(np.asarray(st.startup_time_s))
            ref = rec.get("startup_time_s")
            if rec["state"] != "steady" or not ref or not math.isfinite(model):
                continue
            margin = float(np.asarray(st.margin))
            rows.append(Timed(path.stem, d.id, str(d.params.stage), margin, model, float(ref)))
    return rows


def _line(label: str, ratio: np.ndarray) -> str:
    if ratio.size == 0:
        return f"{label:22} {0:4}"
    within = float(np.mean(np.abs(ratio - 1.0) <= 0.3))
    err = float(np.median(np.abs(ratio - 1.0)))
    return f"{label:22} {ratio.size:4} {within:9.1%} {err:9.1%} {float(np.median(ratio)):9.2f}"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    ap.add_argument("--json", type=Path, help="also write the rows to this file")
    args = ap.parse_args(argv)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        rows = timed_designs()
    m = np.array([r.margin for r in rows])
    ratio = np.array([r.model_s / r.ngspice_s for r in rows])
    print(f"{'margin':22} {'n':>4} {'±30 %':>9} {'med. err':>9} {'med. ratio':>9}")
    for lo, hi in BANDS:
        print(_line(f"{lo:g} to {hi:g}", ratio[(m >= lo) & (m < hi)]))
    print(_line(f"at most {OVERDRIVE_MARGIN:g}", ratio[m <= OVERDRIVE_MARGIN]))
    print(_line(f"above {OVERDRIVE_MARGIN:g}", ratio[m > OVERDRIVE_MARGIN]))
    print(_line("all", ratio))
    if args.json:
        args.json.write_text(json.dumps([asdict(r) for r in rows], indent=1), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
