"""The spec's models: a validated :class:`Spec` with SI floats, section by section.

The pydantic models of every spec table (``[frequency]``, ``[feedback]``,
``[parts.X]``, ``[parasitics]``, ``[yield]``, ``[cost]``, ``[report]``,
``[search]``; ``[amplifier]`` is :mod:`picker.spec.amplifier`). Reading the
file and turning validation errors into one-line
:class:`~picker.errors.SpecError` is :mod:`picker.spec.load`.

Unknown keys are errors everywhere (a typo must not be silently ignored).
Engineering strings ("4.7 nF", "4n7", "±3 %", "J") are parsed by
:mod:`picker.units`; a bare number is taken in SI base units.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationInfo,
    field_validator,
    model_validator,
)

from picker import units
from picker.errors import KeyedError, SpecError
from picker.parts import limits
from picker.parts import series as series_mod
from picker.spec.amplifier import AmplifierSpec
from picker.spec.fields import (
    currency_code,
    parse_field_quantity,
    parse_share,
    parse_temperature_range,
)
from picker.spec.production import check_part as check_production_keys
from picker.spec.production import check_spec
from picker.spec.production import parse_part_keys as parse_production_keys
from picker.spec.tank import TankSpec, expand_tapped_coil
from picker.tank import TOPOLOGIES, Topology, get_topology, topology_names
from picker.tank.base import MAX_COUPLING


def _one_of(words: Sequence[str]) -> str:
    """``'a', 'b' or 'c'``: the allowed words as pydantic lists a ``Literal``'s."""
    quoted = [repr(w) for w in words]
    return " or ".join([", ".join(quoted[:-1]), quoted[-1]] if len(quoted) > 1 else quoted)


