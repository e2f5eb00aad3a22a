"""Speed figures for consolidation and stock loading (prints; no pass/fail).

``python -m picker.bench.consolidate`` prints

* the CP-SAT solve of a synthetic, seeded plan: 8 Colpitts channels at invented
  frequencies, each with its 200 best (C1, C2, L) designs drawn from a 500-part
  stock list (price breaks, limited stock), under three priority orders; the
  proof status, the gap and the wall time;
* the default order again with the exact reductions of
  :mod:`picker.buyer.reductions` switched on one at a time, and on three more seeds;
* the load time of a synthetic 100,000-row stock CSV (best of 3).

The instances are invented (random, seeded); they measure speed only.
"""

from __future__ import annotations

import argparse
import csv
import math
import os
import tempfile
import time

import numpy as np
from scipy.stats import norm

from picker.buyer.consolidate import consolidate
from picker.buyer.model import ChannelCandidates, PartInfo
from picker.spec.stock import COLUMNS as STOCK_COLUMNS
from picker.spec.stock import load_stock
from picker.tank.colpitts import COLPITTS

E24 = (
    1.0,
    1.1,
    1.2,
    1.3,
    1.5,
    1.6,
    1.8,
    2.0,
    2.2,
    2.4,
    2.7,
    3.0,
    3.3,
    3.6,
    3.9,
    4.3,
    4.7,
    5.1,
    5.6,
    6.2,
    6.8,
    7.5,
    8.2,
    9.1,
)  # IEC 60063
E12 = E24[::2]
#: Invented channel frequencies of the synthetic eight-channel board, Hz.
CHANNEL_HZ = (210e3, 250e3, 300e3, 350e3, 420e3, 500e3, 600e3, 700e3)


def synthetic_stock(seed: int = 1, parts: int = 500) -> dict[str, PartInfo]:
    """A seeded stock list: 80 % capacitors (E24, 100 pF..91 nF), 20 % inductors (E12).

    Each part is a random value with a random tolerance; tighter parts cost
    more; on-hand quantities are random, some unlimited. Invented data.
    """
    rng = np.random.default_rng(seed)
    caps = [m * d for d in (1e-10, 1e-9, 1e-8) for m in E24]
    coils = [m * d for d in (1e-6, 1e-5, 1e-4) for m in E12] + [1e-3]
    out: dict[str, PartInfo] = {}
    for i in range(parts):
        is_c = i < parts * 4 // 5
        values, tols, base = (
            (caps, (0.01, 0.02, 0.05, 0.05, 0.1), 0.01)
            if is_c
            else (coils, (0.02, 0.05, 0.1), 0.08)
        )
        v = values[int(rng.integers(len(values)))]
        t = tols[int(rng.integers(len(tols)))]
        p = round(base * math.sqrt(0.05 / t) * rng.uniform(0.5, 1.5), 4)
        pid = f"{'C' if is_c else 'L'}{i:04d}"
        out[pid] = PartInfo(
            pid,
            "C" if is_c else "L",
            v,
            t,
            (1.0, 1000.0, 5000.0),
            (p, round(p * 0.6, 4), round(p * 0.35, 4)),
            float(rng.choice([math.inf, 2000, 5000, 20000])),
        )
    return out


def synthetic_channel(
    name: str,
    f0: float,
    stock: dict[str, PartInfo],
    *,
    window: float = 0.02,
    top: int = 200,
    stray: float = 12e-12,
) -> ChannelCandidates:
    """Every stock (C1, C2, L) in the window with 0.15 <= C1/C2 <= 0.5, best ``top`` kept.

    Yield is the first-order normal approximation: relative frequency spread
    sigma = sqrt(sum (S_i t_i / sqrt 3)^2) (uniform tolerances, sigma = t/sqrt 3,
    GUM JCGM 100:2008), sensitivities from picker.tank.base; a stand-in for the
    Monte Carlo, good enough to rank a benchmark.
    """
    cs = [p for p in stock.values() if p.kind == "C"]
    ls = [p for p in stock.values() if p.kind == "L"]
    cv = np.array([p.value for p in cs])
    ct = np.array([p.tol for p in cs])
    gi, gj = np.meshgrid(np.arange(len(cs)), np.arange(len(cs)), indexing="ij")
    i, j = gi.ravel(), gj.ravel()
    beta = cv[i] / cv[j]
    keep = (beta >= 0.15) & (beta <= 0.5)
    i, j = i[keep], j[keep]
    rows = []
    w = math.log1p(window)
    for k, coil in enumerate(ls):
        vals = {"C1": cv[i], "C2": cv[j], "L": np.full(i.shape, coil.value)}
        f = COLPITTS.frequency(vals, stray)
        hit = np.abs(np.log(f / f0)) <= w
        if not hit.any():
            continue
        sub = {key: a[hit] for key, a in vals.items()}
        sens = COLPITTS.sensitivities(sub, stray)
        sig = np.sqrt(
            (sens["C1"] * ct[i[hit]]) ** 2
            + (sens["C2"] * ct[j[hit]]) ** 2
            + (sens["L"] * coil.tol) ** 2
        ) / math.sqrt(3)
        e = np.log(f[hit] / f0)
        y = norm.cdf((w - e) / sig) - norm.cdf((-w - e) / sig)
        rows.append((np.round(y, 4), i[hit], j[hit], np.full(hit.sum(), k)))
    y = np.concatenate([r[0] for r in rows])
    ii = np.concatenate([r[1] for r in rows])
    jj = np.concatenate([r[2] for r in rows])
    kk = np.concatenate([r[3] for r in rows])
    order = np.lexsort((np.arange(len(y)), -y))[:top]
    parts = tuple(((cs[ii[o]].part_id,), (cs[jj[o]].part_id,), (ls[kk[o]].part_id,)) for o in order)
    return ChannelCandidates(name, ("C1", "C2", "L"), parts, y[order])


