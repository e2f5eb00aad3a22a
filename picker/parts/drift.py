"""Temperature drift of parts: dielectric and core material classes.

Every part value is referred to 25 °C. ``drift_factor`` gives the relative
change ``x(T)/x(25 °C) - 1`` of each simulated part at each temperature; a
part's individual curve inside its class is picked by one uniform variate
``u`` per sample, so drift uses common random numbers like the tolerances.

Material models
---------------
Linear (``kind = "linear"``): x(T)/x(25) - 1 = α·(T - 25 °C), with the part's
tempco α uniform over α0 ± spread (the only information a "± ppm/°C" marking
gives; rectangular, GUM JCGM 100:2008, 4.3.7).

* Class-1 ceramics, EIA-198 / IEC 60384-8 three-character code: the first
  letter and the digit give α0, the last letter the tolerance. C0G (NP0) is
  0 ± 30 ppm/°C, −55..125 °C [pub, REFERENCES.md]; tolerance letters G 30,
  H 60, J 120, K 250 ppm/°C [pub]; L 500, M 1000, N 2500 ppm/°C and the
  significant-figure letters and multiplier digits are [memory].
* Polypropylene film: −200 ± 100 ppm/°C [memory], rated −55..105 °C [memory],
  which keeps within the ±2.5 % over the range that makers' film tables give
  [pub].
* Polyester (PET) film: +400 ± 100 ppm/°C [memory], rated −55..125 °C
  [memory], within the ±5 % of makers' tables [pub].
* Ferrite-core inductor: +400 ± 400 ppm/°C, −40..125 °C. An **assumption**:
  ferrite drift is "several hundred to over 1000 ppm/°C, non-linear and rarely
  specified" [memory]; give ``tempco`` and ``tempco_spread`` when known.
* Air-core inductor: +75 ± 50 ppm/°C (the +25..+125 ppm/°C of REFERENCES.md
  [memory]), −55..125 °C (assumption).
* An explicit tempco (``tempco = "+100 ppm/°C"``, ``tempco_spread = "30
  ppm/°C"``): linear, no rated range.

Class 2 (``kind = "class2"``): EIA-198 / IEC 60384-9 three-character code
[pub]: low temperature X −55, Y −30, Z +10 °C; high temperature 2 +45, 4 +65,
5 +85, 6 +105, 7 +125, 8 +150, 9 +200 °C; maximum change A ±1.0, B ±1.5,
C ±2.2, D ±3.3, E ±4.7, F ±7.5, P ±10, R ±15, S ±22, T +22/−33, U +22/−56,
V +22/−82 %. The code only bounds the change, so the model is an
**assumption** (common practice: a typical curve scaled inside the
envelope): with x = (T − 25)/(T_hi − 25) and the shape
g(x) = 0.85·x² + 0.15·x³ (a bowl: capacitance highest near room temperature,
falling towards both ends and most at the hot end, as typical BaTiO₃ curves
do), normalised to ĝ = g / max g over the rated range, a part's curve is

    x(T)/x(25) - 1 = −w · L · ĝ(x),   w uniform on [−min(1, H/L), 1],

where −L and +H are the envelope bounds. Every curve stays inside
[−L, +H] over the rated range; the lower bound is reached only by w = 1 and
the upper only by the other end of w. The extremes of ĝ lie at the range
ends, at 25 °C, or at the interior turning point x = −1.7/0.45 of g when the
range reaches that far below 25 °C (:func:`turning_points`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike

from picker.errors import SpecError

T_REF = 25.0  # °C, reference temperature of EIA-198 / IEC 60384 capacitance ratings
PPM = 1e-6

_CLASS2_LOW = {"X": -55.0, "Y": -30.0, "Z": 10.0}
_CLASS2_HIGH = {"2": 45.0, "4": 65.0, "5": 85.0, "6": 105.0, "7": 125.0, "8": 150.0, "9": 200.0}
# (minus, plus) fractions of the largest change (EIA-198 class 2 letter code)
_CLASS2_CHANGE = {
    "A": (0.010, 0.010),
    "B": (0.015, 0.015),
    "C": (0.022, 0.022),
    "D": (0.033, 0.033),
    "E": (0.047, 0.047),
    "F": (0.075, 0.075),
    "P": (0.10, 0.10),
    "R": (0.15, 0.15),
    "S": (0.22, 0.22),
    "T": (0.33, 0.22),
    "U": (0.56, 0.22),
    "V": (0.82, 0.22),
}
# Class 1: significant figure (ppm/°C), multiplier digit, tolerance letter (ppm/°C).
# C and the G/H/J/K letters are [pub]; the rest is [memory]. The two tables below
# keep their rows as the code tables print them (fmt: skip, else one entry a line).
_CLASS1_FIGURE = {
    "C": 0.0, "B": 0.3, "L": 0.8, "A": 0.9, "M": 1.0, "P": 1.5,
    "R": 2.2, "S": 3.3, "T": 4.7, "V": 5.6, "U": 7.5,
}  # fmt: skip
_CLASS1_MULT = {
    "0": -1.0, "1": -10.0, "2": -100.0, "3": -1000.0, "4": -10000.0,
    "5": 1.0, "6": 10.0, "7": 100.0, "8": 1000.0, "9": 10000.0,
}  # fmt: skip
_CLASS1_TOL = {"G": 30.0, "H": 60.0, "J": 120.0, "K": 250.0, "L": 500.0, "M": 1000.0, "N": 2500.0}

# Bowl shape of the class-2 model: g(x) = A2·x² + A3·x³ (assumption, see module docstring).
_A2, _A3 = 0.85, 0.15
_X_TURN = -2.0 * _A2 / (3.0 * _A3)  # g'(x) = 0 away from x = 0


@dataclass(frozen=True)
class Material:
    """A dielectric or core material class.

    Attributes
    ----------
    name : str
        Canonical name ("C0G", "X7R", "polypropylene", "tempco", ...).
    kind : str
        ``"linear"`` (tempco α0 ± spread) or ``"class2"`` (EIA envelope model).
    t_min, t_max : float
        Rated temperature range in °C (``-inf``/``inf`` when not rated).
    tempco, spread : float
        Linear kind: central tempco and its half-width, per °C (1e-6 = 1 ppm/°C).
    change_minus, change_plus : float
        Class 2: the envelope, as positive fractions (X7R: 0.15, 0.15).
    source : str
        Where the numbers come from ("[pub] EIA-198", "[memory]", "assumption").
    """

    name: str
    kind: str
    t_min: float
    t_max: float
    tempco: float = 0.0
    spread: float = 0.0
    change_minus: float = 0.0
    change_plus: float = 0.0
    source: str = ""


def _linear(
    name: str, tc_ppm: float, spread_ppm: float, t_min: float, t_max: float, source: str
) -> Material:
    return Material(
        name, "linear", float(t_min), float(t_max), tc_ppm * PPM, spread_ppm * PPM, source=source
    )


_NAMED = {
    "polypropylene": _linear(
        "polypropylene", -200, 100, -55, 105, "[memory] ppm; ±2.5 % envelope [pub] film tables"
    ),
    "polyester": _linear(
        "polyester", 400, 100, -55, 125, "[memory] ppm; ±5 % envelope [pub] film tables"
    ),
    "ferrite": _linear("ferrite", 400, 400, -40, 125, "assumption ([memory]: several hundred ppm)"),
    "air": _linear("air", 75, 50, -55, 125, "[memory] +25..+125 ppm/°C; range assumed"),
}
_ALIASES = {
    "np0": "C0G",
    "npo": "C0G",
    "cog": "C0G",
    "pp": "polypropylene",
    "mkp": "polypropylene",
    "film-pp": "polypropylene",
    "pet": "polyester",
    "mkt": "polyester",
    "film-pet": "polyester",
    "ferrite-core": "ferrite",
    "air-core": "air",
    "ceramic-core": "air",
}


def class2(code: str) -> Material:
    """Parse an EIA-198 class-2 code such as "X7R", "Y5V", "Z5U".

    Examples
    --------
    >>> m = class2("X7R"); (m.t_min, m.t_max, m.change_minus, m.change_plus)
    (-55.0, 125.0, 0.15, 0.15)
    """
    c = code.strip().upper()
    if len(c) != 3 or c[0] not in _CLASS2_LOW or c[1] not in _CLASS2_HIGH:
        raise SpecError(f"expected an EIA class-2 code such as 'X7R'; got {code!r}")
    if c[2] not in _CLASS2_CHANGE:
        raise SpecError(
            f"expected an EIA class-2 change letter ({''.join(_CLASS2_CHANGE)}); got {code!r}"
        )
    minus, plus = _CLASS2_CHANGE[c[2]]
    return Material(
        c,
        "class2",
        _CLASS2_LOW[c[0]],
        _CLASS2_HIGH[c[1]],
        change_minus=minus,
        change_plus=plus,
        source="[pub] EIA-198 / IEC 60384-9 code; curve shape an assumption",
    )


def class1(code: str) -> Material:
    """Parse an EIA-198 class-1 code such as "C0G", "U2J", "P3K" (rated −55..125 °C).

    Examples
    --------
    >>> m = class1("U2J"); (round(m.tempco / 1e-6, 6), round(m.spread / 1e-6, 6))
    (-750.0, 120.0)
    """
    c = code.strip().upper()
    if (
        len(c) != 3
        or c[0] not in _CLASS1_FIGURE
        or c[1] not in _CLASS1_MULT
        or c[2] not in _CLASS1_TOL
    ):
        raise SpecError(f"expected an EIA class-1 code such as 'C0G'; got {code!r}")
    tc = _CLASS1_FIGURE[c[0]] * _CLASS1_MULT[c[1]]
    tc = 0.0 if tc == 0 else tc  # no "-0.0"
    src = "[pub] C0G 0 ± 30 ppm/°C" if c == "C0G" else "[memory] EIA-198 class-1 letter code"
    return _linear(c, tc, _CLASS1_TOL[c[2]], -55.0, 125.0, src)


def explicit_tempco(tempco: float, spread: float = 0.0) -> Material:
    """A part with a stated linear tempco and spread, per °C; no rated range.

    Parameters
    ----------
    tempco : float
        Central temperature coefficient per °C (+100 ppm/°C = 1e-4).
    spread : float
        Half-width of the part-to-part spread per °C (>= 0).
    """
    if not np.isfinite(tempco) or not np.isfinite(spread) or spread < 0:
        raise SpecError(
            f"expected a finite tempco and a spread >= 0; got {tempco!r}, {spread!r}",
            key="tempco_spread",
        )
    return Material(
        "tempco", "linear", -np.inf, np.inf, float(tempco), float(spread), source="spec"
    )


def get_material(name: str) -> Material:
    """Look a material up by name: an EIA class-1 or class-2 code, or a named class.

    Named classes: "polypropylene" (PP, MKP), "polyester" (PET, MKT), "ferrite",
    "air"; "NP0" is C0G.
    """
    if not isinstance(name, str) or not name.strip():
        raise SpecError(f"expected a dielectric or core material such as 'C0G'; got {name!r}")
    key = name.strip().lower()
    key = _ALIASES.get(key, key)
    if key in _NAMED:
        return _NAMED[key]
    up = key.upper()
    if len(up) == 3 and up[0] in _CLASS2_LOW and up[1] in _CLASS2_HIGH:
        return class2(up)
    if len(up) == 3 and up[0] in _CLASS1_FIGURE and up[1] in _CLASS1_MULT:
        return class1(up)
    raise SpecError(
        "expected a dielectric or core material: an EIA code such as 'C0G', 'X7R', 'Y5V', "
        f"or one of {', '.join(_NAMED)}; got {name!r}"
    )


class DriftKeys(Protocol):
    """A part's drift keys, as a spec part holds them (``dielectric``, ``tempco``, ``tempco_spread``)."""

    @property
    def dielectric(self) -> str | None: ...

    @property
    def tempco(self) -> float | None: ...

    @property
    def tempco_spread(self) -> float | None: ...


