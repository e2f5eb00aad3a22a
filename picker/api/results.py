"""What ``solve`` and ``evaluate`` return: frozen result objects with named fields.

:class:`SolveResult` holds the ranked :class:`Candidate` designs (each with its
:class:`PartPick` per position) or, when nothing is feasible, the nearest
:class:`Miss` designs and advice.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from picker.api import export
from picker.core.montecarlo import YieldEstimate
from picker.spec.model import Spec

__all__ = ["Candidate", "Miss", "PartPick", "SolveResult", "given_design"]


@dataclass(frozen=True)
class PartPick:
    """One chosen part: its value (SI), where it comes from and its tolerance."""

    position: str
    value: float
    unit: str
    source: str
    tolerance: float
    part_id: str = ""
    price: float = float("nan")
    #: A parallel pair: ``value`` is the total, the first part (``value -
    #: second_value``, ``tolerance``, ``part_id``) the larger one, the second part
    #: ``second_value`` (0 for a single part), ``second_part_id``, ``second_tolerance``.
    #: ``price`` is the pair's (both parts).
    second_value: float = 0.0
    second_part_id: str = ""
    second_tolerance: float = float("nan")

    @property
    def is_pair(self) -> bool:
        return self.second_value > 0

    @property
    def first_value(self) -> float:
        return self.value - self.second_value


@dataclass(frozen=True, repr=False)
class Candidate:
    """A ranked design with its figures."""

    rank: int
    parts: dict[str, PartPick]
    f_nominal_hz: float
    error: float
    feedback_fraction: float
    yield_: YieldEstimate
    screen_yield: float
    f_worst_low_hz: float
    f_worst_high_hz: float
    sensitivities: dict[str, float]
    in_window: bool = True
    feedback_ok: bool = True
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def values(self) -> dict[str, float]:
        return {p: pp.value for p, pp in self.parts.items()}

    @property
    def part_ids(self) -> dict[str, str]:
        return {p: pp.part_id for p, pp in self.parts.items()}

    @property
    def yield_estimate(self) -> float:
        return self.yield_.estimate

    @property
    def ci_low(self) -> float:
        return self.yield_.ci_low

    @property
    def ci_high(self) -> float:
        return self.yield_.ci_high

    def __repr__(self) -> str:
        return export.candidate_text(self)


@dataclass(frozen=True)
class Miss:
    """A near-feasible design and the constraint it fails."""

    values: dict[str, float]
    f_nominal_hz: float
    feedback_fraction: float
    failed: str


@dataclass(frozen=True, repr=False)
class SolveResult:
    """Everything ``solve`` or ``evaluate`` found, best design first."""

    spec: Spec
    status: str
    candidates: list[Candidate]
    space_size: int = 0
    feasible: int = 0
    screened: int = 0
    misses: list[Miss] = field(default_factory=list)
    advice: list[str] = field(default_factory=list)
    distribution: str = "uniform"
    samples: int = 0
    seed: int = 0
    #: Production view: warnings (e.g. a temperature outside a part's rating),
    #: run facts for the JSON ``monte_carlo`` object, and arrays for the plots
    #: (``plot_data``, only when asked for; never in the JSON).
    warnings: list[str] = field(default_factory=list)
    production: dict[str, Any] = field(default_factory=dict)
    plot_data: dict[str, Any] | None = None
    #: The top-up's stop rule (conditional ranking only): designs not checked in full
    #: that can only tie with the N-th (``count``, ``unresolved``, ``resolution``, ``rule``).
    ties: dict[str, Any] = field(default_factory=dict)

    def __repr__(self) -> str:
        return export.summary_text(self)

    def _repr_html_(self) -> str:
        """The ranked table for a notebook (Jupyter calls this)."""
        return export.summary_html(self)

    def to_dict(self) -> dict[str, Any]:
        """The result as the JSON output holds it (``picker solve --format json``)."""
        return export.result_dict(self)

    def to_dataframe(self) -> Any:
        """One row per design (best first) as a ``pandas.DataFrame``.

        The results CSV's columns (``picker solve -f csv``): numbers stay
        numbers, with the unit in the column name (``C1_F``, ``L_H``,
        ``f_nominal_Hz``); tolerance, error and yield are fractions (0.05 =
        5 %); see :func:`picker.api.export.design_columns`.
        """
        import pandas  # optional and heavy (about 0.3 s): loaded only when asked

        return pandas.DataFrame(export.design_rows(self), columns=export.design_columns(self))


def given_design(
    values: Candidate | Mapping[str, Any],
    tolerances: Mapping[str, Any] | None = None,
    parts: Mapping[str, Any] | None = None,
) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any]]:
    """``evaluate``'s inputs with a :class:`Candidate` or :class:`PartPick` entries unpacked.

    A ``PartPick`` gives its value (or pair), its tolerance and its part id(s);
    explicit ``tolerances`` and ``parts`` win over what it carries.
    """
    given = values.parts if isinstance(values, Candidate) else values
    vals: dict[str, Any] = {}
    tols: dict[str, Any] = {}
    ids: dict[str, Any] = {}
    for p, x in given.items():
        if not isinstance(x, PartPick):
            vals[p] = x
            continue
        vals[p] = (x.first_value, x.second_value) if x.is_pair else x.value
        if x.part_id:
            ids[p] = (x.part_id, x.second_part_id) if x.is_pair else x.part_id
        elif not x.is_pair or x.second_tolerance == x.tolerance:
            tols[p] = x.tolerance
    return vals, {**tols, **(tolerances or {})}, {**ids, **(parts or {})}
