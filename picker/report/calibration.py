"""Render a :class:`~picker.calibration.result.CalibrationResult`: JSON, a rich table, a spec fragment.

Edge module. JSON numbers are SI (F, Hz; ``l_scale`` dimensionless), NaN
becomes ``null``, and keys come out in a fixed order, so the same fit gives
byte-identical text. The residual plot is :func:`picker.report.plots.plot_residuals`.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from typing import Any

from rich.console import Console
from rich.table import Table

from picker.calibration.result import CalibrationResult, format_parameter
from picker.report.text import plain
from picker.units import format_quantity

__all__ = ["fragment_toml", "parameter_text", "print_table", "result_dict", "to_json"]


def _num(x: float) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def parameter_text(unit: str, x: float, digits: int = 4) -> str:
    """A parasitic's value for a table or a plot: farads with a prefix, else ``%.6g``; NaN is —."""
    if not math.isfinite(x):
        return "—"
    if unit == "F":
        return format_quantity(x, "F", digits=digits)
    return f"{x:.6g}"


def result_dict(
    r: CalibrationResult,
    *,
    source: str | None = None,
    rows: Sequence[int] | None = None,
    extra_notes: Sequence[str] = (),
) -> dict:
    """The JSON object of ``picker calibrate --format json``."""
    return {
        "source": source,
        "topology": r.topology,
        "units": len(r.unit_ids),
        "loss": r.loss,
        "f_scale": _num(r.f_scale) if r.f_scale is not None else None,
        "fitted": list(r.fitted),
        "parameters": {
            p.name: {
                "estimate": _num(p.estimate),
                "std_error": _num(p.std_error),
                "ci_low": _num(p.ci_low),
                "ci_high": _num(p.ci_high),
                "unit": p.unit,
                "fitted": p.fitted,
            }
            for p in r.parameters
        },
        "confidence": r.confidence,
        "dof": r.dof,
        "residual_scale": _num(r.residual_scale),
        "residual_scale_unit": "sigma" if r.sigma is not None else "ppm",
        "residuals": [
            {
                "unit": uid,
                **({"row": int(rows[i])} if rows is not None else {}),
                "f_measured_hz": _num(r.f_measured[i]),
                "f_fitted_hz": _num(r.f_fitted[i]),
                "residual_hz": _num(r.residual_hz[i]),
                "residual_ppm": _num(r.residual_ppm[i]),
                "studentized": _num(r.studentized[i]),
            }
            for i, uid in enumerate(r.unit_ids)
        ],
        "identifiable": r.identifiable,
        "combinations": {k: dict(v) for k, v in r.aliases.items()},
        "outliers": list(r.outliers),
        "outlier_threshold": _num(r.outlier_threshold),
        "notes": [*r.notes, *extra_notes],
    }


def to_json(r: CalibrationResult, **kw: Any) -> str:
    """``result_dict`` as indented JSON text ending in a newline."""
    return json.dumps(result_dict(r, **kw), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def print_table(r: CalibrationResult, console: Console, *, extra_notes: Sequence[str] = ()) -> None:
    """Print the parameters, the per-unit residuals and the notes."""
    level = f"{100 * r.confidence:g} %"
    t = Table(title=f"Board parasitics ({r.topology} tank, {len(r.unit_ids)} units, {r.loss} loss)")
    for col in ("parasitic", "estimate", "std. error", f"{level} interval", "status"):
        t.add_column(col, justify="left" if col in ("parasitic", "status") else "right")
    for p in r.parameters:
        interval = (
            f"{parameter_text(p.unit, p.ci_low)} .. {parameter_text(p.unit, p.ci_high)}"
            if p.fitted
            else "—"
        )
        t.add_row(
            p.name,
            parameter_text(p.unit, p.estimate),
            parameter_text(p.unit, p.std_error, 3),
            interval,
            "fitted" if p.fitted else "held",
        )
    console.print(t)
    u = Table(title="Residuals (measured − fitted)")
    for col in ("unit", "measured", "fitted", "residual", "ppm", "studentised"):
        u.add_column(col, justify="left" if col == "unit" else "right")
    for i, uid in enumerate(r.unit_ids):
        z = r.studentized[i]
        u.add_row(
            plain(uid + (" (outlier)" if uid in r.outliers else "")),
            format_quantity(r.f_measured[i], "Hz", digits=7),
            format_quantity(r.f_fitted[i], "Hz", digits=7),
            format_quantity(r.residual_hz[i], "Hz", digits=3),
            f"{r.residual_ppm[i]:+.1f}",
            "—" if not math.isfinite(z) else f"{z:+.2f}",
        )
    console.print(u)
    scale = "" if r.sigma is not None else " ppm"
    console.print(f"residual scale s = {r.residual_scale:.3g}{scale}, {r.dof} degrees of freedom")
    for note in (*r.notes, *extra_notes):
        console.print(f"note: {note}", markup=False, highlight=False)


def fragment_toml(result: CalibrationResult, *, source: str | None = None) -> str:
    """A ``[parasitics]`` TOML section holding the fitted board, for a spec file.

    Capacitances are written as engineering strings ("12.34 pF", four
    significant digits), ``l_scale`` as a number. The spec requires
    capacitances ≥ 0, so a negative estimate is written as "0 F" with a
    comment. The header says where the values came from; it carries no date,
    so the same fit gives the same text.
    """
    n = len(result.unit_ids)
    head = [
        "# Board parasitics learnt by `picker calibrate`" + (f" from {source}" if source else ""),
        f"# ({n} units, {result.topology} tank, {result.loss} loss). Fitted: "
        f"{', '.join(result.fitted)}; residual scale s = {result.residual_scale:.3g}"
        f"{' (sigma units)' if result.sigma is not None else ' ppm'}.",
    ]
    lines = ["[parasitics]"]
    for p in result.parameters:
        level = f"{100 * result.confidence:g} %"
        if p.fitted:
            estimate = format_parameter(p.name, p.estimate)
            std_error = format_parameter(p.name, p.std_error)
            head.append(
                f"# {p.name} = {estimate} ± {std_error}"
                f" (1 s.e.; {level} interval {format_parameter(p.name, p.ci_low)} .. "
                f"{format_parameter(p.name, p.ci_high)})"
            )
        else:
            head.append(f"# {p.name} held, not fitted")
        value = p.estimate
        if p.unit == "F":
            if value < 0:
                head.append(f"# {p.name}: the fit gave a negative value; written as 0")
                value = 0.0
            lines.append(f'{p.name} = "{format_quantity(value, "F", digits=4)}"')
        else:
            lines.append(f"{p.name} = {float(f'{value:.6g}')!r}")
    for uid in result.outliers:
        head.append(f"# outlier: unit {uid}")
    head = [h.replace("\n", " ") for h in head]
    return "\n".join(head + lines) + "\n"
