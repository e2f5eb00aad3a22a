"""The oscillator's own netlist as a batch of nonlinear circuits, integrated in time.

:mod:`picker.circuit.shooting` needs the circuit that ngspice simulates, not a model of
it: every element of picker's netlist of the design
(:meth:`picker.circuit.stages.base.Stage.netlist`, the lines
:func:`picker.circuit.netlist.write_netlist` writes, the start-up kick left out) with its
value, and the transistor with the equations of the netlist's ``.model`` card. Here the
element lines are read into the matrices of modified nodal analysis (Ho, Ruehli &
Brennan, "The modified nodal approach to network analysis", IEEE Trans. Circuits Syst.
22, 1975): unknowns x are the node voltages (ground and the supply, a DC source to
ground, are known) and the inductors' currents, and the circuit is

    d/dt Q(x) + I(x) = b,   Q = C·x + q_D(x),   I = G·x + i_Q(x)                    (T1)

with C the capacitances (and the inductances on the inductor rows), G the conductances
and the inductors' incidence, b the supply's terms, i_Q and q_D the transistor's
terminal currents and diffusion charge. A coupling line ``K`` joins two inductors'
rows as SPICE's K element does (Nagel, *SPICE2*, UCB/ERL M520, 1975, the mutual
inductor; both currents counted into each inductor's first node):

    L1·di1/dt + M·di2/dt = v_1,   M·di1/dt + L2·di2/dt = v_2,   M = k·√(L1·L2)       (T4)

A bipolar transistor's terminal may sit on the supply (the follower's collector): its
voltage is known, so it enters the junction voltages as a constant and the current into
it drops out of x (the source supplies it); a fet's terminal on the supply is an unknown
held at the supply's voltage by its own row. The transistor is SPICE's Gummel-Poon model
with the card's parameters (no high injection, no leakage currents, no base resistance;
constant junction capacitances, MJE = MJC = 0), as ngspice evaluates it (Massobrio &
Antognetti, *Semiconductor Device Modeling with SPICE*, 2nd ed., ch. 2, eqs. of the
Gummel-Poon model; with VAR = ∞ and IKF = IKR = ∞ the base charge is
q_b = 1/(1 − V_BC/VAF)):

    i_F = IS·(e^{V_BE/V_T} − 1),  i_R = IS·(e^{V_BC/V_T} − 1)                       (T2)
    I_C = (i_F − i_R)/q_b − i_R/BR,  I_B = i_F/BF + i_R/BR,  q_D = TF·i_F/q_b          (T3)

plus the junction capacitances CJE (base-emitter) and CJC (base-collector) in C. A fet
(``J`` with an NJF/PJF card, ``M`` with an NMOS/PMOS level-1 card) takes the
transistor's place through :attr:`Circuit.law` (:mod:`picker.circuit.transient_devices`:
drain, gate, source where collector, base, emitter are; its terminal on the supply is
an unknown held at the supply's voltage by its own row).

Integration (:func:`integrate`): fixed steps h, the first by the trapezoidal rule, the
rest by the second-order backward differentiation formula (BDF2, Gear's method:
Gear, *Numerical Initial Value Problems in Ordinary Differential Equations*, 1971,
ch. 11; the pairing as in the TR-BDF2 scheme of Bank et al., IEEE Trans. Electron
Devices 32, 1985), each step solved by Newton's method, and, on request, the
sensitivities ∂x_n/∂(x_0, T) (h = T/N) by differentiating each step's equation (the
discrete variational equations; Aprille & Trick, Proc. IEEE 60, 1972, sec. III).
Every product over the batch is an einsum and every element's Newton stops on its own
(a board's figures do not depend on the boards beside it).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.transient_devices import FET_TYPES, FetLaw, fet_law

__all__ = [
    "Circuit",
    "Period",
    "build_circuit",
    "charge",
    "dc_point",
    "dc_with_currents",
    "device",
    "evaluate",
    "integrate",
    "solve_each",
]

_EXP_CAP = 80.0  # exponent beyond which e^u continues linearly (no overflow in Newton)
_V_STEP = 0.2  # largest change of a junction voltage in one Newton iteration, V
_NEWTON = 40  # Newton iterations per time step at most


def _value(text: str) -> float:
    """A netlist number as :func:`picker.circuit.stages.base.spice_number` writes it."""
    return float(text)


@dataclass(frozen=True)
class Circuit:
    """A batch of circuits (T1) padded to one size ``n``; arrays over the batch on axis 0.

    ``g``, ``c`` (B, n, n), ``b`` (B, n); ``q`` (B, 3) the transistor's collector, base
    and emitter as indices into x extended by a zero (index n: ground); ``top`` (B,)
    the tank top's index; ``card``: IS, BF, BR, VAF, TF; ``vt`` the thermal voltage."""

    g: np.ndarray
    c: np.ndarray
    b: np.ndarray
    q: np.ndarray
    top: np.ndarray
    card: dict[str, float]
    vt: float
    n_nodes: np.ndarray  # (B,) node-voltage unknowns (the rest are inductor currents)
    #: (B, n, 2): ∂(V_BE, V_BC)/∂x, the transistor's junction voltages from x
    gather: np.ndarray
    #: (B, n, 2): where I_C and I_B enter the rows of x (+1 at the collector or the
    #: base, −1 at the emitter)
    scatter: np.ndarray
    #: (B, n): where the diffusion charge q_D sits (+1 at the base, −1 at the emitter)
    charge_at: np.ndarray
    #: (B, 2): the part of (V_BE, V_BC) from known nodes (a bjt's terminal on the supply)
    v_known: np.ndarray
    #: a fet's equations (:mod:`picker.circuit.transient_devices`; drain, gate and
    #: source in the places of collector, base and emitter), None for the bjt
    law: FetLaw | None = None

    @property
    def size(self) -> int:
        return int(self.g.shape[1])

    def take(self, rows: np.ndarray) -> Circuit:
        """The circuits ``rows`` of the batch."""
        return Circuit(
            self.g[rows],
            self.c[rows],
            self.b[rows],
            self.q[rows],
            self.top[rows],
            self.card,
            self.vt,
            self.n_nodes[rows],
            self.gather[rows],
            self.scatter[rows],
            self.charge_at[rows],
            self.v_known[rows],
            None if self.law is None else self.law.take(rows),
        )


