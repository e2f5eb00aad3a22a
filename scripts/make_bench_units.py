"""Write demo_specs/bench_units.csv: invented bench measurements for `picker calibrate`.

The scenario (invented, not a check value): ten prototype boards of the
proximity-probe exciter (demo_specs/probe_exciter.toml, Colpitts, ~310 kHz),
built with three C1/C2 pairs and three inductor values while the design was
being tuned. The board "truth" used to generate them:

* stray = 18 pF across the tank (layout, probe socket),
* c2_shunt = 30 pF across C2 (the transistor's input capacitance),
* l_scale = 0.97: the chokes all come from one reel that runs 3 % below its
  marking (inside its 10 % tolerance), with 0.1 % unit-to-unit scatter.

C1 and C2 were measured on an LCR meter (0.05 % reading error); L is the
marked value; the frequency is read on a counter (10 ppm). Run from the
repository root:  python scripts/make_bench_units.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from picker.files import atomic_write
from picker.tank.board import Parasitics, board_frequency
from picker.tank.colpitts import COLPITTS
from picker.units import format_quantity

TRUTH = Parasitics(stray=18e-12, c1_shunt=0.0, c2_shunt=30e-12, l_scale=0.97)
SEED = 20250310

# (C1, C2, L) as built: nominal, marked values
BUILDS = [
    (1.5e-9, 6.8e-9, 220e-6),
    (1.5e-9, 6.8e-9, 220e-6),
    (1.0e-9, 4.7e-9, 330e-6),
    (1.0e-9, 4.7e-9, 330e-6),
    (2.2e-9, 10e-9, 150e-6),
    (2.2e-9, 10e-9, 150e-6),
    (1.0e-9, 10e-9, 270e-6),
    (2.2e-9, 4.7e-9, 180e-6),
    (1.0e-9, 10e-9, 270e-6),
    (2.2e-9, 4.7e-9, 180e-6),
]


def main() -> None:
    rng = np.random.default_rng(SEED)
    c1_nom, c2_nom, l_mark = (np.array(x) for x in zip(*BUILDS, strict=True))
    n = c1_nom.size
    c1_true = c1_nom * (1 + 0.02 * rng.uniform(-1, 1, n))  # 5 % parts, most land nearer
    c2_true = c2_nom * (1 + 0.02 * rng.uniform(-1, 1, n))
    l_true = l_mark * TRUTH.l_scale * (1 + 0.001 * rng.standard_normal(n))
    c1_read = c1_true * (1 + 0.0005 * rng.standard_normal(n))  # LCR meter
    c2_read = c2_true * (1 + 0.0005 * rng.standard_normal(n))
    true_values = {"C1": c1_true, "C2": c2_true, "L": l_true / TRUTH.l_scale}
    f = board_frequency(COLPITTS, true_values, TRUTH) * (1 + 10e-6 * rng.standard_normal(n))

    lines = [
        "# Invented bench measurements: ten prototype boards of the proximity-probe exciter",
        "# (demo_specs/probe_exciter.toml). Written by scripts/make_bench_units.py, which",
        "# says what board it models. C1 and C2 read on an LCR meter; L as marked.",
        "unit,C1,C2,L,frequency,measured,note",
    ]
    for i in range(n):
        lines.append(
            ",".join(
                [
                    f"P{i + 1}",
                    format_quantity(c1_read[i], "F", digits=5).replace(" ", ""),
                    format_quantity(c2_read[i], "F", digits=5).replace(" ", ""),
                    format_quantity(l_mark[i], "H", digits=3).replace(" ", ""),
                    format_quantity(f[i], "Hz", digits=6),
                    "C1 C2",
                    "",
                ]
            )
        )
    out = Path(__file__).resolve().parent.parent / "demo_specs" / "bench_units.csv"
    # regenerating the demo file is the point of the script, hence force=True
    atomic_write(out, "\n".join(lines) + "\n", force=True, key="bench_units.csv")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
