"""Plots of a design's Monte Carlo result (edge module: matplotlib, PNG files).

Figures are drawn on ``matplotlib.figure.Figure`` with the Agg canvas, so no
global backend or pyplot state is touched (safe in a CLI, a test run or a
notebook). Axes carry units with SI prefixes (``matplotlib.ticker.EngFormatter``)
or per cent.

Every ``plot_*`` function returns the :class:`~matplotlib.figure.Figure`; it
draws on ``ax=`` when given (a notebook's own axes) and writes a PNG only when
a ``path`` is given. :func:`result_figures` draws the three figures of a
result (best design) for a notebook or the HTML report.

:func:`write_plots` writes the three PNGs of ``--plot DIR`` (:data:`PLOT_FILES`)
through a temporary file in the target folder and a rename; existing files are
kept unless ``force`` is given, and :func:`check_plot_folder` refuses a bad
folder before the run.
"""

from __future__ import annotations

import contextlib
import io
import math
import os
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import (
    AutoMinorLocator,
    EngFormatter,
    FixedLocator,
    FuncFormatter,
    MaxNLocator,
    PercentFormatter,
)
from numpy.typing import ArrayLike

from picker.api.results import SolveResult
from picker.calibration.result import CalibrationResult
from picker.errors import SpecError
from picker.files import check_output
from picker.report.calibration import parameter_text
from picker.units import format_quantity, parse_quantity

#: File names written into the ``--plot`` folder.
PLOT_FILES = ("histogram.png", "yield_vs_tolerance.png", "drivers.png")

_SIZE = (7.0, 4.2)  # inches; at 120 dpi a 840 x 504 PNG
_DPI = 120
_WINDOW = "#2a9d8f"
_OUT = "#e76f51"
_IN = "#264653"


def _axes(ax: Axes | None, size: tuple[float, float]) -> tuple[Figure, Axes, bool]:
    """The figure and axes to draw on: ``ax``'s own, or a new Agg figure (``True``)."""
    if ax is not None:
        fig = ax.get_figure()
        assert isinstance(fig, Figure)
        return fig, ax, False
    fig = Figure(figsize=size)
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot(), True


def _finish(fig: Figure, own: bool, path: str | Path | None) -> Figure:
    """Lay out a figure made here; write it as PNG when ``path`` is given."""
    if own:
        fig.tight_layout()
    if path is not None:
        save_png(fig, path)
    return fig


def save_png(fig: Figure, path: str | Path) -> Path:
    """Write ``fig`` as a PNG (no time stamp, so the same figure gives the same bytes)."""
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    if fig.canvas is None or not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    fig.savefig(p, format="png", dpi=_DPI, metadata={"Software": None})
    return p