def _card(models: list[str]) -> dict[str, float]:
    """The parameters of the one ``.model`` line (``.model NAME NPN (K=V ...)``)."""
    if len(models) != 1:
        raise ValueError("expected one transistor model card")
    body = models[0].split("(", 1)[1].rstrip(")")
    par = {k.upper(): float(v) for k, v in (item.split("=") for item in body.split())}
    return {
        "IS": par.get("IS", 1e-16),
        "BF": par.get("BF", 100.0),
        "BR": par.get("BR", 1.0),
        "VAF": par.get("VAF", np.inf),
        "TF": par.get("TF", 0.0),
        "CJE": par.get("CJE", 0.0),
        "CJC": par.get("CJC", 0.0),
    }


def _stamp(
    mat: np.ndarray,
    rhs: np.ndarray | None,
    idx: dict[str, int],
    known: dict[str, float],
    a: str,
    bb: str,
    y: float,
) -> None:
    """Stamp y between nodes a and bb into ``mat`` (Ho, Ruehli & Brennan); a known node's
    term moves to ``rhs`` (conductances) or drops (capacitances: the supply is constant)."""
    for p, o in ((a, bb), (bb, a)):
        if p in idx:
            i = idx[p]
            mat[i, i] += y
            if o in idx:
                mat[i, idx[o]] -= y
            elif rhs is not None:
                rhs[i] += y * known[o]


