"""A report to file: one self-contained HTML page per run (``--report FILE.html``).

The page needs no network: the styles sit in a ``<style>`` element and the
plots are PNGs embedded as ``data:`` URIs (RFC 2397). It holds what a lot
record needs: the inputs (the spec text and the SHA-256 of every file read,
FIPS 180-4), picker's version, the seed, the ranked table, the production,
circuit and buyer sections and the plots; print CSS lays it out for a
browser's "print to PDF" (A4, no split tables or figures). Every text that
came from the user or a file is HTML-escaped (:func:`html.escape`).

One entry point, :func:`write_report`, takes what the command produced: a
``SolveResult`` (solve, evaluate), a ``CalibrationResult`` (calibrate) or a
``PlanRun`` (consolidate). :func:`render_report` returns the page as text.
No date or time goes into the page, so the same run gives the same bytes
(the consolidate solver's wall-clock time aside).
"""

from __future__ import annotations

import base64
import hashlib
import html
import io
import re
from collections.abc import Callable, Iterable, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

from rich.console import Console

from picker import __version__
from picker.api.export import part_text, rank_text, ties
from picker.api.results import Candidate, SolveResult
from picker.calibration.result import CalibrationResult
from picker.errors import SpecError
from picker.files import atomic_write

# matplotlib comes with the plots: this module is imported only when a report is asked for
from picker.report.calibration import print_table as print_calibration
from picker.report.designs import run_verdict
from picker.report.plan import print_table as print_plan
from picker.report.plots import plot_residuals, png_bytes, result_figures
from picker.report.production import print_production
from picker.units import format_percent, format_quantity

__all__ = ["inputs_of", "render_report", "write_report"]

_E = html.escape

_CSS = """
:root { color-scheme: light; }
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; font-size: 10.5pt;
  color: #1b1b1b; background: #fff; margin: 24px auto; max-width: 1100px; padding: 0 16px; }
h1 { font-size: 17pt; margin: 0 0 4px 0; }
h2 { font-size: 13pt; border-bottom: 2px solid #264653; padding-bottom: 2px; margin-top: 22px; }
h3 { font-size: 11pt; margin: 14px 0 4px 0; }
.meta { color: #444; margin: 0 0 10px 0; }
table { border-collapse: collapse; margin: 6px 0 10px 0; }
th, td { border: 1px solid #b9c2c7; padding: 3px 7px; vertical-align: top; }
th { background: #e8eef1; text-align: left; font-weight: 600; }
td.n { text-align: right; font-variant-numeric: tabular-nums; }
table.wide { font-size: 9pt; }
td.h, code { font-family: "DejaVu Sans Mono", "Liberation Mono", monospace; font-size: 8.5pt;
  word-break: break-all; }
pre { font-family: "DejaVu Sans Mono", "Liberation Mono", monospace; font-size: 8.5pt;
  background: #f6f8f9; border: 1px solid #dde3e6; padding: 8px; overflow-x: auto;
  white-space: pre; line-height: 1.25; }
figure { margin: 10px 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #dde3e6; }
figcaption { font-size: 9pt; color: #444; }
.warn { color: #8a4b00; }
.note { font-size: 9.5pt; color: #333; }
.status-ok { color: #1e6b3a; font-weight: 600; }
.status-bad { color: #a12a1a; font-weight: 600; }
@page { size: A4; margin: 12mm; }
@media print {
  body { margin: 0; max-width: none; font-size: 9.5pt; }
  h2 { break-after: avoid; page-break-after: avoid; }
  table, figure, pre { break-inside: avoid; page-break-inside: avoid; }
  pre { white-space: pre-wrap; font-size: 7pt; overflow: visible; }
  figure img { max-height: 120mm; }
}
"""


# ---------------------------------------------------------------- pieces


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def inputs_of(result: SolveResult) -> list[Path]:
    """The files a solve read besides the spec: stock lists and lot files, each once."""
    base = Path(result.spec.source).parent if result.spec.source else Path.cwd()
    out: list[Path] = []
    for part in result.spec.parts.values():
        for name in (part.stock, part.lot):
            if name is None:
                continue
            p = Path(name)
            p = (p if p.is_absolute() else base / p).resolve()
            if p not in out:
                out.append(p)
    return out


