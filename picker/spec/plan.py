"""The plan file: several oscillator channels on one board, consolidated together.

A plan is TOML (our own format; unknown keys are errors):

.. code-block:: toml

    title = "Three-channel sensor board"   # optional
    base = "plan_sensor_base.toml"          # shared spec for channels given by target
    stock = "stock_demo.csv"                # optional stock list (picker.spec.stock format)
    build_quantity = 500                    # boards to build
    priorities = ["parts", "cost", "yield"] # any order, any non-empty subset
    min_yield = "90 %"                      # default for every channel (default 0)
    candidates = 200                        # designs per channel handed to the solver
    time_limit = 10                         # seconds for the solver (default 10)

    [channels.north]
    target = "455 kHz"                      # on top of base: frequency.target
    window = "±2 %"                         # optional: frequency.window
    min_yield = "95 %"                      # optional, overrides the plan's

    [channels.ref]
    spec = "probe_exciter.toml"             # a whole spec of its own
    candidates = 50

    [channels.south]
    target = "600 kHz"
    [channels.south.set]                    # any spec keys, merged over the spec
    parts.L.max = "1 mH"

Paths are relative to the plan file. Each channel becomes a spec path plus an
overrides dict that :func:`picker.spec.load.load_spec` merges over that TOML before
validation. Series values carry no part id; they are named by value and
tolerance (:func:`picker.buyer.model.generic_part_id`) and, when a stock list is
given, matched to the cheapest stock part of the same kind and value with a
tolerance at least as tight (``match_stock = false`` turns this off).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from picker import units
from picker.buyer.model import PRIORITIES
from picker.errors import SpecError
from picker.files import read_text
from picker.spec.fields import currency_code
from picker.spec.load import input_files, parse_toml
from picker.tank import get_topology


def _fraction(v: Any) -> float:
    """A yield between 0 and 100 % ("90 %", 0.9); ValueError otherwise."""
    try:
        x = units.parse_fraction(v)
    except SpecError as exc:
        raise ValueError(exc.message) from None
    if not 0 <= x <= 1:
        raise ValueError(f"expected a yield between 0 and 100 %; got {v!r}")
    return x


def _path_text(v: Any) -> Any:
    """A file path must be non-blank text (a blank one would name the plan's folder)."""
    if v is not None and not (isinstance(v, str) and v.strip()):
        raise ValueError(f"expected the path of a file, relative to the plan; got {v!r}")
    return v


class ChannelSpec(BaseModel):
    """One channel of a plan: a spec of its own, or a target on top of the base."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    spec: str | None = None
    target: str | float | None = None
    window: str | float | None = None
    min_yield: float | None = None
    candidates: int | None = Field(None, ge=1, le=10_000)
    set: dict[str, Any] = Field(default_factory=dict)

    @field_validator("min_yield", mode="before")
    @classmethod
    def _yield(cls, v: Any) -> float | None:
        return None if v is None else _fraction(v)

    @field_validator("spec", mode="before")
    @classmethod
    def _spec_path(cls, v: Any) -> Any:
        return _path_text(v)

    @model_validator(mode="after")
    def _one_source(self) -> ChannelSpec:
        if self.spec is None and self.target is None:
            raise ValueError("expected spec = 'file.toml' or target = '455 kHz'")
        if self.window is not None and self.target is None:
            raise ValueError("window needs a target")
        return self


class PlanSpec(BaseModel):
    """A validated plan file (paths still as written)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    title: str = ""
    base: str | None = None
    stock: str | None = None
    build_quantity: int = Field(..., ge=1, le=100_000_000)
    priorities: tuple[str, ...] = PRIORITIES
    min_yield: float = 0.0
    candidates: int = Field(200, ge=1, le=10_000)
    time_limit: float = Field(10.0, gt=0, le=3600)
    match_stock: bool = True
    stock_only: bool = False
    #: currency of the prices (ISO 4217-style code); "" takes the channel specs' [cost] currency
    currency: str = ""
    channels: dict[str, ChannelSpec]

    @field_validator("currency", mode="before")
    @classmethod
    def _currency(cls, v: Any) -> str:
        return currency_code(v)

    @field_validator("min_yield", mode="before")
    @classmethod
    def _yield(cls, v: Any) -> float:
        return _fraction(v)

    @field_validator("base", "stock", mode="before")
    @classmethod
    def _path(cls, v: Any) -> Any:
        return _path_text(v)

    @field_validator("build_quantity", "candidates", mode="before")
    @classmethod
    def _whole(cls, v: Any) -> int:
        if isinstance(v, bool) or not isinstance(v, int):
            raise ValueError(f"expected a whole number; got {v!r}")
        return v

    @field_validator("priorities", mode="before")
    @classmethod
    def _prio(cls, v: Any) -> tuple[str, ...]:
        if isinstance(v, str) or not isinstance(v, list | tuple):
            raise ValueError(f"expected a list such as ['parts', 'cost', 'yield']; got {v!r}")
        out = tuple(str(x).strip().lower() for x in v)
        if not out or len(set(out)) != len(out) or not set(out) <= set(PRIORITIES):
            raise ValueError(
                f"expected a list of {', '.join(PRIORITIES)}, each at most once; got {list(v)!r}"
            )
        return out

    @model_validator(mode="after")
    def _channels(self) -> PlanSpec:
        if not self.channels:
            raise ValueError("expected at least one [channels.NAME] table")
        if self.stock_only and self.stock is None:
            raise ValueError("stock_only = true needs stock = 'list.csv'")
        for name, ch in self.channels.items():
            if ch.spec is None and self.base is None:
                raise ValueError(f"channel {name!r} gives a target but the plan has no base spec")
        return self


@dataclass(frozen=True)
class Plan:
    """A loaded plan: the validated file plus its location."""

    spec: PlanSpec
    path: Path

    def resolve(self, rel: str) -> Path:
        p = Path(rel)
        return p if p.is_absolute() else self.path.parent / p

    def channel_sources(self) -> list[tuple[str, Path, dict]]:
        """(channel name, spec path, overrides dict) for every channel, in file order."""
        out = []
        for name, ch in self.spec.channels.items():
            path = self.resolve(ch.spec if ch.spec is not None else self.spec.base)  # type: ignore[arg-type]
            over: dict[str, Any] = _nested(ch.set)
            self._plan_paths(over, path)
            if ch.target is not None:
                freq = dict(over.get("frequency", {}))
                freq["target"] = ch.target
                if ch.window is not None:
                    freq["window"] = ch.window
                over["frequency"] = freq
            over.setdefault("title", f"{self.spec.title or self.path.stem}: {name}")
            out.append((name, path, over))
        return out

    def _plan_paths(self, over: dict, spec_path: Path) -> None:
        """Make the overrides' ``parts.X.stock`` / ``lot`` paths relative to the plan file
        (absolute), and with ``stock_only`` fill every position from the plan's stock list
        (the spec's series is dropped; its min, max, tolerance, dielectric and
        voltage_rating become the stock filters)."""
        parts = over.get("parts")
        if isinstance(parts, dict):
            for table in parts.values():
                if not isinstance(table, dict):
                    continue
                for key in ("stock", "lot"):
                    if isinstance(table.get(key), str):
                        table[key] = str(self.resolve(table[key]).resolve())
        if not self.spec.stock_only:
            return
        try:
            text = read_text(spec_path, what="a spec file")
            topo = parse_toml(text, file=str(spec_path)).get("topology", "")
            positions = get_topology(str(over.get("topology", topo))).positions
        except (OSError, ValueError, SpecError):
            return  # the spec's own load reports the fault
        stock = str(self.resolve(self.spec.stock).resolve())  # type: ignore[arg-type]
        parts = over.setdefault("parts", {})
        for pos in positions:
            table = parts.setdefault(pos, {})
            table.setdefault("stock", stock)
            for key in ("series", "values", "price", "prices"):
                table[key] = None

    def inputs(self) -> list[Path]:
        """Every file the plan reads (never to be written over)."""
        files = [self.path]
        for _, p, over in self.channel_sources():
            files += input_files(p)  # the channel's spec and the files it names
            files += input_files(p, over)[1:]  # and those the plan's overrides name
        if self.spec.stock:
            files.append(self.resolve(self.spec.stock))
        return files


def _nested(d: dict) -> dict:
    """Deep-copy a TOML table, expanding dotted keys written as strings ("parts.L.max")."""
    out: dict[str, Any] = {}
    for k, v in d.items():
        v = _nested(v) if isinstance(v, dict) else v
        node = out
        *head, last = str(k).split(".")
        for h in head:
            node = node.setdefault(h, {})
        if isinstance(v, dict) and isinstance(node.get(last), dict):
            node[last].update(v)
        else:
            node[last] = v
    return out


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan file (SpecError naming the file and key on any fault)."""
    p = Path(path)
    name = str(path)
    text = read_text(path, what="a plan file", missing="expected {what}; no such file")
    data = parse_toml(text, file=name)
    try:
        spec = PlanSpec.model_validate(data)
    except ValidationError as exc:
        err = exc.errors()[0]
        # the plan-level check (no loc) is about the channels table
        key = ".".join(str(x) for x in err["loc"]) or "channels"
        msg = err["msg"].removeprefix("Value error, ")
        if err["type"] == "extra_forbidden":
            msg = f"unknown key (a typo?); got {err.get('input')!r}"
        elif err["type"] == "missing":
            msg = "expected this key; it is missing"
        raise SpecError(msg, file=name, key=key) from None
    return Plan(spec, p)
