"""The optional ``[amplifier]`` section of a spec file (edge layer, pydantic).

Example (every quantity accepts engineering strings; bare numbers are SI)::

    [amplifier]
    kind = "bjt"                 # the device type: "bjt" or "fet"
    stage = "common-emitter"     # the configuration (omit: the device type's default stage)
    supply = "9 V"
    r_load = "2.2 kohm"          # collector resistor ... or: choke = "100 uH", choke_resistance = "2 ohm"
                                 # (both r_load and choke: the resistor in series with the choke)
    r_bias_top = "47 kohm"       # supply to base
    r_bias_bottom = "10 kohm"    # base to ground (omit for a single base resistor)
    r_emitter = "1 kohm"
    c_emitter = "100 nF"         # omit: unbypassed emitter (degeneration)
    c_coupling = "10 nF"         # collector-to-tank blocking capacitor; omit: none (flagged)
    c_base = "100 nF"            # base bypass to ground (the common-base stage's)
    r_stopper = "100 ohm"        # base (gate) stopper in series at the device; omit: none
    min_margin = 2.0             # smallest acceptable start-up margin (default 2)
    max_margin = 20              # largest acceptable start-up margin (omit: no bound)
    monte_carlo = "surrogate"    # or "full": the loaded model on every simulated board

``stage`` takes the name of a registered stage (:data:`picker.circuit.stages.STAGES`:
"common-emitter" for a bjt, "common-source" for a fet); without it the stage is the
default one of ``kind``, and a ``stage`` without ``kind`` sets ``kind`` to the stage's
device type. A stage built from another device than ``kind`` is refused.

A fet may be given by its own SPICE-style parameters instead: ``device`` names a
generic class (:data:`picker.circuit.fet.FET_CLASSES`: "generic-njfet", an n-channel
JFET, or "generic-nmos", an n-channel enhancement MOSFET; typical values, from memory)
and ``idss`` (A, a JFET's), ``vto`` (V: a JFET's pinch-off voltage, negative, or a
MOSFET's threshold), ``kp`` (A/V², a MOSFET's, W/L folded in) and ``lambda`` (1/V)
replace the class's own values. The fet stages then solve their bias: the gate through
the divider, or a single gate resistor to ground (``r_bias_bottom`` alone: a JFET's
source self-bias), the source through ``r_emitter``::

    [amplifier]
    stage = "common-drain"
    device = "generic-njfet"
    idss = "12 mA"
    vto = "-2 V"
    r_bias_bottom = "1 Mohm"     # gate to ground
    r_emitter = "470 ohm"        # source resistor

A bjt's own card: ``device`` names a bipolar class (:data:`picker.circuit.device.BJT_CLASSES`:
"generic-npn", "generic-pnp", "generic-rf-npn"; typical values, from memory) and the
Gummel-Poon keys ``is``, ``bf``, ``br``, ``vaf``, ``tf``, ``cje``, ``cjc`` replace the
class's own (:data:`picker.circuit.device.BJT_CARD_KEYS`); the bias, the models and the
netlist all take the card.

Optional device keys: ``bias_current`` (A; bjt default: solved from the bias
network), ``gm`` (S), ``current_gain``, ``early_voltage`` (V), ``r_out`` (ohm),
``c_pi``, ``c_mu`` (F), ``f_t`` (Hz), ``overdrive_voltage`` (V, fet). Without them
a bjt uses the project's generic small-signal NPN (:mod:`picker.circuit.device`).
The next stage's input may load the output (the collector or drain; a follower's
emitter or source), through a coupling capacitor, so it takes no DC
(:mod:`picker.circuit.loads`)::

    next_stage_r = "4.7 kohm"    # the next stage's input resistance
    next_stage_c = "10 pF"       # its input capacitance, in parallel (optional)
    next_stage_coupling = "100 nF"  # the coupling capacitor (default 100 nF)

Inductor loss (``q``, ``q_frequency``, ``esr``) and capacitor ``esr`` live in the
per-part tables and reach the model through :meth:`AmplifierSpec.to_params`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationInfo,
    field_validator,
    model_validator,
)

from picker import units
from picker.circuit.amplifier import AmplifierParams
from picker.circuit.device import BJT_CARD_KEYS, BJT_CLASSES, GENERIC_NPN, GENERIC_PNP, bjt_card
from picker.circuit.fet import FET_CLASSES, FetCard, fet_class
from picker.errors import SpecError

_UNITS = {
    "supply": "V",
    "bias_current": "A",
    "gm": "S",
    "early_voltage": "V",
    "r_out": "ohm",
    "c_pi": "F",
    "c_mu": "F",
    "f_t": "Hz",
    "overdrive_voltage": "V",
    "r_load": "ohm",
    "choke": "H",
    "choke_resistance": "ohm",
    "r_bias_top": "ohm",
    "r_bias_bottom": "ohm",
    "r_emitter": "ohm",
    "c_emitter": "F",
    "c_coupling": "F",
    "c_base": "F",
    "idss": "A",
    "cgs": "F",
    "cgd": "F",
    # the next stage across the output (picker.circuit.loads)
    "next_stage_r": "ohm",
    "next_stage_c": "F",
    "next_stage_coupling": "F",
}
_MAY_BE_ZERO = {"choke_resistance", "c_pi", "c_mu", "cgs", "cgd"}
# the bias-network details (picker.circuit.bias), a block of their own
_BIAS_UNITS = {"r_feedback": "ohm", "r_emitter_unbypassed": "ohm", "r_stopper": "ohm"}


class AmplifierSpec(BaseModel):
    """Validated ``[amplifier]`` section, SI floats (``None`` = absent)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    kind: Literal["bjt", "fet"] = "bjt"
    stage: str = "common-emitter"
    supply: float = 9.0
    bias_current: float | None = None
    gm: float | None = None
    current_gain: float | None = None
    early_voltage: float | None = None
    r_out: float | None = None
    c_pi: float | None = None
    c_mu: float | None = None
    f_t: float | None = None
    overdrive_voltage: float | None = None
    r_load: float | None = None
    choke: float | None = None
    choke_resistance: float = 0.0
    r_bias_top: float | None = None
    r_bias_bottom: float | None = None
    r_emitter: float | None = None
    c_emitter: float | None = None
    c_coupling: float | None = None
    c_base: float | None = None
    device: str | None = None
    idss: float | None = None
    vto: float | None = None
    kp: float | None = None
    lambda_: float | None = Field(default=None, alias="lambda")
    cgs: float | None = None
    cgd: float | None = None
    # a bjt's own card (SPICE Gummel-Poon names; picker.circuit.device.BJT_CARD_KEYS)
    is_: float | None = Field(default=None, alias="is")
    bf: float | None = None
    br: float | None = None
    vaf: float | None = None
    tf: float | None = None
    cje: float | None = None
    cjc: float | None = None
    min_margin: float = 2.0
    max_margin: float | None = None
    monte_carlo: Literal["surrogate", "full"] = "surrogate"
    # the bias-network details (picker.circuit.bias)
    bias: Literal["divider", "base-resistor", "collector-feedback"] | None = None
    r_feedback: float | None = None
    r_emitter_unbypassed: float | None = None
    r_stopper: float | None = None
    polarity: Literal["npn", "pnp", "n-channel", "p-channel"] | None = None
    # the next stage across the output (picker.circuit.loads)
    next_stage_r: float | None = None
    next_stage_c: float | None = None
    next_stage_coupling: float = 100e-9

    @model_validator(mode="before")
    @classmethod
    def _default_stage(cls, data: Any) -> Any:
        """No ``stage``: the default stage of ``kind``; a ``stage`` and no ``kind``: its device."""
        if not isinstance(data, Mapping):
            return data
        # the stage registry (its modules import scipy.special): only with an [amplifier]
        from picker.circuit.stages import STAGES, default_stage

        data = dict(data)
        device = data.get("device")
        if isinstance(device, str) and device in BJT_CLASSES:  # a bjt class: kind, polarity
            data.setdefault("kind", "bjt")
            if data.get("kind") == "bjt":
                data.setdefault("polarity", BJT_CLASSES[device][1])
        stage = data.get("stage")
        if "kind" not in data and isinstance(stage, str) and stage in STAGES:
            data["kind"] = STAGES[stage].device
        elif "stage" not in data:
            try:
                data["stage"] = default_stage(data.get("kind", "bjt")).name
            except (TypeError, ValueError):
                pass  # a bad kind: its own message, from the kind field
        return data

    @field_validator("stage", mode="before")
    @classmethod
    def _stage(cls, v: Any, info: ValidationInfo) -> str:
        # the stage registry (its modules import scipy.special): only with an [amplifier]
        from picker.circuit.stages import STAGES, stage_names

        if not isinstance(v, str) or v not in STAGES:
            raise ValueError(
                f"expected an amplifier stage, one of {', '.join(stage_names())}; got {v!r}"
            )
        kind = info.data.get("kind")
        if kind is not None and STAGES[v].device != kind:
            raise ValueError(
                f"expected a stage built from the device kind = {kind!r}; got {v!r}, which is "
                f"built from a {STAGES[v].device}"
            )
        return v

    @field_validator(*_UNITS, mode="before")
    @classmethod
    def _quantity(cls, v: Any, info: ValidationInfo) -> float:
        name = str(info.field_name)
        unit = _UNITS[name]
        try:
            x = units.parse_quantity(v, unit)
        except SpecError as exc:
            raise ValueError(exc.message) from None
        if not math.isfinite(x) or x < 0 or (x == 0 and name not in _MAY_BE_ZERO):
            raise ValueError(f"expected a positive value in {unit}; got {v!r}")
        return x

    @field_validator(*_BIAS_UNITS, mode="before")
    @classmethod
    def _bias_quantity(cls, v: Any, info: ValidationInfo) -> float:
        unit = _BIAS_UNITS[str(info.field_name)]
        try:
            x = units.parse_quantity(v, unit)
        except SpecError as exc:
            raise ValueError(exc.message) from None
        if not math.isfinite(x) or x <= 0:
            raise ValueError(f"expected a positive value in {unit}; got {v!r}")
        return x

    @field_validator("device", mode="before")
    @classmethod
    def _device(cls, v: Any) -> str:
        if not isinstance(v, str) or (v not in FET_CLASSES and v not in BJT_CLASSES):
            raise ValueError(
                f"expected a device class, one of {', '.join([*BJT_CLASSES, *FET_CLASSES])}; "
                f"got {v!r}"
            )
        return v

    @field_validator(*BJT_CARD_KEYS, mode="before")
    @classmethod
    def _bjt_card(cls, v: Any, info: ValidationInfo) -> float:
        name = str(info.field_name)
        lo, hi, unit = BJT_CARD_KEYS[name]
        try:
            x = units.parse_quantity(v, unit) if unit else v
        except SpecError as exc:
            raise ValueError(exc.message) from None
        if isinstance(x, bool) or not isinstance(x, int | float) or not lo <= x <= hi:
            raise ValueError(
                f"expected the card's {name.rstrip('_').upper()} from {lo:g} to {hi:g}"
                f"{' ' + unit if unit else ''}; got {v!r}"
            )
        return float(x)

    @field_validator("vto", mode="before")
    @classmethod
    def _vto(cls, v: Any) -> float:
        try:
            x = units.parse_quantity(v, "V")
        except SpecError as exc:
            raise ValueError(exc.message) from None
        if not math.isfinite(x) or x == 0 or abs(x) > 100:
            raise ValueError(f"expected a non-zero voltage within ±100 V such as -2 V; got {v!r}")
        return x

    @field_validator("kp", mode="before")
    @classmethod
    def _kp(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float) or not 1e-6 <= v <= 100:
            raise ValueError(
                f"expected a transconductance parameter in A/V² between 1e-6 and 100 such "
                f"as 0.1; got {v!r}"
            )
        return float(v)

    @field_validator("lambda_", mode="before")
    @classmethod
    def _lambda(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float) or not 0 <= v <= 1:
            raise ValueError(
                f"expected a channel-length modulation in 1/V between 0 and 1 such as 0.01; "
                f"got {v!r}"
            )
        return float(v)

    @field_validator("current_gain", mode="before")
    @classmethod
    def _gain(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float) or not 1 <= v <= 10_000:
            raise ValueError(
                f"expected a current gain (beta) between 1 and 10000 such as 150; got {v!r}"
            )
        return float(v)

    @field_validator("min_margin", mode="before")
    @classmethod
    def _margin(cls, v: Any) -> float:
        if isinstance(v, bool) or not isinstance(v, int | float) or not 1 <= v <= 100:
            raise ValueError(f"expected a start-up margin between 1 and 100 such as 2; got {v!r}")
        return float(v)

    @field_validator("max_margin", mode="before")
    @classmethod
    def _max_margin(cls, v: Any, info: ValidationInfo) -> float:
        low = info.data.get("min_margin", 1.0)
        if isinstance(v, bool) or not isinstance(v, int | float) or not low < v <= 10_000:
            raise ValueError(
                f"expected a largest start-up margin above min_margin ({low:g}) and at most "
                f"10000 such as 20; got {v!r}"
            )
        return float(v)

    @model_validator(mode="after")
    def _consistent(self) -> AmplifierSpec:
        # the stage registry (its modules import scipy.special): only with an [amplifier]
        from picker.circuit.stages import STAGES

        if not STAGES[self.stage].collector_load:
            if self.r_load is not None or self.choke is not None:
                raise ValueError(
                    f"expected no collector load for the {self.stage} stage (its collector "
                    "goes to the supply); got r_load or choke"
                )
        elif self.r_load is None and self.choke is None:
            raise ValueError(
                "expected a collector load: r_load, choke, or both (the resistor in series "
                "with the choke)"
            )
        self._check_next_stage()
        card_keys = [
            k
            for k in ("idss", "vto", "kp", "lambda_", "cgs", "cgd")
            if getattr(self, k) is not None
        ]
        if card_keys and self.device not in FET_CLASSES:
            raise ValueError(
                f"{card_keys[0].rstrip('_')} needs device (a fet class: {', '.join(FET_CLASSES)})"
            )
        if self.device in FET_CLASSES and self.kind != "fet":
            raise ValueError(f"device names a fet class; got kind = {self.kind!r}")
        if self.device in FET_CLASSES:
            typed = [k for k in ("c_pi", "c_mu", "f_t", "gm") if getattr(self, k) is not None]
            if typed:
                raise ValueError(
                    f"expected the fet's card (device, cgs, cgd) or the typed {typed[0]}, not "
                    f"both (with device the card sets gm and the gate capacitances)"
                )
        if self.device in BJT_CLASSES and self.kind != "bjt":
            raise ValueError(f"device names a bjt class; got kind = {self.kind!r}")
        self._check_bjt_card()
        if (
            self.r_bias_bottom is not None
            and self.r_bias_top is None
            and self.device not in FET_CLASSES
            and self.r_feedback is None
        ):
            raise ValueError(
                "r_bias_bottom needs r_bias_top (the resistor from the supply); a fet with "
                "device may have a gate resistor alone"
            )
        if self.c_emitter is not None and self.r_emitter is None:
            raise ValueError("c_emitter needs r_emitter (it bypasses the emitter resistor)")
        if self.kind == "bjt":
            if (
                self.r_bias_top is None
                and self.r_feedback is None
                and self.gm is None
                and self.bias_current is None
            ):
                raise ValueError(
                    "a bjt needs its bias: r_bias_top (and r_bias_bottom), r_feedback, or gm"
                )
        elif self.device not in FET_CLASSES:
            if self.gm is None and (self.bias_current is None or self.overdrive_voltage is None):
                raise ValueError("a fet needs gm, or bias_current with overdrive_voltage")
            if self.c_mu is None or (self.c_pi is None and self.f_t is None):
                raise ValueError("a fet needs c_mu (C_gd) and c_pi (C_gs) or f_t")
        return self

    @model_validator(mode="after")
    def _bias_details(self) -> AmplifierSpec:
        """The bias network's keys agree with each other, the ``bias`` word and the stage."""
        from picker.circuit.stages import STAGES  # the registry: see _default_stage

        options = STAGES[self.stage].options
        if self.r_feedback is not None:
            if self.kind != "bjt" or "collector-feedback" not in options:
                raise ValueError(
                    f"r_feedback (collector-to-base bias) is modelled for the stages "
                    f"{_stages_with('collector-feedback')}; got stage = {self.stage!r}"
                    f"{_refusal(self.stage, 'collector-feedback')}"
                )
            if self.r_bias_top is not None:
                raise ValueError(
                    "expected r_feedback (collector to base) or r_bias_top (supply to base), "
                    "not both"
                )
        if self.r_emitter_unbypassed is not None:
            if "emitter-split" not in options:
                raise ValueError(
                    f"r_emitter_unbypassed is modelled for the stages "
                    f"{_stages_with('emitter-split')}; got stage = {self.stage!r}"
                    f"{_refusal(self.stage, 'emitter-split')}"
                )
            if self.r_emitter is None or self.c_emitter is None:
                raise ValueError(
                    "r_emitter_unbypassed needs r_emitter and c_emitter (it sits in series "
                    "with the bypassed r_emitter; without c_emitter add it to r_emitter)"
                )
        if self.r_stopper is not None and "stopper" not in options:
            raise ValueError(
                f"r_stopper (base or gate stopper) is modelled for the stages "
                f"{_stages_with('stopper')}; got stage = {self.stage!r}"
                f"{_refusal(self.stage, 'stopper')}"
            )
        if self.polarity is not None:
            words = ("npn", "pnp") if self.kind == "bjt" else ("n-channel", "p-channel")
            if self.polarity not in words:
                raise ValueError(
                    f"expected polarity {words[0]!r} or {words[1]!r} for kind = {self.kind!r}; "
                    f"got {self.polarity!r}"
                )
            if self.polarity == words[1] and "p-type" not in options:
                raise ValueError(
                    f"a {self.polarity} device is modelled for the stages "
                    f"{_stages_with('p-type')}; got stage = {self.stage!r}"
                )
            mos = self.device in FET_CLASSES and _is_mosfet(str(self.device))
            if self.polarity == "p-channel" and mos and self.vto is not None and self.vto > 0:
                raise ValueError(
                    f"expected a negative threshold vto for a p-channel enhancement MOSFET "
                    f"(as ngspice's PMOS card takes it); got {self.vto:g} V"
                )
        if self.bias is not None:
            if self.kind != "bjt":
                raise ValueError(f"bias names a bjt's bias network; got kind = {self.kind!r}")
            found = (
                "collector-feedback"
                if self.r_feedback is not None
                else "base-resistor"
                if self.r_bias_bottom is None
                else "divider"
            )
            if self.r_feedback is None and self.r_bias_top is None:
                found = "none"
            if found != self.bias:
                need = {
                    "divider": "r_bias_top and r_bias_bottom",
                    "base-resistor": "r_bias_top without r_bias_bottom",
                    "collector-feedback": "r_feedback (and optionally r_bias_bottom)",
                }[self.bias]
                raise ValueError(f"bias = {self.bias!r} expects {need}")
        return self

    def _check_bjt_card(self) -> None:
        """A bjt's card keys: a bjt's only, and not beside the typed values they set."""
        if self.device in BJT_CLASSES and self.polarity != BJT_CLASSES[self.device][1]:
            raise ValueError(
                f"device {self.device!r} is a {BJT_CLASSES[self.device][1]} class; got "
                f"polarity = {self.polarity!r}"
            )
        given = [k for k in BJT_CARD_KEYS if getattr(self, k) is not None]
        if not given:
            return
        word = given[0].rstrip("_")
        if self.kind != "bjt":
            raise ValueError(f"{word} is a bjt card parameter; got kind = {self.kind!r}")
        clashes = {
            "bf": ("current_gain",),
            "vaf": ("early_voltage", "r_out"),
            "tf": ("c_pi", "f_t"),
            "cje": ("c_pi", "f_t"),
            "cjc": ("c_mu",),
            "is_": ("gm", "bias_current"),
        }
        for key in given:
            for typed in clashes.get(key, ()):
                if getattr(self, typed) is not None:
                    raise ValueError(
                        f"expected the card's {key.rstrip('_')} or the typed {typed}, not both "
                        f"({typed} would override the card)"
                    )

    def _check_next_stage(self) -> None:
        """The next stage's keys hang together (a ValueError naming the key)."""
        if self.next_stage_r is None:
            for key in ("next_stage_c", "next_stage_coupling"):
                if key in self.model_fields_set:
                    raise ValueError(
                        f"{key} needs next_stage_r (the next stage's input resistance)"
                    )

    def _bjt_device(self) -> Any:
        """The bjt's card: the class named by ``device`` (else the generic NPN or PNP of
        the polarity) with the card keys given in place of its own."""
        name = self.device if self.device in BJT_CLASSES else None
        if name is None:
            name = "generic-pnp" if self.polarity == "pnp" else "generic-npn"
        card = bjt_card(name, **{k: getattr(self, k) for k in BJT_CARD_KEYS})
        default = GENERIC_PNP if self.polarity == "pnp" else GENERIC_NPN
        return default if card == default else card

    def to_params(self, parts: Mapping[str, Any] | None = None) -> AmplifierParams:
        """The core-model description, with inductor and capacitor loss from the part tables.

        ``parts`` maps position → an object with optional attributes ``q``,
        ``q_frequency`` (Hz) and ``esr`` (ohm) (picker.spec.model.PartSpec). The inductor's
        ``esr`` is used when it has no ``q``. A part's ``unit`` ("H" for the
        inductor, "F" for a capacitor; the topology's fact, set by the spec) tells
        which is which.
        """
        parts = parts or {}
        ind = next((p for p in parts.values() if getattr(p, "unit", None) == "H"), None)
        q = getattr(ind, "q", None)
        esr_l = getattr(ind, "esr", None)
        cap_esr = {
            pos: float(esr)
            for pos, p in parts.items()
            if getattr(p, "unit", None) == "F" and (esr := getattr(p, "esr", None))
        }
        card: FetCard | None = None
        if self.device in FET_CLASSES:
            vto = self.vto
            if self.polarity == "p-channel" and vto is not None and _is_mosfet(self.device):
                vto = -vto  # a PMOS card's threshold: the mirrored NMOS's is its negative
            try:
                card = fet_class(
                    str(self.device),
                    idss=self.idss,
                    vto=vto,
                    kp=self.kp,
                    lam=self.lambda_,
                    cgs=self.cgs,
                    cgd=self.cgd,
                )
            except ValueError as exc:
                raise SpecError(str(exc), key="amplifier") from None
        params = AmplifierParams(
            fet=card,
            kind=self.kind,
            stage=self.stage,
            vcc=self.supply,
            i_bias=self.bias_current,
            gm=self.gm,
            current_gain=self.current_gain,
            early_voltage=self.early_voltage,
            r_o=self.r_out,
            c_pi=self.c_pi,
            c_mu=self.c_mu,
            f_t=self.f_t,
            overdrive_voltage=self.overdrive_voltage,
            r_c=self.r_load,
            l_choke=self.choke,
            r_choke=self.choke_resistance,
            r_b1=self.r_bias_top,
            r_b2=self.r_bias_bottom,
            r_e=(
                self.r_emitter
                if self.r_emitter is None or self.r_emitter_unbypassed is None
                else self.r_emitter + self.r_emitter_unbypassed
            ),
            c_e=self.c_emitter,
            c_block=self.c_coupling,
            c_base=self.c_base,
            inductor_esr=float(esr_l) if (q is None and esr_l) else 0.0,
            inductor_q=float(q) if q is not None else None,
            q_frequency=getattr(ind, "q_frequency", None) if q is not None else None,
            capacitor_esr=cap_esr,
            # the bias-network details (picker.circuit.bias)
            r_feedback=self.r_feedback,
            r_e_unbypassed=self.r_emitter_unbypassed,
            r_stopper=self.r_stopper,
            p_type=self.polarity in ("pnp", "p-channel"),
            device=self._bjt_device(),
            r_next=self.next_stage_r,
            c_next=self.next_stage_c,
            c_next_coupling=self.next_stage_coupling,
        )
        from picker.circuit.stages import small_signal  # the registry: see _default_stage

        try:
            small_signal(params)
        except ValueError as exc:  # bias network that cannot work, e.g. a divider below V_BE
            raise SpecError(str(exc), key="amplifier") from None
        return params


def _is_mosfet(device: str) -> bool:
    """Whether the fet class ``device`` is a MOSFET (its ``vto`` a threshold)."""
    return FET_CLASSES[device].kind == "nmos"


def _refusal(stage: str, option: str) -> str:
    """The stage's reason for not taking ``option``, as the tail of a message ("" if none)."""
    from picker.circuit.stages import STAGES  # the registry: see AmplifierSpec._default_stage

    reason = STAGES[stage].refusals.get(option)
    return f" ({reason})" if reason else ""


def _stages_with(option: str) -> str:
    """The names of the stages that model ``option``, for a message."""
    from picker.circuit.stages import STAGES  # the registry: see AmplifierSpec._default_stage

    return ", ".join(n for n, st in STAGES.items() if option in st.options)
