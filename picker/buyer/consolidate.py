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

Model (CP-SAT, Google OR-Tools)
-------------------------------
* one boolean ``x[c, j]`` per channel and candidate, exactly one true per channel;
  candidates below the channel's minimum yield are dropped before the model is
  built (a channel with none left makes the plan infeasible, and says so), and
  so are the candidates the exact reductions of :mod:`picker.buyer.reductions` rule
  out (stock-impossible, dominated, and, with parts first, those outside every
  fewest-parts cover, whose size the branch and bound of
  :mod:`picker.buyer.partcover` proves and adds as ``Σ u[p] ≥ k``);
* ``n[p] = Σ x[c, j] · count[c, j, p]``: part p's quantity per board (a
  parallel pair of the same id counts twice); a part-used boolean ``u[p]``
  with ``u[p] ⇔ n[p] ≥ 1``, linked per channel in aggregate,
  ``Σ_{j ∋ p} x[c, j] ≤ u[p]`` (valid since one j per channel is chosen, and
  tighter in the linear relaxation than one link per candidate);
* stock: ``n[p] ≤ floor(on_hand[p] / build_qty)``;
* cost: ``cost[p] = table_p[n[p]]`` through an element constraint, the table
  holding the integer-scaled extended price for each possible quantity (so price
  breaks on the consolidated quantity are exact); a part with one flat price is
  a linear term instead.

Integer scaling: costs in units of 1e-4 of the currency (:data:`COST_SCALE`),
yield loss in units of 1e-6 (:data:`YIELD_SCALE`), each rounded to nearest.

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
from dataclasses import dataclass, field

import numpy as np
from ortools.sat.python import cp_model

from picker.errors import SpecError
from picker.parts.pricing import unit_price_from_breaks

#: Integer cost units per currency unit.
COST_SCALE = 10_000
#: Integer yield-loss units per unit of yield.
YIELD_SCALE = 1_000_000
PRIORITIES = ("parts", "cost", "yield")
REDUCTIONS = ("stock", "dominated", "covers")


@dataclass(frozen=True)
class PartInfo:
    """What the plan needs to know about one part id.

    Attributes
    ----------
    part_id : the id (a stock id, or a generic one from :func:`generic_part_id`).
    kind : "C" or "L".
    value : F or H.
    tol : relative tolerance.
    break_qty, break_price : price breaks, ascending (empty: price unknown).
    on_hand : quantity on hand (``inf``: not tracked).
    material : dielectric or core, "" if unknown.
    """

    part_id: str
    kind: str
    value: float
    tol: float
    break_qty: tuple[float, ...] = ()
    break_price: tuple[float, ...] = ()
    on_hand: float = math.inf
    material: str = ""

    def unit_price(self, qty: float) -> float:
        """Unit price for a purchase of ``qty`` (NaN when unknown)."""
        if not self.break_qty:
            return math.nan
        q = np.array([self.break_qty], dtype=float)
        p = np.array([self.break_price], dtype=float)
        return float(unit_price_from_breaks(q, p, qty)[0])


@dataclass(frozen=True)
class ChannelCandidates:
    """One channel's candidate designs.

    Attributes
    ----------
    name : channel name.
    positions : part positions ("C1", "C2", "L", ...).
    parts : ``parts[j][k]`` is the tuple of part ids at position ``positions[k]``
        of candidate ``j``: one id, or two for a parallel pair.
    yield_estimate : (n,) yield estimate of each candidate.
    ci_low, ci_high : (n,) confidence interval of the yield (optional).
    min_yield : candidates below this yield estimate are not eligible.
    values : (n, len(positions)) nominal value of each position, SI (optional).
    extra : per-candidate facts passed through to the report (optional).
    """

    name: str
    positions: tuple[str, ...]
    parts: tuple[tuple[tuple[str, ...], ...], ...]
    yield_estimate: np.ndarray
    ci_low: np.ndarray | None = None
    ci_high: np.ndarray | None = None
    min_yield: float = 0.0
    values: np.ndarray | None = None
    extra: tuple[dict, ...] | None = None

    def __len__(self) -> int:
        return len(self.parts)

    def counts(self, j: int) -> dict[str, int]:
        """Quantity per board of each part id in candidate ``j``."""
        out: dict[str, int] = {}
        for ids in self.parts[j]:
            for p in ids:
                out[p] = out.get(p, 0) + 1
        return out


@dataclass(frozen=True)
class BomLine:
    """One line of a consolidated bill of materials (prices NaN when unknown)."""

    part_id: str
    kind: str
    value: float
    tol: float
    qty_per_board: int
    qty_build: int
    unit_price: float
    extended_price: float
    on_hand: float
    short_by: int
    material: str = ""


