"""The model's run from rest against ngspice at the netlist's own step, on the records
ngspice confirmed at a finer step.

A record whose netlist step showed a burst or a wandering envelope was run again at a
five times finer step, and at 25 times where that disagreed too
(``picker.circuit.ngspice.simulate`` with ``confirm``); the record keeps both readings
(``step_refined``: the factor, and the carrier at the netlist's step). This script asks
whether the model's run, at its own step, follows ngspice's course at the netlist's step
rather than the confirmed one: for every such record of the given sets it prints the
model's carrier (``picker.circuit.validation.model_answers``) against the record's
confirmed reading and against its reading at the netlist's step, and how many lie
within 2 % of each.

Usage::

    python scripts/step_for_step.py tests/validation/tank_hartley.json [...]

About 2 to 5 minutes of CPU a set (the runs from rest of its refined records).
"""

from __future__ import annotations

import argparse
import math
import warnings
from pathlib import Path

from picker.circuit.validation import load_reference, model_answers

WITHIN = 0.02  # issue 11's frequency target


def _rel(model: float, ref: float | None) -> float:
    if not ref or not math.isfinite(model):
        return math.nan
    return model / ref - 1.0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    ap.add_argument("sets", nargs="+", type=Path, help="validation record files")
    args = ap.parse_args(argv)
    hits_final = hits_coarse = total = 0
    print(f"{'set':22} {'id':6} {'step':>5} {'vs confirmed':>13} {'vs netlist step':>16}")
    for path in args.sets:
        designs, records = load_reference(path)
        pick = [i for i, r in enumerate(records) if r.get("step_refined")]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            got = model_answers([designs[i] for i in pick])
        for i, answer in zip(pick, got, strict=True):
            rec = records[i]
            refined = rec["step_refined"]
            final = _rel(answer.f_hz, rec["f_hz"])
            coarse = _rel(answer.f_hz, refined["f_hz_at_netlist_step"])
            total += 1
            hits_final += abs(final) <= WITHIN
            hits_coarse += abs(coarse) <= WITHIN
            print(
                f"{path.stem:22} {designs[i].id:6} {refined['factor']:>4}x "
                f"{final:>+13.2%} {coarse:>+16.2%}"
            )
    print(f"within 2 % of the confirmed reading: {hits_final} of {total}")
    print(f"within 2 % of the netlist step's reading: {hits_coarse} of {total}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
