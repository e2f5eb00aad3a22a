"""Render a :class:`~picker.calibration.result.CalibrationResult`: JSON, a rich table, a spec fragment.

Edge module. JSON numbers are SI (F, Hz; ``l_scale`` dimensionless), NaN
becomes ``null``, and keys come out in a fixed order, so the same fit gives
byte-identical text. The residual plot is :func:`picker.report.plots.plot_residuals`.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Sequence
from typing import IO, Any

import numpy as np
from rich.console import Console
from rich.table import Table

from picker.calibration.result import CalibrationResult, format_parameter
from picker.report.text import plain
from picker.units import format_quantity, json_number

__all__ = [
    "SHOWN_OUTLIERS",
    "TABLE_UNITS",
    "WORST_UNITS",
    "fragment_toml",
    "merge_into_spec",
    "parameter_text",
    "print_table",
    "result_dict",
    "to_json",
    "write_json",
]

#: A batch up to this many units gets one row per unit; a larger one a summary.
TABLE_UNITS = 50
#: Units shown in a large batch's summary (largest studentised residuals first).
WORST_UNITS = 10
#: Outlier ids named in a large batch's summary.
SHOWN_OUTLIERS = 10


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
    with_residuals: bool = True,
) -> dict:
    """The JSON object of ``picker calibrate --format json``.

    ``with_residuals=False`` leaves the per-unit list empty (:func:`write_json`
    streams it instead).
    """
    return {
        "source": source,
        "topology": r.topology,
        "units": len(r.unit_ids),
        "loss": r.loss,
        "f_scale": json_number(r.f_scale) if r.f_scale is not None else None,
        "fitted": list(r.fitted),
        "parameters": {
            p.name: {
                "estimate": json_number(p.estimate),
                "std_error": json_number(p.std_error),
                "ci_low": json_number(p.ci_low),
                "ci_high": json_number(p.ci_high),
                "unit": p.unit,
                "fitted": p.fitted,
            }
            for p in r.parameters
        },
        "confidence": r.confidence,
        "dof": r.dof,
        "residual_scale": json_number(r.residual_scale),
        "residual_scale_unit": "sigma" if r.sigma is not None else "ppm",
        "residuals": [_residual(r, i, rows) for i in range(len(r.unit_ids))]
        if with_residuals
        else [],
        "selection": [
            {
                "parasitic": st.name,
                "kept": st.kept,
                "test": st.test or None,
                "statistic": json_number(st.statistic),
                "df": list(st.df),
                "p_value": json_number(st.p_value),
                "reason": st.reason,
            }
            for st in r.selection
        ],
        "identifiable": r.identifiable,
        "combinations": {k: dict(v) for k, v in r.aliases.items()},
        "outliers": list(r.outliers),
        "outlier_threshold": json_number(r.outlier_threshold),
        "notes": [*r.notes, *extra_notes],
    }


def _residual(r: CalibrationResult, i: int, rows: Sequence[int] | None) -> dict[str, Any]:
    return {
        "unit": r.unit_ids[i],
        **({"row": int(rows[i])} if rows is not None else {}),
        "f_measured_hz": json_number(r.f_measured[i]),
        "f_fitted_hz": json_number(r.f_fitted[i]),
        "residual_hz": json_number(r.residual_hz[i]),
        "residual_ppm": json_number(r.residual_ppm[i]),
        "studentized": json_number(r.studentized[i]),
    }


def _json_scalar(x: str | int | float | None) -> str:
    """One JSON scalar as ``json.dumps`` writes it (floats by repr), without its slow indenter."""
    if isinstance(x, float):
        return repr(x)  # finite: _num turned NaN and infinities into None
    return json.dumps(x, ensure_ascii=False)


def _dumps(x: Any) -> str:
    return json.dumps(x, indent=2, ensure_ascii=False, allow_nan=False)


def write_json(
    r: CalibrationResult,
    stream: IO[str],
    *,
    rows: Sequence[int] | None = None,
    **kw: Any,
) -> None:
    """Write ``result_dict`` as indented JSON text ending in a newline, unit by unit.

    The text is that of ``json.dumps(result_dict(r, ...), indent=2)``; the
    per-unit residuals are written one at a time, so a file of a million
    units never holds its whole JSON text in memory.
    """
    head = _dumps(result_dict(r, rows=rows, with_residuals=False, **kw))
    marker = '\n  "residuals": [],\n'
    before, after = head.split(marker)
    stream.write(before + '\n  "residuals": [\n')
    for i in range(len(r.unit_ids)):
        fields = ",\n".join(
            f"      {json.dumps(k)}: {_json_scalar(v)}" for k, v in _residual(r, i, rows).items()
        )
        stream.write(
            "    {\n" + fields + ("\n    },\n" if i + 1 < len(r.unit_ids) else "\n    }\n")
        )
    stream.write("  ],\n" + after + "\n")


def to_json(r: CalibrationResult, **kw: Any) -> str:
    """``result_dict`` as indented JSON text ending in a newline."""
    return _dumps(result_dict(r, **kw)) + "\n"


def _residual_cells(r: CalibrationResult, i: int) -> tuple[str, ...]:
    uid = r.unit_ids[i]
    z = r.studentized[i]
    return (
        uid + (" (outlier)" if uid in r.outliers else ""),
        format_quantity(r.f_measured[i], "Hz", digits=7),
        format_quantity(r.f_fitted[i], "Hz", digits=7),
        format_quantity(r.residual_hz[i], "Hz", digits=3),
        f"{r.residual_ppm[i]:+.1f}",
        "—" if not math.isfinite(z) else f"{z:+.2f}",
    )


_RESIDUAL_COLUMNS = ("unit", "measured", "fitted", "residual", "ppm", "studentised")


def _residual_table(r: CalibrationResult, title: str, units: Sequence[int]) -> Table:
    u = Table(title=title)
    for col in _RESIDUAL_COLUMNS:
        u.add_column(col, justify="left" if col == "unit" else "right")
    for i in units:
        first, *rest = _residual_cells(r, i)
        u.add_row(plain(first), *rest)  # a unit id is user text: never markup, escapes shown
    return u


def _stream_residuals(r: CalibrationResult, stream: IO[str]) -> None:
    """Every unit's residual as aligned plain text, written line by line (bounded memory)."""
    width = max(len(uid) for uid in r.unit_ids) + len(" (outlier)")
    stream.write("Residuals (measured − fitted), every unit\n")
    head = f"{'unit':<{width}} " + " ".join(f"{c:>14}" for c in _RESIDUAL_COLUMNS[1:])
    stream.write(head + "\n")
    for i in range(len(r.unit_ids)):
        cells = _residual_cells(r, i)
        stream.write(f"{cells[0]:<{width}} " + " ".join(f"{c:>14}" for c in cells[1:]) + "\n")


