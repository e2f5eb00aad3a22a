"""``picker netlist`` and ``picker simulate``: SPICE export and the ngspice cross-check.

Registered on the main app by :func:`register` (see picker.cli.main). Both commands
take the part values from ``--set POS=VALUE`` (every position) or, without
``--set``, from the top design of a solve of the spec. The spec must have an
``[amplifier]`` section. ``netlist`` writes to standard output without ``-o``.

Also the ``--verify`` report of ``solve`` and ``evaluate`` (:func:`run_verify`,
:func:`verify_text`): the top designs in ngspice at nominal and two tolerance corners,
measured as ``simulate`` measures (:mod:`picker.circuit.waveform`).
"""

from __future__ import annotations

import json
import math
import sys
import time
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer
from rich.console import Console

from picker.cli.options import check_format, parse_assignments, spec_inputs, unit_of
from picker.errors import InfeasibleError, SpecError
from picker.files import atomic_write, check_output

#: Printed where a board bursts: its carrier is what the bursts average to, and on short,
#: irregular bursts that moves with the simulator's step and the run's length
#: (tests/validation/README.md: the Hartley set's hy015 read 790-1114 kHz, hy016
#: 66.6-72.7 kHz, in ngspice runs of one netlist).
BURST_CARRIER_CAUTION = (
    "caution: a bursting board's carrier is an average over its bursts; where they are short "
    "and irregular it moves by several per cent with the simulator's step and the run's "
    "length: read it as a rough figure (a board that bursts fails anyway)"
)
#: Printed where ngspice's steady carrier still moved across the measured tail by more
#: than picker.circuit.ngspice.SETTLING_DRIFT (tests/validation/README.md: the series
#: Hartley set's hs021, as first drawn, moved -0.44 % across its record's tail and settled
#: 1.4 % lower).
SETTLING_CAUTION = (
    "caution: ngspice's carrier still moved by {drift} from the first half of the measured "
    "tail to the second{where}: the bias was still settling when the run ended (a slow time "
    "constant, such as the collector coupling capacitor charging through the base divider), "
    "so the carrier read is not the board's final one"
)
#: The note where a board's planned run still drifted and a longer run is reported
#: (picker.circuit.verify.settled_run).
LENGTHENED_NOTE = (
    "note: ngspice's carrier still moved by {drift} across the planned run's measured "
    "tail (the bias was settling), so {what} run {longer}, and the longer run's tail, read "
    "over the same span, is reported"
)
#: The note beside a model column read from the board's own circuit run from rest
#: (picker.circuit.burst_carrier.run_hint) rather than from its steady solution.
RUN_FROM_REST_NOTE = (
    "note: the model's carrier, amplitude and start-up time{which} come from the board's "
    "own circuit run "
    "from rest (the steady solution bursts there, does not exist, its orbit did not "
    "converge, or its waveform is too far from a sine for the steady solution), measured "
    "as ngspice's run is"
)

if TYPE_CHECKING:
    from rich.console import JustifyMethod

    from picker.api.results import SolveResult
    from picker.api.verify import DesignCheck
    from picker.circuit.amplifier import AmplifierParams
    from picker.circuit.verify import BoardCheck
    from picker.spec.model import Spec
    from picker.tank.base import Topology
    from picker.tank.board import Parasitics

# The numeric modules (numpy, scipy, the solver; picker.units uses numpy) are imported
# inside the commands, so that the command line starts without them.


