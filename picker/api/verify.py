"""``--verify``: the top designs of a result checked in ngspice at nominal and two corners.

For each of the first ``count`` candidates, three boards: the nominal one and the two
tolerance corners that push the frequency lowest and highest. A corner moves every part
to the end of its tolerance that moves the frequency the chosen way, read from the sign
of the design's frequency sensitivity S_i = ∂ln f/∂ln x_i (the first-order worst case,
as in the worst-case span; the sensitivities' signs are exact for the ideal tank, where
every part lowers the frequency as it grows). Parasitics apply as everywhere
(:func:`picker.tank.board.board_values`); drift over temperature is not included. The
boards run through :func:`picker.circuit.verify.check_boards`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from picker.api.problem import parasitics_of
from picker.api.results import Candidate, PartPick, SolveResult
from picker.circuit.verify import WORKERS, BoardCheck, check_boards
from picker.tank.board import board_values

__all__ = ["DesignCheck", "corner_values", "verify_result"]

#: Designs ``--verify`` checks unless told otherwise.
DEFAULT_COUNT = 5


def _tolerance(pick: PartPick) -> float:
    """Relative tolerance of a position (a parallel pair: the value-weighted mean of its
    two parts' tolerances, the pair's worst case)."""
    if pick.is_pair and math.isfinite(pick.second_tolerance):
        return (
            pick.first_value * pick.tolerance + pick.second_value * pick.second_tolerance
        ) / pick.value
    return pick.tolerance


def corner_values(candidate: Candidate, direction: int) -> dict[str, float]:
    """Part values at the tolerance corner that moves the frequency down (``direction``
    −1) or up (+1): x_i·(1 + direction·sign(S_i)·t_i)."""
    out = {}
    for p, pick in candidate.parts.items():
        s = candidate.sensitivities.get(p, 0.0)
        sign = 0.0 if s == 0 else math.copysign(1.0, s)
        out[p] = pick.value * (1.0 + direction * sign * _tolerance(pick))
    return out


@dataclass(frozen=True)
class DesignCheck:
    """The ngspice check of one ranked design: its ``rank`` and one :class:`BoardCheck`
    per board (nominal, low corner, high corner)."""

    rank: int
    boards: list[BoardCheck]

    @property
    def verdict(self) -> str:
        """ "ok" when every board passes; otherwise the failing boards and why."""
        bad = [f"{b.label}: {b.verdict}" for b in self.boards if not b.ok]
        return "; ".join(bad) or "ok"

    def to_dict(self) -> dict[str, Any]:
        return {
            "rank": self.rank,
            "verdict": self.verdict,
            "boards": [b.to_dict() for b in self.boards],
        }


def verify_result(
    result: SolveResult,
    *,
    count: int = DEFAULT_COUNT,
    corners: bool = True,
    workers: int = WORKERS,
    timeout: float = 120.0,
) -> list[DesignCheck]:
    """Check the first ``count`` candidates of ``result`` in ngspice (every transient in
    one pool of ``workers`` processes).

    Raises
    ------
    SpecError
        The spec has no ``[amplifier]`` section (there is no circuit to simulate).
    SolverError
        ngspice missing, failing or timing out.
    """
    from picker.errors import SpecError

    spec = result.spec
    if spec.amplifier is None:
        raise SpecError(
            "expected an [amplifier] section (--verify simulates the transistor stage)",
            key="amplifier",
        )
    topo = spec.topo
    params = spec.amplifier.to_params(spec.parts)
    par = parasitics_of(spec)
    window = (spec.frequency.f_min, spec.frequency.f_max)
    picked = result.candidates[:count]
    boards: list[tuple[str, dict[str, Any]]] = []
    for c in picked:
        sets = [("nominal", c.values)]
        if corners:
            sets += [("low corner", corner_values(c, -1)), ("high corner", corner_values(c, +1))]
        boards += [(label, board_values(topo, v, par)) for label, v in sets]
    try:
        checks = check_boards(
            topo, boards, float(par.stray), params, window=window, workers=workers, timeout=timeout
        )
    except ValueError as exc:
        raise SpecError(str(exc), key="amplifier") from None
    per = len(boards) // max(len(picked), 1)
    return [DesignCheck(c.rank, checks[i * per : (i + 1) * per]) for i, c in enumerate(picked)]