@dataclass(frozen=True)
class PlanSummary:
    """A set of choices (one candidate index per channel) and what it costs."""

    choice: dict[str, int]
    distinct_parts: int
    cost: float
    yield_loss: float
    bom: tuple[BomLine, ...]
    unpriced: tuple[str, ...]

    @property
    def stock_ok(self) -> bool:
        return all(line.short_by == 0 for line in self.bom)


@dataclass(frozen=True)
class PlanResult:
    """Outcome of :func:`consolidate`.

    Attributes
    ----------
    status : "optimal", "feasible" (time limit before the proof; see ``bounds``),
        "infeasible" (see ``binding``) or "unknown" (no plan found in time).
    priorities : the order the objectives were minimised in.
    objective : priority -> value of the chosen plan (parts: int, cost:
        currency, yield: total yield loss), empty when there is no plan.
    bounds : priority -> best proven lower bound in the same units.
    plan : the chosen plan, or None.
    baseline : each channel's top-yield candidate alone.
    saving : baseline minus plan for "parts" and "cost", and
        ``"yield_loss"`` = plan minus baseline (what the saving costs in yield).
    binding : for an infeasible plan, the constraint that cannot be met.
    solve_seconds : wall time spent in the solver.
    """

    status: str
    priorities: tuple[str, ...]
    objective: dict[str, float]
    bounds: dict[str, float]
    plan: PlanSummary | None
    baseline: PlanSummary
    saving: dict[str, float]
    binding: str | None = None
    solve_seconds: float = 0.0
    eligible: dict[str, int] = field(default_factory=dict)
    #: How the model was reduced before CP-SAT (:mod:`picker.buyer.reductions`):
    #: candidate counts after each step, ``parts_lower_bound`` proven by the
    #: cover search, ``optimal_covers``, ``reduce_seconds``.
    reductions: dict = field(default_factory=dict)

    @property
    def gap(self) -> dict[str, float]:
        """Priority -> objective minus bound (0 when proven optimal)."""
        return {
            k: self.objective[k] - self.bounds.get(k, self.objective[k]) for k in self.objective
        }


def generic_part_id(kind: str, value: float, tol: float, material: str = "") -> str:
    """Part identity for a series value that has no stock id: "C 4.7 nF 5 %".

    The series name is left out on purpose: a 4.7 nF 5 % capacitor is the same
    part whether a channel found it in E12 or in E24, so two channels share it.
    """
    from picker.units import format_percent, format_quantity

    unit = "F" if kind == "C" else "H"
    text = f"{kind} {format_quantity(value, unit)} {format_percent(tol)}"
    return f"{text} {material}" if material else text


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
        on_hand = _on_hand(p, catalogue, stock_on_hand)
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


def _on_hand(p: str, catalogue, stock_on_hand) -> float:
    if stock_on_hand is not None:
        return float(stock_on_hand.get(p, math.inf))
    info = catalogue.get(p)
    return math.inf if info is None else float(info.on_hand)


def baseline_choice(channels: Sequence[ChannelCandidates]) -> dict[str, int]:
    """Each channel's top-yield candidate (lowest index among equal yields)."""
    return {ch.name: int(np.argmax(np.asarray(ch.yield_estimate))) for ch in channels}


# ---------------------------------------------------------------------------
# the model


