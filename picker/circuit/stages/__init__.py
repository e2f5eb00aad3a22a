"""Amplifier stages as plug-ins: the registry.

Every subclass of :class:`picker.circuit.stages.base.Stage` that sets a ``name``
registers itself when its module is imported; the imports below make every
stage module part of the registry (adding a stage: one module and one import
line here, see :mod:`picker.circuit.stages.base`).
"""

from __future__ import annotations

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import BiasPoint, SmallSignal
from picker.circuit.stages.base import STAGES, Stage

# Importing a module registers its stage; the registry (and every message that
# lists the stages) keeps this order, so the imports are not sorted.
from picker.circuit.stages import common_emitter  # noqa: F401, I001  # isort: skip
from picker.circuit.stages import common_source  # noqa: F401, I001  # isort: skip
from picker.circuit.stages import common_collector  # noqa: F401, I001  # isort: skip
from picker.circuit.stages import common_drain  # noqa: F401, I001  # isort: skip
from picker.circuit.stages import common_base  # noqa: F401, I001  # isort: skip
from picker.circuit.stages import common_gate  # noqa: F401, I001  # isort: skip

__all__ = [
    "STAGES",
    "Stage",
    "bias",
    "default_stage",
    "device_kinds",
    "get_stage",
    "small_signal",
    "stage_names",
    "stage_of",
]


def stage_names() -> tuple[str, ...]:
    """Names of the registered stages, in registration order."""
    return tuple(STAGES)


def device_kinds() -> tuple[str, ...]:
    """The device types the registered stages are built from, in registration order."""
    return tuple(dict.fromkeys(s.device for s in STAGES.values()))


def get_stage(name: str) -> Stage:
    """Look a registered stage up by name (a ValueError listing the names otherwise)."""
    try:
        return STAGES[name]
    except KeyError:
        raise ValueError(
            f"expected an amplifier stage, one of {', '.join(STAGES)}; got {name!r}"
        ) from None


def default_stage(kind: str) -> Stage:
    """The stage a device type gets when no stage is named ("bjt" → common-emitter)."""
    for s in STAGES.values():
        if s.device == kind and s.default_for_device:
            return s
    kinds = " or ".join(repr(k) for k in device_kinds())
    raise ValueError(f"amplifier kind must be {kinds}, got {kind!r}")


def stage_of(params: AmplifierParams) -> Stage:
    """The stage of ``params``: its ``stage``, or the default for its ``kind``; a
    ValueError when the named stage is not built from that kind of device."""
    if params.stage is None:
        return default_stage(params.kind)
    stage = get_stage(params.stage)
    if stage.device != params.kind:
        raise ValueError(
            f"the {stage.name} stage is built from a {stage.device}, not a {params.kind}"
        )
    return stage


def bias(params: AmplifierParams) -> BiasPoint | None:
    """DC bias point of the amplifier's stage, or None where it solves none."""
    return stage_of(params).bias(params)


def small_signal(params: AmplifierParams) -> SmallSignal:
    """Hybrid-pi values the loaded model uses for ``params`` (its stage's)."""
    return stage_of(params).small_signal(params)