def _design(
    spec_path: Path, sets: list[str]
) -> tuple[Spec, Topology, dict[str, float], dict[str, Any], Parasitics, AmplifierParams]:
    """The spec, its topology, the part values (``--set`` or the top design), the board
    values (parasitics applied), the parasitics and the amplifier."""
    from picker import api
    from picker.tank.board import board_values  # numpy: not at start-up

    spec = api.load_spec(spec_path)
    if spec.amplifier is None:
        raise SpecError(
            "expected an [amplifier] section (the circuit commands need the transistor stage)",
            file=str(spec_path),
            key="amplifier",
        )
    topo = spec.topo
    if sets:
        values = parse_assignments(sets, "--set", unit_of)
        missing = [p for p in topo.positions if p not in values]
        extra = [p for p in values if p not in topo.positions]
        if missing or extra:
            raise SpecError(
                f"expected a value for each of {', '.join(topo.positions)}; "
                f"got {', '.join(values) or 'none'}",
                key="--set",
            )
    else:
        if sys.stderr.isatty():  # a solve may take minutes: say why nothing shows yet
            typer.echo(f"no --set: solving {spec_path.name} for its top design first", err=True)
        result = api.solve(spec)
        if not result.candidates:
            raise InfeasibleError(  # a valid spec that nothing meets: exit status 1
                f"{spec_path}: no design meets the spec, so there is no top design; run "
                "'picker solve' on it for the nearest misses, or give the values with --set"
            )
        values = dict(result.candidates[0].values)
    params = spec.amplifier.to_params(spec.parts)
    par = api.parasitics_of(spec)
    board = board_values(topo, values, par)  # the parts as the board sees them
    return spec, topo, values, board, par, params


#: The loaded model's figures ``simulate`` prints beside the transient's.
_MODEL_KEYS = (
    "f_ideal_hz",
    "f_loaded_hz",
    "startup_margin",
    "amplitude_v",
    "overdriven",
    "peak_voltage_v",
)


def _model_figures(
    topo: Topology, values: Mapping[str, float], par: Parasitics, params: AmplifierParams
) -> dict[str, Any]:
    """The loaded model's figures of one design as ``solve`` reports them
    (:func:`picker.circuit.figures.nominal_figures`), less its cautions and large-signal
    object: ``simulate``'s transient check gives the run's own."""
    from picker.circuit.figures import nominal_figures

    figures = nominal_figures(topo, values, par, params)
    return {k: figures[k] for k in _MODEL_KEYS}


def _netlist_text(
    spec: Spec,
    spec_path: Path,
    topo: Topology,
    values: Mapping[str, float],
    board: Mapping[str, Any],
    stray: float,
    params: AmplifierParams,
) -> str:
    """The netlist ``simulate`` runs: long enough to see start-up, the settled envelope
    and bursting (:func:`picker.circuit.netlist.verify_plan`)."""
    from picker.circuit.netlist import write_netlist
    from picker.circuit.verify import board_plans

    title = f"{spec.title or spec_path.stem}: " + " ".join(
        f"{p}={values[p]:.6g}" for p in topo.positions
    )
    try:
        _, (plan,) = board_plans(topo, [board], stray, params)
        return write_netlist(topo, board, stray, params, title=title, tstop=plan.tstop)
    except ValueError as exc:
        raise SpecError(str(exc), file=str(spec_path), key="amplifier") from None


def netlist(
    spec_path: Path = typer.Argument(..., metavar="SPEC", help="The spec file (TOML)."),
    set_: list[str] = typer.Option(
        [],
        "--set",
        metavar="POS=VALUE",
        help="A part value, e.g. --set C1=4.7n (repeat for every position). Without --set: "
        "the top design of a solve of SPEC.",
    ),
    output: Path | None = typer.Option(
        None, "-o", "--output", help="Netlist file to write (default: standard output)."
    ),
    force: bool = typer.Option(False, "--force", help="Replace an existing output file."),
) -> None:
    """Write a SPICE netlist of the whole oscillator (bias network, transient, measurements)."""
    if output is not None:
        check_output(
            output, force=force, inputs=spec_inputs(spec_path)
        )  # before the solve, not after
    spec, topo, values, board, par, params = _design(spec_path, set_)
    stray = float(par.stray)
    text = _netlist_text(spec, spec_path, topo, values, board, stray, params)
    if output is None:
        sys.stdout.write(text)
        return
    atomic_write(output, text, force=force, inputs=spec_inputs(spec_path))
    typer.echo(f"wrote {output}")


def _shown(x: float | None, unit: str, digits: int = 6) -> str:
    """``x`` in engineering text, "-" where it is missing or not finite."""
    from picker.units import format_quantity

    return "-" if x is None or not math.isfinite(x) else format_quantity(x, unit, digits=digits)