def png_bytes(fig: Figure) -> bytes:
    """``fig`` as PNG bytes (for embedding in a report)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, metadata={"Software": None})
    return buf.getvalue()


def _places(span: float, centre: float) -> int:
    """Decimal places EngFormatter needs so that ticks over ``span`` stay distinct."""
    if span <= 0 or centre <= 0:
        return 1
    scale = 10 ** (3 * np.floor(np.log10(centre) / 3))  # the engineering prefix's unit
    return int(min(6, max(0, np.ceil(-np.log10(span / scale / 5)))))


def edge_label(x: float, unit: str = "Hz") -> str:
    """The shortest engineering text of ``x`` that reads back as ``x`` (to 1e-9).

    A tick at a window edge must name the edge itself, not a rounding of it
    (1.025 MHz, not 1.02 MHz).
    """
    for digits in range(3, 13):
        text = format_quantity(x, unit, digits=digits)
        if abs(parse_quantity(text, unit) / x - 1.0) < 1e-9:
            return text
    return format_quantity(x, unit, digits=12)


def plot_histogram(
    f_samples: ArrayLike,
    f_min: float,
    f_max: float,
    target: float,
    path: str | Path | None = None,
    title: str = "Monte Carlo frequency spread",
    *,
    bins: int = 80,
    ax: Axes | None = None,
) -> Figure:
    """Histogram of the simulated boards' frequencies with the window marked.

    Parameters
    ----------
    f_samples : array_like, shape (samples,)
        Frequency of each simulated board, Hz (at the worst temperature, or 25 °C); NaN
        for a board that does not run (counted in the share, outside the window).
    f_min, f_max : float
        The frequency window, Hz.
    target : float
        Target frequency, Hz.
    path : str or pathlib.Path, optional
        PNG file to write (none when omitted).
    title : str
    bins : int
    ax : matplotlib.axes.Axes, optional
        Draw on these axes instead of a new figure.

    Returns
    -------
    matplotlib.figure.Figure
        The figure drawn on. Major ticks sit at the window edges and the target,
        each labelled to as many digits as it needs (:func:`edge_label`); under a
        fifth of the axis the target's label is left out, and under a
        twentieth (boards far outside the window) the ticks are plain and the
        note in the corner names the edges.
    """
    f = np.asarray(f_samples, dtype=float).ravel()
    n_all = f.size  # NaN: a board that does not run (counted outside the window)
    f = f[np.isfinite(f)]
    idle = n_all - f.size
    inside = (f >= f_min) & (f <= f_max)
    lo = min(f.min(initial=f_min), f_min)
    hi = max(f.max(initial=f_max), f_max)
    pad = 0.04 * (hi - lo) if hi > lo else 0.01 * target
    edges = np.linspace(lo - pad, hi + pad, bins + 1)
    fig, ax, own = _axes(ax, _SIZE)
    weights = np.full(f.size, 100.0 / max(n_all, 1))
    ax.hist(f[inside], edges.tolist(), weights=weights[inside], color=_IN, label="in window")
    ax.hist(f[~inside], edges.tolist(), weights=weights[~inside], color=_OUT, label="outside")
    ax.axvspan(f_min, f_max, color=_WINDOW, alpha=0.15, lw=0)
    for x in (f_min, f_max):
        ax.axvline(x, color=_WINDOW, lw=1.5)
    ax.axvline(
        target, color="black", lw=1, ls="--", label=f"target {format_quantity(target, 'Hz')}"
    )
    share_of_axis = (f_max - f_min) / (edges[-1] - edges[0])
    marks = sorted({f_min, target, f_max} if f_min < target < f_max else {f_min, f_max})
    if share_of_axis < 0.2:  # no room for three labels: the edges only, written outwards
        marks = [f_min, f_max]
    if share_of_axis >= 0.05:
        ax.xaxis.set_major_locator(FixedLocator(marks))
        labels = {m: edge_label(m) for m in marks}
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: labels.get(v, "")))
        ax.xaxis.set_minor_locator(AutoMinorLocator(4))
        if len(marks) == 2:
            first, last = ax.xaxis.get_major_ticks()[:2]
            first.label1.set_horizontalalignment("right")
            last.label1.set_horizontalalignment("left")
    else:  # boards far outside a narrow window: plain ticks; the note names the edges
        ax.xaxis.set_major_locator(MaxNLocator(nbins=5))
        ax.xaxis.set_major_formatter(EngFormatter(unit="Hz", places=_places(hi - lo, target)))
        marks = [target]
    ax.set_ylim(0, 1.4 * ax.get_ylim()[1])  # head room for the legend and the note
    ax.set_xlabel("board frequency")
    ax.set_ylabel("share of boards per bin")
    ax.yaxis.set_major_formatter(PercentFormatter(decimals=1))
    if f.size == 0:  # no board runs: an empty axis has no shares to mark
        ax.set_yticks([])

    def to_dev(x: ArrayLike) -> np.ndarray:
        return (np.asarray(x, dtype=float) / target - 1.0) * 100.0

    def from_dev(d: ArrayLike) -> np.ndarray:
        return target * (1.0 + np.asarray(d, dtype=float) / 100.0)

    top = ax.secondary_xaxis("top", functions=(to_dev, from_dev))
    top.set_xticks([float(to_dev(m)) for m in marks])
    top.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:+.4g} %"))
    top.set_xlabel("deviation from target")
    share = inside.sum() / n_all if n_all else 0.0
    note = f"\n{idle} boards do not run steady" if idle else ""
    ax.text(
        0.01,
        0.97,
        f"window {format_quantity(f_min, 'Hz')} – {format_quantity(f_max, 'Hz')}\n"
        f"{share:.2%} of {n_all} boards inside{note}",
        transform=ax.transAxes,
        va="top",
        fontsize=9,
        bbox={"facecolor": "white", "alpha": 0.8, "lw": 0},
    )
    ax.legend(loc="upper right", fontsize=8, framealpha=0.8)
    ax.set_title(title, fontsize=11)
    return _finish(fig, own, path)


def plot_yield_vs_tolerance(
    data: Mapping[str, Sequence[Sequence[float]]],
    path: str | Path | None = None,
    title: str = "Yield against tolerance class",
    *,
    current: Mapping[str, float] | None = None,
    ax: Axes | None = None,
) -> Figure:
    """Yield against the tolerance of each position (others kept as they are).

    Parameters
    ----------
    data : mapping position -> sequence of rows
        Each row is ``(tolerance, yield)`` or ``(tolerance, yield, ci_low, ci_high)``,
        fractions (0.05 = 5 %).
    path : str or pathlib.Path, optional
        PNG file to write (none when omitted).
    title : str
    current : mapping position -> float, optional
        The design's present tolerance per position, marked with a ring.
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax, own = _axes(ax, _SIZE)
    markers = "osD^vP*X"
    ticks: set[float] = set()
    for i, (pos, rows) in enumerate(data.items()):
        arr = np.asarray(sorted(tuple(map(float, r)) for r in rows), dtype=float)
        if arr.size == 0:
            continue
        t, y = arr[:, 0] * 100, arr[:, 1] * 100
        ticks.update(float(v) for v in t)
        line = ax.plot(t, y, marker=markers[i % len(markers)], label=pos)[0]
        if arr.shape[1] >= 4:
            err = np.vstack([y - arr[:, 2] * 100, arr[:, 3] * 100 - y])
            ax.errorbar(
                t, y, yerr=np.clip(err, 0, None), fmt="none", ecolor=line.get_color(), capsize=3
            )
        if current and pos in current:
            k = np.argmin(np.abs(arr[:, 0] - current[pos]))
            ax.plot(t[k], y[k], "o", ms=12, mfc="none", mec=line.get_color(), mew=1.5)
    ax.set_xscale("log")
    ax.invert_xaxis()  # tighter parts to the right
    ax.set_xticks(sorted(ticks))  # one labelled tick per tolerance class plotted
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g} %"))
    ax.xaxis.set_minor_formatter(FuncFormatter(lambda v, _: ""))
    ax.tick_params(axis="x", which="minor", length=0)
    ax.set_xlabel("tolerance of the position (±, tighter →)")
    ax.set_ylabel("yield")
    ax.yaxis.set_major_formatter(PercentFormatter(decimals=0))
    lo, hi = ax.get_ylim()
    hi = min(100.0, hi) + 2
    if hi - lo < 10:  # flat yields (all near 0 % or 100 %): a readable band, whole per cents
        lo, hi = max(-2.0, hi - 12), max(hi, 10.0)
    ax.set_ylim(lo, hi)
    ax.grid(True, alpha=0.3)
    ax.legend(title="position", fontsize=9)
    ax.set_title(title, fontsize=11)
    return _finish(fig, own, path)


