"""The circuit of many variants of one case as arrays: laws, capacitances, on-state, start state.

The variants share the case's structure (switch type, clamps and their elements, which node has
capacitance) and differ in values: every value is read through ``get(path)``, which returns an
array over the variants (the case's value, or the values a study varies). Variants that cannot
be simulated are marked with a reason and left out of the run; the rest go on.

State layout (as in :mod:`kickback.circuit`): ``[i, v (with node capacitance), v_C …]``.
Branches: 0 the switch channel (on-state law, capped by the falling current), 1 the switch's
off-state law (avalanche, body diode), 2… the clamp chains that are not a lone capacitor
(a lone capacitor adds to the node capacitance, as in the detailed engine).
"""

from __future__ import annotations

import numpy as np

from kickback.case import Case
from kickback.engine.batch_fit import FIT_ABS
from kickback.engine.batch_laws import ChainLaw, chain_law, element_piece, make_law
from kickback.engine.batch_node import solve_node
from kickback.engine.pwl import DECLINED
from kickback.keypath import value_getter  # noqa: F401 - the engine's getter (one definition, in keypath)
from kickback.models.switch import DEFAULT_BODY_DIODE_DROP

#: features the batch engine does not model (the detailed engine does)
UNSUPPORTED = (
    ("coil", "saturation_current", "a saturating coil (coil.saturation_current) is not piecewise linear"),
)


def unsupported(case: Case) -> str | None:
    """Why the batch engine does not cover ``case`` (a feature of its structure, whatever its
    values), or None when it does."""
    for table, name, why in UNSUPPORTED:
        if getattr(getattr(case, table), name, None) is not None:
            return why
    if getattr(case, "drive", None) is not None:
        return ("repetitive switching ([drive]: the last turn-off starts from the PWM steady state) is simulated "
                "by the detailed engine only")
    if getattr(case, "motor", None) is not None:
        return "a motor winding's back EMF and speed are not piecewise-linear states of the batch engine"
    for obj, label in [(case.switch, "switch")] + [(el, f"{cl.name}: {el.name or el.type}")
                                                   for cl in case.clamps for el in cl.elements]:
        if getattr(obj, "thermal_resistance", None) is not None:
            return f"{label} has a thermal network: junction temperatures are computed by the detailed engine only"
    return None


def _cap_only(clamp) -> bool:
    return all(el.type == "capacitor" for el in clamp.elements)


