"""Exact reductions of a consolidation model before CP-SAT sees it.

Each reduction removes candidates that no lexicographically optimal plan
chooses, so :func:`picker.buyer.consolidate.consolidate` returns the same plan with
or without them (a property test against brute force checks this), only
faster:

* **stock-impossible** candidates: one of their parts is needed more often for
  the build than is on hand, so no plan can hold them;
* **dominated** candidates: B dominates A in the same channel when B comes
  first in the channel's list, B's parts are a sub-multiset of A's (so B needs
  no more distinct parts and no more stock), B's yield is at least A's (when
  "yield" is a priority), and every part A holds more of has an extended price
  that never falls as the quantity grows (when "cost" is a priority; a price
  break can make 1000 parts cheaper than 999, and then more is not dearer).
  Swapping A for B in any plan is then no worse in every priority, and the
  deterministic tie-break (lowest index first) prefers B, so A is never chosen;
* **outside every fewest-parts cover** (parts first): once
  :func:`picker.buyer.partcover.min_part_covers` has proven the fewest distinct
  parts k and listed every optimal cover, a plan with k parts uses only
  candidates inside one of them (:func:`picker.buyer.partcover.in_some_cover`).
"""

from __future__ import annotations

import time
from collections.abc import Mapping, Sequence
from typing import Any

from picker.buyer.model import YIELD_SCALE, ChannelCandidates, PartInfo, PlanModel, on_hand_of
from picker.buyer.partcover import CoverResult, in_some_cover, min_part_covers


def stock_possible(
    channels: Sequence[ChannelCandidates],
    eligible: Mapping[str, Sequence[int]],
    catalogue: Mapping[str, PartInfo],
    build_qty: int,
    stock_on_hand: Mapping[str, float] | None,
) -> dict[str, list[int]]:
    """Candidates whose every part, alone on the board, is on hand for the build."""
    out = {}
    for ch in channels:
        keep = []
        for j in eligible[ch.name]:
            if all(
                k * build_qty <= on_hand_of(p, catalogue, stock_on_hand)
                for p, k in ch.counts(j).items()
            ):
                keep.append(j)
        out[ch.name] = keep
    return out


def _never_cheaper_with_more(
    info: PartInfo | None, build_qty: int, most: int, cache: dict[tuple[str, int], bool]
) -> bool:
    """Is the extended price of ``n * build_qty`` units nondecreasing for n = 0..most?"""
    if info is None or not info.break_qty:
        return True  # unpriced parts cost nothing in the model
    key = (info.part_id, most)
    if key not in cache:
        ext = [0.0] + [info.unit_price(n * build_qty) * n * build_qty for n in range(1, most + 1)]
        cache[key] = all(b >= a for a, b in zip(ext, ext[1:], strict=False))
    return cache[key]


def undominated(
    channels: Sequence[ChannelCandidates],
    eligible: Mapping[str, Sequence[int]],
    catalogue: Mapping[str, PartInfo],
    build_qty: int,
    priorities: Sequence[str],
) -> dict[str, list[int]]:
    """The eligible candidates no earlier candidate of the same channel dominates.

    See the module docstring for the dominance rule.
    """
    yield_matters = "yield" in priorities
    cost_matters = "cost" in priorities
    # the most of a part one board could hold: summed over channels, per channel the most
    most: dict[str, int] = {}
    for ch in channels:
        per: dict[str, int] = {}
        for j in eligible[ch.name]:
            for p, k in ch.counts(j).items():
                per[p] = max(per.get(p, 0), k)
        for p, k in per.items():
            most[p] = most.get(p, 0) + k
    cache: dict[tuple[str, int], bool] = {}
    bit: dict[str, int] = {}
    out = {}
    for ch in channels:
        kept: list[tuple[int, int, dict[str, int], int]] = []  # (j, mask, counts, loss)
        for j in eligible[ch.name]:
            cnt = ch.counts(j)
            mask = 0
            for p in cnt:
                mask |= bit.setdefault(p, 1 << len(bit))
            loss = round((1.0 - float(ch.yield_estimate[j])) * YIELD_SCALE)
            dominated = False
            for _, mb, cb, lb in kept:
                if mb & ~mask:
                    continue  # B holds a part A does not
                if any(cb[p] > cnt[p] for p in cb):
                    continue
                if yield_matters and lb > loss:
                    continue
                if cost_matters and not all(
                    _never_cheaper_with_more(catalogue.get(p), build_qty, most[p], cache)
                    for p in cnt
                    if cnt[p] > cb.get(p, 0)
                ):
                    continue
                dominated = True
                break
            if not dominated:
                kept.append((j, mask, cnt, loss))
        out[ch.name] = [j for j, _, _, _ in kept]
    return out