def material_of(part: DriftKeys, with_drift: bool) -> Material | None:
    """The part's :class:`Material`, or ``None`` (no drift simulated).

    A ``dielectric`` names the class (:func:`get_material`); a ``tempco`` with
    it replaces the class's linear figures by the datasheet's, and a ``tempco``
    alone is :func:`explicit_tempco`. ``with_drift = False`` (no temperature
    range) gives ``None`` for every part.
    """
    if not with_drift:
        return None
    if part.dielectric is not None:
        m = get_material(part.dielectric)
        if part.tempco is not None:  # a datasheet figure for a linear material
            tc, spread = part.tempco, part.tempco_spread or 0.0
            m = dataclasses.replace(m, tempco=tc, spread=spread, source="spec (tempco)")
        return m
    if part.tempco is not None:
        return explicit_tempco(part.tempco, part.tempco_spread or 0.0)
    return None


def _x(material: Material, temps: ArrayLike) -> np.ndarray:
    return (np.asarray(temps, dtype=float) - T_REF) / (material.t_max - T_REF)


def _g(x: np.ndarray) -> np.ndarray:
    return _A2 * x * x + _A3 * x**3


def _g_max(material: Material) -> float:
    """max g over the rated range.

    g(x) = x²·(0.85 + 0.15·x) >= 0 for x >= −5.67; every EIA code has
    x(t_min) >= −4 (X2x), so ĝ lies in [0, 1] over the rated range.
    """
    pts = [_x(material, material.t_min), 1.0]
    if _x(material, material.t_min) < _X_TURN:
        pts.append(_X_TURN)
    return float(max(_g(np.asarray(pts))))


