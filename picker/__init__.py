"""picker: standard-value part picking and Monte Carlo yield for LC oscillators.

The notebook API lives in :mod:`picker.api.solve` and is re-exported here lazily:
``load_spec``, ``solve``, ``evaluate``.
"""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__", "evaluate", "load_spec", "solve"]


def __getattr__(name: str):
    if name in ("load_spec", "solve", "evaluate", "spec_from_dict"):
        from picker.api import solve as api

        return getattr(api, name)
    raise AttributeError(name)