def fewest_parts_filter(
    channels: Sequence[ChannelCandidates],
    eligible: Mapping[str, Sequence[int]],
    *,
    time_limit: float,
) -> tuple[dict[str, list[int]] | None, CoverResult]:
    """Prove the fewest distinct parts and keep the candidates inside an optimal cover.

    Returns (candidates kept per channel or None when the search ran out of
    time, the :class:`~picker.buyer.partcover.CoverResult`).
    """
    sets = [
        [frozenset(p for ids in ch.parts[j] for p in ids) for j in eligible[ch.name]]
        for ch in channels
    ]
    res = min_part_covers(sets, time_limit=time_limit)
    if not res.complete:
        return None, res
    inside = in_some_cover(sets, res)
    kept = {
        ch.name: [j for j, ok in zip(eligible[ch.name], row, strict=True) if ok]
        for ch, row in zip(channels, inside, strict=True)
    }
    return kept, res


def reduced_model(
    channels: Sequence[ChannelCandidates],
    eligible: Mapping[str, Sequence[int]],
    catalogue: Mapping[str, PartInfo],
    build_qty: int,
    stock_on_hand: Mapping[str, float] | None,
    priorities: Sequence[str],
    limit: float,
    reduce: Sequence[str],
) -> tuple[PlanModel, int | None, dict[str, Any]]:
    """The CP-SAT model after the exact reductions of :mod:`picker.buyer.reductions`.

    Returns (model, proven lower bound on distinct parts or None, facts for the
    report: candidate counts after each reduction, the bound, the covers found).
    """
    t0 = time.perf_counter()
    possible = eligible
    if "stock" in reduce:
        possible = stock_possible(channels, eligible, catalogue, build_qty, stock_on_hand)
    kept = possible
    if "dominated" in reduce:
        kept = undominated(channels, possible, catalogue, build_qty, priorities)
    info: dict[str, Any] = {
        "candidates": sum(len(v) for v in eligible.values()),
        "stock_possible": sum(len(v) for v in possible.values()),
        "undominated": sum(len(v) for v in kept.values()),
        "undominated_candidates": kept,
        "cover_filter": False,
    }
    lower = None
    use = kept
    if "covers" in reduce and priorities[0] == "parts" and all(kept[ch.name] for ch in channels):
        # at most 60 % of the time: the solver needs the rest
        inside, cover = fewest_parts_filter(channels, kept, time_limit=0.6 * limit)
        lower = cover.lower_bound
        info["parts_lower_bound"] = lower
        info["cover_search_complete"] = cover.complete
        if inside is not None:
            use = inside
            info["cover_filter"] = True
            info["optimal_covers"] = len(cover.covers)
            info["in_a_cover"] = sum(len(v) for v in inside.values())
    model = PlanModel(channels, use, catalogue, build_qty, stock_on_hand)
    if lower is not None:
        model.m.add(model.objectives["parts"] >= lower)
    hint = {ch.name: use[ch.name][0] for ch in channels if use[ch.name]}  # best yield each
    if info["cover_filter"]:  # a plan inside the first optimal cover
        first = cover.covers[0]
        for ch in channels:
            for j in use[ch.name]:
                if all(p in first for ids in ch.parts[j] for p in ids):
                    hint[ch.name] = j
                    break
    model.hint(hint)
    info["reduce_seconds"] = time.perf_counter() - t0
    return model, lower, info