_NUMBER_UNIT = re.compile(r"(?<=\d) (?=[%a-zA-Zµ°])")
_LIGHT = str.maketrans("┏┳┓┃┡╇┩━┗┻┛╋┣┫", "┌┬┐│├┼┤─└┴┘┼├┤")


def _keep(text: str) -> str:
    """A number and its unit never split over two lines (U+00A0 between them)."""
    return _NUMBER_UNIT.sub("\u00a0", text)


def _table(
    head: Sequence[str],
    rows: Iterable[Sequence[str]],
    numeric: set[int],
    mono: set[int] = frozenset(),  # type: ignore[assignment]
) -> str:
    th = "".join(f"<th>{_E(h)}</th>" for h in head)
    body = []
    for row in rows:
        cells = "".join(
            f'<td class="{"n" if i in numeric else "h" if i in mono else "t"}">{_E(_keep(x))}</td>'
            for i, x in enumerate(row)
        )
        body.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{th}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _inputs_section(files: Sequence[Path], main: Path | None) -> str:
    rows = []
    seen: set[Path] = set()
    for f in files:
        p = Path(f)
        if p.resolve() in seen:
            continue
        seen.add(p.resolve())
        try:
            rows.append((str(p), f"{p.stat().st_size:,}", _sha256(p)))
        except OSError as exc:
            rows.append((str(p), "—", f"not readable ({exc.strerror or exc})"))
    head = ("file", "bytes", "SHA-256")
    table = _table(head, rows, {1}, mono={2})
    text = ""
    if main is not None:
        try:
            body = main.read_text(encoding="utf-8", errors="replace")
        except OSError:
            body = ""
        text = f"<h3>{_E(main.name)}</h3><pre>{_E(body)}</pre>"
    return f"<h2>Inputs</h2>{table}{text}"


def _captured(print_fn: Callable[[Console], None], width: int = 118) -> str:
    """What a rich printer writes, as plain text (box drawing kept)."""
    con = Console(record=True, width=width, file=io.StringIO(), color_system=None)
    print_fn(con)
    return con.export_text().translate(_LIGHT)  # light lines: monospace fonts draw them evenly


def _pre(text: str) -> str:
    return f"<pre>{_E(text.strip(chr(10)))}</pre>" if text.strip() else ""


def _figure(png: bytes, caption: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return (
        f'<figure><img alt="{_E(caption)}" src="data:image/png;base64,{data}">'
        f"<figcaption>{_E(caption)}</figcaption></figure>"
    )


def _page(title: str, command: str, meta: Sequence[str], sections: Sequence[str]) -> str:
    meta_html = "".join(f'<p class="meta">{m}</p>' for m in meta)
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{_E(title)}</title><style>{_CSS}</style></head><body>"
        f"<h1>{_E(title)}</h1>"
        f'<p class="meta">picker {_E(__version__)}, <code>{_E(command)}</code></p>'
        f"{meta_html}{''.join(sections)}</body></html>\n"
    )


# ---------------------------------------------------------------- solve / evaluate


def _pct(x: float) -> str:
    return f"{x * 100:.1f} %"


def _span(lo: float, hi: float, target: float) -> str:
    return f"{(lo / target - 1) * 100:+.2f} % .. {(hi / target - 1) * 100:+.2f} %"


