"""The steady state of boards by shooting on their own netlists: the figures steady_state needs.

:func:`periodic_state` takes boards of a :class:`picker.circuit.network.Network` (one per
element of ``idx``), writes each one's netlist lines (:meth:`picker.circuit.stages.base.Stage.netlist`,
the very lines ngspice is given), reads them into a batch of circuits
(:mod:`picker.circuit.transient`) and finds their periodic orbits by shooting
(:mod:`picker.circuit.shooting`), starting from the circuit's own oscillating mode scaled
to the describing function's amplitude and period. From the orbit it reads:

* the frequency 1/T;
* the peak voltage at the tank top, half its peak-to-peak (as the validation's
  measurement reads ngspice's waveform);
* the 2nd and 3rd harmonics of the tank top relative to the fundamental, dBc (the
  discrete Fourier transform of the N samples of one period);
* the peak collector current and the device's mean dissipation ⟨I_C·V_CE + I_B·V_BE⟩;
* whether the orbit is unstable in its envelope (a Floquet multiplier outside the unit
  circle, a flip to twice the period left out: it keeps the envelope steady).

Where it is used: :mod:`picker.circuit.nominal_orbit` runs it on the designs whose
describing function saturates, for the reported designs of ``solve`` and ``evaluate``
and for the validation statistics (:func:`picker.circuit.validation.model_answers`).
Speed (``python -m picker.bench.shooting``): the saturated designs of the validation
sets in batches of one netlist shape, about a second of CPU per design; one design
per call with the former 40-period warm-up, about four times that.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.device import thermal_voltage
from picker.circuit.network import Network
from picker.circuit.shooting import (
    RETRY_WARM,
    STEPS,
    UNSTABLE_MARGIN,
    WARM,
    oscillating_mode,
    periodic_orbit,
)
from picker.circuit.transient import Circuit, build_circuit, dc_point, dc_with_currents, device
from picker.tank.base import TWO_PI

__all__ = [
    "REFINE",
    "SUPPLY_LINK",
    "PeriodicState",
    "board_lines",
    "periodic_circuits",
    "periodic_state",
    "supply_linked",
]

#: The converged orbit is solved again with this many times the steps (for the
#: multipliers and the figures).
REFINE = 4
#: A multiplier counts as real where its imaginary part is below this fraction of its
#: modulus (an eigenvalue of a real matrix: exactly real up to rounding).
FLIP_IMAG = 1e-6


@dataclass(frozen=True)
class PeriodicState:
    """Figures of the orbits (1-D over the elements asked for; NaN where ``ok`` is false)."""

    ok: np.ndarray
    w: np.ndarray  # rad/s
    top: np.ndarray  # V, half the peak-to-peak at the tank top
    harmonics_dbc: np.ndarray  # (m, 2)
    peak_current: np.ndarray  # A
    dissipation: np.ndarray  # W
    unstable: np.ndarray  # bool
    multiplier: np.ndarray  # the largest non-trivial Floquet multiplier's modulus


#: Resistance between the supply and a transistor terminal on it, Ω (:func:`board_lines`).
SUPPLY_LINK = 1e-3


def supply_linked(lines: list[str]) -> list[str]:
    """Element lines with each transistor terminal that sits on a DC source's node (the
    emitter follower's collector on the supply) moved to a node of its own, joined to
    the source by :data:`SUPPLY_LINK`: the circuit reader
    (:func:`picker.circuit.transient.build_circuit`) simulates a transistor whose
    terminals are unknowns only. The link drops I_C·1 mΩ, a few µV at the stages'
    currents, against a supply of volts: far below anything the orbit resolves (the
    card's own collector resistance RC is 0, as in the netlist ngspice runs)."""
    sources = {ln.split()[1] for ln in lines if ln[:1].upper() == "V"}
    out: list[str] = []
    for ln in lines:
        f = ln.split()
        if f and f[0][:1].upper() == "Q" and sources.intersection(f[1:4]):
            for k in (1, 2, 3):
                if f[k] in sources:
                    node = f"{f[0]}_{k}"
                    out.append(f"R{node} {f[k]} {node} {SUPPLY_LINK:g}")
                    f[k] = node
            ln = " ".join(f)
        out.append(ln)
    return out


def board_lines(net: Network, idx: np.ndarray) -> tuple[list[list[str]], list[str]]:
    """The netlist element lines of the boards ``idx`` of ``net`` (the lines ngspice is
    given, :meth:`picker.circuit.stages.base.Stage.netlist`, a transistor terminal on the
    supply linked to it by :func:`supply_linked`) and the model cards."""
    stage, params = net.stage, net.params
    topo = net.topology
    lines = []
    models: list[str] = []
    for i in idx:
        vals = {p: float(net.el[p][i]) for p in topo.positions}
        part = stage.netlist(topo, vals, float(net.el["stray"][i]), float(net.el["r_l"][i]), params)
        lines.append(supply_linked(list(part.elements)))
        models = part.models
    return lines, models


def periodic_state(
    net: Network,
    idx: np.ndarray,
    w: np.ndarray,
    top: np.ndarray,
    i_mean: np.ndarray,
    *,
    steps: int = STEPS,
    refine: int = REFINE,
    warm: int = WARM,
    retry: int = RETRY_WARM,
) -> PeriodicState:
    """The periodic orbits of the boards ``idx`` of ``net`` (a bjt stage with its bias
    network), from the describing function's frequency ``w`` (rad/s), tank-top
    amplitude ``top`` (V) and mean collector current ``i_mean`` (A), one per element
    (:func:`periodic_circuits`; where ``w`` is not finite, the ideal tank's)."""
    topo = net.topology
    lines, models = board_lines(net, idx)
    circ = build_circuit(lines, models, net.stage.top, thermal_voltage(net.params.temperature_c))
    w = np.where(
        np.isfinite(w) & (w > 0),
        w,
        TWO_PI * topo.frequency({p: net.el[p][idx] for p in topo.positions}, net.el["stray"][idx]),
    )
    return periodic_circuits(
        circ, w, top, i_mean, steps=steps, refine=refine, warm=warm, retry=retry
    )


def periodic_circuits(
    circ: Circuit,
    w: np.ndarray,
    top: np.ndarray,
    i_mean: np.ndarray,
    *,
    steps: int = STEPS,
    refine: int = REFINE,
    warm: int = WARM,
    retry: int = RETRY_WARM,
) -> PeriodicState:
    """The periodic orbits of a batch of circuits (:func:`picker.circuit.transient.build_circuit`)
    from the frequencies ``w`` (rad/s), tank-top amplitudes ``top`` (V) and mean
    collector currents ``i_mean`` (A) of the describing function, one per element: the
    start is the DC state with the transistor's mean currents (the bias shift) plus the
    circuit's oscillating mode at that amplitude."""
    m = circ.b.shape[0]
    x_dc, ok_dc = dc_point(circ)
    _, vec = oscillating_mode(circ, x_dc, w)
    ar = np.arange(m)
    # the mode's phase with the base-emitter voltage at its trough: the transistor is off
    # at the start, whatever the amplitude
    ve = np.concatenate([vec, np.zeros((m, 1))], axis=1)
    v_be = ve[ar, circ.q[:, 1]] - ve[ar, circ.q[:, 2]]
    vec = vec * (-np.conj(v_be) / np.maximum(np.abs(v_be), 1e-300))[:, None]
    v_top = vec[ar, circ.top]
    amp = np.where(np.isfinite(top) & (top > 0), top, 1.0)
    beta = circ.card["BF"]
    i_ok = np.isfinite(i_mean) & (i_mean > 0)
    x_mid = dc_with_currents(circ, np.where(i_ok, i_mean, 0.0), np.where(i_ok, i_mean, 0.0) / beta)
    x_mid = np.where(i_ok[:, None] & np.isfinite(x_mid), x_mid, x_dc)
    x0 = x_mid + (vec * (amp / np.maximum(np.abs(v_top), 1e-300))[:, None]).real
    x0 = np.where(np.isfinite(x0), x0, x_dc)
    orb = periodic_orbit(circ, x0, TWO_PI / w, steps=steps, warm=warm, retry=retry)
    ok = orb.ok & ok_dc
    period, mult, unstable = orb.period, orb.multipliers, orb.unstable
    xs = orb.x[:-1]  # (N, m, n): one period
    if refine > 1 and ok.any():
        # the orbit again at refine × steps from the converged one: the multipliers of
        # a saturated orbit move by several % between 128 and 512 steps a period
        # (the trivial one, exactly 1 in the limit, shows the error), enough to flip
        # the stability of a steady design
        sel = np.nonzero(ok)[0]
        fine = periodic_orbit(
            circ.take(sel), orb.x[0, sel], orb.period[sel], steps=refine * steps, warm=0, retry=0
        )
        ok[sel] = fine.ok
        period = period.copy()
        mult, unstable = mult.copy(), unstable.copy()
        period[sel] = fine.period
        mult[sel] = fine.multipliers
        unstable[sel] = fine.unstable
        xs = np.repeat(xs, refine, axis=0)  # the same shape for every element
        xs[:, sel] = fine.x[:-1]
    v = xs[:, ar, circ.top]
    half = 0.5 * (v.max(axis=0) - v.min(axis=0))
    spec = np.abs(np.fft.rfft(v, axis=0))  # (N/2 + 1, m)
    with np.errstate(divide="ignore", invalid="ignore"):
        harm = 20.0 * np.log10(spec[2:4] / spec[1][None, :]).T
    dev = device(circ, xs)
    vce = dev["vbe"] - dev["vbc"]
    # the mean over each element's own contiguous row: numpy's pairwise summation then
    # adds the same terms in the same order whatever the batch beside it
    p_dev = np.ascontiguousarray((dev["ic"] * vce + dev["ib"] * dev["vbe"]).T).mean(axis=1)
    mu = np.abs(mult[:, 0])
    # a real multiplier below −1 (a flip) leads to an orbit of twice the period whose
    # envelope at the carrier is as steady as this one's (the period-doubling, or flip,
    # bifurcation of the period map: Kuznetsov, *Elements of Applied Bifurcation Theory*,
    # ch. 4); the envelope modulates (bursts) only through a multiplier beyond +1 or a
    # complex pair outside the unit circle (the Neimark-Sacker bifurcation, ibid.)
    flip = (mult.real < 0.0) & (np.abs(mult.imag) <= FLIP_IMAG * np.abs(mult))
    grows = np.abs(mult) > 1.0 + UNSTABLE_MARGIN
    unstable = unstable & np.any(grows & ~flip, axis=1)
    nan = np.nan
    return PeriodicState(
        ok=ok,
        w=np.where(ok, TWO_PI / period, nan),
        top=np.where(ok, half, nan),
        harmonics_dbc=np.where(ok[:, None], harm, nan),
        peak_current=np.where(ok, dev["ic"].max(axis=0), nan),
        dissipation=np.where(ok, p_dev, nan),
        unstable=ok & unstable,
        multiplier=np.where(ok, mu, nan),
    )
