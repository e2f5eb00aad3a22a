"""``picker netlist`` and ``picker simulate``: SPICE export and the ngspice cross-check.

Registered on the main app by :func:`register` (see picker.cli.main). Both commands
take the part values from ``--set POS=VALUE`` (every position) or, without
``--set``, from the top design of a solve of the spec. The spec must have an
``[amplifier]`` section.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer

from picker.cli.options import check_format, parse_assignments, spec_inputs, unit_of
from picker.errors import InfeasibleError, SpecError
from picker.files import atomic_write, check_output

if TYPE_CHECKING:
    from picker.circuit.amplifier import AmplifierParams
    from picker.spec.model import Spec
    from picker.tank.base import Topology

# The numeric modules (numpy, scipy, the solver; picker.units uses numpy) are imported
# inside the commands, so that the command line starts without them.


def _design(
    spec_path: Path, sets: list[str]
) -> tuple[Spec, Topology, dict[str, float], dict[str, Any], float, AmplifierParams]:
    """The spec, its topology, the part values (``--set`` or the top design), the board
    values (parasitics applied), the stray capacitance and the amplifier."""
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
    return spec, topo, values, board, float(par.stray), params


def _figures(
    topo: Topology, board: Mapping[str, Any], stray: float, params: AmplifierParams
) -> dict[str, Any]:
    """The loaded model's figures of one board: frequencies, margin, amplitude, stress."""
    from picker.circuit.amplitude import amplitude_estimate, capacitor_stress
    from picker.circuit.oscillation import loaded_response

    res = loaded_response(topo, board, stray, params)
    amp = amplitude_estimate(topo, board, stray, params, res)
    stress = capacitor_stress(topo, board, stray, params, amp)
    f = float(res.f_hz)
    return {
        "f_ideal_hz": float(topo.frequency(board, stray)),
        "f_loaded_hz": f if math.isfinite(f) else None,
        "startup_margin": float(res.margin),
        "amplitude_v": float(amp.tank),
        "overdriven": bool(amp.overdriven),
        "peak_voltage_v": {k: float(v) for k, v in stress.items()},
    }


def netlist(
    spec_path: Path = typer.Argument(..., metavar="SPEC", help="The spec file (TOML)."),
    set_: list[str] = typer.Option([], "--set", help="A part value, e.g. --set C1=4.7n (repeat)."),
    output: Path = typer.Option(..., "-o", "--output", help="Netlist file to write."),
    force: bool = typer.Option(False, "--force", help="Replace an existing output file."),
) -> None:
    """Write a SPICE netlist of the whole oscillator (bias network, transient, measurements)."""
    from picker.circuit.netlist import write_netlist

    check_output(output, force=force, inputs=spec_inputs(spec_path))  # before the solve, not after
    spec, topo, values, board, stray, params = _design(spec_path, set_)
    title = f"{spec.title or spec_path.stem}: " + " ".join(
        f"{p}={values[p]:.6g}" for p in topo.positions
    )
    try:
        text = write_netlist(topo, board, stray, params, title=title)
    except ValueError as exc:
        raise SpecError(str(exc), file=str(spec_path), key="amplifier") from None
    atomic_write(output, text, force=force, inputs=spec_inputs(spec_path))
    typer.echo(f"wrote {output}")


def simulate(
    spec_path: Path = typer.Argument(..., metavar="SPEC", help="The spec file (TOML)."),
    set_: list[str] = typer.Option([], "--set", help="A part value, e.g. --set C1=4.7n (repeat)."),
    fmt: str = typer.Option("table", "--format", help="table or json."),
    timeout: float = typer.Option(120.0, "--timeout", help="Seconds to allow ngspice."),
) -> None:
    """Simulate the oscillator in ngspice and compare with the loaded model."""
    from picker.circuit.netlist import write_netlist
    from picker.circuit.ngspice import simulate as run
    from picker.units import format_quantity

    fmt = check_format(fmt, ("table", "json"))
    if not 0 < timeout <= 3600:  # also refuses nan
        raise SpecError(f"expected seconds between 0 and 3600; got {timeout}", key="--timeout")
    spec, topo, values, board, stray, params = _design(spec_path, set_)
    model = _figures(topo, board, stray, params)
    try:
        text = write_netlist(topo, board, stray, params, title=spec.title or spec_path.stem)
    except ValueError as exc:
        raise SpecError(str(exc), file=str(spec_path), key="amplifier") from None
    sim = run(text, timeout=timeout)
    f_sim = sim.frequency_hz if math.isfinite(sim.frequency_hz) else None
    out = {
        "parts": {p: {"value": values[p]} for p in topo.positions},
        **model,
        "simulated": {
            "oscillating": sim.oscillating,
            "f_hz": f_sim,
            "amplitude_v": sim.amplitude_v,
            "warnings": list(sim.warnings),
        },
    }
    if fmt == "json":
        typer.echo(json.dumps(out, sort_keys=True))
        return

    def hz(x: float | None) -> str:
        return "-" if x is None else format_quantity(x, "Hz")

    parts = "  ".join(f"{p} {format_quantity(values[p], topo.unit(p))}" for p in topo.positions)
    lines = [
        parts,
        f"{'':22}{'model':>16}{'ngspice':>16}",
        f"{'frequency (ideal)':22}{hz(model['f_ideal_hz']):>16}",
        f"{'frequency (loaded)':22}{hz(model['f_loaded_hz']):>16}{hz(f_sim):>16}",
        f"{'amplitude, tank top':22}{format_quantity(model['amplitude_v'], 'V'):>16}"
        f"{format_quantity(sim.amplitude_v, 'V'):>16}",
        f"{'start-up margin':22}{model['startup_margin']:>16.3g}"
        f"{'oscillates' if sim.oscillating else 'does not start':>16}",
    ]
    if model["overdriven"]:
        lines.append("caution: overdriven (margin above 5 or collector swing beyond headroom)")
    lines += [f"ngspice: {w}" for w in sim.warnings]
    typer.echo("\n".join(lines))


def register(app: typer.Typer) -> None:
    """Add the ``netlist`` and ``simulate`` commands to ``app``."""
    app.command("netlist")(netlist)
    app.command("simulate")(simulate)
