"""A topology is a plug-in: one registered class, and the whole pipeline takes it.

A throwaway topology is registered here: the Colpitts circuit with its
positions renamed (Ka, Kb for the divider, Lt for the inductor). Nothing
outside ``picker/tank`` may name a position, so solving, evaluating, the
production figures and the loaded circuit model must give for it exactly what
they give for the Colpitts with the same tables. Plausible bugs caught: a
module that still looks up ``values["L"]`` or ``"C1"`` (KeyError or a different
answer), a spec check that keeps a fixed list of topology names or positions,
a unit decided by a position's first letter.

The frequency of the top design is also checked against the textbook formula
(Sedra & Smith, *Microelectronic Circuits*, Colpitts section:
f = 1 / (2π √(L · C1·C2/(C1 + C2)))), written out here.
"""

from __future__ import annotations

import copy
import json
import math
from collections.abc import Iterator
from typing import Any

import pytest

from picker.api import evaluate, solve, spec_from_dict
from picker.circuit.netlist import write_netlist
from picker.tank import TOPOLOGIES, get_topology
from picker.tank.base import Topology

RENAME = {"C1": "Ka", "C2": "Kb", "L": "Lt"}


@pytest.fixture
def renamed() -> Iterator[Topology]:
    class Renamed(Topology):
        name = "renamed-colpitts"
        positions = ("Ka", "Kb", "Lt")
        capacitors = ("Ka", "Kb")
        inductor = "Lt"
        feedback_pair = ("Ka", "Kb")

    try:
        yield TOPOLOGIES["renamed-colpitts"]
    finally:
        del TOPOLOGIES["renamed-colpitts"]


BASE: dict[str, Any] = {
    "title": "plug-in check",
    "topology": "colpitts",
    "frequency": {"target": "1.2 MHz", "window": "±4 %"},
    "feedback": {"min": 0.2, "max": 1.0},
    "parts": {
        "C1": {"series": "E12", "tolerance": "5 %", "min": "100 pF", "max": "2.2 nF"},
        "C2": {"series": "E12", "tolerance": "5 %", "min": "100 pF", "max": "4.7 nF"},
        "L": {"series": "E12", "tolerance": "10 %", "min": "4.7 uH", "max": "220 uH"},
    },
    "parasitics": {"stray": "5 pF"},
    "yield": {"samples": 4000, "seed": 3, "candidates": 40},
}


def _renamed_spec(data: dict[str, Any]) -> dict[str, Any]:
    out = copy.deepcopy(data)
    out["topology"] = "renamed-colpitts"
    out["parts"] = {RENAME[p]: v for p, v in data["parts"].items()}
    return out


def _values(candidate: Any, back: bool = False) -> dict[str, float]:
    inverse = {v: k for k, v in RENAME.items()}
    return {(inverse[p] if back else p): v for p, v in candidate.values.items()}


def test_registered_and_named_by_the_spec(renamed: Topology) -> None:
    assert get_topology("renamed-colpitts") is renamed
    assert renamed.unit("Lt") == "H" and renamed.unit("Ka") == "F"
    spec = spec_from_dict(_renamed_spec(BASE))
    assert spec.topo is renamed


def test_solve_gives_what_the_colpitts_gives(renamed: Topology) -> None:
    ref = solve(spec_from_dict(BASE), top=5)
    got = solve(spec_from_dict(_renamed_spec(BASE)), top=5)
    assert len(ref.candidates) == len(got.candidates) == 5
    for a, b in zip(ref.candidates, got.candidates, strict=True):
        assert _values(b, back=True) == a.values
        assert b.yield_estimate == a.yield_estimate
    best = _values(got.candidates[0], back=True)
    c = best["C1"] * best["C2"] / (best["C1"] + best["C2"]) + 5e-12  # + stray across the tank
    f = 1 / (2 * math.pi * math.sqrt(best["L"] * c))
    assert abs(f / 1.2e6 - 1) <= 0.04  # inside the ±4 % window


