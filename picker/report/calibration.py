"""Render a :class:`~picker.calibration.fit.CalibrationResult`: JSON, a rich table, a residual plot.

Edge module. JSON numbers are SI (F, Hz; ``l_scale`` dimensionless), NaN
becomes ``null``, and keys come out in a fixed order, so the same fit gives
byte-identical text.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence

import numpy as np
from rich.console import Console
from rich.table import Table

from picker.calibration.fit import CalibrationResult
from picker.units import format_quantity

__all__ = ["plot_residuals", "print_table", "result_dict", "to_json"]


def _num(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def _text(name: str, unit: str, x: float, digits: int = 4) -> str:
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


def to_json(r: CalibrationResult, **kw) -> str:
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
            f"{_text(p.name, p.unit, p.ci_low)} .. {_text(p.name, p.unit, p.ci_high)}"
            if p.fitted
            else "—"
        )
        t.add_row(
            p.name,
            _text(p.name, p.unit, p.estimate),
            _text(p.name, p.unit, p.std_error, 3),
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
            uid + (" (outlier)" if uid in r.outliers else ""),
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


def plot_residuals(r: CalibrationResult) -> bytes:
    """A PNG of the residuals: per unit with ±2s bars, and against frequency."""
    import io

    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    ppm = r.residual_ppm
    if r.sigma is None:
        band = np.full(ppm.shape, 2 * r.residual_scale)  # s is in ppm already
    else:
        band = 2 * r.residual_scale * 1e6 * r.sigma / r.f_fitted
    band = np.where(np.isfinite(band), band, 0.0)
    bad = np.array([u in r.outliers for u in r.unit_ids])
    x = np.arange(len(r.unit_ids))

    fig = Figure(figsize=(9, 4.2), dpi=110, layout="constrained")
    a, b = fig.subplots(1, 2, gridspec_kw={"width_ratios": [3, 2]})
    for ax in (a, b):
        ax.axhline(0.0, color="0.4", lw=0.8)
        ax.grid(True, alpha=0.3)
    if r.sigma is None:  # one residual scale for every unit: a band around zero
        a.axhspan(-band[0], band[0], color="tab:blue", alpha=0.12, label="±2 s")
        a.plot(x[~bad], ppm[~bad], "o", color="tab:blue", label="unit")
        if bad.any():
            a.plot(x[bad], ppm[bad], "s", color="tab:red", label="outlier")
    else:  # per-unit sigmas: a bar on each unit
        a.errorbar(x[~bad], ppm[~bad], yerr=band[~bad], fmt="o", color="tab:blue", capsize=3,
                   label="unit (±2 s·sigma)")  # fmt: skip
        if bad.any():
            a.errorbar(x[bad], ppm[bad], yerr=band[bad], fmt="s", color="tab:red", capsize=3,
                       label="outlier")  # fmt: skip
    a.set_xticks(x, list(r.unit_ids), rotation=45 if len(x) > 8 else 0, ha="right")
    a.set_xlabel("unit")
    a.set_ylabel("measured − fitted frequency (ppm)")
    a.legend(loc="best", fontsize=8)
    b.scatter(r.f_measured[~bad] / 1e3, ppm[~bad], color="tab:blue")
    if bad.any():
        b.scatter(r.f_measured[bad] / 1e3, ppm[bad], color="tab:red", marker="s")
    b.set_xlabel("measured frequency (kHz)")
    b.set_ylabel("residual (ppm)")
    est = ", ".join(
        f"{p.name} = {_text(p.name, p.unit, p.estimate)}" for p in r.parameters if p.fitted
    )
    fig.suptitle(f"Calibration residuals, {r.topology} tank ({r.loss} loss): {est}", fontsize=10)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", metadata={"Software": None})
    return buf.getvalue()
