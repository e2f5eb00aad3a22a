"""Loading a spec: TOML in, a validated :class:`~picker.spec.model.Spec` out.

This is an edge module: it reads the spec file (through
:func:`picker.files.read_text`), merges command-line overrides, validates the
tables with :mod:`picker.spec.model`, reads the stock lists and measured lots
the parts name, and turns every fault into a :class:`~picker.errors.SpecError`
that names the file, the key path (``parts.C1.tolerance``), what was expected
and what was given.
"""

from __future__ import annotations

import copy
import math
import tomllib
from pathlib import Path
from typing import Any

from pydantic import ValidationError
from pydantic_core import ErrorDetails

from picker.errors import KeyedError, SpecError
from picker.files import read_text
from picker.parts import drift
from picker.spec.model import PartSpec, Spec
from picker.spec.production import load_lots
from picker.spec.stock import StockList, load_stock, stock_table


def _toml_key(k: str) -> str:
    """A key as TOML writes it: bare when it can be, else quoted (so '' shows as "")."""
    if k and all(c.isascii() and (c.isalnum() or c in "_-") for c in k):
        return k
    return '"' + k.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _format_error(err: ErrorDetails, file: str | None) -> SpecError:
    """One pydantic error as a SpecError naming the TOML key path."""
    loc = [str(x) for x in err.get("loc", ()) if not str(x).startswith("function-")]
    # pydantic puts the model name in loc for tagged validators; drop internal markers
    loc = [x for x in loc if x not in ("FrequencySpec", "PartSpec")]
    msg = err.get("msg", "invalid value")
    ctx = err.get("ctx") or {}
    exc = ctx.get("error")
    key = ".".join("yield" if x == "yield_" else _toml_key(x) for x in loc)
    if isinstance(exc, KeyedError):
        key = f"{key}.{exc.key}" if key else exc.key
        msg = exc.message
    elif msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
    elif err.get("type") == "extra_forbidden":
        msg = f"unknown key (a typo?); got {err.get('input')!r}"
    elif err.get("type") == "missing":
        msg = "missing required key"
    elif err.get("type") == "literal_error":
        msg = (
            f"expected {ctx.get('expected', 'one of the allowed words')}; got {err.get('input')!r}"
        )
    else:
        msg = f"{msg}; got {err.get('input')!r}"
    return SpecError(msg, file=file, key=key or None)


def _merge(base: dict[str, Any], over: dict[str, Any]) -> dict[str, Any]:
    """``over`` merged into a deep copy of ``base``, table by table."""
    out = copy.deepcopy(base)
    for k, v in over.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


def spec_from_dict(data: dict[str, Any], *, file: str | None = None) -> Spec:
    """Validate a spec given as a nested dict (the parsed TOML)."""
    try:
        spec = Spec.model_validate(data)
    except ValidationError as exc:
        raise _format_error(exc.errors()[0], file) from None
    except KeyedError as exc:
        raise SpecError(exc.message, file=file, key=exc.key) from None
    except SpecError as exc:
        raise exc.located(file=file) from None
    if spec.amplifier is not None:  # a bias network that cannot work is bad input too
        try:
            spec.amplifier.to_params(spec.parts)
        except SpecError as exc:
            raise exc.located(file=file) from None
    spec = _load_stock_lists(spec, file)
    return load_lots(spec, file).model_copy(update={"source": file or ""})


def complete_spec(spec: Spec) -> Spec:
    """A spec built directly (``Spec(**d)``, ``Spec.model_validate(d)``) made whole.

    :func:`spec_from_dict` reads the stock lists and lot files a spec names; a
    :class:`Spec` built by hand has only their paths. This reads them the same
    way (relative to ``spec.source``, else the working folder), so a spec from
    keywords and one from a dict or a file behave the same. A spec that holds
    everything already is returned as it is.
    """
    stock = any(p.stock is not None and p.stock_list is None for p in spec.parts.values())
    lot = any(p.lot is not None and p.lot_deviations is None for p in spec.parts.values())
    if not (stock or lot):
        return spec
    file = spec.source or None
    return load_lots(_load_stock_lists(spec, file), file)


def _load_stock_lists(spec: Spec, file: str | None) -> Spec:
    """Read every part's ``stock`` file (relative to the spec file; each path once).

    Also checks that each stock position keeps at least one part after its
    filters, and that ``[cost] rank_by = "cost"`` has a yield threshold.
    """
    c = spec.cost
    if c.rank_by == "cost" and c.min_yield is None and spec.yield_.target is None:
        raise SpecError(
            'rank_by = "cost" needs a yield floor: give cost.min_yield or yield.target',
            file=file,
            key="cost.rank_by",
        )
    if not any(p.stock is not None for p in spec.parts.values()):
        return spec
    base = Path(file).parent if file else Path.cwd()
    cache: dict[Path, StockList] = {}
    parts = dict(spec.parts)
    for pos, part in spec.parts.items():
        if part.stock is None:
            continue
        path = Path(part.stock)
        path = (path if path.is_absolute() else base / path).resolve()
        if not path.is_file():  # a fault of the spec's key, not of a file that is not there
            raise SpecError(
                f"expected an existing stock-list file; no such file {str(path)!r}",
                file=file,
                key=f"parts.{pos}.stock",
            )
        if path not in cache:
            try:
                cache[path] = load_stock(path)
            except SpecError as exc:
                raise SpecError(
                    f"{exc.message} (stock list of parts.{pos})",
                    file=exc.file or str(path),
                    key=exc.key,
                ) from None
        stock = cache[path]
        t = stock_table(
            stock,
            pos[0],
            part.min or 0.0,
            part.max or math.inf,
            tolerance_max=part.tolerance,
            dielectric=materials_like(stock, part),
            min_voltage=part.voltage_rating,
            qty=c.build_quantity,
        )
        if len(t["values"]) == 0:
            raise SpecError(
                f"the stock list {part.stock!r} holds no {pos[0]} part within this position's "
                "min, max, tolerance, dielectric and voltage_rating",
                file=file,
                key=f"parts.{pos}.stock",
            )
        parts[pos] = part.model_copy(update={"stock_list": stock})
    return spec.model_copy(update={"parts": parts})


def materials_like(stock: StockList, part: PartSpec) -> list[str] | None:
    """The stock list's dielectric/core texts that name the position's material."""
    if part.dielectric is None:
        return None
    out = []
    for text in {str(m) for m in stock.material}:
        try:
            if text and drift.get_material(text).name == part.dielectric:
                out.append(text)
        except SpecError:
            continue
    return out


def load_spec(path: str | Path, overrides: dict[str, Any] | None = None) -> Spec:
    """Read and validate a spec file; ``overrides`` is merged over the TOML first."""
    name = str(path)
    text = read_text(path, what="a spec file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"not valid TOML: {exc}", file=name) from None
    if overrides:
        data = _merge(data, overrides)
    return spec_from_dict(data, file=name)