class BatchCircuit:
    """Arrays of one batch of variants.

    Parameters
    ----------
    case : Case — the base case (structure, and values not varied)
    n : int — number of variants
    get : callable — ``get(path) -> (n,) array`` of a case value (NaN for "not given")
    """

    def __init__(self, case: Case, n: int, get):
        self.case, self.n = case, n
        self.ok = np.ones(n, bool)
        self.why = np.full(n, "", dtype=object)
        s = case.switch
        why = unsupported(case)
        if why is not None:
            self.fail(np.ones(n, bool), why)
        self.Vs = get("supply.voltage")
        self.L, self.R = get("coil.inductance"), get("coil.resistance")
        self.i_given = get("coil.initial_current")
        self.release_current = get("coil.release_current")
        self.release_delay = np.nan_to_num(get("coil.release_delay"), nan=0.0)
        self.tf = np.nan_to_num(get("switch.fall_time"), nan=0.0)
        self.kind = s.type
        self.clamps = case.clamps
        cap_plus = np.nan_to_num(get("coil.capacitance"), nan=0.0)
        cap_gnd = np.nan_to_num(get("switch.capacitance"), nan=0.0)
        self.lone = []  # (clamp index, capacitance, reference)
        for k, cl in enumerate(case.clamps):
            if _cap_only(cl):
                cs = sum(get(f"clamp[{k}].element[{j}].capacitance") for j in range(len(cl.elements)))
                ref = 1.0 if cl.across == "coil" else 0.0
                self.lone.append((k, cs, ref))
                if cl.across == "coil":
                    cap_plus = cap_plus + cs
                else:
                    cap_gnd = cap_gnd + cs
        self.C_plus, self.C_gnd = cap_plus, cap_gnd
        self.C_node = cap_plus + cap_gnd
        self.capacitive = bool(np.all(self.C_node > 0))
        if np.any(self.C_node > 0) and not self.capacitive:
            raise ValueError("a batch must not mix variants with and without node capacitance")
        self._check_values()
        self._switch_laws(get)
        self._chains(get)

    # ------------------------------------------------------------------ helpers
    def fail(self, mask, why: str) -> None:
        """Mark the variants in ``mask`` as not simulated, with the reason (the first one is kept)."""
        mask = np.asarray(mask, bool) & self.ok
        self.why[mask] = why
        self.ok &= ~mask

    def _check_values(self) -> None:
        bad = ~(self.L > 0)
        self.fail(bad, "coil.inductance must be > 0")
        self.fail(~(self.R >= 0), "coil.resistance must be >= 0")
        self.fail((self.R == 0) & ~np.isfinite(self.i_given),
                  "zero coil resistance needs coil.initial_current (the DC on-state is unbounded)")
        self.fail(~(self.tf >= 0), "switch.fall_time must be >= 0")
        self.fail(~(self.C_node >= 0), "capacitances must be >= 0")

    def _switch_laws(self, get) -> None:
        n = self.n
        s = self.case.switch
        vbr = get("switch.breakdown_voltage")
        vbr = np.where(np.isfinite(vbr), vbr, np.inf)
        rav = np.nan_to_num(get("switch.avalanche_resistance"), nan=0.0)
        inf = np.full(n, np.inf)
        zero = np.zeros(n)
        if self.kind == "mosfet":
            ron = get("switch.on_resistance")
            self.fail(~(ron > 0), "a MOSFET needs switch.on_resistance > 0")
            ron = np.where(ron > 0, ron, 1.0)
            self.on_law = make_law([], False, [(zero, ron, -inf, inf)], n)
            vbd = get("switch.body_diode_voltage")
            vbd = np.where(np.isfinite(vbd), vbd, DEFAULT_BODY_DIODE_DROP)
            self.off_law = make_law([(-vbd, ron, -inf, zero)], True, [(vbr, rav, zero, inf)], n)
            self.on_desc = "MOSFET"
        elif self.kind == "bjt":
            vsat = np.nan_to_num(get("switch.saturation_voltage"), nan=0.0)
            self.on_law = make_law([], True, [(vsat, zero, zero, inf)], n)
            self.off_law = make_law([], True, [(vbr, rav, zero, inf)], n)
        else:
            self.on_law = make_law([], False, [(zero, zero, -inf, inf)], n)
            self.off_law = make_law([], True, [(vbr, rav, zero, inf)], n)
        self.v_br = vbr
        self.has_breakdown = s.breakdown_voltage is not None

    def _chains(self, get) -> None:
        """Chain laws at a first i0 (fits need it), the on-state, and the laws again if i0 moved."""
        i0 = np.where(np.isfinite(self.i_given), self.i_given,
                      self.Vs / np.where(self.R > 0, self.R + (get("switch.on_resistance")
                                                               if self.kind == "mosfet" else 0.0), 1.0))
        i0 = np.where(np.isfinite(i0) & (i0 > 0), i0, 1.0)
        for _ in range(3):
            self._build_chains(get, i0)
            self._on_state()
            moved = np.abs(self.i0 - i0) > 1e-9 * np.abs(i0)
            if not (self.fitted and np.any(moved & self.ok)):
                break
            i0 = np.where(self.i0 > 0, self.i0, i0)
        self._refuse_following_coil()
        self._start_state()

    def _refuse_following_coil(self) -> None:
        """Refuse the variants whose coil current would follow the switch's falling current.

        With no node capacitance, the node voltage at which the coil current falls exactly as
        the channel's (linearly over the fall time) is V_s − R·i0 + L·i0/t_f. Where every other
        path still blocks at that voltage (the switch's avalanche and every clamp within its
        blocking band), the coil follows the channel until the node reaches a path — a regime
        the batch engine's modes do not hold (it would put the node on the nearest path at
        t = 0+ and read a wrong peak). Such variants get a stated reason, so that a study runs
        them on the detailed engine.
        """
        if self.capacitive:
            return
        tf = np.where(self.tf > 0, self.tf, np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            v = self.Vs - self.R * self.i0 + self.L * self.i0 / tf
        blocked = np.isfinite(v)
        for law, ref in [(self.off_law, 0.0)] + [(ch.law, r * self.Vs) for ch, r in zip(self.chains, self.ref,
                                                                                     strict=True)]:
            b = law.block
            if b is None:
                blocked &= False
                continue
            u = v - ref
            with np.errstate(invalid="ignore"):
                blocked &= (u > law.ulo[:, b]) & (u < law.uhi[:, b])
        self.fail(blocked, "the coil current would follow the switch's falling current (no node capacitance, "
                           "and no path conducts at V_s − R·i0 + L·i0/t_f): a regime the batch engine does "
                           f"not cover ({DECLINED})")

    def _build_chains(self, get, i0) -> None:
        n = self.n
        self.chains: list[ChainLaw] = []
        self.chain_index, self.ref, self.cap_of = [], [], []
        self.fitted = False
        self.fit_notes = []
        for k, cl in enumerate(self.clamps):
            if _cap_only(cl):
                continue
            pieces, caps = [], None
            for j, el in enumerate(cl.elements):
                pre = f"clamp[{k}].element[{j}]."
                if el.type == "capacitor":
                    cj = get(pre + "capacitance")
                    caps = cj if caps is None else 1.0 / (1.0 / caps + 1.0 / cj)
                    continue

                def g(name, pre=pre):
                    return get(pre + name)

                p = element_piece(el, g, i0, n)
                if p.invalid is not None:
                    self.fail(p.invalid, f"{cl.name}: {el.name or el.type}: values give no device law")
                if p.refuse is not None:
                    self.fail(p.refuse[0], f"{cl.name}: {el.name or el.type}: {p.refuse[1]}")
                if p.leak is not None and (any(e.type == "capacitor" for e in cl.elements) or self.capacitive):
                    self.fail(p.leak > FIT_ABS * i0,
                              f"{cl.name}: {el.name or el.type}: a reverse saturation current above {FIT_ABS:g}·i0, "
                              "which the batch engine's fit leaves out (its reverse-biased diode blocks) while a "
                              f"capacitor can drive it: outside the fit's stated error ({DECLINED})")
                pieces.append(p)
            try:
                law, els, notes = chain_law(pieces, n)
            except ValueError as err:
                self.fail(np.ones(n, bool), f"{cl.name}: {err}")
                law, els, notes = chain_law(pieces[:1], n)
            full = []
            it = iter(els)
            for el in cl.elements:
                # (a chain whose law could not be formed keeps a placeholder per element: its
                # variants are failed above with the reason, the others of the batch go on)
                full.append(None if el.type == "capacitor" else next(it, els[0]))
            ch = ChainLaw(law, full, caps, notes)
            it = iter(pieces)
            ch.currents = [None if el.type == "capacitor" else next(it).current for el in cl.elements]
            sat = [j for j, el in enumerate(cl.elements) if el.type == "diode" and el.model != "constant-drop"]
            if len(sat) == 1:
                ch.saturating = sat[0]
                it = iter(pieces)
                ch.exact = [None if el.type == "capacitor" else next(it).exact for el in cl.elements]
                ch.diode, ch.exact[sat[0]] = ch.exact[sat[0]], None
            if caps is not None:
                self.fail(np.any(law.r[:, [s for s, kd in enumerate(law.kinds) if kd == "seg"]] <= 0, axis=1),
                          f"{cl.name}: a capacitor in series with elements of zero resistance has no defined "
                          "current (expected a resistor or a series_resistance in this chain)")
            self.fitted |= bool(notes)
            self.fit_notes += [f"{cl.name}: {x}" for x in notes]
            self.chains.append(ch)
            self.chain_index.append(k)
            self.ref.append(1.0 if cl.across == "coil" else 0.0)
        self.cap_chains = [m for m, ch in enumerate(self.chains) if ch.capacitance is not None]
        self.nX = 1 + (1 if self.capacitive else 0) + len(self.cap_chains)
        self.iv = 1 if self.capacitive else None
        base = 2 if self.capacitive else 1
        self.icap = {m: base + q for q, m in enumerate(self.cap_chains)}
        self.laws = [self.on_law, self.off_law] + [ch.law for ch in self.chains]
        self.refs = [0.0, 0.0] + self.ref

    def offsets(self, X, idx):
        """Far-end voltage [V] of every branch for states X (G, nX) of the variants ``idx``."""
        out = [np.zeros(X.shape[0]), np.zeros(X.shape[0])]
        for m, ref in enumerate(self.ref):
            o = ref * self.Vs[idx]
            if m in self.icap:
                o = o + X[:, self.icap[m]]
            out.append(o)
        return out

    def _on_state(self) -> None:
        """DC on-state: coil, switch on-state law and every resistive chain (no snubber)."""
        n = self.n
        laws = [self.on_law] + [ch.law for ch in self.chains if ch.capacitance is None]
        offs = [np.zeros(n)] + [self.ref[m] * self.Vs for m, ch in enumerate(self.chains) if ch.capacitance is None]
        given = np.isfinite(self.i_given)
        g_x = np.where(given, 0.0, 1.0 / np.where(self.R > 0, self.R, 1.0))
        target = np.where(given, self.i_given, self.Vs * g_x)
        v, ok, _pin, cur, _u = solve_node(laws, offs, target, g_extra=g_x)
        self.fail(~ok, "no DC on-state (nothing conducts the coil current with the switch on)")
        v = np.where(ok, v, 0.0)
        self.v_on = v
        self.i0 = np.where(given, self.i_given, (self.Vs - v) * g_x)
        chain_cur, it = [], iter(cur[1:])
        for ch in self.chains:
            chain_cur.append(np.zeros(n) if ch.capacitance is not None else next(it))
        self.on_chain_currents = chain_cur
        self.on_chain_voltages = [v - ref * self.Vs for ref in self.ref]
        vertical = self.on_law.r[:, -1] == 0
        at_v = np.abs(v - self.on_law.V[:, -1]) <= 1e-12 * np.maximum(1.0, np.abs(v))
        self.i_on = np.where(vertical & at_v, self.i0 - sum(chain_cur, np.zeros(n)), cur[0])
        self.fail(~(self.i0 > 0), "the coil carries no current before turn-off (expected a positive on-state "
                  "current)")

    def _start_state(self) -> None:
        n = self.n
        X = np.zeros((n, self.nX))
        X[:, 0] = self.i0
        if self.capacitive:
            X[:, 1] = self.v_on
        for m in self.cap_chains:
            law = self.chains[m].law
            b = law.block
            lo = law.V[:, b] if b is not None else np.zeros(n)
            hi = law.uhi[:, b] if b is not None else np.zeros(n)
            vx = self.on_chain_voltages[m]
            inside = (lo <= 0) & (0 <= hi)
            X[:, self.icap[m]] = np.where(inside, vx, vx - np.clip(0.0, lo, hi))
        self.X0 = X
        finite = [np.where(np.isfinite(self.v_br), self.v_br, 0.0)]
        for m, ch in enumerate(self.chains):
            b = ch.law.block
            if b is not None:
                hi = ch.law.uhi[:, b]
                finite.append(np.where(np.isfinite(hi), hi + self.ref[m] * self.Vs, 0.0))
        self.v_scale = np.maximum.reduce([self.Vs, np.ones(n)] + [np.abs(x) for x in finite])
        if not self.capacitive and not self.clamps and not self.has_breakdown:
            self.fail(np.ones(n, bool), "no conducting path takes the coil current at turn-off: the switch-node "
                      "voltage would be unbounded (expected a clamp, switch.breakdown_voltage or switch.capacitance)")
        self.stored = 0.5 * self.L * self.i0**2
        self.cap0 = self.capacitor_energy(self.v_on, X)
        tau = np.where(self.R > 0, self.L / np.where(self.R > 0, self.R, 1.0), self.L * self.i0 / self.Vs)
        self.t_bound = self.tf + 60.0 * tau

    def capacitor_energy(self, v, X):
        """Energy [J] in the node and snubber capacitors."""
        w = 0.5 * self.C_gnd * v * v + 0.5 * self.C_plus * (self.Vs - v) ** 2
        for m in self.cap_chains:
            w = w + 0.5 * self.chains[m].capacitance * X[:, self.icap[m]] ** 2
        return w

    @property
    def descriptions(self) -> list[str]:
        """Model notes of the batch."""
        out = [f"{self.kind} switch laws as in the detailed engine"] + self.fit_notes
        return out
