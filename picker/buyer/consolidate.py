"""Multi-oscillator BOM consolidation: one design per channel, chosen together (CP-SAT).

Each channel (an oscillator on the board) comes with a ranked list of
candidate designs. Choosing every channel's best design alone rarely gives the
best board: sharing part ids across channels cuts distinct parts (reels, feeder
slots, paperwork) and raises order quantities into cheaper price breaks, for a
small loss of yield. This module picks one candidate per channel to minimise,
in the order of priority the caller gives,

* ``"parts"``: the number of distinct part ids on the board,
* ``"cost"``: the cost of the build, Σ over parts of unit price at the total
  quantity bought × that quantity (price breaks from :mod:`picker.parts.pricing`),
* ``"yield"``: the total yield loss, Σ over channels of (1 − yield estimate),

subject to each channel's minimum yield and to stock on hand (for every part,
quantity per board × build quantity ≤ on hand).

The CP-SAT model (:class:`picker.buyer.model.PlanModel`) has one boolean per
channel and candidate. Candidates below the channel's minimum yield are dropped
before the model is built (a channel with none left makes the plan infeasible,
and says so), and so are the candidates the exact reductions of
:mod:`picker.buyer.reductions` rule out (stock-impossible, dominated, and, with
parts first, those outside every fewest-parts cover, whose size the branch and
bound of :mod:`picker.buyer.partcover` proves and adds as ``Σ u[p] ≥ k``; when no
plan inside those covers fits the stock, the fewest is above k and the filter
is dropped: a plan of more parts may use any candidate).

Lexicographic objective: **sequential solves**. The first priority is
minimised; its optimum is fixed as a constraint (``==`` when proven optimal,
``≤`` the incumbent when the time limit stopped the proof) and the next
priority is minimised, and so on. This is exact without the huge weights a
single weighted sum would need. Ties left after the last priority are broken
deterministically: channel by channel, the lowest candidate index (the input
order, normally best yield first) among the optimal plans, so the same input
gives the same plan whatever the number of solver workers.

Status "optimal" means every priority's value is proven: by CP-SAT, or for
"parts" by the cover search's bound meeting CP-SAT's plan. Infeasible plans
name their binding constraint (:mod:`picker.buyer.binding`).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence

import numpy as np
from ortools.sat.python import cp_model

from picker.buyer.binding import explain_infeasible
from picker.buyer.model import (
    COST_SCALE,
    PRIORITIES,
    YIELD_SCALE,
    BomLine,
    ChannelCandidates,
    PartInfo,
    PlanModel,
    PlanResult,
    PlanSummary,
    baseline_choice,
    on_hand_of,
)
from picker.buyer.reductions import reduced_model
from picker.errors import SpecError

REDUCTIONS = ("stock", "dominated", "covers")


# ---------------------------------------------------------------------------
# evaluation (plain Python; used for reporting and the baseline)


def evaluate_plan(
    channels: Sequence[ChannelCandidates],
    choice: Mapping[str, int],
    catalogue: Mapping[str, PartInfo],
    build_qty: int,
    stock_on_hand: Mapping[str, float] | None = None,
) -> PlanSummary:
    """Distinct parts, build cost, yield loss and BOM of one choice per channel."""
    per_board: dict[str, int] = {}
    loss = 0.0
    for ch in channels:
        j = choice[ch.name]
        loss += 1.0 - float(ch.yield_estimate[j])
        for p, k in ch.counts(j).items():
            per_board[p] = per_board.get(p, 0) + k
    lines = []
    cost = 0.0
    unpriced = []
    for p in sorted(per_board):
        info = catalogue.get(p) or PartInfo(p, "", math.nan, math.nan)
        qb = per_board[p] * build_qty
        price = info.unit_price(qb)
        if math.isnan(price):
            unpriced.append(p)
        else:
            cost += price * qb
        on_hand = on_hand_of(p, catalogue, stock_on_hand)
        short = 0 if math.isinf(on_hand) else max(0, qb - int(on_hand))
        lines.append(
            BomLine(
                p,
                info.kind,
                info.value,
                info.tol,
                per_board[p],
                qb,
                price,
                price * qb,
                on_hand,
                short,
                info.material,
            )
        )
    return PlanSummary(dict(choice), len(per_board), cost, loss, tuple(lines), tuple(unpriced))


def consolidate(
    channels: Sequence[ChannelCandidates],
    *,
    build_qty: int,
    catalogue: Mapping[str, PartInfo] | None = None,
    stock_on_hand: Mapping[str, float] | None = None,
    priorities: Sequence[str] = PRIORITIES,
    time_limit: float = 10.0,
    workers: int = 2,
    reduce: Sequence[str] = REDUCTIONS,
) -> PlanResult:
    """Pick one candidate per channel, lexicographically optimal in ``priorities``.

    Parameters
    ----------
    channels:
        The channels and their candidates (distinct names).
    build_qty:
        Boards to build (a whole number, at least 1).
    catalogue:
        Part id -> :class:`PartInfo` (prices, stock). Ids missing from it are
        unpriced and unlimited.
    stock_on_hand:
        Part id -> quantity on hand; when given it replaces the catalogue's
        ``on_hand`` (ids missing from it are unlimited).
    priorities:
        A non-empty ordering of some of "parts", "cost", "yield", each at most once.
    time_limit:
        Seconds for all solver stages together.
    workers:
        CP-SAT worker threads.
    reduce:
        Exact model reductions to apply (:mod:`picker.buyer.reductions`): any of
        "stock", "dominated", "covers" (all by default; fewer only to measure
        what each one buys).

    Returns
    -------
    PlanResult
    """
    t0 = time.perf_counter()
    catalogue = {} if catalogue is None else catalogue
    priorities = tuple(priorities)
    if (
        not priorities
        or len(set(priorities)) != len(priorities)
        or not set(priorities) <= set(PRIORITIES)
    ):
        raise SpecError(
            f"expected priorities from {', '.join(PRIORITIES)}, each once; got {list(priorities)}",
            key="priorities",
        )
    if int(build_qty) != build_qty or build_qty < 1:
        raise SpecError(
            f"expected a whole build quantity of 1 or more; got {build_qty}", key="build_quantity"
        )
    build_qty = int(build_qty)
    names = [ch.name for ch in channels]
    if not channels or len(set(names)) != len(names):
        raise SpecError(
            f"expected one or more channels with distinct names; got {names}", key="channels"
        )
    for ch in channels:
        if len(ch) == 0:
            raise SpecError(f"channel {ch.name!r} has no candidate designs", key="channels")

    base = evaluate_plan(channels, baseline_choice(channels), catalogue, build_qty, stock_on_hand)

    def infeasible(message: str, eligible: dict[str, int] | None = None) -> PlanResult:
        return PlanResult(
            "infeasible",
            priorities,
            {},
            {},
            None,
            base,
            {},
            message,
            time.perf_counter() - t0,
            eligible or {},
        )

    # 1. minimum yield per channel
    eligible = {
        ch.name: [j for j in range(len(ch)) if float(ch.yield_estimate[j]) >= ch.min_yield]
        for ch in channels
    }
    for ch in channels:
        if not eligible[ch.name]:
            best = float(np.max(ch.yield_estimate))
            return infeasible(
                f"channel {ch.name!r}: no candidate reaches its minimum yield "
                f"{ch.min_yield * 100:.4g} % (best {best * 100:.4g} % of {len(ch)} candidates)"
            )
    counts = {k: len(v) for k, v in eligible.items()}
    model, lower, info = reduced_model(
        channels, eligible, catalogue, build_qty, stock_on_hand, priorities, time_limit, reduce
    )

    objective: dict[str, float] = {}
    bounds: dict[str, float] = {}
    status = "optimal"
    choice: dict[str, int] | None = None
    for s_i, prio in enumerate(priorities):
        left = time_limit - (time.perf_counter() - t0)
        if choice is not None and left <= 0:
            status = "feasible"
            break
        # share what is left between this stage and the ones after it; a stage that
        # proves its optimum early hands its unused time on
        budget = left if s_i == len(priorities) - 1 else left / (len(priorities) - s_i)
        if choice is not None:
            budget = max(budget, 0.5)
        solver, st = model.solve(model.objectives[prio], time_limit=budget, workers=workers)
        if choice is None and info.get("cover_filter") and _no_plan_of_fewest(solver, st, lower):
            # No plan inside a fewest-parts cover fits the stock: more parts are needed,
            # and a plan with more parts may use candidates outside every such cover
            # (the filter is exact only for plans of the fewest parts), so drop it.
            found = model.choice(solver) if st == cp_model.OPTIMAL else None
            model = PlanModel(
                channels, info["undominated_candidates"], catalogue, build_qty, stock_on_hand
            )
            assert lower is not None  # the cover filter is on only after a proven bound
            lower += 1
            model.m.add(model.objectives["parts"] >= lower)
            if found is not None:
                model.hint(found)
            info = {**info, "cover_filter": False, "parts_lower_bound": lower}
            solver, st = model.solve(model.objectives[prio], time_limit=budget, workers=workers)
        if st == cp_model.INFEASIBLE and choice is None:
            return infeasible(
                explain_infeasible(channels, eligible, catalogue, build_qty, stock_on_hand), counts
            )
        if st not in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            if choice is None:
                return PlanResult(
                    "unknown",
                    priorities,
                    objective,
                    bounds,
                    None,
                    base,
                    {},
                    "no plan found within the time limit",
                    time.perf_counter() - t0,
                    counts,
                )
            status = "feasible"  # keep the previous stage's plan; later priorities unproven
            break
        value = round(solver.objective_value)
        obj = model.objectives[prio]
        if st == cp_model.OPTIMAL:
            model.m.add(obj == value)
            bound = value
        else:
            model.m.add(obj <= value)
            bound = math.ceil(solver.best_objective_bound - 1e-9)
            narrowed = info.get("cover_filter") and lower is not None and value > lower
            if narrowed:
                # Stopped by the time limit inside the covers with a plan above k: the
                # solver's bound holds inside the covers only (above k there it proves
                # only that no plan of k parts exists), and the later priorities would
                # search inside the covers, exact only for plans of k parts.
                assert lower is not None
                bound = lower + 1 if bound > lower else lower
                status = "feasible"
            elif prio == "parts" and lower is not None:
                bound = max(bound, lower)  # proven by the cover search
            if bound < value:
                status = "feasible"
            else:  # the cover search's bound closes the gap
                model.m.add(obj == value)
        objective[prio] = _unscale(prio, value)
        bounds[prio] = _unscale(prio, bound)
        choice = model.choice(solver)
        model.hint(choice)

    # deterministic tie-break among the optimal plans: lowest index, channel by channel
    if status == "optimal":
        for c, ch in enumerate(channels):
            left = time_limit - (time.perf_counter() - t0)
            if left <= 0:
                break
            idx = sum(j * model.x[c, j] for j in model.eligible[ch.name])
            solver, st = model.solve(idx, time_limit=left, workers=workers)
            if st != cp_model.OPTIMAL:
                break
            j = round(solver.objective_value)
            model.m.add(model.x[c, j] == 1)
            choice = model.choice(solver)
            model.hint(choice)

    assert choice is not None
    plan = evaluate_plan(channels, choice, catalogue, build_qty, stock_on_hand)
    for prio in priorities:  # priorities the time limit did not reach: the plan's value
        if prio not in objective:
            objective[prio] = _unscale(prio, _scaled_value(model, prio, choice))
    saving = {
        "parts": base.distinct_parts - plan.distinct_parts,
        "cost": base.cost - plan.cost,
        "yield_loss": plan.yield_loss - base.yield_loss,
    }
    return PlanResult(
        status,
        priorities,
        objective,
        bounds,
        plan,
        base,
        saving,
        None,
        time.perf_counter() - t0,
        counts,
        {k: v for k, v in info.items() if k != "undominated_candidates"},
    )


def _no_plan_of_fewest(
    solver: cp_model.CpSolver, status: cp_model.CpSolverStatus, fewest: int | None
) -> bool:
    """Has the fewest-parts solve inside the covers proven that no plan of ``fewest`` parts fits?

    Infeasible, or optimal above ``fewest``: every plan of that many parts lies inside
    one of the covers, so none exists.
    """
    if status == cp_model.INFEASIBLE:
        return True
    return status == cp_model.OPTIMAL and fewest is not None and solver.objective_value > fewest


def _scaled_value(model: PlanModel, prio: str, choice: dict[str, int]) -> int:
    """Integer objective ``prio`` of a choice, evaluated exactly as in the model."""
    chosen = {(c, choice[ch.name]) for c, ch in enumerate(model.channels)}
    n = {p: 0 for p in model.parts}
    for c, j in chosen:
        for p, k in model.channels[c].counts(j).items():
            n[p] += k
    if prio == "parts":
        return sum(1 for v in n.values() if v)
    if prio == "yield":
        return sum(model.loss[key] for key in chosen)
    return sum(model.cost_of(p, n[p]) for p in model.parts)


def _unscale(prio: str, value: int) -> float:
    if prio == "parts":
        return int(value)
    if prio == "cost":
        return value / COST_SCALE
    return value / YIELD_SCALE
