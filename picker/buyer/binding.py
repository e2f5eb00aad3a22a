"""Name the constraint that makes a consolidation plan infeasible.

Called by :func:`picker.buyer.consolidate.consolidate` once CP-SAT has shown that
no plan exists although every channel has a candidate at its minimum yield.
The constraint groups are relaxed in turn: first each channel's stock on its
own (a channel none of whose candidates fits the stock even alone), then the
stock constraints together, shrunk with CP-SAT's assumption core and a
deletion filter to a minimal set of parts whose stock cannot all be honoured.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from ortools.sat.python import cp_model

from picker.buyer.model import ChannelCandidates, PartInfo, PlanModel, on_hand_of


def explain_infeasible(
    channels: Sequence[ChannelCandidates],
    eligible: Mapping[str, Sequence[int]],
    catalogue: Mapping[str, PartInfo],
    build_qty: int,
    stock_on_hand: Mapping[str, float] | None,
) -> str:
    """Name the constraint that makes the plan infeasible (the min-yield filter passed)."""
    # 2. a channel that cannot be built from stock even on its own
    for ch in channels:
        fits = False
        worst: tuple[int, str, int, float] | None = None
        for j in eligible[ch.name]:
            over = []
            for p, k in ch.counts(j).items():
                on_hand = on_hand_of(p, catalogue, stock_on_hand)
                if k * build_qty > on_hand:
                    over.append((p, k, on_hand))
            if not over:
                fits = True
                break
            if worst is None:
                p, k, on_hand = over[0]
                worst = (j, p, k, on_hand)
        if not fits and worst is not None:
            j, p, k, on_hand = worst
            return (
                f"channel {ch.name!r}: every eligible candidate needs more stock than is on hand; "
                f"candidate {j} needs part {p!r} x{k} per board = {k * build_qty} for "
                f"{build_qty} boards, on hand {on_hand:g}"
            )
    # 3. stock constraints together: assumption core, then a deletion filter
    model = PlanModel(channels, eligible, catalogue, build_qty, stock_on_hand, relaxable=True)
    solver, st = model.solve(
        None, time_limit=5.0, workers=1, assumptions=list(model.stock_lit.values())
    )
    lit_part = {lit.index: p for p, lit in model.stock_lit.items()}
    core = [lit_part[i] for i in solver.sufficient_assumptions_for_infeasibility() if i in lit_part]
    if not core:
        core = list(model.stock_lit)
    needed = list(core)
    for p in list(core):
        trial = [model.stock_lit[q] for q in needed if q != p]
        _, st = model.solve(None, time_limit=5.0, workers=1, assumptions=trial)
        if st == cp_model.INFEASIBLE:
            needed.remove(p)
    parts = ", ".join(
        f"{p!r} (on hand {on_hand_of(p, catalogue, stock_on_hand):g}, "
        f"at most {model.limit[p]} per board)"
        for p in needed
    )
    return (
        f"stock on hand cannot cover {build_qty} boards: the channels together need more of "
        f"{parts} than is on hand"
    )
