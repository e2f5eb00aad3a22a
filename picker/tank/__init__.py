"""Tank topologies as plug-ins: the registry.

Every subclass of :class:`picker.tank.base.Topology` registers itself when its
module is imported; the imports below make every topology module part of the
registry (adding a topology: one module and one import line here, see
:mod:`picker.tank.base`).
"""

from __future__ import annotations

from picker.errors import SpecError
from picker.tank.base import TOPOLOGIES, Topology

# Importing a module registers its topology; the registry (and every message
# that lists the topologies) keeps this order, so the imports are not sorted.
from picker.tank import colpitts  # noqa: F401, I001  # isort: skip
from picker.tank import clapp  # noqa: F401, I001  # isort: skip
from picker.tank import hartley  # noqa: F401, I001  # isort: skip
from picker.tank import hartley_series  # noqa: F401, I001  # isort: skip

__all__ = [
    "TOPOLOGIES",
    "Topology",
    "all_positions",
    "get_topology",
    "position_unit",
    "topology_names",
]


def topology_names() -> tuple[str, ...]:
    """Names of the registered topologies, in registration order."""
    return tuple(TOPOLOGIES)


def get_topology(name: str) -> Topology:
    """Look a registered topology up by name (case and surrounding blanks ignored)."""
    try:
        return TOPOLOGIES[name.strip().lower()]
    except KeyError:
        raise SpecError(
            f"expected a topology, one of {', '.join(TOPOLOGIES)}; got {name!r}", key="topology"
        ) from None


def all_positions() -> tuple[str, ...]:
    """Every position of any registered topology, sorted."""
    return tuple(sorted({p for t in TOPOLOGIES.values() for p in t.positions}))


def position_unit(pos: str) -> str | None:
    """SI unit ("F" or "H") of a position in the registered topologies; None if none has it."""
    for topo in TOPOLOGIES.values():
        if pos in topo.positions:
            return topo.unit(pos)
    return None
