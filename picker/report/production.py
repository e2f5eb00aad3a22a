"""Text sections of the production view, printed after the main table (edge module).

For the best design: the temperature summary (yield at 25 °C against yield
across the operating range, per check temperature), the spread-driver table
(first order beside the Monte Carlo regression), the buy-tighter list and
plan, and the trimmer recommendation; and every warning of the run. The
figures come from ``Candidate.extra`` (see :mod:`picker.production.figures`).
"""

from __future__ import annotations

from collections.abc import Iterable

from rich.console import Console
from rich.text import Text

from picker.api.results import Candidate, SolveResult
from picker.report.text import Col, pct, plain, points, print_fitted
from picker.tank.base import Topology
from picker.units import format_percent, format_quantity


def _opt(x: str | float, unit: str) -> str:
    """A change's option: a tolerance fraction or a material name."""
    if isinstance(x, str):
        return x
    return format_percent(float(x)) if unit == "%" else str(x)


def _money(x: float | None) -> str:
    return "—" if x is None else f"{x:+.3f}"


def _pct(x: float) -> str:
    return pct(x)


def _say(console: Console, text: str) -> None:
    """A line of prose that may hold user text: never parsed as markup (leading
    newlines are blank lines; any other control character is shown escaped)."""
    body = text.lstrip("\n")
    for _ in range(len(text) - len(body)):
        console.print()
    console.print(plain(body), highlight=False)


def print_warnings(warnings: Iterable[str], console: Console) -> None:
    for w in warnings:
        console.print(Text("Warning:", style="yellow") + Text(" ") + plain(w), highlight=False)


def print_temperature(x: dict, console: Console) -> None:
    yt = x.get("yield_over_temperature")
    if not yt:
        return
    lo, hi = yt["range_c"]
    a, b = yt["over_range"], yt["at_25c"]
    console.print()
    console.print(
        Text("Over temperature", style="bold")
        + Text(
            f" ({lo:g} °C .. {hi:g} °C, "
            f"{len(yt['temperatures_c'])} check points): "
            f"{_pct(a['estimate'])} ({_pct(a['ci_low'])}–{_pct(a['ci_high'])}) of boards stay "
            f"in the window at every point; {_pct(b['estimate'])} at 25 °C alone. "
            f"Worst single point {yt['worst_temperature_c']:g} °C."
        ),
        highlight=False,
    )
    cols = [
        Col("temperature", [f"{t:g} °C" for t in yt["temperatures_c"]], essential=True),
        Col("yield there", [_pct(y) for y in yt["yield_at_temperature"]], essential=True),
        Col("mean frequency shift", [f"{x * 100:+.3f} %" for x in yt["frequency_shift"]]),
    ]
    print_fitted(console, cols)


def print_worst_case(c: Candidate, target: float, console: Console) -> None:
    """The worst-case span of the best design at 25 °C and, with a range, over it."""
    wc = c.extra.get("worst_case_over_range")
    if not wc:
        return

    def span(lo: float, hi: float) -> str:
        return f"{(lo / target - 1) * 100:+.2f} %..{(hi / target - 1) * 100:+.2f} %"

    lo, hi = wc["range_c"]
    console.print(
        f"Worst case (every part at a tolerance corner): {span(c.f_worst_low_hz, c.f_worst_high_hz)}"
        f" at 25 °C; {span(wc['f_low_hz'], wc['f_high_hz'])} over {lo:g} °C .. {hi:g} °C "
        "(each part's drift at the edge of its class as well)."
    )


def print_drivers(x: dict, console: Console) -> None:
    sh = x.get("drivers")
    if not sh:
        return
    mc = (x.get("drivers_mc") or {}).get("shares", {})
    r2 = (x.get("drivers_mc") or {}).get("r2")
    console.print("\n[bold]What drives the frequency spread[/bold] (share of the variance of ln f)")
    if mc and all(v is None for v in mc.values()):
        _say(console, "  none: fewer than two simulated boards oscillate steadily")
        return
    # a first-order share is None where the nominal design has no steady frequency
    keys = sorted(sh, key=lambda k: (-(sh[k] if sh[k] is not None else mc.get(k) or 0.0), k))
    cols = [
        Col("input", [plain(k) for k in keys], justify="left", essential=True),
        Col(
            "first order",
            [_pct(sh[k]) if sh[k] is not None else "—" for k in keys],
            essential=True,
        ),
        Col(
            "Monte Carlo",
            [_pct(mc[k]) if mc.get(k) is not None else "—" for k in keys],
            essential=True,
        ),
    ]
    print_fitted(console, cols)
    notes = []
    if r2 is not None:
        notes.append(f"regression R² {r2:.4f}")
    if "temperature" in sh:
        tc = (x.get("drivers_mc") or {}).get("temperature_c")
        where = f" at {tc:g} °C" if tc is not None else ""
        notes.append(
            f"'temperature' is the part-to-part spread of the drift{where}; the mean shift "
            "is in the temperature table"
        )
    if notes:
        _say(console, "  " + "; ".join(notes))


