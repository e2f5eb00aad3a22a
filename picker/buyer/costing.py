"""Buyer's view of one oscillator: cost per board, stock sufficiency, cost limit and ranking.

Cost per board of a design is the sum over its positions of the unit price of
each part at the price break of the ``[cost] build_quantity`` (a parallel
pair's two parts both count; a part id used twice on a board is still priced
at the build quantity's break, which can only overstate the cost, since unit
prices do not rise with quantity). The build cost is that times the build
quantity. A design with any unpriced part has no cost (``None`` in JSON).

Rules (README "Stock lists, parallel pairs and cost"):

* ``max_per_board`` keeps the designs whose cost per board is at most the limit;
  a design without a cost cannot be shown to meet it and is dropped.
* ``rank_by = "cost"`` lists the cheapest designs whose Monte Carlo yield
  interval lies at or above the floor (``ci_low >= min_yield``, the floor being
  ``[cost] min_yield`` or else ``[yield] target``), cheapest first, then by
  yield. Designs are checked by Monte Carlo in cost order; a design whose
  first-order screen yield is further below the floor than the screen has been
  seen to err (plus four binomial standard errors) is skipped, as in the
  yield ranking's top-up (:mod:`picker.core.ranking`). When no checked design
  reaches the floor the designs are ranked by yield and a warning says so.
* Stock: every stock part must be on hand for ``qty per board x build
  quantity``; ``short`` lists the shortfall per part id. Series and list parts
  are not tracked.

Core functions here take arrays and return arrays (no I/O).
"""

from __future__ import annotations

import math

import numpy as np

from picker.core.montecarlo import Simulation, binomial_interval, count_passing
from picker.core.ranking import TOP_UP_CAP, monte_carlo_rank
from picker.core.sampling import Rows
from picker.core.screen import screen_yield
from picker.core.search import Designs, Problem


def design_costs(problem: Problem, designs: Designs) -> np.ndarray:
    """Cost per board of every design, shape (n,) (NaN where a part has no price)."""
    out = np.zeros(len(designs))
    for p in problem.topology.positions:
        out = out + problem.tables[p].price[designs.idx[p]]
    return out


def within_cost(problem: Problem, designs: Designs, max_per_board: float | None) -> np.ndarray:
    """Mask of the designs that meet ``max_per_board`` (all when it is None), shape (n,)."""
    if max_per_board is None:
        return np.ones(len(designs), dtype=bool)
    c = design_costs(problem, designs)
    return np.isfinite(c) & (c <= max_per_board * (1 + 1e-12))


def part_counts(problem: Problem, designs: Designs, r: int) -> dict[str, int]:
    """Part ids (stock parts only) of design ``r`` and how many of each one board holds."""
    out: dict[str, int] = {}
    for p in problem.topology.positions:
        t = problem.tables[p]
        i = designs.idx[p][r]
        ids = [str(t.part_id[i])]
        if t.second is not None and t.second[i] > 0:
            ids.append(str(t.second_id[i]))
        for pid in ids:
            if pid:
                out[pid] = out.get(pid, 0) + 1
    return out


def cost_figures(
    problem: Problem,
    designs: Designs,
    build_quantity: int,
    on_hand: dict[str, float],
) -> list[dict]:
    """Per design: ``cost`` = {per_board, build, build_quantity, parts_per_board (a
    parallel pair counts two), stock_ok, short} (JSON-ready).

    ``on_hand`` maps a stock part id to its quantity on hand (ids missing from
    it are not tracked).
    """
    per_board = design_costs(problem, designs)
    pairs = np.zeros(len(designs), dtype=int)
    for p in problem.topology.positions:
        t = problem.tables[p]
        if t.second is not None:
            pairs += t.second[designs.idx[p]] > 0
    n_parts = len(problem.topology.positions) + pairs
    out = []
    for r in range(len(designs)):
        short = {}
        for pid, k in sorted(part_counts(problem, designs, r).items()):
            have = on_hand.get(pid, math.inf)
            need = k * build_quantity
            if need > have:
                short[pid] = int(need - have)
        c = float(per_board[r])
        ok = math.isfinite(c)
        out.append(
            {
                "cost": {
                    "per_board": round(c, 9) if ok else None,
                    "build": round(c * build_quantity, 9) if ok else None,
                    "build_quantity": int(build_quantity),
                    "parts_per_board": int(n_parts[r]),
                    "stock_ok": not short,
                    "short": short,
                }
            }
        )
    return out


