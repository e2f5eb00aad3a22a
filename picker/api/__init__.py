"""What a notebook user imports: load a spec, solve it, evaluate a given design, run a plan.

>>> from picker.api import load_spec, solve                # doctest: +SKIP
>>> result = solve(load_spec("demo_specs/probe_exciter.toml"))  # doctest: +SKIP
>>> result.candidates[0].values                      # doctest: +SKIP

``problem`` turns the spec into the core's inputs, ``pipeline`` orchestrates (its
``solve`` is re-exported here, so the module is not named after the function),
``candidates`` builds the ranked results and their extras, ``misses`` explains
an empty result, ``results`` holds the result types and ``plan`` runs a
multi-channel plan. The CLI is a thin client of these functions.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from picker.api.candidates import circuit_extras, cost_extras, production_extras
from picker.api.pipeline import evaluate, solve
from picker.api.problem import (
    board_model_of,
    build_problem,
    given_table,
    parasitics_of,
    part_table,
    random_inputs,
    simulation_of,
)
from picker.api.results import Candidate, Miss, PartPick, SolveResult
from picker.spec.load import load_spec, spec_from_dict

if TYPE_CHECKING:
    from picker.api.plan import ChannelRun, PlanRun, run_plan

# The plan runner pulls in the buyer's CP-SAT model (ortools, about 1 s to import):
# loaded on first use (PEP 562), so a solve does not pay for it.
_LAZY = {"ChannelRun", "PlanRun", "run_plan"}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        from picker.api import plan

        return getattr(plan, name)
    raise AttributeError(f"module 'picker.api' has no attribute {name!r}")


__all__ = [
    "Candidate",
    "ChannelRun",
    "Miss",
    "PartPick",
    "PlanRun",
    "SolveResult",
    "board_model_of",
    "build_problem",
    "circuit_extras",
    "cost_extras",
    "evaluate",
    "given_table",
    "load_spec",
    "parasitics_of",
    "part_table",
    "production_extras",
    "random_inputs",
    "run_plan",
    "simulation_of",
    "solve",
    "spec_from_dict",
]
