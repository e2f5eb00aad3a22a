"""The spec: TOML in, a validated :class:`Spec` with SI floats out (the only home of pydantic).

``model`` holds the pydantic models, ``fields`` the shared field parsers,
``load`` reads a file and merges overrides, ``production`` and ``amplifier``
the keys of the production view and of ``[amplifier]``, ``stock``, ``lots`` and
``plan`` the other input files.
"""

from __future__ import annotations

from picker.spec.load import load_spec, spec_from_dict
from picker.spec.model import PartSpec, Spec

__all__ = ["PartSpec", "Spec", "load_spec", "spec_from_dict"]