class _Model:
    """CP-SAT model of a plan, with stock constraints that can be switched off."""

    def __init__(self, channels, eligible, catalogue, build_qty, stock_on_hand, *, relaxable=False):
        self.m = cp_model.CpModel()
        self.channels = channels
        self.eligible = eligible  # channel name -> list of candidate indices
        self.x: dict[tuple[int, int], cp_model.IntVar] = {}
        uses: dict[str, list[tuple[cp_model.IntVar, int]]] = {}
        by_channel: dict[tuple[int, str], list[cp_model.IntVar]] = {}
        most_in: dict[tuple[int, str], int] = {}
        for c, ch in enumerate(channels):
            lits = []
            for j in eligible[ch.name]:
                v = self.m.new_bool_var(f"x_{c}_{j}")
                self.x[c, j] = v
                lits.append(v)
                for p, k in ch.counts(j).items():
                    uses.setdefault(p, []).append((v, k))
                    by_channel.setdefault((c, p), []).append(v)
                    most_in[c, p] = max(most_in.get((c, p), 0), k)
            self.m.add_exactly_one(lits)
        self.parts = sorted(uses)
        self.n: dict[str, cp_model.LinearExpr] = {}
        self.u: dict[str, cp_model.IntVar] = {}
        self.cost_terms = []
        self.cost_table: dict[str, list[int]] = {}
        self.stock_lit: dict[str, cp_model.IntVar] = {}
        self.limit: dict[str, int] = {}
        channels_of: dict[str, list[int]] = {}
        for c, p in by_channel:
            channels_of.setdefault(p, []).append(c)
        for p in self.parts:
            # the most of part p one board can hold: the largest count per channel, summed
            most = sum(most_in[c, p] for c in channels_of[p])
            n = self.m.new_int_var(0, most, f"n_{p}")
            self.m.add(n == sum(k * v for v, k in uses[p]))
            self.n[p] = n
            # u[p] <=> part p used. Per channel at most one candidate is chosen, so
            # sum_j x[c, j] (over the candidates holding p) <= u[p] is valid and tight.
            u = self.m.new_bool_var(f"u_{p}")
            for c in channels_of[p]:
                self.m.add(sum(by_channel[c, p]) <= u)
            self.m.add_bool_or([v for v, _ in uses[p]] + [~u])
            self.u[p] = u
            on_hand = _on_hand(p, catalogue, stock_on_hand)
            if not math.isinf(on_hand):
                cap = int(on_hand // build_qty)
                if cap < most:
                    self.limit[p] = cap
                    if relaxable:  # switched on by an assumption literal
                        lit = self.m.new_bool_var(f"stock_{p}")
                        self.m.add(n <= cap).only_enforce_if(lit)
                        self.stock_lit[p] = lit
                    else:
                        self.m.add(n <= cap)
            info = catalogue.get(p)
            if info is None or not info.break_qty:
                continue
            table = [_scaled_cost(info, k * build_qty) for k in range(most + 1)]
            if len(info.break_qty) == 1:  # one flat price: linear in n
                table = [k * table[1] for k in range(most + 1)] if most else table
                self.cost_terms.append(table[1] * n if most else 0)
            else:
                cvar = self.m.new_int_var(0, max(table), f"cost_{p}")
                self.m.add_element(n, table, cvar)
                self.cost_terms.append(cvar)
            self.cost_table[p] = table
        self.loss = {
            (c, j): round((1.0 - float(ch.yield_estimate[j])) * YIELD_SCALE)
            for c, ch in enumerate(channels)
            for j in eligible[ch.name]
        }
        self.objectives = {
            "parts": sum(self.u.values()),
            "cost": sum(self.cost_terms),
            "yield": sum(w * self.x[key] for key, w in self.loss.items()),
        }

    def cost_of(self, p: str, n: int) -> int:
        """Integer-scaled extended price of ``n`` per board of part ``p`` (0 if unpriced)."""
        table = self.cost_table.get(p)
        return 0 if table is None or n == 0 else table[n]

    def solve(self, objective, *, time_limit, workers, assumptions=()):
        m = self.m
        m.clear_assumptions()
        m.add_assumptions(list(assumptions))
        if objective is None:
            m.clear_objective()
        else:
            m.minimize(objective)
        solver = cp_model.CpSolver()
        solver.parameters.max_time_in_seconds = max(0.05, time_limit)
        solver.parameters.num_workers = workers
        status = solver.solve(m)
        return solver, status

    def choice(self, solver) -> dict[str, int]:
        out = {}
        for (c, j), v in self.x.items():
            if solver.boolean_value(v):
                out[self.channels[c].name] = j
        return out

    def hint(self, choice):
        self.m.clear_hints()
        for (c, j), v in self.x.items():
            self.m.add_hint(v, choice.get(self.channels[c].name) == j)


def _scaled_cost(info: PartInfo, qty: int) -> int:
    if qty == 0:
        return 0
    return round(info.unit_price(qty) * qty * COST_SCALE)


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

    def infeasible(message: str, eligible=None) -> PlanResult:
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
                f"{ch.min_yield:.4g} (best {best:.4g} of {len(ch)} candidates)"
            )
    counts = {k: len(v) for k, v in eligible.items()}
    from picker.buyer.binding import explain_infeasible
    from picker.buyer.reductions import reduced_model

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
        if st == cp_model.INFEASIBLE and choice is None and info.get("cover_filter"):
            # no fewest-parts cover fits the stock: more parts are needed; drop the filter
            model = _Model(channels, info["undominated_candidates"], catalogue, build_qty,
                           stock_on_hand)  # fmt: skip
            lower += 1
            model.m.add(model.objectives["parts"] >= lower)
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
            if prio == "parts" and lower is not None:
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


def _scaled_value(model: _Model, prio: str, choice: dict[str, int]) -> int:
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