def _or_nan(x: float | None) -> float:
    return math.nan if x is None else float(x)


def plot_drivers(
    shares: Mapping[str, float],
    path: str | Path | None = None,
    title: str = "What drives the frequency spread",
    *,
    confirm: Mapping[str, float] | None = None,
    ax: Axes | None = None,
) -> Figure:
    """Horizontal bars: each input's share of the frequency variance.

    Parameters
    ----------
    shares : mapping name -> float
        First-order shares (fractions summing to one).
    path : str or pathlib.Path, optional
        PNG file to write (none when omitted).
    title : str
    confirm : mapping name -> float, optional
        Monte Carlo shares, drawn as markers beside the bars.
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    names = sorted(shares, key=lambda k: (float(shares[k]), k))
    vals = np.array([float(shares[k]) for k in names]) * 100
    fig, ax, own = _axes(ax, (_SIZE[0], max(2.4, 0.55 * len(names) + 1.4)))
    y = np.arange(len(names))
    ax.barh(y, vals, color=_IN, label="first order")
    # a Monte Carlo share is None (NaN) where fewer than two boards oscillate
    cv = np.array([float(_or_nan(confirm.get(k))) * 100 for k in names]) if confirm else None
    if cv is not None and not np.any(np.isfinite(cv)) and not np.any(vals > 0):
        # no board oscillates (the Monte Carlo shares are None): no bars, and say why
        ax.text(
            0.5,
            0.5,
            "no simulated board oscillates steadily:\nno spread to apportion",
            transform=ax.transAxes,
            ha="center",
            va="center",
            fontsize=10,
        )
        cv, vals = None, np.array([])
    for i, (yi, v) in enumerate(zip(y[: vals.size], vals, strict=True)):
        right = v if cv is None or not np.isfinite(cv[i]) else max(v, cv[i])
        label = f"{v:.1f} %"
        if cv is not None and np.isfinite(cv[i]):
            label += f" (MC {cv[i]:.1f} %)"
        ax.text(float(right) + 2.5, float(yi), label, va="center", fontsize=9)
    if cv is not None:
        ax.plot(cv, y, "D", color=_OUT, ms=6, label="Monte Carlo", zorder=3)
        ax.legend(loc="lower right", fontsize=8)
    ax.set_yticks(y, names)
    ax.set_xlim(0, 125)
    ax.set_xticks(np.arange(0, 101, 20))
    ax.xaxis.set_major_formatter(PercentFormatter(decimals=0))
    ax.set_xlabel("share of the variance of ln f")
    ax.set_title(title, fontsize=11)
    ax.grid(True, axis="x", alpha=0.3)
    return _finish(fig, own, path)


def format_value(value: float, unit: str) -> str:
    """A part value as engineering text for a plot title (``4.7 nF``)."""
    return format_quantity(value, unit)


def _title(result: SolveResult) -> str:
    """The best design's parts, ``C1 4.7 nF, C2 …``, for the plot titles."""
    c = result.candidates[0]
    return ", ".join(f"{p} {format_value(pp.value, pp.unit)}" for p, pp in c.parts.items())


