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
import os
import re
import tomllib
from pathlib import Path
from typing import Any

from pydantic import ValidationError
from pydantic_core import ErrorDetails
from scipy.special import ndtri

from picker.errors import KeyedError, SpecError
from picker.files import read_text
from picker.parts import distributions, drift
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
    _check_physical(spec, file)
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


#: Largest tolerance a normal distribution (sigma = tol/3, untruncated) may have: its
#: deepest draw, at the sampler's smallest variate 2^-53 (z = -8.2), stays above -100 %.
NORMAL_TOL_MAX = distributions.COVERAGE_K / -float(ndtri(distributions.U_MIN))


def _check_physical(spec: Spec, file: str | None) -> None:
    """Refuse a distribution that would draw part values at or below zero.

    A normal distribution (sigma = tol/3, JCGM 100:2008 G.1) is not truncated, so
    its tail reaches z = Φ⁻¹(2^-53) = -8.2 and a value nominal·(1 + z·tol/3); that
    is at or below zero for a tolerance above :data:`NORMAL_TOL_MAX` (36.5 %). The
    uniform kinds stay within ±tol, below 100 % by the tolerance's own check.
    """
    for pos, part in spec.parts.items():
        kind = part.distribution or spec.yield_.distribution
        if part.lot is not None or kind != "normal":
            continue
        tol = part.tolerance
        if part.stock_list is not None:
            t = stock_table(
                part.stock_list,
                pos[0],
                part.min or 0.0,
                part.max or math.inf,
                tolerance_max=part.tolerance,
                dielectric=materials_like(part.stock_list, part),
                min_voltage=part.voltage_rating,
                qty=spec.cost.build_quantity,
            )
            tol = float(max(t["tol"])) if len(t["tol"]) else None
        if tol is not None and tol > NORMAL_TOL_MAX:
            raise SpecError(
                f"a normal distribution (sigma = tolerance/3) with a tolerance of "
                f"{tol:.3g} draws part values at or below zero in its tail (from "
                f"{NORMAL_TOL_MAX:.0%}); use distribution = 'uniform' or a tighter tolerance",
                file=file,
                key=f"parts.{pos}.tolerance" if part.stock_list is None else f"parts.{pos}.stock",
            )


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
        path = path if path.is_absolute() else base / path
        try:
            path = path.resolve()
        except (OSError, RuntimeError):  # a loop of symbolic links: read_text words it
            pass
        if not os.path.lexists(path):  # a fault of the spec's key, not of a file
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
                    f"{_not_echoed(exc)} (stock list of parts.{pos})",
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


def _not_echoed(exc: SpecError) -> str:
    """The message of a stock list's fault, without the file's first row in it.

    The spec merely names the file: if its first row is not a stock list's header,
    the file is something else (``stock = "/etc/shadow"``), and its contents stay
    out of the message. Faults past a recognised header quote their cell as usual.
    """
    if (exc.key or "").startswith("row 1") and ("got " in exc.message or "twice" in exc.message):
        return (
            "expected a stock list: a CSV file whose first row names its columns "
            "(id, kind, value, ...); the first row of this file is not such a header"
        )
    return exc.message


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


#: Deepest nesting of tables and arrays a spec or plan may have (a spec needs 4).
MAX_TOML_DEPTH = 32
#: Largest integer a spec or plan may hold (a signed 64-bit integer: seeds, counts).
MAX_TOML_INT = 2**63 - 1


def parse_toml(text: str, *, file: str) -> dict[str, Any]:
    """TOML text to a dict, bounded: nesting depth and integer size; faults as SpecError.

    ``tomllib`` recurses once per level of nesting and converts any run of digits
    to an integer, so the text is scanned first (strings and comments skipped): a
    spec nested deeper than :data:`MAX_TOML_DEPTH` or holding a run of more than
    :data:`MAX_DIGITS` digits is refused before it is parsed, with its line and
    column. Integers beyond :data:`MAX_TOML_INT` are then refused with their key.
    """
    fault = _scan(text)
    if fault is not None:
        raise SpecError(f"not valid TOML: {fault}", file=file)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"not valid TOML: {exc}", file=file) from None
    except (ValueError, RecursionError) as exc:  # what the scan missed, if anything
        raise SpecError(f"not valid TOML: {str(exc).split(';')[0]}", file=file) from None
    _check_integers(data, file)
    return data