def build_circuit(
    netlists: list[list[str]],
    models: list[str],
    top: str,
    vt: float,
    *,
    cards: list[list[str]] | None = None,
) -> Circuit:
    """The batch of circuits (T1) of netlists' element lines (one list per circuit: R, C,
    L, a DC source V to ground, one bjt Q or one fet J or M; current sources, the start-up
    kick, are left out) and their one ``.model`` card; ``top`` names the tank-top node.
    A batch of fets may give each circuit its own card: ``cards``, one list per circuit,
    in place of ``models``."""
    law_of: list[FetLaw] = []
    first = cards[0] if cards else models
    fet = len(first) == 1 and first[0].split()[2].upper() in FET_TYPES
    card = {"BF": np.inf, "IS": 1e-14} if fet else _card(models)
    parsed = []
    for lines in netlists:
        known: dict[str, float] = {"0": 0.0}
        elems = []
        for line in lines:
            if line.startswith("*"):
                continue
            f = line.split()
            kind = f[0][0].upper()
            if kind == "V":
                if f[2] != "0":
                    raise ValueError(f"source {f[0]} is not to ground")
                known[f[1]] = _value(f[-1])
            elif kind in ("RCLJMK" if fet else "RCLQK"):
                elems.append(f)
            elif kind != "I":
                raise ValueError(f"element {f[0]} is not simulated here")
        # a fet's terminal on the supply: the node is an unknown held at the supply's
        # voltage by its own row (x_i = V; the source's current is not needed)
        pinned = {
            nd: known[nd]
            for f in elems
            if f[0][0].upper() in "JM"
            for nd in f[1:4]
            if nd != "0" and nd in known
        }
        for nd in pinned:
            del known[nd]
        nodes: list[str] = []
        for f in elems:
            kind = f[0][0].upper()
            for nd in f[1:4] if kind in "QJM" else [] if kind == "K" else f[1:3]:
                if nd not in known and nd not in nodes:
                    nodes.append(nd)
        inductors = [f for f in elems if f[0][0].upper() == "L"]
        parsed.append((known, elems, nodes, inductors, pinned))
        names = {f[0].upper() for f in inductors}
        for f in elems:
            if f[0][0].upper() == "K" and not (f[1].upper() in names and f[2].upper() in names):
                raise ValueError(f"coupling {f[0]} names an inductor the netlist lacks")
    n = max(len(p[2]) + len(p[3]) for p in parsed)
    m = len(parsed)
    g = np.zeros((m, n + 1, n + 1))
    c = np.zeros((m, n + 1, n + 1))
    b = np.zeros((m, n + 1))
    qi = np.full((m, 3), n, dtype=int)  # no transistor: every terminal on ground
    vq = np.zeros((m, 3))  # the known voltages of a bjt's terminals off x (ground, supply)
    tops = np.zeros(m, dtype=int)
    n_nodes = np.zeros(m, dtype=int)
    held = np.zeros((m, n), dtype=bool)
    for r, (known, elems, nodes, inductors, pinned) in enumerate(parsed):
        idx = {nd: i for i, nd in enumerate(nodes)}
        n_nodes[r] = len(nodes)
        tops[r] = idx[top]

        for f in elems:
            kind = f[0][0].upper()
            if kind == "R":
                _stamp(g[r], b[r], idx, known, f[1], f[2], 1.0 / _value(f[3]))
            elif kind == "C":
                _stamp(c[r], None, idx, known, f[1], f[2], _value(f[3]))
            elif kind == "Q":
                qi[r] = [idx.get(nd, n) for nd in f[1:4]]
                vq[r] = [known.get(nd, 0.0) for nd in f[1:4]]
                _stamp(c[r], None, idx, known, f[2], f[3], card["CJE"])
                _stamp(c[r], None, idx, known, f[2], f[1], card["CJC"])
            elif kind in "JM":
                law_of.append(fet_law((models if cards is None else cards[r])[0], f))
                qi[r] = [idx.get(nd, n) for nd in f[1:4]]
                _stamp(c[r], None, idx, known, f[2], f[3], float(law_of[-1].cgs[0]))
                _stamp(c[r], None, idx, known, f[2], f[1], float(law_of[-1].cgd[0]))
        for k, f in enumerate(inductors):
            j = len(nodes) + k
            a, bb = f[1], f[2]
            c[r, j, j] = _value(f[3])  # L·di/dt − (v_a − v_b) = 0
            for p, sign in ((a, 1.0), (bb, -1.0)):
                if p in idx:
                    g[r, idx[p], j] += sign  # the current leaves a, enters b
                    g[r, j, idx[p]] -= sign
                else:
                    b[r, j] += sign * known[p]
        row = {f[0].upper(): len(nodes) + k for k, f in enumerate(inductors)}
        for f in elems:
            if f[0][0].upper() == "K":  # (T4): M on the two inductors' rows
                j1, j2 = row[f[1].upper()], row[f[2].upper()]
                mut = _value(f[3]) * np.sqrt(c[r, j1, j1] * c[r, j2, j2])
                c[r, j1, j2] += mut
                c[r, j2, j1] += mut
        for i in range(len(nodes) + len(inductors), n):  # padding: x_i = 0
            g[r, i, i] = 1.0
        for nd, v in pinned.items():  # a supply node: x_i = V
            i = idx[nd]
            g[r, i], c[r, i], b[r, i], g[r, i, i] = 0.0, 0.0, v, 1.0
            held[r, i] = True
    # the transistor's incidence over (collector, base, emitter); ground (index n) drops
    inc = np.zeros((m, n + 1, 3))
    inc[np.arange(m)[:, None], qi, np.arange(3)[None, :]] = 1.0
    inc = inc[:, :n]
    gather = inc @ np.array([[0.0, -1.0], [1.0, 1.0], [-1.0, 0.0]])  # V_BE, V_BC
    scatter = inc @ np.array([[1.0, 0.0], [0.0, 1.0], [-1.0, -1.0]])  # I_C, I_B
    charge_at = inc[:, :, 1] - inc[:, :, 2]
    v_known = np.stack([vq[:, 1] - vq[:, 2], vq[:, 1] - vq[:, 0]], axis=1)
    scatter[held] = 0.0  # the supply takes the device's current
    charge_at[held] = 0.0
    return Circuit(
        g[:, :n, :n],
        c[:, :n, :n],
        b[:, :n],
        qi,
        tops,
        card,
        vt,
        n_nodes,
        gather,
        scatter,
        charge_at,
        v_known,
        _stack(law_of, m),
    )


