"""The consolidation model: the data types of a plan and its CP-SAT model.

Shared by :mod:`picker.buyer.consolidate` (which solves the model, priority by
priority), :mod:`picker.buyer.reductions` (which shrinks it first) and
:mod:`picker.buyer.binding` (which names the constraint of an infeasible plan).

Model (CP-SAT, Google OR-Tools)
-------------------------------
* one boolean ``x[c, j]`` per channel and candidate, exactly one true per channel,
  over the candidates left eligible (minimum yield, exact reductions);
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
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from ortools.sat.python import cp_model

from picker.parts.pricing import unit_price_from_breaks
from picker.units import format_percent, format_quantity

__all__ = [
    "COST_SCALE",
    "PRIORITIES",
    "YIELD_SCALE",
    "BomLine",
    "ChannelCandidates",
    "PartInfo",
    "PlanModel",
    "PlanResult",
    "PlanSummary",
    "baseline_choice",
    "generic_part_id",
    "on_hand_of",
]

#: Integer cost units per currency unit.
COST_SCALE = 10_000
#: Integer yield-loss units per unit of yield.
YIELD_SCALE = 1_000_000
#: The objectives a plan can minimise, in their default order of priority.
PRIORITIES = ("parts", "cost", "yield")


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
    """Outcome of :func:`picker.buyer.consolidate.consolidate`.

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
    unit = "F" if kind == "C" else "H"
    text = f"{kind} {format_quantity(value, unit)} {format_percent(tol)}"
    return f"{text} {material}" if material else text


def on_hand_of(
    p: str, catalogue: Mapping[str, PartInfo], stock_on_hand: Mapping[str, float] | None
) -> float:
    """Quantity of part ``p`` on hand: ``stock_on_hand`` when given, else the catalogue's.

    A part missing from the mapping used is not tracked: ``inf``.
    """
    if stock_on_hand is not None:
        return float(stock_on_hand.get(p, math.inf))
    info = catalogue.get(p)
    return math.inf if info is None else float(info.on_hand)


def baseline_choice(channels: Sequence[ChannelCandidates]) -> dict[str, int]:
    """Each channel's top-yield candidate (lowest index among equal yields)."""
    return {ch.name: int(np.argmax(np.asarray(ch.yield_estimate))) for ch in channels}


# ---------------------------------------------------------------------------
# the model


class PlanModel:
    """CP-SAT model of a plan, with stock constraints that can be switched off.

    Parameters
    ----------
    channels:
        The channels and their candidates.
    eligible:
        Channel name -> the candidate indices the model may choose from.
    catalogue, stock_on_hand:
        Prices and stock, as for :func:`picker.buyer.consolidate.consolidate`.
    build_qty:
        Boards to build.
    relaxable:
        Enforce each stock limit only under its literal in ``stock_lit`` (for
        :func:`picker.buyer.binding.explain_infeasible`), not unconditionally.
    """

    def __init__(
        self,
        channels: Sequence[ChannelCandidates],
        eligible: Mapping[str, Sequence[int]],
        catalogue: Mapping[str, PartInfo],
        build_qty: int,
        stock_on_hand: Mapping[str, float] | None,
        *,
        relaxable: bool = False,
    ) -> None:
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
            on_hand = on_hand_of(p, catalogue, stock_on_hand)
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

    def solve(
        self,
        objective: cp_model.LinearExprT | None,
        *,
        time_limit: float,
        workers: int,
        assumptions: Iterable[cp_model.IntVar] = (),
    ) -> tuple[cp_model.CpSolver, cp_model.CpSolverStatus]:
        """Minimise ``objective`` (None: find any plan) under ``assumptions``."""
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

    def choice(self, solver: cp_model.CpSolver) -> dict[str, int]:
        """Channel name -> the candidate index the solver chose."""
        out = {}
        for (c, j), v in self.x.items():
            if solver.boolean_value(v):
                out[self.channels[c].name] = j
        return out

    def hint(self, choice: Mapping[str, int]) -> None:
        """Hint the solver towards ``choice`` (channel name -> candidate index)."""
        self.m.clear_hints()
        for (c, j), v in self.x.items():
            self.m.add_hint(v, choice.get(self.channels[c].name) == j)


def _scaled_cost(info: PartInfo, qty: int) -> int:
    """Extended price of ``qty`` units in integer units of 1/COST_SCALE (0 for none)."""
    if qty == 0:
        return 0
    return round(info.unit_price(qty) * qty * COST_SCALE)