def _design_table(r: SolveResult, shown: set[int] | None = None) -> str:
    """The ranked table; ``shown`` limits it to those indices (ties still judged on all)."""
    s = r.spec
    target = s.frequency.target
    positions = s.topo.positions
    loaded = s.amplifier is not None
    over = s.yield_.temperature is not None
    priced = any((c.extra.get("cost") or {}).get("per_board") is not None for c in r.candidates)
    ids = any(pp.part_id for c in r.candidates for pp in c.parts.values())
    head = ["#", *positions, "f nominal" if not loaded else "f ideal"]
    head += ["f loaded", "runs", "start-up margin (worst)"] if loaded else []
    head += ["error", "beta", f"yield ({s.yield_.confidence * 100:g} % CI)", "worst case 25 °C"]
    if over:
        t = s.yield_.temperature
        assert t is not None
        head.append(f"worst case {t[0]:g} .. {t[1]:g} °C")
    cur = s.cost.currency
    head += [f"cost/board ({cur})" if cur else "cost/board"] if priced else []
    rows = []
    tie = ties(r)
    for k, (c, tied) in enumerate(zip(r.candidates, tie, strict=True)):
        if shown is not None and k not in shown:
            continue
        row = [rank_text(c.rank, tied)]
        row += [
            f"{part_text(c.parts[p])} {format_percent(c.parts[p].tolerance)}" for p in positions
        ]
        row.append(format_quantity(c.f_nominal_hz, "Hz", digits=6))
        if loaded:
            fl = c.extra.get("f_loaded_hz")
            row.append("none" if fl is None else format_quantity(fl, "Hz", digits=6))
            row.append(run_verdict(c))
            m, w = c.extra.get("startup_margin"), c.extra.get("startup_margin_worst")
            row.append("—" if m is None or w is None else f"{m:.2f} ({w:.2f})")
        row += [
            f"{c.error * 100:+.3f} %",
            f"{c.feedback_fraction:.3f}" + ("" if c.feedback_ok else " !"),
            f"{_pct(c.yield_.estimate)} ({_pct(c.yield_.ci_low)} – {_pct(c.yield_.ci_high)})",
            _span(c.f_worst_low_hz, c.f_worst_high_hz, target),
        ]
        if over:
            wc = c.extra.get("worst_case_over_range") or {}
            lo, hi = wc.get("f_low_hz"), wc.get("f_high_hz")
            row.append("—" if lo is None or hi is None else _span(lo, hi, target))
        if priced:
            cost = c.extra.get("cost") or {}
            x = cost.get("per_board")
            row.append(
                "?" if x is None else f"{x:.4g}" + ("" if cost.get("stock_ok", 1) else " short")
            )
        rows.append(row)
    numeric = set(range(1, len(head))) - ({head.index("runs")} if loaded else set())
    out = _table(head, rows, numeric).replace("<table>", '<table class="wide">', 1)
    notes = []
    if any(tie):
        notes.append(
            "= marks a design whose yield interval overlaps the one ranked above it: "
            "these boards do not tell the two apart."
        )
    if any(not c.feedback_ok for c in r.candidates):
        notes.append("! marks a feedback fraction outside the feedback window.")
    notes.append(
        "worst case: every part at a tolerance corner"
        + (" and, over the range, at the edge of its drift" if over else "")
        + "; relative to the target."
    )
    out += "".join(f'<p class="note">{_E(n)}</p>' for n in notes)
    if ids:
        id_rows = [
            (str(c.rank), *(_part_ids(c, p) for p in positions))
            for k, c in enumerate(r.candidates)
            if shown is None or k in shown
        ]
        out += "<h3>Part ids</h3>" + _table(("#", *positions), id_rows, {0})
    return out


def _part_ids(c: Candidate, p: str) -> str:
    pp = c.parts[p]
    return pp.part_id + (f" + {pp.second_part_id}" if pp.second_part_id else "")


def _misses(r: SolveResult) -> str:
    s = r.spec
    rows = [
        (
            *(format_quantity(m.values[p], s.topo.unit(p)) for p in s.topo.positions),
            format_quantity(m.f_nominal_hz, "Hz", digits=5),
            f"{m.feedback_fraction:.3g}",
            m.failed,
        )
        for m in r.misses
    ]
    out = '<p class="status-bad">No design meets the spec.</p>'
    if rows:
        n = len(s.topo.positions)
        head = (*s.topo.positions, "f nominal", "beta", "fails")
        out += "<h3>Nearest misses</h3>" + _table(head, rows, set(range(n + 2)))
    if r.advice:
        out += "<h3>What to relax</h3><ul>" + "".join(f"<li>{_E(a)}</li>" for a in r.advice)
        out += "</ul>"
    return out