def _window_note(f: float | None, lo: float, hi: float, target: float) -> tuple[str, Any]:
    """The simulated carrier against the window: a line of text and the JSON figures."""
    if f is None:
        return "no carrier to compare with the window", None
    fig = {
        "from_target": f / target - 1.0,
        "in_window": lo <= f <= hi,
        # signed distance to the nearer edge, relative to the target: + inside, − outside
        "margin_to_edge": min(f - lo, hi - f) / target,
    }
    where = "inside" if fig["in_window"] else ("below" if f < lo else "above")
    edge = abs(fig["margin_to_edge"])
    text = f"{fig['from_target']:+.3%} from the target; {where} the window" + (
        f", {edge:.3%} from its nearer edge" if where == "inside" else f" by {edge:.3%}"
    )
    return text.replace("%", " %"), fig


def simulate(
    spec_path: Path = typer.Argument(..., metavar="SPEC", help="The spec file (TOML)."),
    set_: list[str] = typer.Option(
        [],
        "--set",
        metavar="POS=VALUE",
        help="A part value, e.g. --set C1=4.7n (repeat for every position). Without --set: "
        "the top design of a solve of SPEC (the whole solve runs first).",
    ),
    fmt: str = typer.Option("table", "--format", metavar="FORMAT", help="table or json."),
    timeout: float = typer.Option(
        120.0,
        "--timeout",
        metavar="SECONDS",
        help="Seconds to allow ngspice for the planned run (a run made N times as long "
        "because the carrier had not settled gets N times as many).",
    ),
) -> None:
    """Simulate the oscillator in ngspice and compare with the model and the window.

    Needs an [amplifier] section and ngspice. Prints, model beside ngspice: the carrier
    frequency (from the phase slope, right on clipped or bursting waveforms), the
    amplitude at the tank top, the envelope (steady, bursting, unsettled or none), the
    start-up time, and a verdict: ok, or what fails (does not start, bursts, unsettled,
    outside the window). Where ngspice's steady carrier still moved by more than 0.1 %
    across the measured tail (the bias had not settled), the board is run again four and
    then sixteen times as long, and the longer run is reported with a note; a caution
    follows where even that run has not settled.
    """
    from picker.circuit.ngspice import step_note
    from picker.circuit.verify import check_boards
    from picker.units import format_quantity, json_number

    fmt = check_format(fmt, ("table", "json"))
    if not 0 < timeout <= 3600:  # also refuses nan
        raise SpecError(f"expected seconds between 0 and 3600; got {timeout}", key="--timeout")
    spec, topo, values, board, par, params = _design(spec_path, set_)
    stray = float(par.stray)
    model = _model_figures(topo, values, par, params)
    lo, hi, target = spec.frequency.f_min, spec.frequency.f_max, spec.frequency.target
    try:
        (check,) = check_boards(
            topo, [("nominal", board)], stray, params, window=(lo, hi), workers=1, timeout=timeout
        )
    except ValueError as exc:
        raise SpecError(str(exc), file=str(spec_path), key="amplifier") from None
    sim, wave = check.sim, check.sim.waveform
    f_sim = check.f_sim
    note, window_fig = _window_note(f_sim, lo, hi, target)
    wave_json = wave.to_dict()
    out = {
        "parts": {p: {"value": values[p]} for p in topo.positions},
        **model,
        "large_signal": check.model,
        "simulated": {
            "oscillating": sim.oscillating,
            "f_hz": f_sim,
            "amplitude_v": wave_json["amplitude_v"],
            "envelope": wave.state,
            "modulation": wave_json["modulation"],
            "startup_time_s": wave_json["startup_time_s"],
            "harmonics_dbc": wave_json["harmonics_dbc"],
            "cycles": check.cycles,
            "warnings": list(sim.warnings),
            "carrier_drift": json_number(sim.carrier_drift),
            **step_note(sim),
            **check.lengthened_note(),
        },
        "window": {"f_min_hz": lo, "f_max_hz": hi, **(window_fig or {})},
        "verdict": check.verdict,
    }
    if fmt == "json":
        typer.echo(json.dumps(out, sort_keys=True))
        return

    def hz(x: float | None) -> str:
        return _shown(x, "Hz")

    def sec(x: float | None) -> str:
        return _shown(x, "s")

    def volts(x: float | None) -> str:
        return _shown(x, "V")

    ls = check.model
    parts = "  ".join(f"{p} {format_quantity(values[p], topo.unit(p))}" for p in topo.positions)
    amp_sim = format_quantity(wave.amplitude_v, "V") if sim.oscillating else "-"
    lines = [
        parts,
        f"{'':22}{'model':>16}{'ngspice':>16}",
        f"{'frequency (ideal)':22}{hz(model['f_ideal_hz']):>16}",
        f"{'carrier (loaded)':22}{hz(ls['f_hz'] or model['f_loaded_hz']):>16}{hz(f_sim):>16}",
        *([f"{'  runs split, range':22}{_split_range(ls)}"] if _split_range(ls) else []),
        f"{'amplitude, tank top':22}{volts(ls['amplitude_v']):>16}{amp_sim:>16}",
        f"{'start-up margin':22}{model['startup_margin']:>16.3g}"
        f"{'oscillates' if sim.oscillating else 'does not start':>16}",
        f"{'envelope':22}{ls['envelope'] or '-':>16}{wave.state:>16}",
        f"{'start-up time':22}{sec(ls['startup_time_s']):>16}{sec(wave.startup_time_s):>16}",
        f"window {format_quantity(lo, 'Hz')} to {format_quantity(hi, 'Hz')}: {note}",
        f"verdict: {check.verdict}",
    ]
    if model["overdriven"]:
        lines.append("caution: overdriven (margin above 5 or collector swing beyond headroom)")
    if not check.resolved:
        lines.append(
            f"caution: the transient ({check.cycles} periods) is shorter than the predicted "
            "settling and several slow time constants; a slow burst may not show"
        )
    if "bursting" in (wave.state, ls["envelope"]):
        lines.append(BURST_CARRIER_CAUTION)
    if check.planned is not None:
        lines.append(
            LENGTHENED_NOTE.format(
                drift=_percent(check.planned.carrier_drift),
                what="the board was",
                longer=f"{check.lengthened} times as long (the planned run read "
                f"{hz(json_number(check.planned.frequency_hz))}, "
                f"{_percent(check.planned.frequency_hz / sim.frequency_hz - 1.0)})",
            )
        )
    if sim.drifting:
        where = "" if check.planned is None else f" of the run {check.lengthened} times as long"
        lines.append(SETTLING_CAUTION.format(drift=_percent(sim.carrier_drift), where=where))
    if ls.get("carrier_from") == "run from rest":
        lines.append(RUN_FROM_REST_NOTE.format(which="") + _kick_spread(ls))
    if sim.coarse is not None:
        lines.append(
            f"note: at the netlist's own step ngspice showed {sim.coarse.state} "
            f"({hz(json_number(sim.coarse.f_hz))}); at a {sim.step_refined}x finer step "
            f"{wave.state} at {hz(f_sim)}: the two disagree (the "
            "trapezoidal rule's error at the netlist's step), so the finer run is reported"
        )
    lines += [f"ngspice: {w}" for w in sim.warnings]
    typer.echo(_fit(lines, Console().width))