def _stack(laws: list[FetLaw], m: int) -> FetLaw | None:
    """The batch's fets (None for a bjt batch), one per circuit of ``m``."""
    if not laws:
        return None
    if len(laws) != m:
        raise ValueError("expected one fet in every circuit of the batch")
    return FetLaw.stack(laws)


def _exp(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """e^u and its derivative, continued linearly beyond :data:`_EXP_CAP`."""
    e = np.exp(np.minimum(u, _EXP_CAP))
    return e * (1.0 + np.maximum(u - _EXP_CAP, 0.0)), e


def _terms(
    card: dict[str, float], vt: float, vbe: np.ndarray, vbc: np.ndarray
) -> dict[str, np.ndarray]:
    """(T2)-(T3) at junction voltages ``vbe``, ``vbc``."""
    ef, dff = _exp(vbe / vt)
    er, dfr = _exp(vbc / vt)
    i_f, i_r = card["IS"] * (ef - 1.0), card["IS"] * (er - 1.0)
    kq = 1.0 - vbc / card["VAF"]  # 1/q_b (T3)
    return {
        "vbe": vbe,
        "vbc": vbc,
        "i_f": i_f,
        "i_r": i_r,
        "g_f": card["IS"] * dff / vt,
        "g_r": card["IS"] * dfr / vt,
        "kq": kq,
        "ic": (i_f - i_r) * kq - i_r / card["BR"],
        "ib": i_f / card["BF"] + i_r / card["BR"],
        "qd": card["TF"] * i_f * kq,
    }


def _junctions(circ: Circuit, x: np.ndarray) -> np.ndarray:
    """(V_BE, V_BC) (..., B, 2) at states x (..., B, n): :attr:`Circuit.gather` on x plus
    the known terminals' part (a fet's: (V_GS, V_GD), its supply terminal held in x)."""
    return np.einsum("...bi,bik->...bk", x, circ.gather) + circ.v_known  # type: ignore[no-any-return]


def device(circ: Circuit, x: np.ndarray) -> dict[str, np.ndarray]:
    """The transistor's (T2)-(T3) at states x (..., B, n): V_BE, V_BC, I_C, I_B, q_D
    and the exponentials' derivatives."""
    v = _junctions(circ, x)
    if circ.law is not None:  # a fet: V_GS, V_GD, I_D, I_G (picker.circuit.transient_devices)
        return circ.law.terms(circ.vt, v[..., 0], v[..., 1])
    return _terms(circ.card, circ.vt, v[..., 0], v[..., 1])


def evaluate(circ: Circuit, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """I(x), Q(x) of (T1) and their Jacobians ∂I/∂x, ∂Q/∂x for x (B, n).

    The transistor enters through :attr:`Circuit.gather` (its V_BE, V_BC from x) and
    :attr:`Circuit.scatter` (its I_C, I_B into the rows of x; the emitter takes
    −I_C − I_B), each an einsum over the batch, so that no array is built element by
    element at each call."""
    v = _junctions(circ, x)
    dev, qd, dcur, dq = _device_block(circ, v)
    cur = np.einsum("bij,bj->bi", circ.g, x) + np.einsum("bik,bk->bi", circ.scatter, dev)
    chg = np.einsum("bij,bj->bi", circ.c, x) + circ.charge_at * qd[:, None]
    jg = circ.g + np.einsum("bik,bkl,bjl->bij", circ.scatter, dcur, circ.gather)
    jc = circ.c + np.einsum("bi,bl,bjl->bij", circ.charge_at, dq, circ.gather)
    return cur, chg, jg, jc


def _device_block(
    circ: Circuit, v: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The transistor at controlling voltages v (B, 2): its currents (B, 2), charge
    (B,), and their derivatives ∂(I_C, I_B)/∂v (B, 2, 2), ∂q_D/∂v (B, 2)."""
    bsz = v.shape[0]
    if circ.law is not None:  # a fet (picker.circuit.transient_devices): no charge
        t = circ.law.terms(circ.vt, v[:, 0], v[:, 1])
        return np.stack([t["ic"], t["ib"]], axis=1), t["qd"], t["dcur"], np.zeros((bsz, 2))
    p = circ.card
    dv = _terms(p, circ.vt, v[:, 0], v[:, 1])
    i_f, g_f, g_r, kq = dv["i_f"], dv["g_f"], dv["g_r"], dv["kq"]
    # ∂(I_C, I_B)/∂(V_BE, V_BC) and ∂q_D/∂(V_BE, V_BC)
    dic_bc = -g_r * kq - (i_f - dv["i_r"]) / p["VAF"] - g_r / p["BR"]
    dcur = np.empty((bsz, 2, 2))
    dcur[:, 0, 0] = g_f * kq
    dcur[:, 0, 1] = dic_bc
    dcur[:, 1, 0] = g_f / p["BF"]
    dcur[:, 1, 1] = g_r / p["BR"]
    dq = np.empty((bsz, 2))
    dq[:, 0] = p["TF"] * g_f * kq
    dq[:, 1] = -p["TF"] * i_f / p["VAF"]
    dev = np.empty((bsz, 2))
    dev[:, 0] = dv["ic"]
    dev[:, 1] = dv["ib"]
    return dev, dv["qd"], dcur, dq


def charge(circ: Circuit, x: np.ndarray) -> np.ndarray:
    """Q(x) of (T1) alone, for x (B, n)."""
    if circ.law is not None:  # a fet: constant capacitances only
        return np.einsum("bij,bj->bi", circ.c, x)  # type: ignore[no-any-return]
    v = _junctions(circ, x)
    p = circ.card
    ef, _ = _exp(v[:, 0] / circ.vt)
    qd = p["TF"] * p["IS"] * (ef - 1.0) * (1.0 - v[:, 1] / p["VAF"])
    return np.einsum("bij,bj->bi", circ.c, x) + circ.charge_at * qd[:, None]  # type: ignore[no-any-return]


def _damping(circ: Circuit, x: np.ndarray, dx: np.ndarray) -> np.ndarray:
    """The fraction of a Newton step dx (B, n) from x to take: SPICE's junction limiting
    (Nagel, *SPICE2*, UCB/ERL M520, 1975, sec. on convergence: above the critical voltage
    V_crit = V_T·ln(V_T/(√2·IS)) a junction's rise is cut to V_T·ln(1 + ΔV/V_T)), the
    whole step scaled to the tightest junction, and at most :data:`_V_STEP` on either."""
    vt = circ.vt
    if circ.law is not None:  # a fet's own junctions (picker.circuit.transient_devices)
        v = np.einsum("bi,bik->bk", x, circ.gather)
        return circ.law.limit(vt, v, np.einsum("bi,bik->bk", dx, circ.gather))
    v_crit = vt * np.log(vt / (np.sqrt(2.0) * circ.card["IS"]))
    v = _junctions(circ, x)  # (V_BE, V_BC)
    d = np.einsum("bi,bik->bk", dx, circ.gather)
    rise = (v + d > v_crit) & (d > 2.0 * vt)
    ad = np.abs(d)
    cut = np.minimum(np.where(rise, vt * np.log1p(np.maximum(d, 0.0) / vt), ad), _V_STEP)
    with np.errstate(invalid="ignore"):
        frac = np.where(ad > cut, cut / np.maximum(ad, 1e-300), 1.0)
    return np.minimum(1.0, frac.min(axis=1))  # type: ignore[no-any-return]


def dc_point(circ: Circuit, x: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The DC operating point (I(x) = b) by damped Newton, per element; and a mask of
    the elements that converged."""
    bsz, n = circ.b.shape
    x = np.zeros((bsz, n)) if x is None else x.copy()
    done = np.zeros(bsz, dtype=bool)
    # a fet's bias network of small conductances leaves Newton's step at the rounding
    # level of its node voltages (~1e-12 V): its tolerance is the transient's, 1e-9 V
    tol = 1e-12 if circ.law is None else 1e-9
    for _ in range(200):
        act = np.nonzero(~done)[0]
        if act.size == 0:
            break
        sub = circ.take(act)
        cur, _, jg, _ = evaluate(sub, x[act])
        dx = np.linalg.solve(jg, (sub.b - cur)[..., None])[..., 0]
        lim = _damping(sub, x[act], dx)
        x[act] += lim[:, None] * dx
        done[act[(lim == 1.0) & (np.max(np.abs(dx), axis=1) < tol)]] = True
    # on a stiff network (a choke in the collector and the coils of a Hartley tank: the
    # condition number ~1e5) Newton's step stalls at round-off a little above 1e-12; such
    # a point is accepted at the integrator's own tolerance (:func:`integrate`)
    act = np.nonzero(~done)[0]
    if act.size:
        sub = circ.take(act)
        cur, _, jg, _ = evaluate(sub, x[act])
        dx = np.linalg.solve(jg, (sub.b - cur)[..., None])[..., 0]
        tol_n = np.where(np.arange(n)[None, :] < sub.n_nodes[:, None], 1e-9, 1e-13)
        near = (_damping(sub, x[act], dx) == 1.0) & np.all(np.abs(dx) <= tol_n, axis=1)
        done[act[near]] = True
    return x, done


def dc_with_currents(circ: Circuit, ic: np.ndarray, ib: np.ndarray) -> np.ndarray:
    """The DC state of the circuits with the transistor replaced by its mean currents
    ``ic`` (collector) and ``ib`` (base), A (B,): G·x = b − the currents it draws (the
    capacitors' mean currents vanish over a period, so the averages of the node voltages
    satisfy this; the bias shift of the coupling and bypass capacitors)."""
    inj = -np.einsum("bik,bk->bi", circ.scatter, np.stack([ic, ib], axis=1))
    return np.linalg.solve(circ.g, (circ.b + inj)[..., None])[..., 0]  # type: ignore[no-any-return]


@dataclass(frozen=True)
class Period:
    """One integration: the states ``x`` (N + 1, B, n) and, with sensitivities, ``s``
    (B, n, n + 1) = ∂x_N/∂(x_0, T); ``ok`` (B,) where every step's Newton converged."""

    x: np.ndarray
    s: np.ndarray | None
    ok: np.ndarray


def solve_each(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``numpy.linalg.solve`` over a batch (a: (B, n, n), b: (B, n, k)), NaN for an
    element whose matrix is singular instead of an error for the whole batch (a board
    whose Newton or sensitivity matrix degenerates fails alone, as a failed step does)."""
    try:
        return np.linalg.solve(a, b)  # type: ignore[no-any-return]
    except np.linalg.LinAlgError:
        out = np.full(b.shape, np.nan)
        for i in range(b.shape[0]):
            try:
                out[i] = np.linalg.solve(a[i], b[i])
            except np.linalg.LinAlgError:
                pass
        return out


def _solve_step(
    circ: Circuit,
    x_guess: np.ndarray,
    alpha: float,
    h: np.ndarray,
    hist: np.ndarray,
    tol: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Newton on α·Q(x)/h + I(x) + hist = 0 per element; the solution and a mask.

    Every element is evaluated at every iteration (one call over the whole batch costs
    what a call over part of it does), but an element's state stops moving once its own
    Newton has converged, so its result does not depend on the others."""
    x = x_guess.copy()
    bsz = x.shape[0]
    done = np.zeros(bsz, dtype=bool)
    failed = ~np.all(np.isfinite(x), axis=1)
    x[failed] = 0.0  # evaluated, never moved, reported not ok
    done |= failed
    ha = (alpha / h)[:, None]
    for _ in range(_NEWTON):
        cur, chg, jg, jc = evaluate(circ, x)
        r = ha * chg + cur + hist
        jac = ha[:, :, None] * jc + jg
        dx = -solve_each(jac, r[..., None])[..., 0]
        fin = np.all(np.isfinite(dx), axis=1)
        failed |= ~done & ~fin
        done |= failed
        dx[~fin] = 0.0  # a failed element's state stays finite (and is not used)
        lim = _damping(circ, x, dx)
        move = ~done
        x = np.where(move[:, None], x + lim[:, None] * dx, x)
        done |= move & (lim == 1.0) & np.all(np.abs(dx) <= tol, axis=1)
        if done.all():
            break
    x[failed] = np.nan
    return x, done & ~failed


def integrate(
    circ: Circuit, x0: np.ndarray, period: np.ndarray, steps: int, *, sens: bool = False
) -> Period:
    """N = ``steps`` fixed steps of h = ``period``/N from ``x0`` (B, n): the first by the
    trapezoidal rule, the rest by BDF2 (module docstring); with ``sens``, the
    sensitivities ∂x_N/∂(x_0, T) by the discrete variational equations."""
    bsz, n = x0.shape
    h = period / steps
    tol = np.where(np.arange(n)[None, :] < circ.n_nodes[:, None], 1e-9, 1e-13)
    tol = np.broadcast_to(tol, (bsz, n))
    xs = np.empty((steps + 1, bsz, n))
    xs[0] = x0
    ok = np.ones(bsz, dtype=bool)
    cur0, chg0, jg0, jc0 = evaluate(circ, x0)
    s_prev = np.zeros((bsz, n, n + 1))
    s_now = np.zeros((bsz, n, n + 1))
    s_now[:, :, :n] = np.eye(n)[None]
    # trapezoidal first step: 2·(Q − Q0)/h + I + I0 − 2b = 0
    hist = -2.0 * chg0 / h[:, None] + cur0 - 2.0 * circ.b
    x1, ok1 = _solve_step(circ, x0 + 0.0, 2.0, h, hist, tol)
    ok &= ok1
    xs[1] = x1
    c_hist = [jc0]
    chg_hist = [chg0]
    if sens:
        cur1, chg1, jg1, jc1 = evaluate(circ, x1)
        jac = 2.0 / h[:, None, None] * jc1 + jg1
        rhs = -np.einsum("bij,bjk->bik", -2.0 / h[:, None, None] * jc0 + jg0, s_now)
        rhs[:, :, n] -= (cur1 + cur0 - 2.0 * circ.b) / h[:, None] / steps
        s_prev, s_now = s_now, solve_each(jac, rhs)
        c_hist.append(jc1)
        chg_hist.append(chg1)
    else:
        chg_hist.append(charge(circ, x1))
    for k in range(1, steps):
        # BDF2: (3·Q − 4·Q_k + Q_{k−1})/(2h) + I − b = 0
        hist = (-2.0 * chg_hist[-1] + 0.5 * chg_hist[-2]) / h[:, None] - circ.b
        # the predictor: the last step extrapolated, its junction rises limited as Newton's
        slope = xs[k] - xs[k - 1]
        guess = xs[k] + _damping(circ, xs[k], slope)[:, None] * slope
        xk, okk = _solve_step(circ, guess, 1.5, h, hist, tol)
        ok &= okk
        xs[k + 1] = xk
        if sens:
            cur1, chg1, jg1, jc1 = evaluate(circ, xk)
            jac = 1.5 / h[:, None, None] * jc1 + jg1
            rhs = np.einsum("bij,bjk->bik", 2.0 / h[:, None, None] * c_hist[-1], s_now)
            rhs -= np.einsum("bij,bjk->bik", 0.5 / h[:, None, None] * c_hist[-2], s_prev)
            rhs[:, :, n] -= (cur1 - circ.b) / h[:, None] / steps
            s_prev, s_now = s_now, solve_each(jac, rhs)
            c_hist = [c_hist[-1], jc1]
        else:
            chg1 = charge(circ, xk)
        chg_hist = [chg_hist[-1], chg1]
    return Period(xs, s_now if sens else None, ok)