def test_evaluate_and_production_figures_match(renamed: Topology) -> None:
    data = copy.deepcopy(BASE)
    data["yield"]["temperature"] = ["-20 °C", "70 °C"]  # drift over temperature too
    data["yield"]["target"] = "99 %"  # missed, so the trimmer advice runs too
    data["parts"]["C1"]["dielectric"] = "X7R"
    data["parts"]["C2"]["dielectric"] = "C0G"
    values = {"C1": 470e-12, "C2": 1e-9, "L": 56e-6}
    ref = evaluate(spec_from_dict(data), values)
    got = evaluate(spec_from_dict(_renamed_spec(data)), {RENAME[p]: v for p, v in values.items()})
    assert got.candidates[0].yield_estimate == ref.candidates[0].yield_estimate
    assert got.candidates[0].f_nominal_hz == ref.candidates[0].f_nominal_hz
    # drivers, yield over temperature, what to buy tighter, cost: the same, position names aside
    assert "yield_over_temperature" in ref.candidates[0].extra
    assert _renamed_back(got.candidates[0].extra) == _as_text(ref.candidates[0].extra)


def _as_text(extra: dict[str, Any]) -> str:
    return json.dumps(extra, sort_keys=True, default=str)


def _renamed_back(extra: dict[str, Any]) -> str:
    text = _as_text(extra)
    for old, new in RENAME.items():
        text = text.replace(f'"{new}"', f'"{old}"')
    return text


def test_loaded_circuit_model_matches(renamed: Topology) -> None:
    data = copy.deepcopy(BASE)
    data["amplifier"] = {
        "kind": "bjt",
        "supply": "9 V",
        "r_load": "1 kohm",
        "r_bias_top": "47 kohm",
        "r_bias_bottom": "10 kohm",
        "r_emitter": "1 kohm",
        "c_emitter": "100 nF",
        "c_coupling": "10 nF",
    }
    values = {"C1": 470e-12, "C2": 1e-9, "L": 56e-6}
    ref = evaluate(spec_from_dict(data), values).candidates[0]
    got = evaluate(
        spec_from_dict(_renamed_spec(data)), {RENAME[p]: v for p, v in values.items()}
    ).candidates[0]
    assert ref.extra["f_loaded_hz"] is not None
    assert got.extra["f_loaded_hz"] == ref.extra["f_loaded_hz"]
    assert got.extra["startup_margin"] == ref.extra["startup_margin"]


def test_netlist_names_each_part_by_its_spice_letter(renamed: Topology) -> None:
    """A position whose name does not begin with its element's letter is written with the
    letter in front (SPICE reads an element's kind from its first letter: a line "Ka …"
    would be a coupling element; SPICE3 manual, element conventions). The renamed netlist
    is then the Colpitts netlist with its parts' names mapped, line for line. Bug caught:
    the tank's lines named after the position as it is."""
    data = copy.deepcopy(BASE)
    data["amplifier"] = {
        "kind": "bjt",
        "supply": "9 V",
        "r_load": "1 kohm",
        "r_bias_top": "47 kohm",
        "r_bias_bottom": "10 kohm",
        "r_emitter": "1 kohm",
        "c_emitter": "100 nF",
        "c_coupling": "10 nF",
    }
    values = {"C1": 470e-12, "C2": 1e-9, "L": 56e-6}
    ref_spec, got_spec = spec_from_dict(data), spec_from_dict(_renamed_spec(data))
    assert ref_spec.amplifier is not None and got_spec.amplifier is not None
    params = ref_spec.amplifier.to_params()
    ref = write_netlist(get_topology("colpitts"), values, 5e-12, params)
    got = write_netlist(renamed, {RENAME[p]: v for p, v in values.items()}, 5e-12, params)
    got_lines = got.replace("renamed-colpitts", "colpitts").splitlines()
    mapped = [
        line.replace("CKa ", "C1 ").replace("CKb ", "C2 ").replace("Lt1 ", "L1 ")
        for line in got_lines
    ]
    assert mapped == ref.replace("renamed-colpitts", "colpitts").splitlines()
    assert any(line.startswith("CKa ") for line in got_lines)
    assert not any(line.startswith(("Ka ", "Kb ")) for line in got_lines)
