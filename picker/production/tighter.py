"""What to buy tighter: single-part changes ranked by the yield they buy.

For each position the candidate changes are its next tighter tolerance class
and, where the part drifts, a swap to a steadier dielectric or core. Each
change is evaluated by a caller-supplied ``yield_fn`` (the lead's Monte Carlo,
with common random numbers so that differences are not sampling noise) and
ranked by yield gain; with unit prices, the extra cost per board is attached.

Tolerance ladder (common practice, no source): 20 %, 10 %, 5 %, 2 %, 1 %,
0.5 %, 0.25 %, 0.1 % — the classes customarily paired with E6 … E192
(REFERENCES.md) and IEC 60062 letters M, K, J, G, F, D, C, B.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

from picker.parts.drift import get_material

TOLERANCE_LADDER = (0.20, 0.10, 0.05, 0.02, 0.01, 0.005, 0.0025, 0.001)

#: Dielectric / core swaps towards less drift (common practice, no source):
#: any class-2 ceramic to C0G, polyester film to polypropylene, ferrite to air core.
SWAPS = {"polyester": "polypropylene", "ferrite": "air"}

YieldFn = Callable[[dict[str, float], dict[str, str]], float]


def next_tighter(tol: float) -> float | None:
    """The next tolerance class strictly tighter than ``tol``, or ``None``.

    Examples
    --------
    >>> next_tighter(0.05), next_tighter(0.03), next_tighter(0.001)
    (0.02, 0.02, None)
    """
    for t in TOLERANCE_LADDER:
        if t < tol * (1 - 1e-9):
            return t
    return None


def swap_for(material: str | None) -> str | None:
    """A steadier material to try instead of ``material``, or ``None``.

    Examples
    --------
    >>> swap_for("X7R"), swap_for("ferrite"), swap_for("C0G")
    ('C0G', 'air', None)
    """
    if material is None:
        return None
    m = get_material(material)
    if m.kind == "class2":
        return "C0G"
    if m.name in SWAPS:
        return SWAPS[m.name]
    if m.kind == "linear" and m.name not in ("C0G", "polypropylene", "air", "tempco"):
        return "C0G"  # a class-1 ceramic with a large tempco (U2J, P3K, ...)
    return None


@dataclass(frozen=True)
class Change:
    """One candidate change and its effect.

    Attributes
    ----------
    position : str
    kind : str
        ``"tolerance"`` or ``"material"``.
    before, after : float or str
        Old and new tolerance (fraction) or material name.
    yield_before, yield_after, gain : float
        Yields as fractions; ``gain = yield_after - yield_before``.
    extra_cost : float or None
        Extra cost per board (new unit price − old, times parts per board),
        ``None`` without prices.
    """

    position: str
    kind: str
    before: float | str
    after: float | str
    yield_before: float
    yield_after: float
    gain: float
    extra_cost: float | None

    def as_dict(self) -> dict:
        return {
            "position": self.position,
            "kind": self.kind,
            "from": self.before,
            "to": self.after,
            "yield_before": self.yield_before,
            "yield_after": self.yield_after,
            "gain": self.gain,
            "extra_cost_per_board": self.extra_cost,
        }


def _extra_cost(
    prices: Mapping[str, Mapping[float | str, float]] | None,
    position: str,
    before: float | str,
    after: float | str,
    count: int,
) -> float | None:
    """Price difference per board; prices[position] maps option -> unit price."""
    if prices is None or position not in prices:
        return None
    table = prices[position]
    if before not in table or after not in table:
        return None
    return (float(table[after]) - float(table[before])) * count


def candidate_changes(
    tolerances: Mapping[str, float], materials: Mapping[str, str | None] | None = None
) -> list[tuple[str, str, float | str, float | str]]:
    """Every single change to try: (position, kind, before, after), positions in order."""
    materials = materials or {}
    out: list[tuple[str, str, float | str, float | str]] = []
    for p, tol in tolerances.items():
        t = next_tighter(tol)
        if t is not None:
            out.append((p, "tolerance", tol, t))
        m = materials.get(p)
        s = swap_for(m)
        if m is not None and s is not None:
            out.append((p, "material", m, s))
    return out


def rank_changes(
    tolerances: Mapping[str, float],
    yield_fn: YieldFn,
    *,
    materials: Mapping[str, str | None] | None = None,
    prices: Mapping[str, Mapping[float | str, float]] | None = None,
    parts_per_board: Mapping[str, int] | None = None,
    base_yield: float | None = None,
) -> list[Change]:
    """Evaluate each single change and rank them by yield gain (largest first).

    Parameters
    ----------
    tolerances : mapping position -> float
        Current relative tolerance of each position.
    yield_fn : callable
        ``yield_fn(tol_overrides, material_overrides) -> yield`` where the
        overrides map a position to its new tolerance / material name; empty
        overrides give the current design's yield.
    materials : mapping position -> str or None, optional
        Current material of each position (``None``: no drift model).
    prices : mapping position -> mapping option -> unit price, optional
        Options are tolerances (float fractions) or material names; a change
        whose two options are both priced gets ``extra_cost``.
    parts_per_board : mapping position -> int, optional
        Parts of that position per board (default 1).
    base_yield : float, optional
        The current yield, if already known (saves one call).

    Returns
    -------
    list of Change
        Sorted by gain (descending), then extra cost (cheapest first, unknown
        last), then position order (deterministic).
    """
    y0 = float(yield_fn({}, {})) if base_yield is None else float(base_yield)
    counts = parts_per_board or {}
    order = {p: i for i, p in enumerate(tolerances)}
    changes = []
    for p, kind, before, after in candidate_changes(tolerances, materials):
        if kind == "tolerance":
            y = float(yield_fn({p: float(after)}, {}))
        else:
            y = float(yield_fn({}, {p: str(after)}))
        cost = _extra_cost(prices, p, before, after, counts.get(p, 1))
        changes.append(Change(p, kind, before, after, y0, y, y - y0, cost))

    def key(c: Change) -> tuple[float, bool, float, int]:
        return (-round(c.gain, 12), c.extra_cost is None, c.extra_cost or 0.0, order[c.position])

    return sorted(changes, key=key)


def greedy_plan(
    tolerances: Mapping[str, float],
    yield_fn: YieldFn,
    *,
    target: float,
    materials: Mapping[str, str | None] | None = None,
    max_steps: int = 8,
    prices: Mapping[str, Mapping[float | str, float]] | None = None,
    parts_per_board: Mapping[str, int] | None = None,
) -> list[Change]:
    """Apply the best single change repeatedly until ``target`` yield is reached.

    Greedy (each step takes the largest gain given the earlier steps), so not
    guaranteed to be the cheapest set; stops when no change gains anything.
    ``prices`` and ``parts_per_board`` are as for :func:`rank_changes` and give
    each step its extra cost.

    Returns
    -------
    list of Change
        The steps in order; ``yield_after`` of the last is the plan's yield.
    """
    tol = dict(tolerances)
    mat = dict(materials or {})
    tol_over: dict[str, float] = {}
    mat_over: dict[str, str] = {}

    def fn(t_extra: dict[str, float], m_extra: dict[str, str]) -> float:
        return yield_fn({**tol_over, **t_extra}, {**mat_over, **m_extra})

    steps: list[Change] = []
    y = float(fn({}, {}))
    for _ in range(max_steps):
        if y >= target:
            break
        ranked = rank_changes(
            tol, fn, materials=mat, base_yield=y, prices=prices, parts_per_board=parts_per_board
        )
        if not ranked or ranked[0].gain <= 0:
            break
        best = ranked[0]
        steps.append(best)
        if best.kind == "tolerance":
            tol[best.position] = float(best.after)
            tol_over[best.position] = float(best.after)
        else:
            mat[best.position] = str(best.after)
            mat_over[best.position] = str(best.after)
        y = best.yield_after
    return steps
