"""The amplifier stage base class: what a stage contributes to the loaded oscillator.

A stage is the active half of the oscillator; the tank (:mod:`picker.tank`) is
the passive half. The generic nodal solver (:mod:`picker.circuit.network`)
builds the circuit's nodal-admittance matrix from the stamps of both, in the
manner of modified nodal analysis (every element stamps its admittance y
between its two nodes a, b: +y on the diagonal entries (a, a) and (b, b), −y on
(a, b) and (b, a); Ho, Ruehli & Brennan, "The modified nodal approach to network
analysis", IEEE Trans. Circuits Syst. 22 (1975)). The stage also owns its bias
solution, its small-signal device values, the large-signal limit that sets the
amplitude, its DC voltages, its netlist lines and its cautions.

Nodes
-----
Every stage names four nodes (:attr:`Stage.nodes`) by their roles: ``output``
(where the controlled source delivers its current), ``top`` (the tank's output
end, which the output drives, possibly through a coupling capacitor),
``input`` (the tank's input end; the controlling voltage is input − common)
and ``common``. "0" is the reference node of the small-signal network: the
tank's common end (its two feedback capacitors meet there). For a stage with its
emitter grounded through its bias parts that is ground (the AC ground of the
supply too); a stage whose emitter is the tank's common end (the emitter follower,
the common-base stage) names the emitter "0" and gives ground its own node, which
nodal analysis allows (any node may be the reference; the return ratio and every
voltage difference are the same).

Adding an amplifier stage
-------------------------
Write one module in ``picker/circuit/stages/`` with a subclass of
:class:`Stage` that sets ``name`` (the spec's ``stage`` word, hyphenated) and
``device`` (the spec's ``kind``), and implements the abstract methods below,
each with its source. Defining the class registers it
(``__init_subclass__``); add one import line to
``picker/circuit/stages/__init__.py``. For the large-signal model
(:mod:`picker.circuit.steady`) the stage also describes its device under drive:
:meth:`Stage.bias_loop` (the DC loop around it), :meth:`Stage.device_currents` (mean,
harmonics and peak of the output current for a sine at the input) and
:meth:`Stage.diffusion_capacitance`; without them :meth:`Stage.bias_loop` returns
``None``: the steady frequency is then the linear zero-phase frequency and the other
steady figures are NaN. A stage that also gives its device law in the time domain
(:meth:`Stage.output_current`, with ``has_device_law = True``) gets its steady
frequency corrected by the harmonic balance of :mod:`picker.circuit.harmonic`. ``tests/test_stage_conformance.py`` then
checks it without change: the idealised stage (:meth:`Stage.ideal_params`)
reduces to its textbook start-up condition (:meth:`Stage.required_gain`), the
fast closed form agrees with the generic nodal solver, and the netlist of
:meth:`Stage.typical_params` runs in ngspice with no floating node.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from typing import Any, ClassVar

import numpy as np

from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import BiasPoint, SmallSignal
from picker.circuit.stages.slow import SlowNetwork, grounded_common
from picker.tank.base import TWO_PI, Topology

__all__ = [
    "STAGES",
    "INNER",
    "BiasLoop",
    "DeviceCurrents",
    "KICK_FRACTION",
    "Stage",
    "StageNetlist",
    "Stamp",
    "need",
    "spice_number",
]

#: The netlist's start-up kick: a current pulse of this fraction of the bias current for
#: half an ideal period into the tank top (also the disturbance the start-up time of
#: :mod:`picker.circuit.envelope` starts from).
KICK_FRACTION = 0.2

#: The inner base (gate) node behind a base stopper: the device's own control terminal
#: (:mod:`picker.circuit.stages.stopper`).
INNER = "bs"

#: Every registered stage by name, filled by :meth:`Stage.__init_subclass__`.
STAGES: dict[str, Stage] = {}


def need(x: float | None, what: str) -> float:
    """``x``, or a ValueError saying that the amplifier needs ``what``."""
    if x is None:
        raise ValueError(f"the amplifier needs {what}")
    return x


def spice_number(x: float) -> str:
    """A value as a netlist writes it (six significant figures)."""
    return f"{float(x):.6g}"


@dataclass(frozen=True)
class Stamp:
    """One admittance ``y`` (S; scalar or one value per element) between nodes ``a`` and ``b``.

    "0" is ground. :func:`picker.circuit.network.loop_gain_matrix` adds +y to the
    diagonal entries of ``a`` and ``b`` and −y to the two off-diagonal ones.
    """

    a: str
    b: str
    y: Any


@dataclass(frozen=True)
class StageNetlist:
    """The stage's part of a SPICE netlist (:func:`picker.circuit.netlist.write_netlist`).

    ``elements``: every element line in order, the tank's lines included (the
    stage places them); ``models``: the ``.model`` lines; ``kick``: the size of
    the start-up current pulse into the tank top, A; ``top_dc``: the DC voltage
    of the tank top, V (the level the ``.meas`` crossings are taken at).
    """

    elements: list[str]
    models: list[str]
    kick: float
    top_dc: float


@dataclass(frozen=True)
class BiasLoop:
    """The DC loop around the device that sets its mean output current (SI floats).

    With the control voltage's DC part V_dc = V_rest + ΔV and the mean output current
    I, the loop holds ΔV = −r_dc·(I − i_rest) (Thevenin source of the base divider
    through r_th, emitter resistor r_e; r_dc = r_th/β + r_e·(1 + 1/β), Sedra & Smith,
    bias-stability analysis of the four-resistor network). ``r_dc = inf`` holds the
    mean current fixed (no bias network described). ``c_e`` is the emitter (source)
    bypass, 0 without; ``beta`` the DC current gain (inf for a fet); ``v_out`` the DC
    output-to-common voltage at rest; ``r_out`` the DC resistance from the supply to
    the output; ``v_knee`` the output-to-common voltage below which the device leaves
    its active region (saturation of a bjt, triode of a fet).
    """

    i_rest: float
    gm_rest: float
    r_dc: float
    r_th: float
    r_e: float
    c_e: float
    beta: float
    v_out: float
    r_out: float
    v_knee: float


@dataclass(frozen=True)
class DeviceCurrents:
    """Output current of the device driven by V_rest + ΔV + a·cos θ (arrays, A): its mean,
    its 1st, 2nd and 3rd harmonic amplitudes (cosine coefficients) and its peak."""

    mean: np.ndarray
    h1: np.ndarray
    h2: np.ndarray
    h3: np.ndarray
    peak: np.ndarray


class Stage:
    """An amplifier stage: a stateless plug-in; ``Subclass()`` is the registered instance.

    Class attributes
    ----------------
    name : the spec's word for it ("common-emitter").
    device : the device type it is built from, the spec's ``kind`` ("bjt").
    default_for_device : whether it is the stage a spec with this ``kind`` and no
        ``stage`` key gets (one per device type).
    output, top, input, common : node names by role (see the module docstring).
    coupling_parts : the stage's own capacitors that carry the tank's signal and
        so appear in the stress figures (a blocking capacitor).
    has_device_law : whether the stage implements :meth:`output_current` (the harmonic
        balance of :mod:`picker.circuit.harmonic` then corrects its steady frequency).
    collector_load : whether the stage takes a collector (drain) load, the spec's
        ``r_load`` or ``choke`` (an emitter follower's collector goes straight to the
        supply: no load).
    options : the bias-network details (:mod:`picker.circuit.bias`) the stage models:
        "collector-feedback" (``r_feedback``), "emitter-split" (``r_e_unbypassed``),
        "stopper" (``r_stopper``), "p-type" (``p_type``). Not inherited: a subclass that
        changes the network declares its own (the spec refuses the others, one line).
    refusals : why the stage does not take an option, by option (the spec adds the reason
        to its one-line refusal); inherited.
    saturated_balance : whether the harmonic balance of both junctions
        (:mod:`picker.circuit.junctions`) is taken on boards whose device saturates when the
        stage has a base stopper (:mod:`picker.circuit.stages.stopper`; the describing
        function leaves out the base current's harmonics through it).
    grounded_common : whether the tank's common end (the stage's ``common`` node) is at
        AC ground (common-emitter, common-source); False where it is the emitter
        (source) that taps the tank (the followers, the common-base and common-gate
        stages). A Hartley coil's tap returns to the common end through its bypass
        (:data:`picker.tank.hartley.TAP_BYPASS`): to ground here, to the emitter (source)
        in the others, as in the emitter-follower Hartley whose emitter sits on the tap.
    orbit_on_start : whether every design that starts takes the periodic orbit of its
        netlist at its nominal values (:mod:`picker.circuit.nominal_orbit`), saturated or
        not: a stage whose control junction sits across a tank capacitor whose other end
        is the output (the emitter follower: the device's current pulses flow straight
        into C1 at the emitter, which is also the junction's return), where the
        describing function's sine at the junction misses the drive.
    """

    name: ClassVar[str]
    device: ClassVar[str]
    default_for_device: ClassVar[bool] = True
    output: ClassVar[str] = "c"
    top: ClassVar[str] = "t"
    input: ClassVar[str] = "b"
    common: ClassVar[str] = "e"
    coupling_parts: ClassVar[tuple[str, ...]] = ()
    has_device_law: ClassVar[bool] = False
    collector_load: ClassVar[bool] = True
    grounded_common: ClassVar[bool] = True
    options: ClassVar[frozenset[str]] = frozenset()
    refusals: ClassVar[Mapping[str, str]] = {}
    saturated_balance: ClassVar[bool] = True
    orbit_on_start: ClassVar[bool] = False
    _instance: ClassVar[Stage | None] = None

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        cls._instance = None
        if "options" not in cls.__dict__:  # not inherited (see the class docstring)
            cls.options = frozenset()
        if "name" in cls.__dict__:
            if cls.name in STAGES:
                raise ValueError(f"a stage named {cls.name!r} is already registered")
            STAGES[cls.name] = cls()

    def __new__(cls) -> Stage:
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return f"{type(self).__name__}()"

    def __reduce__(self) -> tuple[type[Stage], tuple[()]]:
        return (type(self), ())

    @property
    def nodes(self) -> tuple[str, ...]:
        """The stage's nodes in the order of the nodal matrix (ground excluded)."""
        roles = (self.output, self.top, self.input, self.common)
        return tuple(n for n in dict.fromkeys(roles) if n != "0")

    def network_nodes(self, params: AmplifierParams) -> tuple[str, ...]:
        """:attr:`nodes`, and the inner base (gate) node behind a stopper
        (:mod:`picker.circuit.stages.stopper`) where ``params`` has one."""
        return self.nodes + ((INNER,) if params.r_stopper is not None else ())

    def control(self, params: AmplifierParams) -> str:
        """The node of the device's own base (gate), whose voltage to ``common`` drives the
        junction: ``input``, or the inner node behind a stopper."""
        return INNER if params.r_stopper is not None else self.input

    # ------------------------------------------------------------ bias and device values

    def bias(self, params: AmplifierParams) -> BiasPoint | None:
        """DC bias point from the bias network, or ``None`` where the stage does not solve one."""
        return None

    def device_small_signal(self, params: AmplifierParams) -> SmallSignal:
        """Hybrid-pi values of the device at its bias (r_o resolved), before the
        capacitance overrides of :meth:`small_signal`."""
        raise NotImplementedError

    def small_signal(self, params: AmplifierParams) -> SmallSignal:
        """Hybrid-pi values the loaded model uses (see :mod:`picker.circuit.device`).

        The device's own values (:meth:`device_small_signal`), then the user's
        ``c_mu``, and ``c_pi`` given directly or from the transition frequency:
        C_pi = gm/(2π·f_T) − C_mu (f_T = gm/(2π·(C_pi + C_mu)); Sedra & Smith,
        high-frequency hybrid-pi model), never below zero.
        """
        ss = self.device_small_signal(params)
        c_mu = params.c_mu if params.c_mu is not None else ss.c_mu
        if params.c_pi is not None:
            c_pi = params.c_pi
        elif params.f_t is not None:
            c_pi = max(ss.gm / (TWO_PI * params.f_t) - c_mu, 0.0)
        else:
            c_pi = ss.c_pi
        return replace(ss, c_pi=c_pi, c_mu=c_mu)

    def ideal_params(self, gm: float, r_load: float) -> AmplifierParams:
        """The idealised stage: transconductance ``gm``, load ``r_load`` and nothing else
        (no input conductance, no device capacitance, infinite output resistance, the
        common node grounded, no bias network, no coupling capacitor)."""
        raise NotImplementedError

    def typical_params(self) -> AmplifierParams:
        """A typical working stage with its bias network (invented values, not a real
        circuit) that oscillates with a Colpitts tank of C1 = 1 nF, C2 = 2.2 nF,
        L = 22 µH; the conformance test writes its netlist."""
        raise NotImplementedError

    def typical_variants(self) -> dict[str, AmplifierParams]:
        """:meth:`typical_params` with each bias-network option of :attr:`options` (invented
        values, not real circuits), by name; the conformance tests run over them too."""
        return {}

    # ------------------------------------------------------------ start-up

    def required_gain(self, topology: Topology, values: Mapping[str, Any]) -> Any:
        """The gain gm·R the idealised stage needs to start with this tank (the edge of
        oscillation: loop gain 1 at the ideal tank frequency)."""
        raise NotImplementedError

    # ------------------------------------------------------------ the small-signal network

    def transconductance(self, ss: SmallSignal) -> float:
        """gm of the controlled source: current gm·(v_input − v_common) from ``output``
        to ``common`` through the device."""
        return ss.gm

    def stamps(
        self, s: np.ndarray, topology: Topology, params: AmplifierParams, ss: SmallSignal
    ) -> list[Stamp]:
        """Every passive admittance of the stage at complex frequency ``s`` (1-D), the
        device's r_pi, C_pi, C_mu and r_o included, the controlled source excluded."""
        raise NotImplementedError

    def loop_gain(
        self,
        s: np.ndarray,
        tank: tuple[Any, Any, Any],
        topology: Topology,
        params: AmplifierParams,
        ss: SmallSignal,
        *,
        nodes: bool = False,
    ) -> Any:
        """Return ratio T at ``s`` in closed form, given the tank's (Y_out, Y_in, Y_bridge)
        (:meth:`picker.tank.base.Topology.pi_admittances`); with ``nodes``, also the node
        voltages for a unit test current, as ``(T, {node: x})``. Must equal the generic
        solver on :meth:`stamps` (the conformance test checks it)."""
        raise NotImplementedError

    def loaded_tank(
        self, topology: Topology, values: Mapping[str, Any], ss: SmallSignal
    ) -> dict[str, Any]:
        """Tank values with the device's capacitances added where they load it: the
        root finder's first estimate of the loaded frequency."""
        return topology.with_end_capacitance(values, ss.c_mu, ss.c_pi)

    def probe(self, x: Mapping[str, Any]) -> Any:
        """The tank top's voltage as the netlist's transient measures it (to ground), from
        node voltages ``x`` referenced to the network's "0": ``x[top]`` where "0" is ground."""
        return x[self.top]

    def needs_bleed(self, topology: Topology, params: AmplifierParams) -> bool:
        """Whether the tank top needs the bleed resistor ``r_bleed`` to ground for a
        DC path (a coupling capacitor on one side, a bridge that blocks DC on the other)."""
        return False

    def blocking_joins_input(self, topology: Topology, params: AmplifierParams) -> bool:
        """Whether the coupling capacitor C_B belongs to the input's DC node: it sits
        between the output and the tank top, and the tank's bridge passes DC to the
        input (:func:`picker.circuit.netlist.bias_time_constant` then counts it)."""
        return False

    # ------------------------------------------------------------ large signal

    def drive_limit(
        self, params: AmplifierParams, ss: SmallSignal, margin: np.ndarray, ok: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Peak input (control) voltage at which the fundamental transconductance has
        fallen to gm/margin (the describing-function amplitude), V, and a mask of
        the elements whose swing the device's own limit cannot bound (overdriven)."""
        raise NotImplementedError

    def bias_loop(self, params: AmplifierParams, ss: SmallSignal) -> BiasLoop | None:
        """The DC loop that sets the mean output current under drive (:class:`BiasLoop`),
        or ``None`` where the large-signal model has too little to go on."""
        return None

    def device_currents(
        self, params: AmplifierParams, ss: SmallSignal, dv: np.ndarray, a: np.ndarray
    ) -> DeviceCurrents:
        """The device's output current driven by V_rest + ``dv`` + ``a``·cos θ (V):
        mean, harmonics 1-3 and peak (:class:`DeviceCurrents`), arrays of the broadcast
        shape of ``dv`` and ``a``."""
        raise NotImplementedError

    def mean_current(
        self, params: AmplifierParams, ss: SmallSignal, a: np.ndarray
    ) -> Callable[[np.ndarray], np.ndarray]:
        """ΔV ↦ the mean of :meth:`device_currents` (ΔV, ``a``) at the fixed drive ``a``:
        what the bias shift's bisection evaluates forty times per drive. A stage may
        compute once what does not depend on ΔV; the value must equal
        ``device_currents(params, ss, dv, a).mean`` bit for bit."""
        return lambda dv: self.device_currents(params, ss, dv, a).mean

    def gate_current(
        self, params: AmplifierParams, ss: SmallSignal, a: np.ndarray
    ) -> Callable[[np.ndarray], np.ndarray] | None:
        """ΔV ↦ the mean current of a junction from the input to the common node (a
        JFET's gate junction) at drive ``a``, A; ``None`` (the default) where the input
        draws no such current or the stage counts it in :meth:`mean_current` (a bjt's
        base current)."""
        return None

    def output_current(self, params: AmplifierParams, ss: SmallSignal, v: np.ndarray) -> np.ndarray:
        """The device's output current at control voltage V_rest + ``v`` (V, any shape), A:
        the law :meth:`device_currents` takes the harmonics of, for the harmonic correction
        of :mod:`picker.circuit.harmonic`."""
        raise NotImplementedError

    def diffusion_capacitance(self, params: AmplifierParams, ss: SmallSignal) -> float:
        """The part of C_pi that is charge stored in proportion to the output current
        (TF·gm for a bjt), F; it compresses with the drive as gm does."""
        return 0.0

    def compressed(
        self, params: AmplifierParams, ss: SmallSignal, c: np.ndarray, d: np.ndarray
    ) -> SmallSignal:
        """The device seen by the fundamental under drive (fields become arrays).

        Describing functions: the fundamental transconductance is c·gm; the input
        conductance (base current = output current/β) and the stored charge
        (q = TF·i_C, Gummel-Poon; Massobrio & Antognetti ch. 2) follow the same
        current, so g_pi and the diffusion part of C_pi compress by the same c; the
        output conductance (Early effect, g_o = I/VAF) follows the mean current,
        ratio d = I/I_rest.
        """
        c = np.asarray(c, dtype=float)
        d = np.asarray(d, dtype=float)
        c_diff = self.diffusion_capacitance(params, ss)
        arr: Any = SmallSignal  # the fields become arrays, one per element
        return arr(  # type: ignore[no-any-return]
            gm=ss.gm * c,
            r_pi=ss.r_pi / c,
            r_o=ss.r_o / d,
            c_pi=ss.c_pi - c_diff + c_diff * c,
            c_mu=ss.c_mu + 0.0 * c,
            i_dc=ss.i_dc * d,
        )

    def slow_network(
        self,
        topology: Topology,
        params: AmplifierParams,
        ss: SmallSignal,
        loop: BiasLoop,
        tank: tuple[Any, Any, Any],
        s_lo: np.ndarray,
    ) -> SlowNetwork:
        """The bias network's DC nodes for the envelope equations of
        :mod:`picker.circuit.envelope` (``tank``: the π admittances at the low frequency
        ``s_lo``); by default those of a grounded common end
        (:func:`picker.circuit.stages.slow.grounded_common`)."""
        return grounded_common(self, topology, params, ss, loop, tank, s_lo)

    def relaxation_time(self, params: AmplifierParams) -> float:
        """The time constant through which a saturated board's bias recovers after the
        device's junctions have pulled it (the bursting criterion of saturated boards,
        :data:`picker.circuit.envelope.SATURATED_BURST`), s: R_E·C_E, the emitter bypass
        charged by the emitter current's pulses and drained through R_E (0 without)."""
        return (params.r_e or 0.0) * (params.c_e or 0.0)

    def headroom(self, params: AmplifierParams) -> float:
        """Largest peak swing at the output before the device saturates, V (inf: unknown)."""
        return math.inf

    # ------------------------------------------------------------ DC voltages, parts, cautions

    def dc_voltages(self, topology: Topology, params: AmplifierParams) -> dict[str, float]:
        """DC voltage across each capacitor (the tank's and :attr:`coupling_parts`), V;
        NaN where the bias point is unknown."""
        return {p: math.nan for p in (*topology.capacitors, *self.coupling_parts)}

    def coupling_across(
        self, node: Mapping[str, np.ndarray], params: AmplifierParams
    ) -> dict[str, np.ndarray]:
        """Peak AC voltage across each of :attr:`coupling_parts` present, from the complex
        node voltages ``node``, V."""
        return {}

    def cautions(self, topology: Topology, params: AmplifierParams) -> list[str]:
        """Plain-language warnings about the stage and how it meets this tank."""
        return []

    # ------------------------------------------------------------ netlist

    def settling_time(self, params: AmplifierParams) -> float:
        """Time the bias needs to settle after power-up, s (added to the transient)."""
        return 0.0

    def netlist(
        self,
        topology: Topology,
        values: Mapping[str, float],
        stray: float,
        r_l: float,
        params: AmplifierParams,
    ) -> StageNetlist:
        """The stage's netlist lines around the tank's (ValueError where the stage
        cannot be written, e.g. without a bias network)."""
        raise NotImplementedError
