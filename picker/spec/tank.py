"""The spec's ``[tank]`` table: facts of the tank that are not part values.

``coupling`` (k of two coupled inductors, a Hartley tank's L1 and L2; 0 = separate
coils, the default) and ``coupling_tolerance`` (the board-to-board spread of k, absolute,
uniform in k ± it in the Monte Carlo; 0 = every board has the same k).

The tapped-coil form. A Hartley tank wound as one coil with a tap is given by the coil
instead of its two sections::

    topology = "hartley"
    [tank]
    coupling = 0.4               # k between the two sections
    tapped_coil = "12 uH"        # the whole coil's inductance
    tap = 0.25                   # the tap's fraction of the turns, from the input (L2) end
    coil_tolerance = "5 %"       # the whole coil's tolerance

:func:`expand_tapped_coil` turns it into the sections ``[parts.L1]`` and ``[parts.L2]``
before validation, by :func:`picker.tank.hartley.tapped_inductor` (inductance ∝ turns²,
L1 = a·(1 − t)², L2 = a·t², L1 + L2 + 2M = the whole coil), each a single value with the
coil's tolerance; ``[parts.L1]`` may still carry the coil's ``q``, ``q_frequency`` or
``esr`` (the sections share L1's loss). The two sections are one part: the Monte Carlo
moves them together (:attr:`picker.core.montecarlo.Simulation.shared`), so f moves as
the whole coil. Only C (and C_S) are searched.
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, field_validator

from picker import units
from picker.errors import KeyedError, SpecError
from picker.tank.base import MAX_COUPLING
from picker.tank.hartley import tapped_inductor

__all__ = ["SECTION_KEYS", "TankSpec", "expand_tapped_coil"]

#: The part keys a section may still carry in the tapped-coil form (the coil's loss).
SECTION_KEYS = ("q", "q_frequency", "esr")


class TankSpec(BaseModel):
    """The validated ``[tank]`` table (see the module docstring)."""

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)

    coupling: float = 0.0
    #: Half-width of the board-to-board spread of k (absolute, uniform in k ± it, in the
    #: Monte Carlo; 0 = every board has the same k).
    coupling_tolerance: float = 0.0
    #: The tapped-coil form: the whole coil (H), the tap fraction and the coil's tolerance
    #: (already expanded into [parts.L1] and [parts.L2] by expand_tapped_coil).
    tapped_coil: float | None = None
    tap: float | None = None
    coil_tolerance: float | None = None

    @field_validator("coupling", mode="before")
    @classmethod
    def _coupling(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float) or not (0 <= v <= MAX_COUPLING):
            raise ValueError(f"expected a coupling coefficient from 0 to {MAX_COUPLING}; got {v!r}")
        return float(v)

    @field_validator("coupling_tolerance", mode="before")
    @classmethod
    def _coupling_tolerance(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float) or not (0 <= v <= MAX_COUPLING):
            raise ValueError(
                f"expected a spread of k (plus or minus, absolute) from 0 to {MAX_COUPLING} "
                f"such as 0.02; got {v!r}"
            )
        return float(v)


def _coil(tank: dict[str, Any]) -> tuple[float, float, float, float]:
    """(whole coil H, tap, tolerance, k) of the raw ``[tank]`` table; KeyedError naming the key."""
    try:
        total = units.parse_quantity(tank["tapped_coil"], "H")
    except SpecError as exc:
        raise KeyedError("tank.tapped_coil", exc.message) from None
    if not 0 < total < 1:
        raise KeyedError(
            "tank.tapped_coil", f"expected an inductance such as 12 uH; got {tank['tapped_coil']!r}"
        )
    tap = tank.get("tap")
    if isinstance(tap, bool) or not isinstance(tap, int | float) or not 0 < tap < 1:
        raise KeyedError(
            "tank.tap",
            f"expected the tap's fraction of the turns from the input end, between 0 and 1 "
            f"such as 0.25 (tapped_coil needs it); got {tap!r}",
        )
    if "coil_tolerance" not in tank:
        raise KeyedError("tank.coil_tolerance", "expected the coil's tolerance such as '5 %'")
    try:
        tol = units.parse_tolerance(tank["coil_tolerance"])
    except SpecError as exc:
        raise KeyedError("tank.coil_tolerance", exc.message) from None
    k = tank.get("coupling", 0.0)
    if isinstance(k, bool) or not isinstance(k, int | float) or not 0 <= k <= MAX_COUPLING:
        raise KeyedError(
            "tank.coupling", f"expected a coupling coefficient from 0 to {MAX_COUPLING}; got {k!r}"
        )
    return total, float(tap), tol, float(k)


def expand_tapped_coil(d: dict[str, Any], sections: tuple[str, str]) -> dict[str, Any]:
    """The raw spec ``d`` with a ``[tank] tapped_coil`` turned into its two sections.

    ``sections`` are the tank's (output-side, input-side) inductor positions (L1, L2). A
    spec without ``tapped_coil`` is returned as it is; one with the sections given as
    parts too is refused (one line naming the part).
    """
    tank = d.get("tank")
    if not isinstance(tank, dict) or "tapped_coil" not in tank:
        for key in ("tap", "coil_tolerance"):
            if isinstance(tank, dict) and key in tank:
                raise KeyedError(f"tank.{key}", "needs tapped_coil (the whole coil's inductance)")
        return d
    total, tap, tol, k = _coil(tank)
    parts = dict(d.get("parts") or {})
    l1, l2 = tapped_inductor(total, tap, k)
    for pos, value in zip(sections, (float(l1), float(l2)), strict=True):
        given = parts.get(pos, {})
        extra = set(given) - set(SECTION_KEYS) if isinstance(given, dict) else {"?"}
        if extra:
            raise KeyedError(
                f"parts.{pos}",
                f"given by [tank] tapped_coil (a section of the coil); keep only "
                f"{', '.join(SECTION_KEYS)} here, got {', '.join(sorted(extra))}",
            )
        parts[pos] = {**given, "values": [value], "tolerance": tol}
    parsed = {**tank, "tapped_coil": total, "tap": tap, "coil_tolerance": tol}
    return {**d, "parts": parts, "tank": parsed}