def _summary_lines(r: CalibrationResult) -> list[str]:
    """A few lines that describe every unit's residual at once."""
    ppm = r.residual_ppm
    worst = int(np.argmax(np.abs(ppm)))
    lines = [
        f"residuals of {len(ppm):,} units: median {np.median(ppm):+.1f} ppm, "
        f"RMS {np.sqrt(np.mean(ppm**2)):.1f} ppm, largest {ppm[worst]:+.1f} ppm "
        f"(unit {r.unit_ids[worst]})",
    ]
    if r.outliers:
        shown = ", ".join(r.outliers[:SHOWN_OUTLIERS])
        more = len(r.outliers) - SHOWN_OUTLIERS
        lines.append(
            f"{len(r.outliers):,} outlier(s): {shown}" + (f" and {more:,} more" if more > 0 else "")
        )
    return lines


def print_table(
    r: CalibrationResult,
    console: Console,
    *,
    extra_notes: Sequence[str] = (),
    every_unit: bool = False,
) -> None:
    """Print the parameters, the residuals and the notes.

    Up to :data:`TABLE_UNITS` units (or with ``every_unit``) every unit gets a
    row; beyond that a summary and the :data:`WORST_UNITS` units with the
    largest studentised residuals, so the output and its memory stay bounded
    whatever the file's size. ``every_unit`` on a larger batch writes the
    rows as plain aligned text, one line at a time.
    """
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
    n = len(r.unit_ids)
    if n <= TABLE_UNITS:
        console.print(_residual_table(r, "Residuals (measured − fitted)", range(n)))
    elif every_unit:
        _stream_residuals(r, console.file)
    else:
        for line in _summary_lines(r):
            console.print(line, markup=False, highlight=False)
        z = np.where(np.isfinite(r.studentized), np.abs(r.studentized), np.abs(r.standardized))
        worst = np.argsort(-z, kind="stable")[:WORST_UNITS]
        console.print(
            _residual_table(
                r,
                f"Largest {WORST_UNITS} of {n:,} residuals (measured − fitted); "
                "--every-unit lists all",
                [int(i) for i in worst],
            )
        )
    scale = "" if r.sigma is not None else " ppm"
    console.print(f"residual scale s = {r.residual_scale:.3g}{scale}, {r.dof} degrees of freedom")
    for note in (*r.notes, *extra_notes):
        console.print(f"note: {note}", markup=False, highlight=False)