def _circuit(r: SolveResult) -> str:
    if r.spec.amplifier is None or not r.candidates:
        return ""
    seen: dict[str, list[int]] = {}
    for c in r.candidates:
        for text in c.extra.get("cautions", ()):
            seen.setdefault(str(text), []).append(c.rank)
    items = "".join(
        f"<li>{_E(', '.join(f'#{k}' for k in ranks))}: {_E(text)}</li>"
        for text, ranks in seen.items()
    )
    return (
        "<h2>Circuit</h2><p class='note'>f loaded: the loaded model (transistor, bias "
        "network, losses); error is against the loaded frequency (against f ideal where "
        "there is none). runs: steady, bursting or no steady state (large-signal model); "
        "only boards that start and run steady count towards yield. margin: loop gain at "
        "start-up, nominal (worst board).</p>"
        + (f"<h3>Cautions (circuit model)</h3><ul>{items}</ul>" if items else "")
    )


def _buyer(r: SolveResult) -> str:
    if not r.candidates:
        return ""
    c = r.candidates[0]
    cost = c.extra.get("cost") or {}
    known = cost.get("per_board") is not None or any(
        pp.part_id or pp.price == pp.price for pp in c.parts.values()
    )
    if not known:  # no price and no stock part: nothing for a buyer
        return ""
    rows = []
    for p, pp in c.parts.items():
        price = "?" if pp.price != pp.price else f"{pp.price:.4g}"  # NaN: no price
        rows.append(
            (p, part_text(pp), format_percent(pp.tolerance), pp.source, _part_ids(c, p), price)
        )
    out = "<h2>Buyer</h2><h3>Parts of the best design</h3>"
    cur = r.spec.cost.currency
    unit = f"unit price ({cur})" if cur else "unit price"
    out += _table(("position", "value", "tolerance", "from", "part id", unit), rows, {5})
    if cost:
        per = cost.get("per_board")
        line = (
            "cost per board unknown (a part has no price)"
            if per is None
            else f"cost per board {per:.4g}{' ' + cur if cur else ''}, "
            f"build of {cost.get('build_quantity', 1)}: {cost.get('build', 0.0):.4g}"
            f"{' ' + cur if cur else ''}"
        )
        if cost.get("short"):
            short = ", ".join(f"{k} {v}" for k, v in cost["short"].items())
            line += f"; short of stock: {short}"
        out += f'<p class="note">{_E(line)}</p>'
    return out


def _warnings(ws: Sequence[str]) -> str:
    if not ws:
        return ""
    return "<h2>Warnings</h2><ul>" + "".join(f'<li class="warn">{_E(w)}</li>' for w in ws) + "</ul>"


def _plots(r: SolveResult) -> str:
    if not r.candidates or r.plot_data is None:
        return ""
    captions = {
        "histogram.png": "Monte Carlo frequency spread of the best design, window marked",
        "yield_vs_tolerance.png": "Yield against the tolerance class of each position",
        "drivers.png": "What drives the frequency spread (share of the variance of ln f)",
    }
    figs = result_figures(r)
    return "<h2>Plots</h2>" + "".join(_figure(png_bytes(figs[k]), captions[k]) for k in captions)


def _solve_page(r: SolveResult, command: str, files: Sequence[Path]) -> str:
    s = r.spec
    f = s.frequency
    status = (
        '<span class="status-ok">ok</span>'
        if r.status == "ok"
        else f'<span class="status-bad">{_E(r.status)}</span>'
    )
    meta = [
        f"{_E(s.topology)}, target {_E(format_quantity(f.target, 'Hz', digits=6))}, window "
        f"{_E(format_quantity(f.f_min, 'Hz', digits=6))} – "
        f"{_E(format_quantity(f.f_max, 'Hz', digits=6))}, feedback "
        f"{s.feedback.min:g} – {s.feedback.max:g}; status {status}",
        f"seed {r.seed}, {r.samples:,} boards per design ({_E(r.distribution)}), "
        f"searched {r.space_size:,} combinations: {r.feasible:,} feasible, "
        f"{r.screened:,} checked by Monte Carlo",
    ]
    sections = [_inputs_section(files, files[0] if files else None), "<h2>Designs</h2>"]
    sections.append(_design_table(r) if r.candidates else _misses(r))
    sections.append(_circuit(r))
    if r.candidates:
        text = _captured(lambda con: print_production(_without_warnings(r), con))
        sections.append("<h2>Production</h2>" + (_pre(text) or "<p>No production figures.</p>"))
    sections += [_buyer(r), _plots(r), _warnings(r.warnings)]
    return _page(s.title or "picker report", command, meta, sections)