def synthetic_plan(seed: int = 1) -> tuple[list[ChannelCandidates], dict[str, PartInfo]]:
    """Eight channels x 200 candidates against a 500-part stock list (seeded, invented)."""
    stock = synthetic_stock(seed)
    chans = [synthetic_channel(f"ch{c}", f0, stock) for c, f0 in enumerate(CHANNEL_HZ)]
    return chans, stock


def bench_reductions(seed: int = 1, workers: int = 2, time_limit: float = 10.0) -> None:
    """The default priority order with each exact reduction switched on in turn."""
    chans, cat = synthetic_plan(seed)
    print("what each reduction buys (priorities parts > cost > yield):")
    for red in ((), ("stock",), ("stock", "dominated"), ("stock", "dominated", "covers")):
        t = time.perf_counter()
        res = consolidate(
            chans, build_qty=1000, catalogue=cat, time_limit=time_limit, workers=workers, reduce=red
        )
        dt = time.perf_counter() - t
        r = res.reductions
        kept = r.get("in_a_cover", r["undominated"])
        gap = {k: round(v, 6) for k, v in res.gap.items()}
        print(
            f"  {'+'.join(red) or 'none':22s} {dt:6.2f} s  status {res.status:8s} "
            f"candidates {r['candidates']} -> {kept}  gap {gap}"
        )


def bench_solve(seed: int = 1, workers: int = 2, time_limit: float = 10.0) -> None:
    """The synthetic plan under three priority orders: status, objective, gap, time."""
    chans, cat = synthetic_plan(seed)
    distinct = len({p for ch in chans for cand in ch.parts for pos in cand for p in pos})
    print(
        f"plan: {len(chans)} channels x {[len(c) for c in chans][0]} candidates, "
        f"{len(cat)}-part stock ({distinct} parts appear in candidates), build 1000, "
        f"{workers} workers, time limit {time_limit:g} s"
    )
    for prio in (
        ("cost", "yield", "parts"),
        ("yield", "cost", "parts"),
        ("parts", "cost", "yield"),
    ):
        t = time.perf_counter()
        res = consolidate(
            chans,
            build_qty=1000,
            catalogue=cat,
            priorities=prio,
            time_limit=time_limit,
            workers=workers,
        )
        dt = time.perf_counter() - t
        gap = {k: (None if v is None else round(v, 6)) for k, v in res.gap.items()}
        print(
            f"  priorities {' > '.join(prio):22s} {dt:6.2f} s  status {res.status:8s} "
            f"objective {res.objective}  gap {gap}  distinct parts "
            f"{res.baseline.distinct_parts} alone -> "
            f"{res.plan.distinct_parts if res.plan else '-'}"
        )
        r = res.reductions
        if r.get("cover_search_complete"):
            print(
                f"    fewest parts {r['parts_lower_bound']} proven by the cover search in "
                f"{r['reduce_seconds']:.2f} s ({r['optimal_covers']} optimal cover profiles, "
                f"{r['in_a_cover']} of {r['candidates']} candidates inside one)"
            )


def write_stock_csv(path: str, rows: int = 100_000, seed: int = 2) -> None:
    """A synthetic stock list mixing SI numbers, prefixed values, letters and breaks."""
    rng = np.random.default_rng(seed)
    texts = ["4.7 nF", "100 pF", "2n2", "1.5e-9", "33 pF", "0.47 uF", "6n8", "1e-10"]
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(STOCK_COLUMNS)
        for i in range(rows):
            cap = i % 4 != 0
            w.writerow(
                [
                    f"P{i:06d}",
                    "C" if cap else "L",
                    texts[int(rng.integers(len(texts)))] if cap else "10 uH",
                    "5 %" if i % 2 else "J",
                    "C0G" if cap else "",
                    "" if cap else "ferrite",
                    "50 V",
                    int(rng.integers(0, 5000)),
                    f"{rng.uniform(0.001, 1):.4f}",
                    "100:0.02;1000:0.01" if i % 5 == 0 else "",
                ]
            )


def bench_load(rows: int = 100_000) -> None:
    """Load time of a synthetic stock CSV of ``rows`` rows (best of 3)."""
    with tempfile.TemporaryDirectory() as d:
        path = os.path.join(d, "stock.csv")
        write_stock_csv(path, rows)
        best = math.inf
        for _ in range(3):
            t = time.perf_counter()
            s = load_stock(path)
            best = min(best, time.perf_counter() - t)
        print(f"load_stock {len(s):,} rows: {best:.3f} s (best of 3)")


def main() -> None:
    """Print the figures of the module docstring."""
    bench_solve()
    bench_reductions()
    for seed in (2, 3, 4):
        chans, cat = synthetic_plan(seed)
        t = time.perf_counter()
        res = consolidate(chans, build_qty=1000, catalogue=cat, time_limit=10.0, workers=2)
        print(
            f"seed {seed}: parts > cost > yield {time.perf_counter() - t:5.2f} s  status "
            f"{res.status}  objective {res.objective}"
        )
    bench_load()


if __name__ == "__main__":
    argparse.ArgumentParser(
        prog="python -m picker.bench.consolidate",
        description="Speed of consolidation and stock loading.",
    ).parse_args()
    main()
