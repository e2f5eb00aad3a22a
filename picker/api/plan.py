"""Running a plan: solve every channel, then consolidate them with CP-SAT.

The plan file itself (channels, base spec, stock list, priorities) is read by
:mod:`picker.spec.plan`; here each channel's spec is loaded and solved
(:func:`picker.api.pipeline.solve`), its ranked designs become the consolidation
input (part ids per position, series values matched to stock parts), and
:func:`picker.buyer.consolidate.consolidate` picks one design per channel.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from picker.api.pipeline import solve
from picker.api.results import PartPick, SolveResult
from picker.buyer.consolidate import consolidate
from picker.buyer.model import ChannelCandidates, PartInfo, PlanResult, generic_part_id
from picker.errors import InfeasibleError, SpecError
from picker.spec.load import load_spec
from picker.spec.model import Spec
from picker.spec.plan import Plan
from picker.spec.stock import StockList, load_stock, unit_price

__all__ = ["ChannelRun", "PlanRun", "StockMatcher", "position_ids", "position_parts", "run_plan"]

#: ``matcher(kind, value, tolerance, generic id) -> part id`` (:class:`StockMatcher`).
Matcher = Callable[[str, float, float, str], str]


@dataclass(frozen=True)
class ChannelRun:
    """One channel's solve: its spec, ranked candidates and the consolidation input."""

    name: str
    spec: Spec
    result: SolveResult
    candidates: ChannelCandidates


@dataclass(frozen=True)
class PlanRun:
    """A solved plan."""

    plan: Plan
    channels: list[ChannelRun]
    catalogue: dict[str, PartInfo]
    result: PlanResult


def position_parts(pp: PartPick) -> list[tuple[str, float, float]]:
    """(part id or "", value, tolerance) of each part at one chosen position (two for a pair)."""
    if pp.is_pair:
        return [
            (pp.part_id, pp.first_value, pp.tolerance),
            (pp.second_part_id, pp.second_value, pp.second_tolerance),
        ]
    return [(pp.part_id, pp.value, pp.tolerance)]


def position_ids(pp: PartPick, kind: str, matcher: Matcher) -> tuple[str, ...]:
    """Part ids of one chosen position: stock ids (two for a pair) or generic ids."""
    out = []
    for pid, value, tol in position_parts(pp):
        if pid:
            out.append(str(pid))
        else:
            out.append(matcher(kind, value, tol, generic_part_id(kind, value, tol)))
    return tuple(out)


class StockMatcher:
    """Maps a series value to the cheapest matching stock part (or keeps its generic id)."""

    def __init__(self, stock: StockList | None, build_qty: int, enabled: bool) -> None:
        self.stock = stock
        self.build_qty = build_qty
        self.enabled = enabled and stock is not None
        self.cache: dict[str, str] = {}

    def __call__(self, kind: str, value: float, tol: float, gid: str) -> str:
        s = self.stock
        if not self.enabled or s is None:
            return gid
        if gid not in self.cache:
            hit = np.flatnonzero(
                (s.kind == kind)
                & (np.abs(s.value / value - 1) < 1e-9)
                & (s.tol <= tol * (1 + 1e-9))
            )
            if hit.size == 0:
                self.cache[gid] = gid
            else:
                price = unit_price(s, hit, self.build_qty)
                key = np.where(np.isnan(price), np.inf, price)
                order = np.lexsort((s.ids[hit].astype(str), key))
                self.cache[gid] = str(s.ids[hit[order[0]]])
        return self.cache[gid]