def _w_low(material: Material) -> float:
    return -min(1.0, material.change_plus / material.change_minus)


def drift_factor(material: Material, temps: ArrayLike, u: ArrayLike) -> np.ndarray:
    """Relative change x(T)/x(25 °C) − 1 of each sampled part at each temperature.

    Parameters
    ----------
    material : Material
    temps : array_like, shape (n_temps,)
        Temperatures in °C.
    u : array_like, shape (samples,)
        Uniform variates in (0, 1): each selects one part's curve in its class.

    Returns
    -------
    numpy.ndarray, shape (n_temps, samples)

    Examples
    --------
    >>> drift_factor(get_material("C0G"), [125.0], [0.0, 0.5, 1.0]).round(6).tolist()
    [[-0.003, 0.0, 0.003]]
    """
    t = np.atleast_1d(np.asarray(temps, dtype=float))[:, None]
    uu = np.atleast_1d(np.asarray(u, dtype=float)).ravel()[None, :]
    if material.kind == "linear":
        alpha = material.tempco + material.spread * (2.0 * uu - 1.0)
        return alpha * (t - T_REF)
    if material.kind == "class2":
        wl = _w_low(material)
        w = wl + (1.0 - wl) * uu
        ghat = _g(_x(material, t)) / _g_max(material)
        return -w * material.change_minus * ghat
    raise ValueError(f"unknown material kind {material.kind!r}")


