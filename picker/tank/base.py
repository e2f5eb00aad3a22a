"""The tank topology base class: positions, units, feedback pair and the ideal-tank formulas.

Convention (Sedra & Smith, *Microelectronic Circuits*, Colpitts section): C1 sits
across the amplifier's output (collector-emitter), C2 across its input
(base-emitter), L from output to input. The feedback fraction is
beta = C1 / C2 and the amplifier needs a gain of at least 1 / beta.

Every formula takes numpy arrays (any broadcastable shapes) in SI units and is
pure. ``values`` is a mapping from position name (the topology's
``positions``, e.g. "C1", "C2", "C3", "L") to an array.

Adding a topology
-----------------
Write one module in ``picker/tank/`` with a subclass of :class:`Topology` that
sets ``name`` (the word a spec's ``topology`` key takes), ``positions`` (every
part position, in the order tables and reports show them), ``capacitors`` (the
capacitors in the series chain the inductor resonates with), ``inductor``,
and ``feedback_pair`` (the capacitors across the amplifier's output and
input), ``typical`` (a tank of about 1.3 MHz for the stage conformance tests);
``trimmer_position`` if a trimmer may sit beside one of its capacitors.
Defining the class registers it (``__init_subclass__``); add one import line
to ``picker/tank/__init__.py`` so the registry sees the module. If the tank is
not "an inductor against a series chain of capacitors", override the formulas
below (:meth:`Topology.l_eff`, :meth:`Topology.c_eff`, :meth:`Topology.frequency`,
:meth:`Topology.inductor_sensitivities`, :attr:`Topology.inductors`,
:meth:`Topology.shunt_targets`, :meth:`Topology.end_capacitance`, :meth:`Topology.beta`,
:meth:`Topology.feedback_bounds`, :meth:`Topology.solvable`,
:meth:`Topology.solve_interval`) and the circuit methods after them
(:meth:`Topology.pi_admittances`, :meth:`Topology.netlist_lines`, …), each
with its source (:mod:`picker.tank.hartley` is the worked example). Then write the
topology's own textbook test file, ``tests/test_<name>.py`` (the formula or a
worked example from a book, as ``tests/test_topology.py`` does for Colpitts
and Clapp). ``tests/test_tank_conformance.py`` runs over every registered
topology (exact search = brute force, sensitivities = finite differences,
frequency = eigenvalues of the LC state matrix of its
:meth:`Topology.netlist_lines`) without any change.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, ClassVar

import numpy as np

TWO_PI = 2.0 * np.pi

#: Largest coupling coefficient k of two coupled inductors: at k = 1 their inductance
#: matrix is singular.
MAX_COUPLING = 0.99

#: Key of a board's own coupling k in a values mapping (the Monte Carlo's sampled k of a
#: tank with coupled inductors, ``[tank] coupling_tolerance``); absent: the topology's own.
COUPLING = "coupling"

#: Every registered topology by name, filled by :meth:`Topology.__init_subclass__`.
TOPOLOGIES: dict[str, Topology] = {}


def resonant_frequency(l: Any, c_eff: Any) -> Any:
    """Ideal tank frequency f = 1 / (2π √(L·C)) in Hz (Thomson's formula)."""
    return 1.0 / (TWO_PI * np.sqrt(np.asarray(l) * np.asarray(c_eff)))


def spice_name(position: str, letter: str) -> str:
    """The SPICE element name of ``position``'s part: the name itself where it begins with
    the element's letter (``letter``: "C" or "L"), else the letter in front (a plug-in's
    capacitor "Ka" is written "CKa": SPICE reads an element's kind from its first letter,
    and a line "Ka …" would be a coupling; the SPICE3 manual's element conventions)."""
    return position if position[:1].upper() == letter else letter + position


def series_capacitance(*caps: Any) -> Any:
    """Capacitors in series: 1 / Σ(1/Ci)."""
    inv = sum(1.0 / np.asarray(c, dtype=float) for c in caps)
    return 1.0 / inv


class Topology:
    """A tank topology: its part positions and its vectorised formulas.

    The defaults describe an inductor resonating with a series chain of
    capacitors, two of which (``feedback_pair``) form the capacitive divider
    that feeds the amplifier's output back to its input (Colpitts and Clapp).
    A subclass is one topology; it is stateless, and ``Subclass()`` always
    returns the one registered instance.

    Class attributes
    ----------------
    name : the spec's word for it ("colpitts").
    positions : every part position, in display order.
    capacitors : the capacitors of the series chain.
    inductor : the inductor's position.
    feedback_pair : (output side, input side): the capacitors across the
        amplifier's output and input; the board's ``c1_shunt`` and
        ``c2_shunt`` add across them (:mod:`picker.tank.board`).
    trimmer_position : the chain capacitor a trimmer may sit in parallel with
        (``[yield] trimmer = "<position>"``), or None.
    """

    name: ClassVar[str]
    positions: ClassVar[tuple[str, ...]]
    capacitors: ClassVar[tuple[str, ...]]
    inductor: ClassVar[str] = "L"
    feedback_pair: ClassVar[tuple[str, str]] = ("C1", "C2")
    trimmer_position: ClassVar[str | None] = None
    #: Whether the tank has two magnetically coupled inductors (the spec's
    #: ``[tank] coupling`` applies; :meth:`configured`).
    coupled: ClassVar[bool] = False
    #: What the circuit model's validation found wanting on this tank, printed with every
    #: design that has an amplifier (:func:`picker.circuit.amplitude.cautions`); None where
    #: nothing is known to be wrong.
    model_caution: ClassVar[str | None] = None
    #: Coupling coefficient k of the inductors (0 for a tank with one inductor).
    coupling: float = 0.0
    #: A typical tank of about 1.3 MHz, position -> value (SI; invented values, not a
    #: design): what the stage conformance tests and examples build a circuit with.
    typical: ClassVar[Mapping[str, float]]
    _instance: ClassVar[Topology | None] = None

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        cls._instance = None
        if "name" in cls.__dict__:
            if cls.name in TOPOLOGIES:
                raise ValueError(f"a topology named {cls.name!r} is already registered")
            TOPOLOGIES[cls.name] = cls()

    def __new__(cls) -> Topology:
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return f"{type(self).__name__}()"

    def __reduce__(self) -> Any:
        return (type(self), ())

    def configured(self, coupling: float | None = None) -> Topology:
        """This topology with the spec's ``[tank]`` settings; a tank with one inductor
        takes no coupling (a topology with ``coupled`` overrides this)."""
        if coupling is not None and coupling != self.coupling:
            raise ValueError(f"a {self.name} tank has one inductor: no coupling to set")
        return self

    # ------------------------------------------------------------ positions

    @property
    def inductors(self) -> tuple[str, ...]:
        """Every inductor position (the one ``inductor`` unless a topology has more)."""
        return (self.inductor,)

    def unit(self, pos: str) -> str:
        """SI unit of a part position: "F" for a capacitor, "H" for an inductor."""
        if pos in self.inductors:
            return "H"
        if pos in self.capacitors:
            return "F"
        raise KeyError(pos)

    # ------------------------------------------------------------ formulas

    def c_series(self, values: Mapping[str, Any]) -> Any:
        """Capacitance of the capacitor chain alone (no stray), in F."""
        return series_capacitance(*(values[p] for p in self.capacitors))

    def c_eff(self, values: Mapping[str, Any], stray: Any = 0.0) -> Any:
        """Effective tank capacitance: the series chain plus stray across the tank."""
        return self.c_series(values) + stray

    def l_eff(self, values: Mapping[str, Any]) -> Any:
        """The inductance the capacitor chain resonates with, H (the inductor's value)."""
        return values[self.inductor]

    def frequency(self, values: Mapping[str, Any], stray: Any = 0.0) -> Any:
        """Nominal oscillation frequency of the ideal tank, Hz (Thomson's formula)."""
        return resonant_frequency(self.l_eff(values), self.c_eff(values, stray))

    def shunt_targets(self) -> dict[str, str]:
        """The position each board shunt parasitic sits in parallel with: ``c1_shunt``
        across the feedback pair's output side, ``c2_shunt`` across its input side
        (:mod:`picker.tank.board`). A tank whose pair is not capacitors returns {}."""
        out, inp = self.feedback_pair
        return {"c1_shunt": out, "c2_shunt": inp}

    def end_capacitance(self, values: Mapping[str, Any]) -> Any:
        """Capacitance from the tank's ends to the common node that holds the stage's DC
        voltages, F: the feedback pair (C1 + C2) of a series-chain tank."""
        return sum(np.asarray(values[p], dtype=float) for p in self.feedback_pair)

    def beta(self, values: Mapping[str, Any]) -> Any:
        """Feedback fraction beta = C_out / C_in of the feedback pair.

        The capacitive divider returns v_in / v_out = C1 / C2 of the output
        voltage to the input (Sedra & Smith, Colpitts section); the amplifier
        needs a gain of at least 1 / beta.
        """
        out, inp = self.feedback_pair
        return np.asarray(values[out]) / np.asarray(values[inp])

    def feedback_bounds(self, first: Any, beta_min: float, beta_max: float) -> tuple[Any, Any]:
        """Interval of the pair's second (input-side) value that puts beta in the window.

        beta = first / second falls as the second grows, so
        second ∈ [first / beta_max, first / beta_min] (the inverse of :meth:`beta`).
        """
        return first / beta_max, first / beta_min

    def sensitivities(self, values: Mapping[str, Any], stray: Any = 0.0) -> dict[str, np.ndarray]:
        """First-order sensitivities S_x = ∂ln f / ∂ln x for every position.

        f ∝ (L·C_eff)^(-1/2) gives S_L = -1/2. For a capacitor Ci in the series
        chain, ∂ln C_s/∂ln Ci = C_s/Ci, so S_Ci = -½ · (C_s/C_eff) · (C_s/Ci);
        with no stray this is the textbook -½·C_eff/Ci (REFERENCES.md,
        derived and checked by central differences in the tests). The
        capacitor terms sum to -½·C_s/C_eff, i.e. -½ without stray.
        """
        cs = self.c_series(values)
        ce = cs + stray
        out = self.inductor_sensitivities(values, np.shape(cs))
        for p in self.capacitors:
            out[p] = -0.5 * (cs / ce) * (cs / np.asarray(values[p]))
        return {p: out[p] for p in self.positions}

    def coupling_sensitivity(self, values: Mapping[str, Any]) -> Any:
        """∂ln f/∂k, the frequency's sensitivity to the coupling k of coupled inductors
        (per unit of k, not of ln k: k may be 0); 0 for a tank with one inductor."""
        return 0.0 * np.asarray(values[self.inductor], dtype=float)

    def inductor_sensitivities(
        self, values: Mapping[str, Any], shape: tuple[int, ...]
    ) -> dict[str, np.ndarray]:
        """S of each inductor: f ∝ L^(-1/2) gives S_L = -1/2 (broadcast to ``shape``)."""
        return {self.inductor: np.broadcast_to(-0.5, shape).astype(float)}

    # ------------------------------------------------------------ the exact search's solve

    def solvable(self) -> tuple[str, ...]:
        """Positions whose frequency window :meth:`solve_interval` solves analytically.

        The inductor and every chain capacitor outside the feedback pair (the
        pair is enumerated through :meth:`feedback_bounds`); none carries a
        shunt, so its board value is its marked value times a scale.
        """
        return (self.inductor,) + tuple(c for c in self.capacitors if c not in self.feedback_pair)

    def solved_position(self, sizes: Mapping[str, int]) -> str:
        """The position the search solves for: the solvable one with the largest table.

        The search enumerates every other position, so solving the largest
        table leaves the smallest outer enumeration; a tie goes to the inductor.
        """
        return max(self.solvable(), key=lambda p: sizes[p])

    def solve_interval(
        self,
        board: Mapping[str, Any],
        solved: str,
        f_min: Any,
        f_max: Any,
        stray: float,
        scale: float,
    ) -> tuple[Any, Any]:
        """Interval [lo, hi] of the solved position's marked value that puts f in [f_min, f_max].

        ``board`` holds the board values (parasitics applied) of every other
        position; ``scale`` is the solved part's board/marked ratio. From
        Thomson's formula ω² = 1 / (L·C_eff):

        - the inductor: L·scale ∈ [1/(ω_max²·C_eff), 1/(ω_min²·C_eff)];
        - a chain capacitor Ck: C_s = C_eff − stray ∈ [1/(ω_max²·L) − stray,
          1/(ω_min²·L) − stray] and 1/Ck = 1/C_s − Σ_{i≠k} 1/Ci; an empty
          interval is (inf, inf), an unbounded one ends at inf.

        Every operation is elementwise, so ``f_min``/``f_max`` may be arrays.
        """
        w_min = (TWO_PI * f_min) ** 2
        w_max = (TWO_PI * f_max) ** 2
        if solved == self.inductor:
            ce = self.c_eff(board, stray)
            lo = 1.0 / (w_max * ce * scale)
            hi = 1.0 / (w_min * ce * scale)
            return lo, hi
        if solved not in self.solvable():
            raise ValueError(f"{solved} is not solvable in a {self.name} tank")
        lt = self.l_eff(board)
        cs_lo = 1.0 / (w_max * lt) - stray
        cs_hi = 1.0 / (w_min * lt) - stray
        a = sum(1.0 / board[p] for p in self.capacitors if p != solved)
        with np.errstate(divide="ignore", invalid="ignore"):
            inv_lo = 1.0 / cs_hi - a  # smallest 1/Ck -> largest Ck
            inv_hi = 1.0 / cs_lo - a
            c_hi = np.where((cs_hi > 0) & (inv_lo > 0), 1.0 / inv_lo, np.inf)
            c_lo = np.where((cs_lo > 0) & (inv_hi > 0), 1.0 / inv_hi, np.inf)
        c_lo = np.where(cs_hi <= 0, np.inf, np.where(cs_lo <= 0, 0.0, c_lo))
        return c_lo / scale, c_hi / scale

    # ------------------------------------------------------------ the loaded model (picker.circuit)
    # The tank seen by the amplifier stage is a π network between its output end (across
    # the feedback pair's output-side capacitor), its input end (across the input-side one)
    # and the common node: Y_out and Y_in from the ends to common, Y_bridge between the ends
    # (Sedra & Smith, LC oscillators: the general three-reactance form of the Colpitts,
    # Clapp and Hartley circuits). The default bridge is the inductor, with its series loss
    # and the stray across it, in series with every chain capacitor outside the feedback
    # pair (none for a Colpitts, C3 for a Clapp). A tank of another shape overrides these.

    def bridge_capacitors(self) -> tuple[str, ...]:
        """The chain capacitors in series with the inductor between the tank's ends."""
        return tuple(c for c in self.capacitors if c not in self.feedback_pair)

    @property
    def bridge_passes_dc(self) -> bool:
        """Whether the bridge between the ends conducts DC (the inductor alone does)."""
        return not self.bridge_capacitors()

    @staticmethod
    def capacitor_admittance(s: Any, c: Any, esr: float) -> Any:
        """Admittance of a capacitor with its ESR in series: s·C/(1 + s·C·ESR), S."""
        return s * c / (1.0 + s * c * esr) if esr else s * c

    def pi_admittances(
        self,
        s: Any,
        values: Mapping[str, Any],
        stray: Any,
        r_l: Any,
        capacitor_esr: Mapping[str, float],
    ) -> tuple[Any, Any, Any]:
        """(Y_out, Y_in, Y_bridge) at complex frequency ``s``, S (shapes of ``values``).

        ``stray`` sits across the inductor, ``r_l`` in series with it;
        ``capacitor_esr`` maps a position to its ESR (ohm).
        """
        out, inp = self.feedback_pair
        y_out = self.capacitor_admittance(s, values[out], capacitor_esr.get(out, 0.0))
        y_in = self.capacitor_admittance(s, values[inp], capacitor_esr.get(inp, 0.0))
        y_bridge = 1.0 / (r_l + s * values[self.inductor]) + s * stray
        bridge = self.bridge_capacitors()
        if bridge:  # impedances in series
            z = 1.0 / y_bridge
            for c in bridge:
                z = z + 1.0 / self.capacitor_admittance(s, values[c], capacitor_esr.get(c, 0.0))
            y_bridge = 1.0 / z
        return y_out, y_in, y_bridge

    def with_end_capacitance(
        self, values: Mapping[str, Any], c_out: float, c_in: float
    ) -> dict[str, Any]:
        """``values`` with ``c_out`` added across the output end and ``c_in`` across the input."""
        out, inp = self.feedback_pair
        return {**values, out: values[out] + c_out, inp: values[inp] + c_in}

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
        """Peak AC voltage across each part, V, from the ends' peaks and complex voltages.

        The feedback pair carries its end's voltage; the bridge current
        i = (v_out − v_in)·Y_bridge drops i/(s·Ck) across each bridge capacitor and
        the rest across the inductor.
        """
        out, inp = self.feedback_pair
        across = {out: peak_out, inp: peak_in}
        d = v_out - v_in
        bridge = self.bridge_capacitors()
        if not bridge:
            across[self.inductor] = np.abs(d)
            return across
        z = [1.0 / (s * values[c]) for c in bridge]
        for c, zc in zip(bridge, z, strict=True):
            across[c] = np.abs(d * y_bridge * zc)
        across[self.inductor] = np.abs(d * (1 - y_bridge * sum(z)))
        return across

    def dc_across(self, v_out: float, v_in: float) -> dict[str, float]:
        """DC voltage across each capacitor with the ends at ``v_out`` and ``v_in``, V.

        The inductor is a DC short, so a single bridge capacitor carries the whole
        difference; how several would share it is unknown (NaN).
        """
        out, inp = self.feedback_pair
        result = {inp: v_in, out: v_out}
        bridge = self.bridge_capacitors()
        for c in bridge:
            result[c] = v_out - v_in if len(bridge) == 1 else float("nan")
        return result

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
        """SPICE element lines of the tank between ``out_node``, ``in_node`` and ground "0".

        Each capacitor with its ESR, the bridge capacitors from the output end
        (internal nodes m, m2, …), ``bleed`` (ohm, if given) from the output end to
        ground for a DC path, the inductor as L1 with its series loss ``r_l``
        (ohm) and the stray across it.
        """

        def g(x: float) -> str:
            return f"{float(x):.6g}"

        lines: list[str] = []

        def cap(pos: str, a: str, b: str) -> None:
            r = capacitor_esr.get(pos, 0.0)
            name = spice_name(pos, "C")
            if r:
                lines.append(f"{name} {a} n{name} {g(values[pos])}")
                lines.append(f"R{name}ESR n{name} {b} {g(r)}")
            else:
                lines.append(f"{name} {a} {b} {g(values[pos])}")

        out, inp = self.feedback_pair
        cap(out, out_node, "0")
        cap(inp, in_node, "0")
        node = out_node
        for k, c in enumerate(self.bridge_capacitors()):
            nxt = "m" if k == 0 else f"m{k + 1}"
            cap(c, node, nxt)
            node = nxt
        if bleed is not None:
            lines.append(f"RBLEED {out_node} 0 {g(bleed)}")
        ind = self.inductor
        name = f"{spice_name(ind, 'L')}1"
        if r_l > 0:
            lines += [f"{name} {node} nl {g(values[ind])}", f"RLESR nl {in_node} {g(r_l)}"]
        else:
            lines.append(f"{name} {node} {in_node} {g(values[ind])}")
        if stray > 0:
            lines.append(f"CSTRAY {node} {in_node} {g(stray)}")
        return lines
