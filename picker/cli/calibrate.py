"""``picker calibrate``: learn the board's parasitics from measured units.

Thin typer command over :mod:`picker.calibration.measurements`, :mod:`picker.calibration.fit`
and :mod:`picker.report.calibration` (:mod:`picker.report.plots` for ``--plot``). Every fault is a
:class:`~picker.errors.SpecError`; ``picker.cli.main.main`` turns it into one line
and exit status 2. Files are written atomically, never over an input, and never
over an existing file without ``--force``.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import IO, TYPE_CHECKING

import typer
from rich.console import Console

from picker.cli.options import spec_inputs
from picker.errors import SpecError
from picker.files import atomic_write

if TYPE_CHECKING:
    import numpy as np

    from picker.calibration.measurements import Measurements
    from picker.calibration.result import CalibrationResult
    from picker.spec.model import Spec
    from picker.tank.base import Topology

__all__ = ["calibrate_cmd", "run_calibrate"]

_LOSSES = ("soft_l1", "huber")
#: The parasitics the default fit chooses from, in order of preference.
CANDIDATES = ("stray", "l_scale", "c2_shunt")


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


def _board_model(spec: Spec, topo: Topology) -> Callable[[Mapping[str, np.ndarray]], np.ndarray]:
    """The frequency of boards as ``solve`` models them: the spec's ``[amplifier]`` loaded model.

    :func:`picker.circuit.steady.steady_state` on the board values the fit
    passes (marked values with the parasitics applied, and ``"stray"``);
    its ``f_hz`` is NaN for a board that does not start.
    """
    import numpy as np

    from picker.api.problem import amplifier_params_of
    from picker.circuit.steady import steady_state

    params = amplifier_params_of(spec)
    assert params is not None  # the caller checked spec.amplifier

    def model(eff: Mapping[str, np.ndarray]) -> np.ndarray:
        with np.errstate(all="ignore"):
            board = {p: eff[p] for p in topo.positions}
            return np.asarray(steady_state(topo, board, eff["stray"], params).f_hz, dtype=float)

    return model


def run_calibrate(
    measurements: Path,
    *,
    topology: str | None = None,
    spec: Path | None = None,
    fit: str | None = None,
    robust: str | None = None,
    fmt: str = "table",
    fragment: Path | None = None,
    into: Path | None = None,
    output: Path | None = None,
    plot: Path | None = None,
    every_unit: bool = False,
    force: bool = False,
    out: IO[str] | None = None,
    report: Path | None = None,
) -> int:
    """What ``picker calibrate`` does; returns the exit status (0)."""
    # numpy, scipy and pydantic: imported here, so that ``picker --help`` stays fast
    from picker.calibration import fit as calibrate
    from picker.calibration.measurements import load_measurements
    from picker.files import check_output, read_text
    from picker.report import calibration as calibrate_report
    from picker.spec.load import load_spec, spec_from_dict
    from picker.tank import get_topology

    fmt_l = fmt.strip().lower()
    if fmt_l not in ("table", "json"):
        raise SpecError(f"expected table or json; got {fmt!r}", key="--format")
    loss = "linear"
    if robust is not None:
        loss = robust.strip().lower().replace("-", "_")
        if loss not in _LOSSES:
            raise SpecError(f"expected soft_l1 or huber; got {robust!r}", key="--robust")
    for path, key in ((spec, "--spec"), (into, "--into")):
        if path is not None and not str(path).strip():
            raise SpecError("expected a spec file name; got a blank one", key=key)
    select = fit is None
    names = CANDIDATES if fit is None else _parse_fit(fit)
    if (into is None) != (output is None):
        raise SpecError(
            "--into SPEC and -o NEW.toml go together: the new spec is SPEC with the fitted "
            "[parasitics] merged in",
            key="-o" if output is None else "--into",
        )
    if into is not None and spec is not None and into.resolve() != spec.resolve():
        raise SpecError(
            f"--into {into} and --spec {spec} name different specs; give one",
            key="--into",
        )
    spec = spec if spec is not None else into

    fixed: dict[str, float] = {}
    extra: list[str] = []
    model = None
    s = None
    if spec is not None:
        s = load_spec(spec)
        topo = s.topo  # with its [tank] settings (a Hartley's coupling)
        if topology is not None and get_topology(topology).name != topo.name:
            raise SpecError(
                f"--topology {topology} disagrees with the spec's topology {topo.name!r}",
                key="--topology",
            )
        fixed = {k: float(getattr(s.parasitics, k)) for k in calibrate.PARAMETERS}
        held = [k for k in calibrate.PARAMETERS if k not in names]
        if any(fixed[k] != calibrate.DEFAULTS[k] for k in held):
            extra.append(f"parasitics not fitted are held at the spec's values ({spec.name}).")
        if s.amplifier is not None:
            model = _board_model(s, topo)
            extra.append(
                f"fitted against the loaded board model of {spec.name}'s [amplifier] section "
                "(the frequency solve uses), not the ideal tank."
            )
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
    if select:  # a shunt is a candidate only where the tank has a capacitor for it
        names = tuple(
            n for n in names if n not in ("c1_shunt", "c2_shunt") or n in topo.shunt_targets()
        )
    else:
        for n in names:
            if n in ("c1_shunt", "c2_shunt") and n not in topo.shunt_targets():
                raise SpecError(
                    f"a {topo.name} tank has no {n}: its ends are not capacitors", key="--fit"
                )

    inputs = [measurements] + (spec_inputs(spec) if spec is not None else [])
    if report is not None:  # refused before the fit and the other files
        from picker.cli.options import check_report

        check_report(report, force, inputs)
    outputs = [(fragment, "--fragment"), (plot, "--plot"), (output, "-o")]
    named = [(p.resolve(), k) for p, k in outputs if p is not None]
    for i, (a, ka) in enumerate(named):  # two outputs into one file: refuse before the run
        for b, kb in named[i + 1 :]:
            if a == b:
                raise SpecError(f"{ka} and {kb} name the same file", file=str(b), key=kb)
    for p, k in outputs:
        if p is not None:
            check_output(p, force=force, inputs=inputs, key=k)
    m = load_measurements(measurements, topo)
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
            model=model,
            select=select,
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
    if into is not None and output is not None:
        merged = calibrate_report.merge_into_spec(
            read_text(into, what="a spec file"), result, source=measurements.name
        )
        _check_merged(merged, result, output, spec_from_dict)
        atomic_write(output, merged, force=force, inputs=inputs, key="-o")
    if plot is not None:
        from picker.report.plots import plot_residuals  # matplotlib: only for --plot

        atomic_write(plot, plot_residuals(result), force=force, inputs=inputs, key="--plot")
    if report is not None:
        from picker.cli.options import command_line
        from picker.report.html import write_report  # matplotlib: only for --report

        cmd = command_line("calibrate", measurements)
        write_report(report, result, inputs=inputs, command=cmd, notes=extra, force=force)

    stream = out if out is not None else sys.stdout
    if fmt_l == "json":
        calibrate_report.write_json(
            result, stream, source=measurements.name, rows=m.rows, extra_notes=extra
        )
    else:
        console = Console(file=stream, width=120, highlight=False)
        calibrate_report.print_table(result, console, extra_notes=extra, every_unit=every_unit)
        for p in (fragment, output, plot):
            if p is not None:
                console.print(f"wrote {p}", markup=False)
        if report is not None:
            console.print(f"wrote {report}", markup=False)
    return 0


def _check_merged(
    text: str, result: CalibrationResult, output: Path, loader: Callable[..., Spec]
) -> None:
    """Refuse a merged spec that would not load from ``output`` or lost the fitted values."""
    import tomllib

    from picker.units import parse_quantity

    try:
        data = tomllib.loads(text)
        spec = loader(data, file=str(output))
    except (tomllib.TOMLDecodeError, SpecError) as exc:
        why = exc.message if isinstance(exc, SpecError) else str(exc)
        raise SpecError(
            f"the spec with the fitted [parasitics] merged in would not load ({why}); "
            "write [parasitics] as a table of its own in the spec, and -o beside it if it "
            "names other files",
            file=str(output),
            key="-o",
        ) from None
    for p in result.parameters:
        if not p.fitted:
            continue
        written = data.get("parasitics", {}).get(p.name)
        want = parse_quantity(written, "F") if isinstance(written, str) else float(written or 0.0)
        if getattr(spec.parasitics, p.name) != want:  # pragma: no cover - a merge fault
            raise SpecError(
                f"the merged spec does not carry the fitted {p.name}", file=str(output), key="-o"
            )


def calibrate_cmd(
    measurements: Path = typer.Argument(
        ...,
        metavar="UNITS",
        help="CSV of built units: C1, C2, [C3,] L, frequency; optional unit, measured, "
        "frequency_sigma or weight, note.",
    ),
    topology: str | None = typer.Option(
        None, "--topology", help="The tank: colpitts or clapp (or give --spec)."
    ),
    spec: Path | None = typer.Option(
        None,
        "--spec",
        help="A spec file: its topology, its parasitics for those held, and with an "
        "[amplifier] section the loaded board model solve uses.",
    ),
    fit: str | None = typer.Option(
        None,
        "--fit",
        help="Fit exactly these parasitics, in order of preference (stray, c1_shunt, "
        "c2_shunt, l_scale). Default: those of stray, l_scale, c2_shunt the data support "
        "(extra-sum-of-squares F-test at 5 %).",
    ),
    robust: str | None = typer.Option(
        None, "--robust", help="A robust loss against outliers: soft_l1 or huber."
    ),
    fmt: str = typer.Option("table", "--format", help="table or json."),
    fragment: Path | None = typer.Option(
        None, "--fragment", help="Write a [parasitics] TOML section for a spec here."
    ),
    into: Path | None = typer.Option(
        None,
        "--into",
        help="A spec to merge the fitted [parasitics] into (it is read, never changed; "
        "implies --spec); the new spec goes to -o.",
    ),
    output: Path | None = typer.Option(
        None, "-o", "--output", help="With --into: where to write the new spec (.toml)."
    ),
    plot: Path | None = typer.Option(None, "--plot", help="Write a residual plot (PNG) here."),
    every_unit: bool = typer.Option(
        False,
        "--every-unit",
        help="List every unit's residual; by default a batch of more than 50 units is "
        "summarised (its 10 largest residuals).",
    ),
    force: bool = typer.Option(False, "--force", help="Replace existing output files."),
    report: Path | None = typer.Option(
        None, "--report", help="Also write a self-contained HTML report (FILE.html)."
    ),
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
        into=into,
        output=output,
        plot=plot,
        every_unit=every_unit,
        force=force,
        report=report,
    )
