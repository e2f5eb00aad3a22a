"""picker: standard-value part picking and Monte Carlo yield for LC oscillators.

The public API, importable from the top::

    import picker
    spec = picker.load_spec("demo_specs/probe_exciter.toml")
    result = picker.solve(spec, plot_data=True)
    result.candidates[0].values
    result.to_dataframe()          # one row per design, units in the column names
    picker.result_figures(result)  # matplotlib Figures (plot_histogram(..., ax=ax) draws on yours)
    picker.write_report("report.html", result)

Names are loaded on first use (PEP 562), so ``import picker`` is cheap and
``picker --help`` imports none of the numerical stack.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

# public name -> the module that defines it
_WHERE: dict[str, str] = {
    "load_spec": "picker.api",
    "spec_from_dict": "picker.api",
    "solve": "picker.api",
    "evaluate": "picker.api",
    "run_plan": "picker.api",
    "SolveResult": "picker.api",
    "Candidate": "picker.api",
    "PartPick": "picker.api",
    "Miss": "picker.api",
    "PlanRun": "picker.api",
    "Spec": "picker.spec",
    "plot_histogram": "picker.report.plots",
    "plot_yield_vs_tolerance": "picker.report.plots",
    "plot_drivers": "picker.report.plots",
    "result_figures": "picker.report.plots",
    "write_report": "picker.report.html",
    "PickerError": "picker.errors",
    "SpecError": "picker.errors",
    "InfeasibleError": "picker.errors",
    "SolverError": "picker.errors",
}

__all__ = [
    "Candidate",
    "InfeasibleError",
    "Miss",
    "PartPick",
    "PickerError",
    "PlanRun",
    "SolveResult",
    "SolverError",
    "Spec",
    "SpecError",
    "__version__",
    "evaluate",
    "load_spec",
    "plot_drivers",
    "plot_histogram",
    "plot_yield_vs_tolerance",
    "result_figures",
    "run_plan",
    "solve",
    "spec_from_dict",
    "write_report",
]

if TYPE_CHECKING:  # for type checkers and editors; never runs
    from picker.api import (
        Candidate,
        Miss,
        PartPick,
        PlanRun,
        SolveResult,
        evaluate,
        load_spec,
        run_plan,
        solve,
        spec_from_dict,
    )
    from picker.errors import InfeasibleError, PickerError, SolverError, SpecError
    from picker.report.html import write_report
    from picker.report.plots import (
        plot_drivers,
        plot_histogram,
        plot_yield_vs_tolerance,
        result_figures,
    )
    from picker.spec import Spec


def __getattr__(name: str) -> Any:
    try:
        module = _WHERE[name]
    except KeyError:
        raise AttributeError(f"module 'picker' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # later lookups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(__all__) | {"__doc__", "__file__", "__name__", "__path__"})
