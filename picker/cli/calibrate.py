"""``picker calibrate``: learn the board's parasitics from measured units.

Thin typer command over :mod:`picker.calibration.measurements`, :mod:`picker.calibration.fit`
and :mod:`picker.report.calibration` (:mod:`picker.report.plots` for ``--plot``). Every fault is a
:class:`~picker.errors.SpecError`; ``picker.cli.main.main`` turns it into one line
and exit status 2. Files are written atomically, never over an input, and never
over an existing file without ``--force``.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import IO, TYPE_CHECKING

import typer
from rich.console import Console

from picker.cli.options import spec_inputs
from picker.errors import SpecError
from picker.files import atomic_write

if TYPE_CHECKING:
    from picker.calibration.measurements import Measurements

__all__ = ["calibrate_cmd", "run_calibrate"]

_LOSSES = ("soft_l1", "huber")


def _parse_fit(text: str) -> tuple[str, ...]:
    from picker.calibration.fit import PARAMETERS  # scipy: not at start-up

    names = tuple(w.strip().lower() for w in text.replace(" ", ",").split(",") if w.strip())
    bad = [w for w in names if w not in PARAMETERS]
    if bad or not names:
        raise SpecError(
            f"expected a comma-separated list from {', '.join(PARAMETERS)}; got {text!r}",
            key="--fit",
        )
    if len(set(names)) != len(names):
        raise SpecError(f"each parasitic may be named once; got {text!r}", key="--fit")
    return names


def _marked_note(m: Measurements) -> list[str]:
    marked = [p for p in m.values if not m.measured[p].all()]
    if not marked:
        return []
    return [
        f"marked, not measured, on some units: {', '.join(marked)}; their tolerances add "
        "scatter to the residuals, and a bias of the whole batch is absorbed by the fitted "
        "parasitics."
    ]


def run_calibrate(
    measurements: Path,
    *,
    topology: str | None = None,
    spec: Path | None = None,
    fit: str = "stray,l_scale,c2_shunt",
    robust: str | None = None,
    fmt: str = "table",
    fragment: Path | None = None,
    plot: Path | None = None,
    force: bool = False,
    out: IO[str] | None = None,
) -> int:
    """What ``picker calibrate`` does; returns the exit status (0)."""
    # numpy, scipy and pydantic: imported here, so that ``picker --help`` stays fast
    from picker.calibration import fit as calibrate
    from picker.calibration.measurements import load_measurements
    from picker.report import calibration as calibrate_report
    from picker.spec.load import load_spec
    from picker.tank import get_topology

    fmt_l = fmt.strip().lower()
    if fmt_l not in ("table", "json"):
        raise SpecError(f"expected table or json; got {fmt!r}", key="--format")
    loss = "linear"
    if robust is not None:
        loss = robust.strip().lower().replace("-", "_")
        if loss not in _LOSSES:
            raise SpecError(f"expected soft_l1 or huber; got {robust!r}", key="--robust")
    names = _parse_fit(fit)

    fixed: dict[str, float] = {}
    extra: list[str] = []
    if spec is not None:
        s = load_spec(spec)
        topo = get_topology(s.topology)
        if topology is not None and get_topology(topology).name != topo.name:
            raise SpecError(
                f"--topology {topology} disagrees with the spec's topology {topo.name!r}",
                key="--topology",
            )
        fixed = {k: float(getattr(s.parasitics, k)) for k in calibrate.PARAMETERS}
        held = [k for k in calibrate.PARAMETERS if k not in names]
        if any(fixed[k] != calibrate.DEFAULTS[k] for k in held):
            extra.append(f"parasitics not fitted are held at the spec's values ({spec.name}).")
    elif topology is not None:
        try:
            topo = get_topology(topology)
        except SpecError as exc:
            raise SpecError(exc.message, key="--topology") from None
    else:
        raise SpecError(
            "say which tank the units are: --topology colpitts|clapp or --spec SPEC.toml",
            key="--topology",
        )

    m = load_measurements(measurements, topo)
    inputs = [measurements] + (spec_inputs(spec) if spec is not None else [])
    if fragment is not None and plot is not None and fragment.resolve() == plot.resolve():
        raise SpecError("--fragment and --plot name the same file", file=str(plot), key="--plot")
    try:
        result = calibrate.fit_parasitics(
            topo,
            m.values,
            m.frequency,
            sigma=m.sigma(),
            fit=names,
            fixed=fixed,
            loss=loss,
            unit_ids=m.unit_ids,
        )
    except SpecError as exc:  # too few or unusable units: a fault of the measurements file
        raise exc.located(file=str(measurements)) from None
    extra += _marked_note(m)

    # write files first, so a refused write leaves no half-finished report behind
    if fragment is not None:
        atomic_write(
            fragment,
            calibrate_report.fragment_toml(result, source=measurements.name),
            force=force,
            inputs=inputs,
            key="--fragment",
        )
    if plot is not None:
        from picker.report.plots import plot_residuals  # matplotlib: only for --plot

        atomic_write(plot, plot_residuals(result), force=force, inputs=inputs, key="--plot")

    stream = out if out is not None else sys.stdout
    if fmt_l == "json":
        stream.write(
            calibrate_report.to_json(
                result, source=measurements.name, rows=m.rows, extra_notes=extra
            )
        )
    else:
        console = Console(file=stream, width=120, highlight=False)
        calibrate_report.print_table(result, console, extra_notes=extra)
        if fragment is not None:
            console.print(f"wrote {fragment}", markup=False)
        if plot is not None:
            console.print(f"wrote {plot}", markup=False)
    return 0


def calibrate_cmd(
    measurements: Path = typer.Argument(
        ...,
        help="CSV of built units: C1, C2, [C3,] L, frequency; optional unit, measured, "
        "frequency_sigma or weight, note.",
    ),
    topology: str | None = typer.Option(
        None, "--topology", help="The tank: colpitts or clapp (or give --spec)."
    ),
    spec: Path | None = typer.Option(
        None, "--spec", help="A spec file: its topology, and its parasitics for those held."
    ),
    fit: str = typer.Option(
        "stray,l_scale,c2_shunt",
        "--fit",
        help="Parasitics to fit, in order of preference (stray, c1_shunt, c2_shunt, l_scale).",
    ),
    robust: str | None = typer.Option(
        None, "--robust", help="A robust loss against outliers: soft_l1 or huber."
    ),
    fmt: str = typer.Option("table", "--format", help="table or json."),
    fragment: Path | None = typer.Option(
        None, "--fragment", help="Write a [parasitics] TOML section for a spec here."
    ),
    plot: Path | None = typer.Option(None, "--plot", help="Write a residual plot (PNG) here."),
    force: bool = typer.Option(False, "--force", help="Replace existing output files."),
) -> None:
    """Learn the board's parasitics from the frequencies of built units."""
    run_calibrate(
        measurements,
        topology=topology,
        spec=spec,
        fit=fit,
        robust=robust,
        fmt=fmt,
        fragment=fragment,
        plot=plot,
        force=force,
    )