def result_figures(result: SolveResult) -> dict[str, Figure]:
    """The three figures of the best design, keyed by their ``--plot`` file names.

    The result must come from ``solve(..., plot_data=True)`` (or ``evaluate``).

    Raises
    ------
    SpecError
        The result holds no design or no plot data.
    """
    if not result.candidates or result.plot_data is None:
        raise SpecError(
            "no design to plot (solve or evaluate with plot_data=True)", key="plot_data"
        )
    pd = result.plot_data
    title = _title(result)
    temp = pd["temperature_c"]
    rng = result.spec.yield_.temperature
    where = f" at {temp:g} °C" if rng is not None else ""
    over = f" ({rng[0]:g} °C .. {rng[1]:g} °C)" if rng is not None else ""
    return {
        "histogram.png": plot_histogram(
            pd["frequencies"],
            pd["f_min"],
            pd["f_max"],
            pd["target"],
            title=f"Monte Carlo frequency spread{where}: {title}",
        ),
        "yield_vs_tolerance.png": plot_yield_vs_tolerance(
            pd["sweep"],
            title=f"Yield{over} against tolerance class: {title}",
            current=pd["tolerances"],
        ),
        "drivers.png": plot_drivers(
            pd["drivers"],
            title=f"What drives the frequency spread: {title}",
            confirm=pd["drivers_mc"],
        ),
    }


