"""The Hartley tank: two coupled inductors L1, L2 in series and a capacitor C across them.

Sedra & Smith, *Microelectronic Circuits*, LC-tuned oscillators (the Hartley
oscillator beside the Colpitts): L1 sits across the amplifier's output
(collector-emitter), L2 across its input (base-emitter), C from output to
input; the two inductors are one tapped coil or two coils with mutual
inductance M = k·√(L1·L2) (0 ≤ k < 1). The loop current runs through L1 and L2
in the same sense (series aiding), so the tank resonates at

    f = 1 / (2π √(L_eff·C)),   L_eff = L1 + L2 + 2M               (H1)

(Sedra & Smith give L1 + L2 for uncoupled coils; the 2M of series-aiding
coupled coils is Hayt & Kemmerly, *Engineering Circuit Analysis*, magnetically
coupled circuits, the series-aiding connection).

Feedback fraction (derived here, checked numerically in tests/test_hartley.py):
with the input end unloaded and the tap at AC ground, a current i round the
loop gives v_out = jω(L1 + M)·i across L1 (its own inductance and M from L2)
and v_in = −jω(L2 + M)·i across L2, so

    beta = |v_in / v_out| = (L2 + M) / (L1 + M)                     (H2)

and the amplifier needs a gain of at least 1/beta = (L1 + M)/(L2 + M) — for
k = 0 Sedra & Smith's gm·R ≥ L1/L2. At ω0 of (H1) the tank is an open circuit
seen from the output (the L1 current and the C–L2 current cancel), so an ideal
inverting stage of gain gm·R has a real loop gain gm·R·beta there exactly.

The tapped-inductor form (one coil of total inductance L_tot with a tap at the
fraction t of its turns from the input end, coupling k between the two
sections) maps to L1, L2 by :func:`tapped_inductor`.

Circuit (``pi_admittances``, ``netlist_lines``): the tap goes to the common node
through a bypass capacitor :data:`TAP_BYPASS`, so the coil joins the tank's two
ends for DC (as a Colpitts inductor does) and the amplifier's bias is not
shorted; the model and the netlist both carry it, exactly. The stray sits
across the whole tank (across C). The board shunts ``c1_shunt``/``c2_shunt``
(capacitors in parallel with a Colpitts pair) do not apply: the ends are
inductors (:meth:`Hartley.shunt_targets` is empty; the spec refuses them).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, ClassVar

import numpy as np

from picker.tank.base import COUPLING, MAX_COUPLING, TOPOLOGIES, Topology, spice_name

__all__ = [
    "HARTLEY",
    "MAX_COUPLING",
    "TAP_BYPASS",
    "Hartley",
    "hartley_inductance",
    "mutual_inductance",
    "tapped_inductor",
]

#: Bypass capacitor from the coil's tap to the common node, F (an RF bypass value,
#: common practice, no source); large against the tank's C, so it carries almost no
#: current at the tank frequency.
TAP_BYPASS = 100e-9


def mutual_inductance(l1: Any, l2: Any, k: float) -> Any:
    """M = k·√(L1·L2), H (Hayt & Kemmerly, magnetically coupled circuits: the coupling
    coefficient's definition)."""
    return k * np.sqrt(np.asarray(l1, dtype=float) * np.asarray(l2, dtype=float))


def hartley_inductance(l1: Any, l2: Any, k: float) -> Any:
    """L_eff = L1 + L2 + 2M of the coils in series aiding, H (equation (H1))."""
    return np.asarray(l1, dtype=float) + l2 + 2.0 * mutual_inductance(l1, l2, k)


def tapped_inductor(total: Any, tap: Any, k: float) -> tuple[Any, Any]:
    """(L1, L2) of one tapped coil: total inductance, tap fraction, coupling k.

    The tap is at the fraction ``tap`` of the turns counted from the input end.
    With inductance proportional to the square of the turns (a coil's sections on
    one former: L ∝ N², Terman, *Radio Engineers' Handbook*, inductance of coils;
    from memory), L1 = a·(1 − t)², L2 = a·t², M = k·a·t·(1 − t), and
    L1 + L2 + 2M = total gives a = total / ((1 − t)² + t² + 2k·t·(1 − t)).
    """
    t = np.asarray(tap, dtype=float)
    if np.any((t <= 0) | (t >= 1)):
        raise ValueError(f"expected a tap fraction between 0 and 1; got {tap!r}")
    if not 0.0 <= k <= MAX_COUPLING:
        raise ValueError(f"expected a coupling between 0 and {MAX_COUPLING}; got {k!r}")
    a = np.asarray(total, dtype=float) / ((1 - t) ** 2 + t**2 + 2 * k * t * (1 - t))
    return a * (1 - t) ** 2, a * t**2


def _restore(name: str, coupling: float) -> Topology:
    """Unpickle a configured topology (its registered instance, configured again)."""
    return TOPOLOGIES[name].configured(coupling)


class Hartley(Topology):
    """Hartley: positions L1, L2, C; the chain (C); feedback pair (L1, L2); coupling k."""

    name = "hartley"
    positions: ClassVar[tuple[str, ...]] = ("L1", "L2", "C")
    capacitors: ClassVar[tuple[str, ...]] = ("C",)
    inductor: ClassVar[str] = "L1"
    feedback_pair: ClassVar[tuple[str, str]] = ("L1", "L2")
    coupled = True
    typical = {"L1": 10e-6, "L2": 4.7e-6, "C": 1e-9}
    _variants: ClassVar[dict[float, Topology]] = {}

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        cls._variants = {}

    def __repr__(self) -> str:
        return f"{type(self).__name__}(coupling={self.coupling!r})"

    def __reduce__(self) -> Any:
        return (_restore, (self.name, self.coupling))

    def configured(self, coupling: float | None = None) -> Topology:
        """This tank with coupling k (one instance per k; k = 0 is the registered one)."""
        k = 0.0 if coupling is None else float(coupling)
        if not 0.0 <= k <= MAX_COUPLING:
            raise ValueError(f"expected a coupling between 0 and {MAX_COUPLING}; got {k!r}")
        base = type(self)()
        if k == base.coupling:
            return base
        got = self._variants.get(k)
        if got is None:
            got = object.__new__(type(self))
            got.coupling = k
            self._variants[k] = got
        return got

    # ------------------------------------------------------------ positions

    @property
    def inductors(self) -> tuple[str, ...]:
        return self.feedback_pair

    def shunt_targets(self) -> dict[str, str]:
        """None: the ends are inductors, a board shunt does not add to them."""
        return {}

    def end_capacitance(self, values: Mapping[str, Any]) -> Any:
        """The tap bypass holds the ends' DC (through the coils), F."""
        return TAP_BYPASS

    # ------------------------------------------------------------ formulas

    def mutual(self, values: Mapping[str, Any]) -> Any:
        """M = k·√(L1·L2), H; k is the board's own where ``values`` holds one (key
        :data:`picker.tank.base.COUPLING`, the Monte Carlo's sampled k), else the tank's."""
        out, inp = self.feedback_pair
        return mutual_inductance(values[out], values[inp], values.get(COUPLING, self.coupling))

    def l_eff(self, values: Mapping[str, Any]) -> Any:
        """L1 + L2 + 2M, H (equation (H1))."""
        out, inp = self.feedback_pair
        return np.asarray(values[out], dtype=float) + values[inp] + 2.0 * self.mutual(values)

    def coupling_sensitivity(self, values: Mapping[str, Any]) -> Any:
        """∂ln f/∂k = −√(L1·L2)/L_eff: from (H1), ∂L_eff/∂k = 2·√(L1·L2) and
        f ∝ L_eff^(−1/2) (derived here; central differences in tests/test_hartley_coupling.py)."""
        out, inp = self.feedback_pair
        root = np.sqrt(np.asarray(values[out], dtype=float) * np.asarray(values[inp], dtype=float))
        return -root / self.l_eff(values)

    def beta(self, values: Mapping[str, Any]) -> Any:
        """beta = (L2 + M)/(L1 + M) (equation (H2))."""
        out, inp = self.feedback_pair
        m = self.mutual(values)
        return (np.asarray(values[inp]) + m) / (np.asarray(values[out]) + m)

    def feedback_bounds(self, first: Any, beta_min: float, beta_max: float) -> tuple[Any, Any]:
        """Interval of L2 that puts beta in the window, given L1 = ``first``.

        With x = √(L2/L1), beta = (x² + k·x)/(1 + k·x) rises with x
        (d beta/dx ∝ x² k + 2x + k > 0), and beta = b is the quadratic
        x² + k(1 − b)·x − b = 0 with the one positive root
        x = (−k(1 − b) + √(k²(1 − b)² + 4b)) / 2; then L2 = L1·x² (derived here).
        """
        k = self.coupling

        def root(b: float) -> float:
            return (-k * (1 - b) + np.sqrt(k * k * (1 - b) ** 2 + 4 * b)) / 2

        first = np.asarray(first, dtype=float)
        return first * root(beta_min) ** 2, first * root(beta_max) ** 2

    def inductor_sensitivities(
        self, values: Mapping[str, Any], shape: tuple[int, ...]
    ) -> dict[str, np.ndarray]:
        """S_L1 = −½·(L1 + M)/L_eff, S_L2 = −½·(L2 + M)/L_eff.

        From (H1): ∂L_eff/∂ln L1 = L1 + M (as ∂M/∂ln L1 = M/2 and M enters twice), and
        f ∝ L_eff^(−1/2) (derived here; the two sum to −½; central differences in
        tests/test_tank_conformance.py).
        """
        out, inp = self.feedback_pair
        m = self.mutual(values)
        le = self.l_eff(values)
        return {
            out: np.broadcast_to(-0.5 * (np.asarray(values[out]) + m) / le, shape).astype(float),
            inp: np.broadcast_to(-0.5 * (np.asarray(values[inp]) + m) / le, shape).astype(float),
        }

    def solvable(self) -> tuple[str, ...]:
        """The chain capacitors: the inductors are the feedback pair, enumerated."""
        return tuple(c for c in self.capacitors if c not in self.feedback_pair)

    # ------------------------------------------------------------ the loaded model

    def _coils(self, s: Any, values: Mapping[str, Any], r_l: Any) -> tuple[Any, ...]:
        """(g11, g12, g22, a, b, D) of the coils and the tap bypass at ``s``.

        The coils' impedance matrix in the frame "both currents into the tap"
        (dots at the output end of L1 and the tap end of L2, so the mutual term is
        −sM) is Z = [[r1 + sL1, −sM], [−sM, r2 + sL2]] (Hayt & Kemmerly, coupled
        circuits); G = Z⁻¹. r1 = ``r_l`` (the loss of ``inductor``, L1) and L2 has the
        same Q: r2 = r_l·L2/L1. The tap node x (to the common node through
        :data:`TAP_BYPASS`) has self-admittance D = a + b + s·C_tap with
        a = g11 + g12, b = g12 + g22.
        """
        out, inp = self.feedback_pair
        l1, l2 = values[out], values[inp]
        m = self.mutual(values)
        z1 = r_l + s * l1
        z2 = r_l * l2 / l1 + s * l2
        zm = -s * m
        det = z1 * z2 - zm * zm
        g11, g12, g22 = z2 / det, -zm / det, z1 / det
        a, b = g11 + g12, g12 + g22
        return g11, g12, g22, a, b, a + b + s * TAP_BYPASS

    def _bridge(
        self, s: Any, values: Mapping[str, Any], stray: Any, esr: Mapping[str, float]
    ) -> Any:
        """Admittance between the ends of the capacitor chain (in series) and the stray."""
        z = sum(
            1.0 / self.capacitor_admittance(s, values[c], esr.get(c, 0.0)) for c in self.capacitors
        )
        return 1.0 / z + s * stray

    def pi_admittances(
        self,
        s: Any,
        values: Mapping[str, Any],
        stray: Any,
        r_l: Any,
        capacitor_esr: Mapping[str, float],
    ) -> tuple[Any, Any, Any]:
        """(Y_out, Y_in, Y_bridge) of the tank, the tap node eliminated.

        Nodal matrix over (out, in, x) of the coils: [[g11, g12, −a], [g12, g22, −b],
        [−a, −b, D]]; eliminating x (Kron reduction, the Schur complement) gives
        Y11 = g11 − a²/D, Y22 = g22 − b²/D, Y12 = g12 − a·b/D, and the π of a
        reciprocal two-port is Y_out = Y11 + Y12, Y_in = Y22 + Y12, Y_bridge = −Y12
        (Desoer & Kuh, *Basic Circuit Theory*, two-ports), plus C (with its ESR) and
        the stray between the ends.
        """
        g11, g12, g22, a, b, d = self._coils(s, values, r_l)
        y11, y22, y12 = g11 - a * a / d, g22 - b * b / d, g12 - a * b / d
        return y11 + y12, y22 + y12, -y12 + self._bridge(s, values, stray, capacitor_esr)

    @property
    def bridge_passes_dc(self) -> bool:
        """The coils join the ends for DC (the tap floats on its bypass capacitor)."""
        return True

    def with_end_capacitance(
        self, values: Mapping[str, Any], c_out: float, c_in: float
    ) -> dict[str, Any]:
        """``values`` with C raised by the ends' capacitances, weighted by the square of each
        end's share of the tank voltage at resonance ((L1 + M)/L_eff and (L2 + M)/L_eff,
        from (H2)): the energy-equivalent capacitance across the tank, a first estimate."""
        out, inp = self.feedback_pair
        m = self.mutual(values)
        le = self.l_eff(values)
        extra = c_out * ((values[out] + m) / le) ** 2 + c_in * ((values[inp] + m) / le) ** 2
        c = self.capacitors[0]
        return {**values, c: values[c] + extra}

    def peak_across(
        self,
        peak_out: Any,
        peak_in: Any,
        v_out: Any,
        v_in: Any,
        y_bridge: Any,
        s: Any,
        values: Mapping[str, Any],
    ) -> dict[str, Any]:
        """Peak voltage across L1 (out to tap), L2 (tap to in) and each chain capacitor, V.

        The tap's voltage is v_x = (a·v_out + b·v_in)/D (the eliminated row of
        :meth:`pi_admittances`); a chain of capacitors shares v_out − v_in in
        proportion to their impedances.
        """
        out, inp = self.feedback_pair
        _, _, _, a, b, d = self._coils(s, values, values.get("r_l", 0.0))
        vx = (a * v_out + b * v_in) / d
        across = {out: np.abs(v_out - vx), inp: np.abs(vx - v_in)}
        z = {c: 1.0 / (s * values[c]) for c in self.capacitors}
        total = sum(z.values())
        for c in self.capacitors:
            across[c] = np.abs((v_out - v_in) * z[c] / total)
        return across

    def dc_across(self, v_out: float, v_in: float) -> dict[str, float]:
        """DC across the chain: v_out − v_in for one capacitor, NaN shared among several."""
        n = len(self.capacitors)
        return {c: (v_out - v_in if n == 1 else float("nan")) for c in self.capacitors}

    def netlist_lines(
        self,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        capacitor_esr: Mapping[str, float],
        out_node: str,
        in_node: str,
        bleed: float | None = None,
    ) -> list[str]:
        """SPICE lines: L1 from the output end to the tap, L2 from the tap to the input end
        (each with its series loss), ``K12`` coupling them (k), the tap bypass CTAP to
        ground, the chain capacitors from output to input (C as element CT) and the
        stray across them; ``bleed`` (ohm) from the output end to ground if given."""

        def g(x: float) -> str:
            return f"{float(x):.6g}"

        out, inp = self.feedback_pair
        l1, l2 = float(values[out]), float(values[inp])
        lines: list[str] = []
        l_out, l_in = spice_name(out, "L"), spice_name(inp, "L")
        for name, a, b, lv, r in (
            (l_out, out_node, "tap", l1, r_l),
            (l_in, "tap", in_node, l2, r_l * l2 / l1),
        ):
            if r > 0:
                lines += [f"{name} {a} n{name} {g(lv)}", f"R{name}ESR n{name} {b} {g(r)}"]
            else:
                lines.append(f"{name} {a} {b} {g(lv)}")
        if self.coupling > 0:
            lines.append(f"K12 {l_out} {l_in} {g(self.coupling)}")
        lines.append(f"CTAP tap 0 {g(TAP_BYPASS)}")
        node = out_node
        chain = self.capacitors
        for k, c in enumerate(chain):
            nxt = in_node if k == len(chain) - 1 else f"m{k + 1}"
            elem = "CT" if c == "C" else spice_name(c, "C")
            r = capacitor_esr.get(c, 0.0)
            if r:
                lines += [
                    f"{elem} {node} n{elem} {g(values[c])}",
                    f"R{elem}ESR n{elem} {nxt} {g(r)}",
                ]
            else:
                lines.append(f"{elem} {node} {nxt} {g(values[c])}")
            node = nxt
        if stray > 0:
            lines.append(f"CSTRAY {out_node} {in_node} {g(stray)}")
        if bleed is not None:
            lines.append(f"RBLEED {out_node} 0 {g(bleed)}")
        return lines


HARTLEY = Hartley()
