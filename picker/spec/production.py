"""Spec keys of the production view: drift class, distribution, lots, prices, [yield] extras.

An edge module, the companion of :mod:`picker.spec.model`: it parses the per-part
keys ``dielectric`` (``core`` for the inductor), ``tempco``,
``tempco_spread``, ``distribution``, ``grade``, ``lot`` and ``prices``, checks
them across the spec (with the ``[yield]`` keys, whose fields
:mod:`picker.spec.fields` parses), and reads the measured-lot files once the
spec is valid. Every fault is a :class:`~picker.errors.SpecError` naming the key
(``parts.C1.dielectric``) or, for a lot file, the file, row and column.

Decisions (documented in the README, "Production view"):

* A **lot** belongs to one nominal value, so it is accepted only where the
  position has exactly one candidate value (``values`` with one entry, or a
  series range that holds one value); its median must lie within the part's
  tolerance of that value (:func:`picker.spec.lots.lot_deviations`).
* An inductor takes ``core = "ferrite" | "air"`` (``dielectric`` is accepted
  too); a capacitor takes any EIA class-1 or class-2 code or a film. A
  material of the other kind (a ferrite capacitor) is an error.
* ``tempco`` (and ``tempco_spread``) alone give a linear part with no rated
  range; beside a class-1, film or core material they replace its figures
  (a datasheet value) and keep its rated range. A class-2 code keeps its
  EIA envelope, so a tempco beside it is an error.
* ``prices`` maps a tolerance (``"2 %"``, ``"G"``) or a material (``"C0G"``)
  to a unit price; ``price`` (the current part's unit price) fills in the
  entries of the current tolerance and material when they are missing.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

from picker import units
from picker.errors import KeyedError, SpecError
from picker.parts import drift
from picker.parts import series as series_mod
from picker.spec import lots
from picker.tank import TOPOLOGIES

if TYPE_CHECKING:  # annotations only: picker.spec.model imports this module
    from picker.spec.model import PartSpec, Spec

#: Materials that belong to an inductor; every other material is a capacitor's.
INDUCTOR_MATERIALS = ("ferrite", "air")
GRADED = ("graded", "graded-normal")


def material_name(text: Any, unit: str, key: str = "dielectric") -> str:
    """Canonical material name for a part of ``unit`` ("F" or "H"); ValueError naming ``key``."""
    try:
        m = drift.get_material(text)
    except SpecError as exc:
        raise KeyedError(key, exc.message) from None
    if unit == "H" and m.name not in INDUCTOR_MATERIALS:
        raise KeyedError(
            key,
            f"expected an inductor core, one of {', '.join(INDUCTOR_MATERIALS)}; got {text!r}",
        )
    if unit == "F" and m.name in INDUCTOR_MATERIALS:
        raise KeyedError(
            key,
            f"{text!r} is an inductor core; expected a capacitor dielectric such as 'C0G', "
            "'X7R' or 'polypropylene'",
        )
    return m.name


def _price(value: Any, key: str) -> float:
    if (
        isinstance(value, bool)
        or not isinstance(value, int | float)
        or not math.isfinite(value)
        or value < 0
    ):
        raise KeyedError(key, f"expected a unit price as a number >= 0; got {value!r}")
    return float(value)


def price_option(text: Any, unit: str, key: str) -> float | str:
    """A ``prices`` key: a tolerance (fraction) or a material name."""
    try:
        return units.parse_tolerance(text)
    except SpecError:
        pass
    try:
        return material_name(text, unit, key)
    except ValueError:
        raise KeyedError(
            key,
            f"expected a tolerance such as '2 %' or a dielectric such as 'C0G'; got {text!r}",
        ) from None


def parse_part_keys(d: dict[str, Any], unit: str) -> dict[str, Any]:
    """Parse the production keys of one ``[parts.X]`` table in place (pydantic 'before')."""
    if "lot_deviations" in d:
        raise KeyedError(
            "lot_deviations", "unknown key (a typo?); the lot is given as lot = 'file.csv'"
        )
    if "core" in d:
        if unit != "H":
            raise KeyedError(
                "core", "core is for the inductor; a capacitor takes dielectric = 'C0G'"
            )
        if d.get("dielectric") is not None:
            raise KeyedError("core", "give either core or dielectric, not both")
        d["dielectric"] = material_name(d.pop("core"), unit, "core")
    elif d.get("dielectric") is not None:
        d["dielectric"] = material_name(d["dielectric"], unit)
    for key in ("tempco", "tempco_spread"):
        if d.get(key) is not None:
            try:
                d[key] = units.parse_quantity(d[key], "ppm/°C")
            except SpecError as exc:
                raise KeyedError(key, exc.message) from None
    if d.get("tempco_spread") is not None:
        if d["tempco_spread"] < 0:
            raise KeyedError("tempco_spread", f"expected a spread >= 0; got {d['tempco_spread']!r}")
        if d.get("tempco") is None:
            raise KeyedError("tempco_spread", "expected tempco too (the spread is around it)")
    if d.get("tempco") is not None and d.get("dielectric") is not None:
        if drift.get_material(d["dielectric"]).kind == "class2":
            raise KeyedError(
                "tempco",
                f"a class-2 dielectric ({d['dielectric']}) drifts within its EIA envelope; "
                "an explicit tempco applies to class-1, film and core materials",
            )
    if isinstance(d.get("distribution"), str):
        d["distribution"] = d["distribution"].strip().lower()
    if d.get("grade") is not None:
        try:
            d["grade"] = units.parse_tolerance(d["grade"])
        except SpecError as exc:
            raise KeyedError("grade", exc.message) from None
    if d.get("lot") is not None and not (isinstance(d["lot"], str) and d["lot"].strip()):
        raise KeyedError(
            "lot", f"expected the path of a CSV file of measured values; got {d['lot']!r}"
        )
    if d.get("prices") is not None:
        raw = d["prices"]
        if not isinstance(raw, dict) or not raw:
            raise KeyedError(
                "prices",
                f"expected a table such as {{ '5 %' = 0.02, '2 %' = 0.05 }}; got {raw!r}",
            )
        table: dict[float | str, float] = {}
        for k, v in raw.items():
            opt = price_option(k, unit, f"prices.{k}")
            table[opt] = _price(v, f"prices.{k}")
        d["prices"] = tuple(table.items())
    return d


def check_part(part: PartSpec) -> None:
    """Cross-key checks of one validated part (pydantic 'after')."""
    tol = part.tolerance  # set by now: a stock position with a grade needs one too
    if part.grade is not None and tol is not None and not 0 <= part.grade < tol:
        raise KeyedError(
            "grade",
            f"expected 0 <= grade < tolerance ({units.format_percent(tol)}); "
            f"got {units.format_percent(part.grade)}",
        )
    if part.distribution == "empirical" and part.lot is None:
        raise KeyedError("distribution", "an empirical distribution needs lot = 'measured.csv'")
    if part.lot is not None:
        if part.distribution not in (None, "empirical"):
            raise KeyedError(
                "lot", f"a lot is resampled as measured; it cannot be {part.distribution!r} too"
            )
        if len(candidate_values(part)) != 1:
            raise KeyedError(
                "lot",
                "a measured lot belongs to one value; give values = ['4.7 nF'] "
                "(one value) for this position",
            )


def candidate_values(part: PartSpec) -> tuple[float, ...]:
    """The values a position may take (its list, or its series range)."""
    if part.values is not None:
        return tuple(part.values)
    # A series position has its series, min and max; a stock position has no
    # series, and expand() refuses the missing name with a SpecError.
    return tuple(float(v) for v in series_mod.expand(part.series, part.min, part.max))  # type: ignore[arg-type]


def check_spec(spec: Spec) -> None:
    """Checks across the spec: graded parts have a grade, a C3 trimmer needs a Clapp."""
    ys = spec.yield_
    for pos, part in spec.parts.items():
        kind = part.distribution or ys.distribution
        if part.lot is not None:
            kind = "empirical"
        if kind in GRADED and part.grade is None:
            raise KeyedError(
                f"parts.{pos}.grade",
                f"a {kind} distribution needs grade, the inner tolerance sorted out "
                "(e.g. grade = '2 %')",
            )
        if kind not in GRADED and part.grade is not None:
            raise KeyedError(
                f"parts.{pos}.grade",
                f"grade applies to a graded distribution; this position is {kind}",
            )
    if ys.trimmer not in ("across", "none") and ys.trimmer != spec.topo.trimmer_position:
        need = " or ".join(
            repr(t.name) for t in TOPOLOGIES.values() if t.trimmer_position == ys.trimmer
        )
        raise KeyedError(
            "yield.trimmer", f"a trimmer at {ys.trimmer} needs topology = {need}; use 'across'"
        )
    if ys.max_samples < ys.samples:
        raise KeyedError(
            "yield.max_samples",
            f"expected max_samples >= samples ({ys.samples}); got {ys.max_samples}",
        )
    if ys.temperature is not None:
        _check_drift_size(spec, ys.temperature)


#: Largest linear drift accepted over the temperature range (relative). A part
#: that moves more than this is a tempco typed in the wrong unit, and beyond
#: 100 % the part value would turn negative (common practice, no source).
MAX_DRIFT = 0.5


def _check_drift_size(spec: Spec, temperature: tuple[float, float]) -> None:
    """A linear drift over the ``temperature`` range (°C) of at most :data:`MAX_DRIFT`."""
    lo, hi = temperature
    span = max(abs(lo - drift.T_REF), abs(hi - drift.T_REF))
    for pos, part in spec.parts.items():
        m = drift.material_of(part, True)
        if m is None or m.kind != "linear":
            continue
        worst = (abs(m.tempco) + m.spread) * span
        if worst > MAX_DRIFT:
            key = "tempco" if part.tempco is not None else "dielectric"
            raise KeyedError(
                f"parts.{pos}.{key}",
                f"this part would drift by {worst:.0%} between {lo:g} °C and {hi:g} °C; "
                f"expected at most {MAX_DRIFT:.0%} (a tempco is in ppm/°C, e.g. '+250 ppm/°C')",
            )


def load_lots(spec: Spec, file: str | None) -> Spec:
    """Read every part's ``lot`` file (relative to the spec file) into ``lot_deviations``."""
    if not any(p.lot is not None for p in spec.parts.values()):
        return spec
    base = Path(file).parent if file else Path.cwd()
    parts = dict(spec.parts)
    for pos, part in spec.parts.items():
        if part.lot is None or part.tolerance is None:  # a lot's position has a tolerance
            continue
        path = Path(part.lot)
        path = path if path.is_absolute() else base / path
        if not os.path.lexists(path):  # a FIFO, link loop or directory: the reader says which
            raise SpecError(f"no such lot file {str(path)!r}", file=file, key=f"parts.{pos}.lot")
        (nominal,) = candidate_values(part)
        try:
            dev = lots.load_lot_csv(path, nominal, part.unit, tol=part.tolerance)
        except SpecError as exc:
            raise SpecError(
                f"{exc.message} (lot of parts.{pos})", file=exc.file or str(path), key=exc.key
            ) from None
        parts[pos] = part.model_copy(update={"lot_deviations": tuple(float(x) for x in dev)})
    return spec.model_copy(update={"parts": parts})