def _kick_spread(model: dict[str, Any]) -> str:
    """How far apart the runs from rest read (picker.circuit.burst_carrier.KICKS), as a
    clause for the note, or nothing where the model column does not say."""
    spread = model.get("carrier_kick_spread")
    if not isinstance(spread, float) or not math.isfinite(spread):
        return ""
    clause = (
        "; the median of runs whose kicks differ by parts per million, whose carriers "
        f"span {100.0 * spread:.2f} % (a burst's course is chaotic)"
    )
    span = _split_range(model)
    if span:
        from picker.circuit.burst_carrier import SPLIT

        clause += (
            f"; above {100.0 * SPLIT:.0f}\u00a0% the runs have split between courses, and the "
            f"board's carrier is their range, {span}, not the median"
        )
    return clause


def _split_range(model: Mapping[str, Any]) -> str:
    """The range of the runs from rest where they split (picker.circuit.burst_carrier.SPLIT),
    e.g. "3.286 MHz to 3.561 MHz", or nothing."""
    lo, hi = model.get("carrier_low_hz"), model.get("carrier_high_hz")
    if not isinstance(lo, float) or not isinstance(hi, float):
        return ""
    return f"{_shown(lo, 'Hz', 4)} to {_shown(hi, 'Hz', 4)}"