def _fragment_parts(
    result: CalibrationResult, source: str | None
) -> tuple[list[str], dict[str, str]]:
    """The comment lines of a ``[parasitics]`` fragment and each parasitic's TOML value text."""
    n = len(result.unit_ids)
    head = [
        "# Board parasitics learnt by `picker calibrate`" + (f" from {source}" if source else ""),
        f"# ({n} units, {result.topology} tank, {result.loss} loss). Fitted: "
        f"{', '.join(result.fitted)}; residual scale s = {result.residual_scale:.3g}"
        f"{' (sigma units)' if result.sigma is not None else ' ppm'}.",
    ]
    values: dict[str, str] = {}
    level = f"{100 * result.confidence:g} %"
    for p in result.parameters:
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
            values[p.name] = f'"{format_quantity(value, "F", digits=4)}"'
        else:
            values[p.name] = f"{float(f'{value:.6g}')!r}"
    for uid in result.outliers[:SHOWN_OUTLIERS]:
        head.append(f"# outlier: unit {uid}")
    if len(result.outliers) > SHOWN_OUTLIERS:
        head.append(f"# and {len(result.outliers) - SHOWN_OUTLIERS} more outliers")
    return [h.replace("\n", " ").replace("\r", " ") for h in head], values


def fragment_toml(result: CalibrationResult, *, source: str | None = None) -> str:
    """A ``[parasitics]`` TOML section holding the fitted board, for a spec file.

    Capacitances are written as engineering strings ("12.34 pF", four
    significant digits), ``l_scale`` as a number. The spec requires
    capacitances ≥ 0, so a negative estimate is written as "0 F" with a
    comment. The header says where the values came from; it carries no date,
    so the same fit gives the same text.
    """
    head, values = _fragment_parts(result, source)
    lines = ["[parasitics]", *(f"{k} = {v}" for k, v in values.items())]
    return "\n".join(head + lines) + "\n"


_TABLE = re.compile(r"^\s*\[")  # a table or array-of-tables header
_PARASITICS = re.compile(r"^\s*\[\s*(parasitics|\"parasitics\")\s*\]\s*(#.*)?$")
_KEY = re.compile(r"^\s*(\"?)(stray|c1_shunt|c2_shunt|l_scale)\1\s*=")


def merge_into_spec(spec_text: str, result: CalibrationResult, *, source: str | None = None) -> str:
    """The text of ``spec_text`` with the fitted parasitics written into its ``[parasitics]``.

    Everything else stays as written, comments included. In the spec's
    ``[parasitics]`` table each fitted parasitic's line is replaced (a held
    one keeps its line: the fit held it at the spec's value); a fitted one the
    table lacks is added under the header, after the fit's comment lines.
    With no ``[parasitics]`` table the fragment is appended. The caller checks
    the result loads (a spec that sets parasitics by dotted keys or an inline
    table is refused).
    """
    newline = "\r\n" if "\r\n" in spec_text else "\n"
    head, values = _fragment_parts(result, source)
    fitted = {k: v for k, v in values.items() if k in result.fitted}
    lines = spec_text.splitlines()
    start = next((i for i, line in enumerate(lines) if _PARASITICS.match(line)), None)
    if start is None:
        body = [*head, "[parasitics]", *(f"{k} = {v}" for k, v in values.items())]
        text = (
            spec_text if spec_text.endswith(("\n", "\r")) or not spec_text else spec_text + newline
        )
        return text + newline + newline.join(body) + newline
    end = next((i for i in range(start + 1, len(lines)) if _TABLE.match(lines[i])), len(lines))
    section = lines[start + 1 : end]
    present = set()
    for j, line in enumerate(section):
        m = _KEY.match(line)
        if m and m.group(2) in fitted:
            present.add(m.group(2))
            section[j] = f"{m.group(2)} = {fitted[m.group(2)]}"
    added = [f"{k} = {v}" for k, v in fitted.items() if k not in present]
    merged = [*lines[: start + 1], *head, *added, *section, *lines[end:]]
    return newline.join(merged) + newline
