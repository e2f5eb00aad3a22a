"""Demo specs say in their header comment what their keys hold, and the two agree.

Plausible bug caught: a demo's key changed without its comment (the production
demo once said "±1.5 %" over a ±2.5 % window, and "+400 ± 400 ppm/°C" over a
+250 ± 100 ppm/°C choke). Each figure the comment states is read back here
with a small parser of this file (not picker's) and compared with the TOML.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import pytest

DEMO = Path(__file__).resolve().parent.parent / "demo_specs"
SPECS = sorted(DEMO.glob("*.toml"))
_PREFIX = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6}


def _si(text: str) -> float:
    """ "4.7 nF", "310 kHz", "15 pF" -> SI float (SI prefixes, BIPM SI Brochure table 7)."""
    m = re.fullmatch(r"\s*([0-9.]+)\s*([pnuµmkM]?)(F|H|Hz)\s*", text)
    assert m, text
    return float(m.group(1)) * _PREFIX[m.group(2)]


def _pct(text: str) -> float:
    m = re.fullmatch(r"\s*±?\s*([0-9.]+)\s*%\s*", str(text))
    assert m, text
    return float(m.group(1))


def _header(path: Path) -> str:
    lines = []
    for line in path.read_text(encoding="utf-8").splitlines():
        if not line.startswith("#"):
            break
        lines.append(line.lstrip("# "))
    return " ".join(lines)


def test_every_demo_has_a_header_comment():
    assert SPECS
    for p in SPECS:
        assert _header(p).startswith("Invented demo"), p.name


@pytest.mark.parametrize("path", SPECS, ids=lambda p: p.name)
def test_header_figures_match_the_keys(path: Path) -> None:
    head = _header(path)
    d = tomllib.loads(path.read_text(encoding="utf-8"))
    checked = 0
    freq = d.get("frequency", {})
    # the window: "within ±2.5 %" or "window is tight (±3 %)"
    for m in re.finditer(r"(?:within|window is tight \()\s*±([0-9.]+) %", head):
        assert float(m.group(1)) == _pct(freq["window"]), (m.group(0), freq["window"])
        checked += 1
    # the target: the first frequency the comment names (plans set it per channel)
    m = re.search(r"([0-9.]+ [kM]Hz)", head)
    if m and "target" in freq and "replaced per channel" not in path.read_text(encoding="utf-8"):
        assert _si(m.group(1)) == pytest.approx(_si(freq["target"]))
        checked += 1
    # the stray: "About 15 pF", "Roughly 4 pF", "about 12 pF"; a spread "± 2 pF" after it
    m = re.search(r"(?:[Aa]bout|Roughly) ([0-9.]+ pF)(?: ± ([0-9.]+ pF))?", head)
    if m:
        par = d["parasitics"]
        assert _si(m.group(1)) == pytest.approx(_si(par["stray"])), (m.group(0), par)
        if m.group(2):
            assert _si(m.group(2)) == pytest.approx(_si(par["stray_tolerance"].lstrip("±")))
        checked += 1
    # a drift figure "(+250 ± 100 ppm/°C" is the inductor's tempco and spread
    m = re.search(r"\(([+-][0-9.]+) ± ([0-9.]+) ppm/°C", head)
    if m:
        lpart = d["parts"]["L"]
        assert float(m.group(1)) == float(lpart["tempco"].split()[0]), (m.group(0), lpart)
        assert float(m.group(2)) == float(lpart["tempco_spread"].split()[0])
        checked += 1
    # a feedback range "(beta 0.08 .. 0.3)"
    m = re.search(r"\(beta ([0-9.]+) \.\. ([0-9.]+)\)", head)
    if m:
        assert (float(m.group(1)), float(m.group(2))) == (
            d["feedback"]["min"],
            d["feedback"]["max"],
        )
        checked += 1
    # the buyer's figures
    cost = d.get("cost", {})
    for pattern, value in (
        (r"at least ([0-9.]+) %", lambda: _pct(cost["min_yield"])),
        (r"at most ([0-9.]+) per board", lambda: float(cost["max_per_board"])),
        (r"build of ([0-9]+)", lambda: float(cost["build_quantity"])),
        (r"wants ([0-9.]+) % of boards", lambda: _pct(d["yield"]["target"])),
    ):
        m = re.search(pattern, head)
        if m:
            assert float(m.group(1)) == value(), (m.group(0), path.name)
            checked += 1
    # "(E6, 10 %)" capacitors and "E24 C0G parts at 2 %"
    m = re.search(r"\((E[0-9]+), ([0-9.]+) %\)", head)
    if m:
        for pos in ("C1", "C2"):
            part = d["parts"][pos]
            assert (part["series"], _pct(part["tolerance"])) == (m.group(1), float(m.group(2)))
        checked += 1
    if path.stem != "plan_demo":  # the plan's header names files, not figures
        assert checked >= 1, f"{path.name}: no figure of the header was checked"