def _percent(x: float) -> str:
    """A relative change as a signed percentage, e.g. "-0.44 %"."""
    return f"{100.0 * x:+.2f} %"


def _fit(lines: list[str], width: int) -> str:
    """``lines`` joined, each wider than ``width`` wrapped at its words (rest indented)."""
    import textwrap

    return "\n".join(
        textwrap.fill(line, width, subsequent_indent="  ") if len(line) > width else line
        for line in lines
    )


# ---------------------------------------------------------------- --verify of solve/evaluate


def run_verify(
    result: SolveResult, count: int, timeout: float = 120.0
) -> tuple[list[DesignCheck], float]:
    """The ngspice check of the top ``count`` designs of ``result`` and its wall time, s."""
    from picker.api.verify import verify_result

    start = time.perf_counter()
    checks = verify_result(result, count=count, timeout=timeout)
    return checks, time.perf_counter() - start


def verify_dict(checks: list[DesignCheck], seconds: float) -> dict[str, Any]:
    """The JSON object ``--verify`` adds (key ``ngspice_check``)."""
    from picker.circuit.verify import WORKERS

    return {
        "boards_per_design": len(checks[0].boards) if checks else 0,
        "workers": WORKERS,
        "designs": [c.to_dict() for c in checks],
        "all_ok": all(c.verdict == "ok" for c in checks),
        # wall-clock time is machine dependent: kept out of the JSON (deterministic output)
    }


def _board_cells(b: BoardCheck) -> tuple[list[str], list[str]]:
    """One board's cells of the two ``--verify`` tables: (frequency, waveform)."""
    f_model, f_sim = b.model["f_hz"], b.f_sim
    diff = "-" if f_model is None or f_sim is None else f"{f_model / f_sim - 1:+.2%}"
    wave = b.sim.waveform
    amp_sim = _shown(wave.amplitude_v, "V", digits=3) if b.sim.oscillating else "-"
    return (
        [_shown(f_model, "Hz"), _shown(f_sim, "Hz"), diff.replace("%", " %"), b.verdict],
        [
            _shown(b.model["amplitude_v"], "V", digits=3),
            amp_sim,
            wave.state,
            _shown(wave.startup_time_s, "s", digits=3),
        ],
    )