#: Longest run of digits read as a number (2^63 has 19; a float's text needs no more).
MAX_DIGITS = 400


def _scan(text: str) -> str | None:
    """Too deep a nesting or too long a number in TOML text (strings and comments skipped)."""
    depth = 0
    pos = 0
    for m in _SPECIAL.finditer(text):
        i = m.start()
        if i < pos:
            continue
        c = text[i]
        if c in "[{":
            depth += 1
            if depth > MAX_TOML_DEPTH:
                return f"tables or arrays nested more than {MAX_TOML_DEPTH} deep {_at(text, i)}"
        elif c in "]}":
            depth = max(0, depth - 1)
        elif c == "#":
            j = text.find("\n", i)
            pos = len(text) if j < 0 else j
        elif c in "\"'":  # a string: skip to its closing quote
            quote = c * 3 if text.startswith(c * 3, i) else c
            end = _STRING_END[quote].search(text, i + len(quote))
            pos = len(text) if end is None else end.end()
        else:
            return f"a number of more than {MAX_DIGITS} digits {_at(text, i)}"
    return None


def _at(text: str, i: int) -> str:
    """``(at line L, column C)`` of index ``i``, as tomllib words its positions."""
    line = text.count("\n", 0, i) + 1
    return f"(at line {line}, column {i - text.rfind(chr(10), 0, i)})"


_SPECIAL = re.compile(rf"[\[\]{{}}#\"']|[0-9_]{{{MAX_DIGITS + 1},}}")
_STRING_END = {
    '"': re.compile(r'(?:\\.|[^"\\\n])*"'),
    "'": re.compile(r"[^'\n]*'"),
    '"""': re.compile(r'(?:\\.|[^\\])*?"""', re.DOTALL),
    "'''": re.compile(r"(?s).*?'''"),
}


def _check_integers(data: Any, file: str) -> None:
    """Refuse an integer beyond ±MAX_TOML_INT anywhere in ``data``, naming its key."""
    stack: list[tuple[str, Any]] = [("", data)]
    while stack:
        key, v = stack.pop()
        if isinstance(v, dict):
            stack.extend(
                (f"{key}.{_toml_key(str(k))}" if key else _toml_key(str(k)), x)
                for k, x in v.items()
            )
        elif isinstance(v, list):
            stack.extend((f"{key}[{i}]", x) for i, x in enumerate(v))
        elif isinstance(v, int) and not isinstance(v, bool) and abs(v) > MAX_TOML_INT:
            raise SpecError(
                f"expected an integer of at most {MAX_TOML_INT:,} in size; got one of "
                f"{len(str(abs(v)))} digits",
                file=file,
                key=key or None,
            )


def input_files(path: str | Path, data: dict[str, Any] | None = None) -> list[Path]:
    """The spec file and every file it names (stock lists, lot files): a command's inputs.

    No output may be any of them (:func:`picker.files.check_output`). Read from the
    TOML without validating it, so outputs can be checked before the run; a spec
    that cannot be read names only itself (its load reports the fault).
    """
    p = Path(path)
    files = [p]
    if data is None:
        try:
            data = parse_toml(read_text(p, what="a spec file"), file=str(p))
        except SpecError:
            return files
    parts = data.get("parts")
    if not isinstance(parts, dict):
        return files
    for table in parts.values():
        if not isinstance(table, dict):
            continue
        for key in ("stock", "lot"):
            name = table.get(key)
            if isinstance(name, str) and name and "\0" not in name:
                q = Path(name)
                files.append(q if q.is_absolute() else p.parent / q)
    return files


def load_spec(path: str | Path, overrides: dict[str, Any] | None = None) -> Spec:
    """Read and validate a spec file; ``overrides`` is merged over the TOML first."""
    name = str(path)
    text = read_text(path, what="a spec file")
    data = parse_toml(text, file=name)
    if overrides:
        data = _merge(data, overrides)
    return spec_from_dict(data, file=name)