def _trimmer_words() -> list[str]:
    """``[yield] trimmer`` values: "across", each topology's trimmer position, "none"."""
    at = sorted({t.trimmer_position for t in TOPOLOGIES.values() if t.trimmer_position})
    return ["across", *at, "none"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class FrequencySpec(_Strict):
    """Target frequency and the window every board must land in."""

    target: float
    window: float | None = None
    min: float | None = None
    max: float | None = None

    @field_validator("target", "min", "max", mode="before")
    @classmethod
    def _hz(cls, v: Any) -> float | None:
        if v is None:
            return None
        f = parse_field_quantity(v, "Hz")
        if not f > 0:
            raise ValueError(f"expected a positive frequency such as '250 kHz'; got {v!r}")
        if (why := limits.frequency_problem(f)) is not None:
            raise ValueError(f"{why}; got {v!r}")
        return f

    @field_validator("window", mode="before")
    @classmethod
    def _window(cls, v: Any) -> float | None:
        if v is None:
            return None
        try:
            w = units.parse_fraction(v)
        except SpecError as exc:
            raise ValueError(exc.message) from None
        if not 0 < w < 1:
            raise ValueError(
                f"expected a window narrower than the target itself, e.g. '±3 %'; got {v!r}"
                + units.percent_hint(v, w)
            )
        return w

    @model_validator(mode="after")
    def _consistent(self) -> FrequencySpec:
        has_edges = self.min is not None or self.max is not None
        if self.window is None and not has_edges:
            raise ValueError("expected either window = '±3 %' or both min and max")
        if self.window is not None and has_edges:
            raise ValueError("give either window or min/max, not both")
        if has_edges and (self.min is None or self.max is None):
            raise ValueError("expected both min and max")
        lo, hi = self.min, self.max
        if lo is not None and hi is not None and not lo < self.target < hi:
            raise ValueError(
                f"expected min < target < max; got min={units.format_quantity(lo, 'Hz')}, "
                f"target={units.format_quantity(self.target, 'Hz')}, "
                f"max={units.format_quantity(hi, 'Hz')}"
            )
        if not self.f_max / self.f_min - 1 >= limits.MIN_WINDOW:
            raise ValueError(
                f"expected a window at least {limits.MIN_WINDOW * 1e6:g} ppm wide (narrower is "
                "below what any part or instrument resolves); got "
                f"{units.format_quantity(self.f_min, 'Hz', digits=12)} to "
                f"{units.format_quantity(self.f_max, 'Hz', digits=12)}"
            )
        return self

    @property
    def f_min(self) -> float:
        return self.min if self.min is not None else self.target * (1 - self.window)  # type: ignore[operator]

    @property
    def f_max(self) -> float:
        return self.max if self.max is not None else self.target * (1 + self.window)  # type: ignore[operator]


class FeedbackSpec(_Strict):
    """Window for the feedback fraction beta = C1 / C2 (default 0.1 to 1.0, common practice)."""

    min: float = 0.1
    max: float = 1.0

    @field_validator("min", "max", mode="before")
    @classmethod
    def _ratio(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float):
            raise ValueError(f"expected a number (a ratio C1/C2 such as 0.25); got {v!r}")
        if not (math.isfinite(v) and v > 0):
            raise ValueError(f"expected a positive finite ratio; got {v!r}")
        if not limits.BETA_RANGE[0] <= v <= limits.BETA_RANGE[1]:
            raise ValueError(
                f"expected a ratio C1/C2 between {limits.BETA_RANGE[0]:g} and "
                f"{limits.BETA_RANGE[1]:g} (a loop gain of at most 1000); got {v!r}"
            )
        return float(v)

    @model_validator(mode="after")
    def _order(self) -> FeedbackSpec:
        if self.min > self.max:
            raise ValueError(f"expected min <= max; got min={self.min}, max={self.max}")
        return self


class PartSpec(_Strict):
    """One part position: where its values come from and how they vary."""

    series: str | None = None
    values: tuple[float, ...] | None = None
    tolerance: float | None = None
    min: float | None = None
    max: float | None = None
    # Optional physical detail used by the circuit-aware model and the cautions.
    q: float | None = None
    q_frequency: float | None = None
    esr: float | None = None
    voltage_rating: float | None = None
    polarised: bool = False
    price: float | None = None
    # Production view (README "Production view"): drift class, distribution, lot, prices.
    dielectric: str | None = None
    tempco: float | None = None
    tempco_spread: float | None = None
    distribution: Literal["uniform", "normal", "graded", "graded-normal", "empirical"] | None = None
    grade: float | None = None
    lot: str | None = None
    prices: tuple[tuple[float | str, float], ...] | None = None
    # Buyer's view (README "Stock lists, parallel pairs and cost"): the position's
    # parts from a stock-list CSV (path relative to the spec file), two parts in
    # parallel, and the largest ratio between the two parts of a pair.
    stock: str | None = None
    parallel: bool = False
    pair_ratio_max: float = 10.0
    # Filled in by spec_from_dict from the ``stock`` file (a picker.spec.stock.StockList).
    stock_list: Any = Field(None, exclude=True, repr=False)
    # Filled in by Spec from the position name before validation.
    unit: Literal["F", "H"] = Field("F", exclude=True)
    # Filled in by spec_from_dict from the ``lot`` file (relative deviations).
    lot_deviations: tuple[float, ...] | None = Field(None, exclude=True)

    @model_validator(mode="before")
    @classmethod
    def _parse(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            raise ValueError(
                f"expected a table of keys (series, tolerance, min, max); got {data!r}"
            )
        d = dict(data)
        unit = d.get("unit", "F")
        for key in ("min", "max"):
            if d.get(key) is not None:
                try:
                    d[key] = units.parse_quantity(d[key], unit)
                except SpecError as exc:
                    raise KeyedError(key, exc.message) from None
                if not d[key] > 0:
                    raise KeyedError(key, f"expected a positive value; got {data[key]!r}")
                if (why := limits.value_problem(d[key], unit, data[key])) is not None:
                    raise KeyedError(key, f"{why}; got {data[key]!r}")
        if d.get("values") is not None:
            raw = d["values"]
            if not isinstance(raw, list) or not raw:
                raise KeyedError("values", f"expected a non-empty list of values; got {raw!r}")
            parsed = []
            for i, v in enumerate(raw):
                try:
                    x = units.parse_quantity(v, unit)
                except SpecError as exc:
                    raise KeyedError(f"values[{i}]", exc.message) from None
                if not x > 0:
                    raise KeyedError(f"values[{i}]", f"expected a positive value; got {v!r}")
                if (why := limits.value_problem(x, unit, v)) is not None:
                    raise KeyedError(f"values[{i}]", f"{why}; got {v!r}")
                parsed.append(x)
            d["values"] = tuple(sorted(set(parsed)))
        if d.get("tolerance") is not None:
            try:
                d["tolerance"] = units.parse_tolerance(d["tolerance"])
            except SpecError as exc:
                raise KeyedError("tolerance", exc.message) from None
        for key, u in (("q_frequency", "Hz"), ("esr", "ohm"), ("voltage_rating", "V")):
            if d.get(key) is not None:
                try:
                    d[key] = units.parse_quantity(d[key], u)
                except SpecError as exc:
                    raise KeyedError(key, exc.message) from None
                if not d[key] > 0 and key != "esr":
                    raise KeyedError(key, f"expected a positive value; got {data[key]!r}")
        if d.get("price") is not None:
            p = d["price"]
            if (
                isinstance(p, bool)
                or not isinstance(p, int | float)
                or not math.isfinite(p)
                or p < 0
            ):
                raise KeyedError("price", f"expected a unit price as a number >= 0; got {p!r}")
        if d.get("q") is not None:
            q = d["q"]
            if (
                isinstance(q, bool)
                or not isinstance(q, int | float)
                or not math.isfinite(q)
                or q <= 0
            ):
                raise KeyedError("q", f"expected a positive quality factor such as 60; got {q!r}")
        if d.get("series") is not None:
            if not isinstance(d["series"], str):
                raise KeyedError(
                    "series", f"expected a series name such as 'E12'; got {d['series']!r}"
                )
            try:
                d["series"] = series_mod.canonical_name(d["series"])
            except SpecError as exc:
                raise KeyedError("series", exc.message) from None
        _parse_buyer_keys(d)
        return parse_production_keys(d, unit)

    @model_validator(mode="after")
    def _complete(self) -> PartSpec:
        if self.stock is not None:
            _check_stock_part(self)
            check_production_keys(self)
            return self
        if self.series is None and self.values is None:
            raise ValueError(
                "expected a series (e.g. series = 'E12'), a list of values or a stock list"
            )
        if self.series is not None and self.values is not None:
            raise ValueError("give either series or values, not both")
        if self.parallel and self.unit != "F":
            raise KeyedError("parallel", "parallel pairs are for capacitors only")
        if self.series is not None:
            if self.min is None or self.max is None:
                missing = "min" if self.min is None else "max"
                raise KeyedError(missing, f"expected {missing} (e.g. '100 pF') with a series")
            if self.min > self.max:
                raise ValueError(
                    f"expected min <= max; got min={units.format_quantity(self.min, self.unit)}, "
                    f"max={units.format_quantity(self.max, self.unit)}"
                )
        if self.tolerance is None:
            if self.series is None:
                raise KeyedError(
                    "tolerance", "expected a tolerance (e.g. '5 %' or 'J') for a value list"
                )
            object.__setattr__(self, "tolerance", series_mod.default_tolerance(self.series))
        check_production_keys(self)
        return self


def _parse_buyer_keys(d: dict) -> None:
    """Parse ``stock``, ``parallel`` and ``pair_ratio_max`` of one part table in place."""
    if "stock_list" in d:
        raise KeyedError("stock_list", "unknown key (a typo?); a stock list is stock = 'file.csv'")
    if d.get("stock") is not None and not (isinstance(d["stock"], str) and d["stock"].strip()):
        raise KeyedError("stock", f"expected the path of a stock-list CSV; got {d['stock']!r}")
    if "parallel" in d and not isinstance(d["parallel"], bool):
        raise KeyedError("parallel", f"expected true or false; got {d['parallel']!r}")
    if d.get("pair_ratio_max") is not None:
        r = d["pair_ratio_max"]
        if isinstance(r, bool) or not isinstance(r, int | float) or not (1 <= r < math.inf):
            raise KeyedError(
                "pair_ratio_max", f"expected a ratio of at least 1 such as 10; got {r!r}"
            )
        if not d.get("parallel"):
            raise KeyedError("pair_ratio_max", "pair_ratio_max needs parallel = true")


def _check_stock_part(part: PartSpec) -> None:
    """Cross-key checks of a position filled from a stock list."""
    for key in ("series", "values"):
        if getattr(part, key) is not None:
            raise KeyedError(key, f"give either {key} or stock, not both")
    for key in ("price", "prices", "lot"):
        if getattr(part, key) is not None:
            why = "prices come from the stock list" if key != "lot" else "a lot is one value"
            raise KeyedError(key, f"{key} does not go with stock ({why})")
    if part.parallel and part.unit != "F":
        raise KeyedError("parallel", "parallel pairs are for capacitors only")
    if part.min is not None and part.max is not None and part.min > part.max:
        raise ValueError(
            f"expected min <= max; got min={units.format_quantity(part.min, part.unit)}, "
            f"max={units.format_quantity(part.max, part.unit)}"
        )
    if part.grade is not None and part.tolerance is None:
        raise KeyedError("grade", "a graded stock position needs tolerance (the outer class)")


class ParasiticsSpec(_Strict):
    """Board and device parasitics added to the tank (all default to none).

    ``stray`` sits across the whole tank, ``c1_shunt`` across C1 (amplifier
    output), ``c2_shunt`` across C2 (amplifier input); ``l_scale`` multiplies
    the marked inductance (a calibrated inductor is 1.0).
    """

    stray: float = 0.0
    c1_shunt: float = 0.0
    c2_shunt: float = 0.0
    l_scale: float = 1.0
    #: Half-width of the board-to-board spread of ``stray`` (F): each simulated
    #: board's stray is uniform in stray ± stray_tolerance (GUM rectangular).
    stray_tolerance: float = 0.0

    @field_validator("stray", "c1_shunt", "c2_shunt", mode="before")
    @classmethod
    def _cap(cls, v: Any) -> float:
        c = parse_field_quantity(v, "F")
        if c < 0:
            raise ValueError(f"expected a capacitance >= 0 such as '10 pF'; got {v!r}")
        return c

    @field_validator("stray_tolerance", mode="before")
    @classmethod
    def _cap_tol(cls, v: Any) -> float:
        text = v.strip().lstrip("±").strip() if isinstance(v, str) else v
        c = parse_field_quantity(text, "F")
        if c < 0:
            raise ValueError(f"expected a capacitance >= 0 such as '±2 pF'; got {v!r}")
        return c

    @model_validator(mode="after")
    def _stray_spread(self) -> ParasiticsSpec:
        if self.stray_tolerance > self.stray:
            raise KeyedError(
                "stray_tolerance",
                "expected at most the stray itself (a board's stray cannot go below 0); got "
                f"{units.format_quantity(self.stray_tolerance, 'F')} against a stray of "
                f"{units.format_quantity(self.stray, 'F')}",
            )
        return self

    @field_validator("l_scale", mode="before")
    @classmethod
    def _scale(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float) or not (0.2 < v < 5):
            raise ValueError(f"expected a factor near 1.0 (between 0.2 and 5); got {v!r}")
        return float(v)


class YieldSpec(_Strict):
    """Monte Carlo settings."""

    samples: int = Field(20000, ge=100, le=10_000_000)
    seed: int = Field(1, ge=0, le=2**63 - 1)
    distribution: Literal["uniform", "normal", "graded", "graded-normal"] = "uniform"
    candidates: int = Field(200, ge=1, le=100_000)
    confidence: float = Field(0.95, gt=0.5, lt=1.0)
    ci_method: Literal["wilson", "exact"] = "wilson"
    # Production view (README "Production view"; parsed by picker.spec.production).
    temperature: tuple[float, float] | None = None
    temperature_points: int = Field(5, ge=2, le=101)
    precision: float | None = None
    max_samples: int = Field(1_000_000, ge=100, le=100_000_000)
    sampling: Literal["random", "sobol"] = "random"
    target: float | None = None
    trimmer: str = "across"  # "across", "none" or a topology's trimmer_position (picker.tank)
    trimmer_share: float = 0.997

    @field_validator(
        "samples", "seed", "candidates", "temperature_points", "max_samples", mode="before"
    )
    @classmethod
    def _int(cls, v: Any) -> int:
        if isinstance(v, bool) or not isinstance(v, int):
            raise ValueError(f"expected a whole number; got {v!r}")
        return v

    @field_validator("temperature", mode="before")
    @classmethod
    def _temperature(cls, v: Any) -> tuple[float, float] | None:
        return parse_temperature_range(v)

    @field_validator("precision", mode="before")
    @classmethod
    def _precision(cls, v: Any) -> float | None:
        return parse_share(v, "a confidence-interval half-width such as '0.5 %'", top=0.5)

    @field_validator("target", mode="before")
    @classmethod
    def _target(cls, v: Any) -> float | None:
        return parse_share(v, "a yield target such as '99 %'")

    @field_validator("trimmer_share", mode="before")
    @classmethod
    def _trimmer_share(cls, v: Any) -> float | None:
        return parse_share(v, "a share of boards such as '99.7 %'", upper_open=True)

    @field_validator("trimmer", "sampling", mode="before")
    @classmethod
    def _word(cls, v: Any, info: ValidationInfo) -> Any:
        words = _trimmer_words()
        if isinstance(v, str):
            w = v.strip().lower()
            v = w.upper() if w.upper() in words else w
        if info.field_name == "trimmer" and v not in words:
            raise ValueError(f"expected {_one_of(words)}; got {v!r}")
        return v


class CostSpec(_Strict):
    """Buyer's view: the build quantity, a cost limit per board and the ranking objective.

    ``rank_by = "cost"`` lists the cheapest designs whose yield confidence
    interval lies at or above ``min_yield`` (default ``[yield] target``), the
    cheapest first.
    """

    build_quantity: int = Field(1, ge=1, le=100_000_000)
    max_per_board: float | None = None
    rank_by: Literal["yield", "cost"] = "yield"
    min_yield: float | None = None
    #: Currency of every price (stock lists and ``price``/``prices`` keys), a
    #: three-letter code in the style of ISO 4217 ("EUR", "USD"); "" when not said.
    currency: str = ""

    @field_validator("currency", mode="before")
    @classmethod
    def _currency(cls, v: Any) -> str:
        return currency_code(v)

    @field_validator("build_quantity", mode="before")
    @classmethod
    def _whole(cls, v: Any) -> int:
        if isinstance(v, bool) or not isinstance(v, int):
            raise ValueError(f"expected a whole number of boards such as 1000; got {v!r}")
        return v

    @field_validator("max_per_board", mode="before")
    @classmethod
    def _money(cls, v: Any) -> float | None:
        if v is None:
            return None
        if isinstance(v, bool) or not isinstance(v, int | float) or not (0 < v < math.inf):
            raise ValueError(f"expected a cost per board above 0 such as 0.25; got {v!r}")
        return float(v)

    @field_validator("min_yield", mode="before")
    @classmethod
    def _share(cls, v: Any) -> float | None:
        return parse_share(v, "a yield such as '95 %'")

    @field_validator("rank_by", mode="before")
    @classmethod
    def _word(cls, v: Any) -> Any:
        return v.strip().lower() if isinstance(v, str) else v


class ReportSpec(_Strict):
    top: int = Field(10, ge=1, le=10_000)


class SearchSpec(_Strict):
    """Limits of the exact search (README, "Large spaces")."""

    max_designs: int = Field(5_000_000, ge=1)
    max_combinations: int = Field(1_000_000_000, ge=1)


class Spec(_Strict):
    """A validated spec: everything in SI floats."""

    title: str = ""
    topology: str  # a registered topology's name (picker.tank)
    frequency: FrequencySpec
    feedback: FeedbackSpec = FeedbackSpec()
    parts: dict[str, PartSpec]
    parasitics: ParasiticsSpec = ParasiticsSpec()
    tank: TankSpec = TankSpec()
    yield_: YieldSpec = Field(YieldSpec(), alias="yield")
    report: ReportSpec = ReportSpec()
    search: SearchSpec = SearchSpec()
    cost: CostSpec = CostSpec()
    amplifier: AmplifierSpec | None = None
    source: str = Field("", exclude=True)

    @model_validator(mode="before")
    @classmethod
    def _prepare(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            return data
        d = dict(data)
        topo = d.get("topology")
        if isinstance(topo, str):
            d["topology"] = topo.strip().lower()
        name = d.get("topology")
        if isinstance(name, str) and name in TOPOLOGIES:
            t = get_topology(name)
            if t.coupled:  # the tapped-coil form: [tank] tapped_coil, tap, coil_tolerance
                d = expand_tapped_coil(d, t.feedback_pair)
            elif isinstance(d.get("tank"), dict) and "tapped_coil" in d["tank"]:
                raise KeyedError("tank.tapped_coil", f"a {name} tank has one inductor")
        parts = d.get("parts")
        if (
            isinstance(parts, dict)
            and isinstance(d.get("topology"), str)
            and d["topology"] in TOPOLOGIES
        ):
            want = get_topology(d["topology"]).positions
            for pos in parts:
                if pos not in want:
                    raise KeyedError(
                        f"parts.{pos}",
                        f"unknown part position for a {d['topology']} tank; expected {', '.join(want)}",
                    )
            for pos in want:
                if pos not in parts:
                    raise KeyedError(
                        f"parts.{pos}", f"missing: a {d['topology']} tank needs {', '.join(want)}"
                    )
            topology = get_topology(d["topology"])
            d["parts"] = {
                p: ({**v, "unit": topology.unit(p)} if isinstance(v, dict) else v)
                for p, v in parts.items()
            }
        return d

    @field_validator("topology", mode="before")
    @classmethod
    def _topology(cls, v: Any) -> str:
        if isinstance(v, str) and v in TOPOLOGIES:
            return v
        raise ValueError(f"expected {_one_of(topology_names())}; got {v!r}")

    @field_validator("title", mode="before")
    @classmethod
    def _title(cls, v: Any) -> str:
        if not isinstance(v, str):
            raise ValueError(f"expected a text title; got {v!r}")
        return v

    @model_validator(mode="after")
    def _feasible_ranges(self) -> Spec:
        for pos, part in self.parts.items():
            lo, hi = part.min, part.max  # a series position always has both (PartSpec)
            if part.series is not None and lo is not None and hi is not None:
                vals = series_mod.expand(part.series, lo, hi)
                if len(vals) == 0:
                    raise KeyedError(
                        f"parts.{pos}",
                        f"the range {units.format_quantity(lo, part.unit)} to "
                        f"{units.format_quantity(hi, part.unit)} holds no {part.series} value",
                    )
        return self

    @model_validator(mode="after")
    def _tank_keys(self) -> Spec:
        topo = get_topology(self.topology)
        if self.tank.coupling and not topo.coupled:
            raise KeyedError(
                "tank.coupling", f"a {self.topology} tank has one inductor; remove the coupling"
            )
        if self.tank.coupling_tolerance and not topo.coupled:
            raise KeyedError(
                "tank.coupling_tolerance",
                f"a {self.topology} tank has one inductor; remove the coupling_tolerance",
            )
        k, t = self.tank.coupling, self.tank.coupling_tolerance
        if t and not (k - t >= 0 and k + t <= MAX_COUPLING):
            raise KeyedError(
                "tank.coupling_tolerance",
                f"expected k ± tolerance within 0 to {MAX_COUPLING}; got {k:g} ± {t:g}",
            )
        for name in ("c1_shunt", "c2_shunt"):
            if getattr(self.parasitics, name) and name not in topo.shunt_targets():
                raise KeyedError(
                    f"parasitics.{name}",
                    f"a {self.topology} tank has no capacitor at that end for a shunt to add to; "
                    "put the board's capacitance in stray",
                )
        return self

    @model_validator(mode="after")
    def _production_keys(self) -> Spec:
        check_spec(self)
        return self

    @property
    def topo(self) -> Topology:
        topo = get_topology(self.topology)
        return topo.configured(self.tank.coupling) if topo.coupled else topo