def _notes(checks: list[DesignCheck]) -> list[str]:
    """The cautions and notes under the ``--verify`` tables."""
    lines = []
    if any(
        "bursting" in (b.sim.waveform.state, b.model.get("envelope"))
        for c in checks
        for b in c.boards
    ):
        lines.append(BURST_CARRIER_CAUTION)
    if any(not b.resolved for c in checks for b in c.boards):
        lines.append(
            "caution: some transients are shorter than the predicted settling and several "
            "slow time constants; a slow burst may not show"
        )
    ran = [
        f"{c.rank} {b.label}"
        for c in checks
        for b in c.boards
        if b.model.get("carrier_from") == "run from rest"
    ]
    if ran:
        lines.append(RUN_FROM_REST_NOTE.format(which=" of " + ", ".join(ran)))
    split = [
        f"{c.rank} {b.label} ({_split_range(b.model)})"
        for c in checks
        for b in c.boards
        if _split_range(b.model)
    ]
    if split:
        from picker.circuit.burst_carrier import SPLIT

        lines.append(
            # a no-break space keeps the figure with its unit when the note wraps
            f"note: the runs from rest split between courses (their carriers span more than "
            f"{100.0 * SPLIT:.0f}\u00a0%) on {', '.join(split)}: the carrier is that range, not "
            "the model column's median"
        )
    longer = [
        f"{c.rank} {b.label}: {b.lengthened} times, the planned run read "
        f"{_percent(b.planned.frequency_hz / b.sim.frequency_hz - 1.0)}"
        for c in checks
        for b in c.boards
        if b.planned is not None
    ]
    if longer:
        lines.append(
            LENGTHENED_NOTE.format(
                drift="more than 0.1 %",
                what="these boards were",
                longer="longer (" + ", ".join(longer) + ")",
            )
        )
    drifting = [
        f"{c.rank} {b.label} {_percent(b.sim.carrier_drift)}"
        for c in checks
        for b in c.boards
        if b.sim.drifting
    ]
    if drifting:
        lines.append(
            SETTLING_CAUTION.format(drift="more than 0.1 %", where=" (" + ", ".join(drifting) + ")")
        )
    refined = [
        f"{c.rank} {b.label} ({b.sim.coarse.state} at the netlist's step)"
        for c in checks
        for b in c.boards
        if b.sim.coarse is not None
    ]
    if refined:
        lines.append(
            "note: read at a finer step where the netlist's own step disagreed with it (the "
            "trapezoidal rule's error): " + ", ".join(refined)
        )
    return lines


#: Columns of the two ``--verify`` tables after rank and board (header, justification).
#: Whether a board lands in the window is in its verdict ("below the window"); JSON has
#: ``in_window`` too.
_FREQUENCY_COLUMNS: tuple[tuple[str, JustifyMethod], ...] = (
    ("f model", "right"),
    ("f ngspice", "right"),
    ("model\n− sim", "right"),
    ("verdict", "left"),
)
_WAVEFORM_COLUMNS: tuple[tuple[str, JustifyMethod], ...] = (
    ("amplitude\nmodel", "right"),
    ("amplitude\nngspice", "right"),
    ("envelope\n(ngspice)", "left"),
    ("start-up\n(ngspice)", "right"),
)


def verify_text(checks: list[DesignCheck], seconds: float, width: int | None = None) -> str:
    """The ``--verify`` check as text ``width`` columns wide (100 when None): the model
    against ngspice per board in two tables (frequency and verdict; amplitude, envelope
    and start-up), a verdict per design, then the cautions."""
    import io

    from rich.table import Table

    from picker.circuit.verify import WORKERS

    width = width or 100
    boards = sum(len(c.boards) for c in checks)
    per = len(checks[0].boards) if checks else 0
    what = "nominal and the two tolerance corners" if per == 3 else "nominal"
    stream = io.StringIO()
    console = Console(file=stream, width=width, highlight=False, color_system=None)
    console.print(
        f"ngspice check of the top {len(checks)}: {what} ({boards} transients, "
        f"{WORKERS} processes, {seconds:.1f} s)"
    )
    for title, columns, part in (
        ("Frequency", _FREQUENCY_COLUMNS, 0),
        ("Waveform", _WAVEFORM_COLUMNS, 1),
    ):
        table = Table(title=title, title_justify="left")
        table.add_column("#", justify="right", no_wrap=True)
        table.add_column("board", no_wrap=True)
        for name, justify in columns:
            # the figures stay whole; the verdict wraps (its words are the cell's breaks)
            table.add_column(name, justify=justify, no_wrap=name != "verdict")
        for c in checks:
            for i, b in enumerate(c.boards):
                table.add_row(str(c.rank) if i == 0 else "", b.label, *_board_cells(b)[part])
        console.print(table)
    text = "".join(line.rstrip() + "\n" for line in stream.getvalue().splitlines())
    lines = [f"design {c.rank}: {c.verdict}" for c in checks] + _notes(checks)
    return text + _fit(lines, width) + "\n"


def register(app: typer.Typer) -> None:
    """Add the ``netlist`` and ``simulate`` commands to ``app``."""
    app.command("netlist")(netlist)
    app.command("simulate")(simulate)