def _change(c: dict) -> str:
    return f"{_opt(c['from'], '%')} → {_opt(c['to'], '%')}"


def print_tighter(x: dict, console: Console) -> None:
    ch = x.get("tighter")
    if not ch:
        return
    console.print("\n[bold]What to buy tighter[/bold] (one change at a time, same boards)")
    cols = [
        Col("#", [str(i) for i in range(1, len(ch) + 1)], essential=True),
        Col("position", [plain(c["position"]) for c in ch], justify="left", essential=True),
        Col("change", [plain(_change(c)) for c in ch], justify="left", essential=True),
        Col("yield", [_pct(c["yield_after"]) for c in ch], essential=True),
        Col("gain", [points(c["gain"]) for c in ch], essential=True),
        Col("extra cost/board", [_money(c["extra_cost_per_board"]) for c in ch], priority=1),
    ]
    print_fitted(console, cols)
    plan = x.get("tighter_plan")
    if plan:
        steps = ", ".join(f"{s['position']} {_change(s)}" for s in plan["steps"]) or "none"
        cost = plan.get("extra_cost_per_board")
        verdict = "reaches" if plan["reaches_target"] else "falls short of"
        _say(
            console,
            f"  To reach {_pct(plan['target'])}: {steps}; yield {_pct(plan['yield'])} "
            f"({verdict} the target)" + ("" if cost is None else f", {cost:+.3f} per board"),
        )


def print_trimmer(x: dict, console: Console, topology: Topology) -> None:
    tr = x.get("trimmer")
    if not tr:
        return
    across = tr["placement"] == "across"
    where = "across the tank" if across else f"in parallel with {tr['placement']}"
    rc = tr["recentre"]
    unit = topology.unit(rc["position"])
    if rc["to"] == rc["from"]:
        fixed = f"{rc['position']} kept at {format_quantity(rc['from'], unit)}"
    elif rc["to"] == 0:
        fixed = f"{rc['position']} left out (the trimmer alone)"
    else:
        fixed = (
            f"{rc['position']} re-centred from {format_quantity(rc['from'], unit)} to "
            f"{format_quantity(rc['to'], unit)}"
        )
    need = tr["required_f"]
    need_txt = (
        f"the boards need {format_quantity(need[0], 'F', digits=3)} to "
        f"{format_quantity(need[1], 'F', digits=3)}"
        if None not in need
        else "no range covers them"
    )
    console.print("\n[bold]Trimmer[/bold] (the best fixed design misses the yield target)")
    if tr["trimmer"] is None:
        _say(
            console,
            f"  No trimmer of the table lets {_pct(tr['share'])} of boards be tuned {where} "
            f"(best: {_pct(tr['tunable'])}, {fixed}); {need_txt}.",
        )
        return
    lo, hi = tr["trimmer"]["min_f"], tr["trimmer"]["max_f"]
    _say(
        console,
        f"  A {format_quantity(lo, 'F')} – {format_quantity(hi, 'F')} trimmer {where}, with "
        f"{fixed}, lets {_pct(tr['tunable'])} of the simulated boards be tuned into the window "
        f"at every check temperature ({_pct(tr['share'])} asked; {need_txt}).",
    )


def print_production(r: SolveResult, console: Console) -> None:
    """Every production section for the best design, then the run's warnings."""
    if r.candidates:
        x = r.candidates[0].extra
        print_temperature(x, console)
        print_worst_case(r.candidates[0], r.spec.frequency.target, console)
        print_drivers(x, console)
        print_tighter(x, console)
        print_trimmer(x, console, r.spec.topo)
    mc = r.production or {}
    if mc.get("precision") is not None:
        state = "reached" if mc.get("converged") else "not reached (sample cap)"
        _say(
            console,
            f"\nPrecision ±{format_percent(mc['precision'])} {state} with {r.samples:,} boards "
            "per design.",
        )
    print_warnings(r.warnings, console)