def drift_moments(material: Material, temps: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard deviation of the relative change at each temperature.

    Closed form for u uniform on (0, 1): linear, mean α0·ΔT and std
    spread·|ΔT|/√3; class 2, w uniform on [w_lo, 1] so mean −L·ĝ·(1 + w_lo)/2
    and std L·ĝ·(1 − w_lo)/√12 (GUM JCGM 100:2008, 4.3.7).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray), each shape (n_temps,)
    """
    t = np.atleast_1d(np.asarray(temps, dtype=float))
    if material.kind == "linear":
        dt = t - T_REF
        return material.tempco * dt, material.spread * np.abs(dt) / np.sqrt(3.0)
    wl = _w_low(material)
    ghat = _g(_x(material, t)) / _g_max(material)
    amp = material.change_minus * ghat
    return -amp * (1.0 + wl) / 2.0, amp * (1.0 - wl) / np.sqrt(12.0)


def envelope(material: Material, temps: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest relative change any part of the class can have at ``temps``.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray), each shape (n_temps,)
    """
    d = drift_factor(material, temps, [0.0, 1.0])
    return d.min(axis=1), d.max(axis=1)


def check_range(material: Material, t_lo: float, t_hi: float) -> list[str]:
    """Warnings when the operating range leaves the material's rated range.

    Returns
    -------
    list of str
        Empty when ``[t_lo, t_hi]`` lies inside the rated range; otherwise one
        line per end that is outside (the model is then extrapolated).
    """
    out = []
    if t_lo < material.t_min:
        out.append(
            f"{material.name} is rated from {material.t_min:g} °C; the operating range starts at "
            f"{t_lo:g} °C (drift below {material.t_min:g} °C is extrapolated)"
        )
    if t_hi > material.t_max:
        out.append(
            f"{material.name} is rated up to {material.t_max:g} °C; the operating range reaches "
            f"{t_hi:g} °C (drift above {material.t_max:g} °C is extrapolated)"
        )
    return out


def turning_points(material: Material) -> list[float]:
    """Temperatures (°C) where the material's curves can turn inside its rated range."""
    if material.kind != "class2":
        return []
    pts = [T_REF]
    t_turn = T_REF + _X_TURN * (material.t_max - T_REF)
    if material.t_min < t_turn:
        pts.append(float(t_turn))
    return pts


def temperature_grid(
    t_lo: float, t_hi: float, n: int = 5, materials: Iterable[Material] = ()
) -> np.ndarray:
    """Temperatures at which boards are checked, sorted, °C.

    Always holds both ends, 25 °C when it lies inside, the turning points of
    every material in ``materials`` that lie inside, and ``n`` evenly spaced
    points (the ends included).

    Returns
    -------
    numpy.ndarray, shape (m,)

    Examples
    --------
    >>> temperature_grid(-40.0, 85.0, 3).tolist()
    [-40.0, 22.5, 25.0, 85.0]
    """
    if not (np.isfinite(t_lo) and np.isfinite(t_hi)) or t_lo > t_hi:
        raise SpecError(
            f"expected a temperature range [low, high] with low <= high; got [{t_lo}, {t_hi}]",
            key="yield.temperature",
        )
    pts = list(np.linspace(t_lo, t_hi, max(int(n), 2)))
    extra = [T_REF] + [p for m in materials for p in turning_points(m)]
    pts += [p for p in extra if t_lo < p < t_hi]
    return np.unique(np.asarray(pts, dtype=float))