def _catalogue(
    ids: set[str], stock: StockList | None, generic: dict[str, tuple[str, float, float]]
) -> dict[str, PartInfo]:
    """The consolidation's part facts: a stock part's from the list, a generic one's kind,
    value and tolerance."""
    out: dict[str, PartInfo] = {}
    for p in sorted(ids):
        if stock is not None and p in stock.index:
            i = stock.index[p]
            fin = np.isfinite(stock.break_qty[i])
            out[p] = PartInfo(
                p,
                str(stock.kind[i]),
                float(stock.value[i]),
                float(stock.tol[i]),
                tuple(float(x) for x in stock.break_qty[i][fin]),
                tuple(float(x) for x in stock.break_price[i][fin]),
                float(stock.on_hand[i]),
                str(stock.material[i]),
            )
        elif p in generic:
            kind, value, tol = generic[p]
            out[p] = PartInfo(p, kind, value, tol)
    return out


def _check_files(plan: Plan) -> None:
    """Every file the plan names exists (else the error names the plan and the key)."""
    ps = plan.spec
    named = [("base", ps.base), ("stock", ps.stock)]
    named += [(f"channels.{n}.spec", ch.spec) for n, ch in ps.channels.items()]
    for key, rel in named:
        # a FIFO, device or link loop goes on to the bounded reader, which names what it is
        if rel is not None and not os.path.lexists(plan.resolve(rel)):
            raise SpecError(
                f"expected an existing file; no such file {str(plan.resolve(rel))!r}",
                file=str(plan.path),
                key=key,
            )


def run_plan(plan: Plan, *, time_limit: float | None = None, workers: int = 2) -> PlanRun:
    """Solve every channel, then consolidate them with CP-SAT.

    Raises
    ------
    SpecError
        A bad plan, channel spec or stock list (one line, exit status 2).
    InfeasibleError
        A channel whose spec has no design at all (nothing to consolidate).
    """
    ps = plan.spec
    _check_files(plan)
    stock: StockList | None = None
    if ps.stock:
        stock = load_stock(plan.resolve(ps.stock))
    matcher = StockMatcher(stock, ps.build_quantity, ps.match_stock)
    runs: list[ChannelRun] = []
    generic: dict[str, tuple[str, float, float]] = {}
    for name, path, over in plan.channel_sources():
        ch = ps.channels[name]
        try:
            spec = load_spec(path, overrides=over)
        except SpecError as exc:
            raise SpecError(
                f"(channel {name}) {exc.message}", file=exc.file or str(path), key=exc.key
            ) from None
        n = ch.candidates if ch.candidates is not None else ps.candidates
        mc = max(n, spec.yield_.candidates)
        res = solve(spec, top=n, candidates=mc)
        if not res.candidates:
            raise InfeasibleError(
                f"{plan.path}: channel {name!r}: no design meets its spec "
                f"({path.name}); run 'picker solve' on it to see the nearest misses"
            )
        positions = tuple(spec.topo.positions)
        parts = []
        for c in res.candidates:
            row = []
            for pos in positions:
                pp = c.parts[pos]
                ids = position_ids(pp, pos[0], matcher)
                for g, (_, value, tol) in zip(ids, position_parts(pp), strict=True):
                    if g not in generic:
                        generic[g] = (pos[0], float(value), float(tol))
                row.append(ids)
            parts.append(tuple(row))
        cc = ChannelCandidates(
            name=name,
            positions=positions,
            parts=tuple(parts),
            yield_estimate=np.array([c.yield_estimate for c in res.candidates]),
            ci_low=np.array([c.ci_low for c in res.candidates]),
            ci_high=np.array([c.ci_high for c in res.candidates]),
            min_yield=ch.min_yield if ch.min_yield is not None else ps.min_yield,
            values=np.array([[c.parts[p].value for p in positions] for c in res.candidates]),
        )
        runs.append(ChannelRun(name, spec, res, cc))
    used = {p for r in runs for cand in r.candidates.parts for pos in cand for p in pos}
    catalogue = _catalogue(used, stock, generic)
    result = consolidate(
        [r.candidates for r in runs],
        build_qty=ps.build_quantity,
        catalogue=catalogue,
        priorities=ps.priorities,
        time_limit=ps.time_limit if time_limit is None else time_limit,
        workers=workers,
    )
    return PlanRun(plan, runs, catalogue, result)