def cost_rank(
    sim: Simulation,
    designs: Designs,
    u: Rows,
    *,
    m: int,
    top: int,
    floor: float,
    confidence: float,
    method: str,
    target: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool, int]:
    """The cheapest ``top`` designs whose yield interval lies at or above ``floor``.

    Parameters
    ----------
    sim, designs, u : as for :func:`picker.core.ranking.monte_carlo_rank`.
    m : designs Monte Carlo checked per batch; at most ``TOP_UP_CAP * m`` in all.
    top : designs wanted.
    floor : yield floor on the interval's lower end.
    confidence, method : of the binomial interval.
    target : target frequency (the yield ranking's tie-break, for the fall-back).

    Returns
    -------
    ranked : (k,) int, indices into ``designs``, cheapest first (then higher yield).
    passed : (k,) int, passing boards of each, same order.
    screen : (k,) float, screen yield of each, same order.
    met : bool, False when no checked design reaches the floor (then ``ranked``
        is the yield ranking of :func:`picker.core.ranking.monte_carlo_rank`; the
        caller warns).
    checked : int, designs Monte Carlo checked.
    """
    n_boards = u.shape[0]
    n = len(designs)
    cost = design_costs(sim.problem, designs)
    screen = screen_yield(sim, designs)
    key = np.where(np.isfinite(cost), cost, np.inf)
    order = np.lexsort((np.arange(n), -np.round(screen, 12), key))
    passed = np.full(n, -1, dtype=np.int64)
    ci_low = np.full(n, -1.0)
    cap = min(n, TOP_UP_CAP * max(1, m))
    delta = 0.0
    lows: dict[int, float] = {}

    def qualified() -> np.ndarray:
        """Checked designs whose interval is at or above the floor, cheapest first."""
        idx = order[passed[order] >= 0]
        idx = idx[ci_low[idx] >= floor]
        return idx[np.lexsort((np.arange(len(idx)), -passed[idx], key[idx]))]

    def check(batch: np.ndarray) -> float:
        """Monte Carlo ``batch``; returns the screen's largest seen error + 4 SE."""
        passed[batch] = count_passing(sim, designs.take(batch), u)
        for b in batch:
            k = int(passed[b])
            if k not in lows:
                lows[k] = binomial_interval(k, n_boards, confidence, method)[0]
            ci_low[b] = lows[k]
        chk = np.flatnonzero(passed >= 0)
        y = passed[chk] / n_boards
        se = np.sqrt(np.maximum(y * (1 - y), 1.0 / n_boards) / n_boards)
        return max(delta, float(np.max(np.abs(screen[chk] - y) + 4 * se)))

    # calibrate the screen on the best m designs by screen yield (they are likely
    # entries anyway), then walk the designs in cost order
    best = np.lexsort((np.arange(n), -np.round(screen, 12)))[: min(m, cap)]
    delta = check(best)
    while True:
        q = qualified()
        # designs not yet checked that could still make the list: cheaper than the
        # top-th qualified (all of them until `top` have qualified) and not ruled out
        # by the screen
        limit = key[q[top - 1]] if len(q) >= top else np.inf
        todo = order[(passed[order] < 0) & (key[order] <= limit)]
        todo = todo[screen[todo] >= floor - delta]
        room = cap - int((passed >= 0).sum())
        if len(todo) == 0 or room <= 0:
            break
        delta = check(todo[: min(m, room)])
    q = qualified()
    checked = int((passed >= 0).sum())
    if len(q):
        q = q[:top]
        return q, passed[q], screen[q], True, checked
    ranked, got, scr = monte_carlo_rank(sim, designs, u, m=m, top=top, target=target)
    return ranked, got, scr, False, len(ranked)


def cost_order(
    problem: Problem, designs: Designs, passed: np.ndarray, meets: np.ndarray | None = None
) -> np.ndarray:
    """Cheapest first (unpriced last), then more passing boards, then input order.

    ``meets`` (bool per design, optional): the designs whose yield interval still lies at
    or above the floor come first, cheapest first; the rest follow, by passing boards
    (a design counted again after :func:`cost_rank` chose it, by a finer model such as
    the periodic orbit, may have fallen below the floor: it is not the cheapest answer)."""
    c = design_costs(problem, designs)
    key = np.where(np.isfinite(c), c, np.inf)
    if meets is None:
        return np.lexsort((np.arange(len(designs)), -passed, key))
    ok = np.asarray(meets, dtype=bool)
    key = np.where(ok, key, np.inf)
    return np.lexsort((np.arange(len(designs)), -passed, key, ~ok))


def below_floor(
    passed: np.ndarray, boards: int, floor: float, confidence: float, method: str
) -> np.ndarray:
    """Bool per design: the interval's low end of ``passed`` of ``boards`` is below ``floor``."""
    lows = {
        k: binomial_interval(k, boards, confidence, method)[0]
        for k in {int(v) for v in np.asarray(passed).tolist()}
    }
    return np.array([lows[int(v)] < floor for v in np.asarray(passed).tolist()], dtype=bool)