def check_plot_folder(
    directory: Path, *, force: bool = False, inputs: Iterable[str | Path] = ()
) -> list[Path]:
    """Refuse a --plot folder before any work: a file, an existing PNG without
    ``force``, a PNG that is one of ``inputs``. Returns the PNG paths."""
    d = Path(directory)
    if d.exists() and not d.is_dir():
        raise SpecError("expected a folder for the plots, got a file", file=str(d), key="--plot")
    targets = [d / name for name in PLOT_FILES]
    if d.is_dir():
        for t in targets:
            check_output(t, force=force, inputs=inputs, key="--plot")
    return targets


def write_plots(
    result: SolveResult,
    directory: Path,
    *,
    force: bool = False,
    inputs: Iterable[str | Path] = (),
) -> list[Path]:
    """Write the histogram, yield-vs-tolerance and driver PNGs of the best design.

    Raises
    ------
    SpecError
        ``directory`` is a file, a PNG exists and ``force`` is not given, a PNG
        would replace one of ``inputs``, the folder cannot be made or written,
        or the result holds no design.
    """
    d = Path(directory)
    targets = check_plot_folder(d, force=force, inputs=inputs)
    if not result.candidates or result.plot_data is None:
        raise SpecError("no design to plot", key="--plot")
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SpecError(
            f"cannot make the folder ({exc.strerror or exc})", file=str(d), key="--plot"
        ) from None
    figures = result_figures(result)
    written = []
    for t in targets:
        tmp = d / f".{t.stem}.{os.getpid()}.tmp.png"  # same folder: the rename is atomic
        try:
            save_png(figures[t.name], tmp)
            if force:
                os.replace(tmp, t)
            else:  # an exclusive link: a PNG made meanwhile by another run is not replaced
                os.link(tmp, t)
                os.unlink(tmp)
        except BaseException as exc:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            if isinstance(exc, OSError):
                raise SpecError(
                    f"cannot write the file ({exc.strerror or exc})", file=str(t), key="--plot"
                ) from None
            raise
        written.append(t)
    return written


def plot_residuals(r: CalibrationResult) -> bytes:
    """A PNG of the residuals of a calibration: per unit with ±2s bars, and against frequency.

    Returns the PNG bytes (the caller writes them with :func:`picker.files.atomic_write`).
    """
    ppm = r.residual_ppm
    if r.sigma is None:
        band = np.full(ppm.shape, 2 * r.residual_scale)  # s is in ppm already
    else:
        band = 2 * r.residual_scale * 1e6 * r.sigma / r.f_fitted
    band = np.where(np.isfinite(band), band, 0.0)
    bad = np.array([u in r.outliers for u in r.unit_ids])
    x = np.arange(len(r.unit_ids))

    fig = Figure(figsize=(9, 4.2), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
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
        a.errorbar(
            x[~bad],
            ppm[~bad],
            yerr=band[~bad],
            fmt="o",
            color="tab:blue",
            capsize=3,
            label="unit (±2 s·sigma)",
        )
        if bad.any():
            a.errorbar(
                x[bad],
                ppm[bad],
                yerr=band[bad],
                fmt="s",
                color="tab:red",
                capsize=3,
                label="outlier",
            )
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
        f"{p.name} = {parameter_text(p.unit, p.estimate)}" for p in r.parameters if p.fitted
    )
    fig.suptitle(f"Calibration residuals, {r.topology} tank ({r.loss} loss): {est}", fontsize=10)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", metadata={"Software": None})
    return buf.getvalue()