def _without_warnings(r: SolveResult) -> SolveResult:
    return replace(r, warnings=[])


# ---------------------------------------------------------------- calibrate, consolidate


def _calibration_page(
    r: CalibrationResult, command: str, files: Sequence[Path], notes: Sequence[str]
) -> str:
    text = _captured(lambda con: print_calibration(r, con, extra_notes=notes))
    sections = [
        _inputs_section(files, files[0] if files else None),
        "<h2>Fitted parasitics</h2>" + _pre(text),
        "<h2>Plots</h2>" + _figure(plot_residuals(r), "Residuals of the fit"),
    ]
    meta = [f"{_E(r.topology)} tank, {len(r.unit_ids)} units, {_E(r.loss)} loss"]
    return _page("Calibration report", command, meta, sections)


#: Designs shown per channel of a plan (best first; the picked one always).
_PLAN_ROWS = 10


def _plan_page(run: Any, command: str, files: Sequence[Path]) -> str:
    text = _captured(lambda con: print_plan(run, con))
    sections = [_inputs_section(files, files[0] if files else None), "<h2>Plan</h2>" + _pre(text)]
    choice = run.result.plan.choice if run.result.plan is not None else {}
    for ch in run.channels:
        r = ch.result
        j = choice.get(ch.name)
        keep = {k for k in range(len(r.candidates)) if k < _PLAN_ROWS or k == j}
        body = _design_table(r, keep) if keep else _misses(r)
        more = len(r.candidates) - len(keep)
        said = [] if j is None else [f"picked: #{j + 1}"]
        said += [f"{more} more designs in the JSON output"] if more > 0 else []
        note = f'<p class="note">{_E("; ".join(said))}</p>' if said else ""
        sections.append(f"<h2>Channel {_E(ch.name)}</h2>{note}{body}")
    ps = run.plan.spec
    meta = [f"{len(run.channels)} channels, {ps.build_quantity} boards"]
    return _page(ps.title or run.plan.path.name, command, meta, sections)


# ---------------------------------------------------------------- entry points


def render_report(
    subject: SolveResult | CalibrationResult | Any,
    *,
    inputs: Sequence[str | Path] = (),
    command: str = "picker",
    notes: Sequence[str] = (),
) -> str:
    """The HTML page of a run.

    Parameters
    ----------
    subject : SolveResult, CalibrationResult or PlanRun
        What ``solve``/``evaluate``, ``calibrate`` or ``consolidate`` produced.
        A ``SolveResult`` made with ``plot_data=True`` gets its plots.
    inputs : sequence of paths
        The files the run read, the main one (spec, measurements, plan) first;
        a solve's stock lists and lot files are added from its spec.
    command : str
        The command line, as shown in the page head.
    notes : sequence of str
        Extra notes of a calibration.
    """
    files = [Path(p) for p in inputs]
    if isinstance(subject, SolveResult):
        seen = {p.resolve() for p in files}
        files += [p for p in inputs_of(subject) if p.resolve() not in seen]
        return _solve_page(subject, command, files)
    if isinstance(subject, CalibrationResult):
        return _calibration_page(subject, command, files, notes)
    if hasattr(subject, "channels") and hasattr(subject, "plan"):
        return _plan_page(subject, command, files)
    raise TypeError(f"no HTML report for a {type(subject).__name__}")


def write_report(
    path: str | Path,
    subject: SolveResult | CalibrationResult | Any,
    *,
    inputs: Sequence[str | Path] = (),
    command: str = "picker",
    notes: Sequence[str] = (),
    force: bool = False,
) -> Path:
    """Write :func:`render_report`'s page to ``path`` (atomically; never over an input).

    Raises
    ------
    SpecError
        ``path`` exists and ``force`` is not given, or it is one of ``inputs``,
        or it cannot be written.
    """
    page = render_report(subject, inputs=inputs, command=command, notes=notes)
    p = Path(path)
    if p.suffix.lower() not in (".html", ".htm"):
        raise SpecError(f"expected a file name ending in .html; got {p.name!r}", key="--report")
    atomic_write(p, page, force=force, inputs=inputs, key="--report")
    return p
