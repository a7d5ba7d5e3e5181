"""Piecewise-linear branch laws as arrays over cases, and the stated fits of nonlinear laws.

A branch law (switch channel, switch off-state, one clamp chain) is a monotone curve of
current against branch voltage made of *states* in ascending voltage: linear segments
``u = V + r·I`` for ``I`` in ``[I_lo, I_hi]`` (``r = 0``: an ideal, vertical segment that holds
its voltage) and at most one zero-current *block* ``band_lo ≤ u ≤ band_hi``. Every value is an
array over the cases of one batch; the structure (number and kind of states) is shared.

Laws that are not piecewise linear enter as a **stated fit** (:mod:`kickback.engine.batch_fit`):
chords between the node currents ``x = i0 × FIT_NODES`` (a grid chosen once) through the law read a little
higher, ``(x, v(FIT_SCALE·x))``, so that the fitted law is continuous and its current at any
voltage lies within ``max(FIT_REL × i, FIT_ABS × i0)`` of the exact law's current ``i``
(``FIT_REL`` = 1 %, ``FIT_ABS`` = 1e-4) from the figures' conduction threshold (``FIT_FLOOR`` =
1e-6·i0) up to ``FIT_TOP`` = 2·i0; the first chord leaves zero current at the law's voltage at
that threshold, the last one goes on beyond the top node. The bound rests on the chord error of
the logarithmic law ``v = a·ln i`` (``batch_fit.chord_error``), the worst case of both laws fitted: a
Shockley diode ``a·ln(1 + i/I_s) + r_s·i`` is less curved against ``ln i``, and so is a varistor
``v₁·(i/i₁)^(1/α)`` for α ≥ 1 (the batch engine refuses a varistor with α < 1, with the
reason). A Shockley diode's fit blocks in reverse, where the exact law leaks −I_s: where
I_s > FIT_ABS·i0 and a capacitor (in its chain, or at the node) can drive that leak, the batch
engine refuses the variant (:class:`~kickback.engine.batch_params.BatchCircuit`). In a series
chain of fitted elements the chain's current error at one voltage keeps the
bound (each element's voltage error is at most its bound times ``i·dv/di``). What this does to
the figures: an energy moves by about the current error times the voltage over the time it
lasts; measured against the exact laws (tests/test_fit_bound.py, tests/test_wide_range.py), the
energies stay within 3 % of the figure or 5e-4 of the energy put in (two fitted paths sharing
the current can each be 1 % off the other way; 2.2 % is the worst measured), times within 1 %.
Where the path stays long below the knee (the absolute error, or a blocked diode's leak, times
the voltage, for as long as that lasts) no share of the figure bounds it: the batch engine
estimates it along the computed path and declines where it is outside (:mod:`batch_fitcheck`).

References
----------
A. S. Sedra and K. C. Smith, Microelectronic Circuits, ch. 4 (diode exponential law and its
piecewise-linear models).
L. M. Levinson and H. R. Philipp, "Zinc oxide varistors — a review", American Ceramic Society
Bulletin 65(4), 1986 (power-law characteristic).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kickback.engine.batch_fit import FIT_MIN_EXPONENT, chords, describe
from kickback.models.breakdown import DEFAULT_FORWARD_DROP
from kickback.models.diode import BOLTZMANN, ELEMENTARY_CHARGE, T25


@dataclass
class Law:
    """A branch law over N cases.

    Attributes
    ----------
    kinds : list of str — "seg" or "block" per state, ascending in voltage
    V, r, Ilo, Ihi : (N, S) — segment voltage at zero current [V], slope [Ω], current range [A]
        (block: V = band_lo, r = 0, I = 0)
    ulo, uhi : (N, S) — [V] voltage range of each state
    """

    kinds: list
    V: np.ndarray
    r: np.ndarray
    Ilo: np.ndarray
    Ihi: np.ndarray
    ulo: np.ndarray
    uhi: np.ndarray

    @property
    def n_states(self) -> int:
        return len(self.kinds)

    @property
    def block(self) -> int | None:
        return self.kinds.index("block") if "block" in self.kinds else None


def make_law(rev: list, block: bool, fwd: list, n: int) -> Law:
    """Law from reverse segments (most negative first), an optional block and forward segments.

    Each segment is a tuple ``(V, r, Ilo, Ihi)`` of arrays (or scalars) over ``n`` cases.
    """
    rows = []
    kinds = []
    for s in rev:
        rows.append(s)
        kinds.append("seg")
    if block:
        lo = rev[-1][0] if rev else np.full(n, -np.inf)
        hi = fwd[0][0] if fwd else np.full(n, np.inf)
        rows.append((lo, 0.0, 0.0, 0.0, hi))
        kinds.append("block")
    for s in fwd:
        rows.append(s)
        kinds.append("seg")
    V = np.empty((n, len(rows)))
    r = np.empty_like(V)
    Ilo = np.empty_like(V)
    Ihi = np.empty_like(V)
    ulo = np.empty_like(V)
    uhi = np.empty_like(V)
    for k, row in enumerate(rows):
        V[:, k], r[:, k], Ilo[:, k], Ihi[:, k] = (np.broadcast_to(np.asarray(x, float), (n,)) for x in row[:4])
        if kinds[k] == "block":
            ulo[:, k] = V[:, k]
            uhi[:, k] = np.broadcast_to(np.asarray(row[4], float), (n,))
        else:
            with np.errstate(invalid="ignore"):
                ulo[:, k] = np.where(r[:, k] > 0, V[:, k] + r[:, k] * Ilo[:, k], V[:, k])
                uhi[:, k] = np.where(r[:, k] > 0, V[:, k] + r[:, k] * Ihi[:, k], V[:, k])
    return Law(kinds, V, r, Ilo, Ihi, ulo, uhi)


@dataclass
class ElementLaw:
    """One non-capacitor element of a chain: its (V, r) on every chain state and its band."""

    type: str
    V: np.ndarray  # (N, S) per chain state
    r: np.ndarray
    band_lo: np.ndarray  # (N,)
    band_hi: np.ndarray
    description: str = ""


@dataclass
class ElementPiece:
    """An element before it is placed in a chain: forward and reverse pieces, maybe a fit."""

    type: str
    fwd: list  # [(V, r, Ilo, Ihi)] ascending current, first Ilo = 0
    rev: list  # [(V, r, Ilo, Ihi)] most negative first, last Ihi = 0; [] = blocks reverse
    linear: bool = False
    description: str = ""
    fitted: bool = False
    fit_note: str = ""
    invalid: np.ndarray | None = None  # (N,) bool: values that make no law
    refuse: tuple | None = None  # ((N,) bool, reason): values outside the fit's stated error
    leak: np.ndarray | None = None  # (N,) [A] reverse saturation current the fit leaves out (Shockley)
    #: the exact law's voltage [V] at reverse currents: ``exact(i, idx)`` for currents ``i`` (G,) of
    #: the variants ``idx``; read where a reverse-saturated Shockley diode shares a chain's
    #: held-off voltage with a leaking element (a varistor far below its knee)
    exact: object = None
    #: the exact law's current [A] at element voltages: ``current(u, idx)`` (fitted laws only), for
    #: the estimate of the fit's error along the computed path (:mod:`kickback.engine.batch_fitcheck`)
    current: object = None


@dataclass
class ChainLaw:
    law: Law
    elements: list = field(default_factory=list)  # ElementLaw or None (capacitor) per element
    capacitance: np.ndarray | None = None  # (N,) series capacitor
    fitted: list = field(default_factory=list)  # notes of fits in this chain
    #: index of a fitted Shockley diode: in reverse it stands for a law carrying −I_s, so the other
    #: elements sit at their reverse zero-current edge and the diode holds the rest (as the
    #: detailed engine shares a reverse-saturated chain)
    saturating: int | None = None
    #: per element (None: capacitor, or no exact law kept): :attr:`ElementPiece.exact`
    exact: list = field(default_factory=list)
    #: (a = n·V_T, I_s, R_s) arrays (N,) of the saturating diode
    diode: tuple | None = None
    #: per element (None: capacitor or a law that is not fitted): :attr:`ElementPiece.current`
    currents: list = field(default_factory=list)


def _pw(V, r, n):
    inf = np.full(n, np.inf)
    return [(np.asarray(V, float) * np.ones(n), np.asarray(r, float) * np.ones(n), np.zeros(n), inf)]


def _pw_rev(V, r, n):
    return [(np.asarray(V, float) * np.ones(n), np.asarray(r, float) * np.ones(n), np.full(n, -np.inf),
             np.zeros(n))]


def element_piece(el, get, i0, n) -> ElementPiece:
    """The law of element ``el`` with values from ``get(name)`` (arrays over n cases).

    ``i0`` [A] (n,) sets the fit nodes of nonlinear laws.
    """
    t = el.type
    if t == "diode" and el.model == "constant-drop":
        vf, rs = get("forward_voltage"), get("series_resistance")
        return ElementPiece("diode", _pw(vf, rs, n), [], description="constant-drop diode",
                            invalid=~(np.isfinite(vf)))
    if t == "diode":
        rs = np.nan_to_num(get("series_resistance"), nan=0.0)
        temp = get("temperature")
        vt = BOLTZMANN * np.where(np.isfinite(temp), temp, T25) / ELEMENTARY_CHARGE
        vf, at = get("forward_voltage"), get("at_current")
        nid, isat = get("ideality"), get("saturation_current")
        vj = vf - rs * at
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            if el.ideality is not None or np.all(np.isfinite(nid)):
                i_s = at / np.expm1(vj / (nid * vt))
            else:
                nid = vj / (vt * np.log1p(at / isat))
                i_s = isat
            if el.forward_voltage is None:
                nid, i_s = get("ideality"), get("saturation_current")
            a = nid * vt
            bad = ~((a > 0) & (i_s > 0) & np.isfinite(a) & np.isfinite(i_s))

            def vfun(i):
                sh = (-1,) + (1,) * (np.ndim(i) - 1)
                return a.reshape(sh) * np.log1p(i / i_s.reshape(sh)) + rs.reshape(sh) * i

            segs = chords(vfun, i0, n)
        note = ("Shockley diode as a piecewise-linear fit (" + describe() + "; exact law in the detailed engine)")
        return ElementPiece("diode", segs, [], description="Shockley diode (fitted)", fitted=True, fit_note=note,
                            invalid=bad | (vj <= 0), leak=np.where(bad, 0.0, i_s), exact=(a, i_s, rs),
                            current=lambda u, idx: shockley_current(u, a[idx], i_s[idx], rs[idx]))
    if t in ("zener", "tvs"):
        v, rd = get("voltage"), get("dynamic_resistance")
        if el.test_current is not None:  # the datasheet's values (models.factory.breakdown_parameters)
            from kickback.models.breakdown import breakdown_line

            v_at = get("breakdown_voltage") if t == "tvs" else v
            slope = get("impedance") if el.impedance is not None else rd
            pulse = (get("clamping_voltage"), get("peak_pulse_current")) if el.clamping_voltage is not None \
                else (None, None)
            v, rd = breakdown_line(v_at, get("test_current"), *pulse, slope)
        bidir = el.bidirectional and t == "tvs"
        if bidir:
            rev = _pw_rev(-v, rd, n)
        else:
            vfz = get("forward_voltage")
            rev = _pw_rev(-np.where(np.isfinite(vfz), vfz, DEFAULT_FORWARD_DROP), rd, n)
        return ElementPiece(t, _pw(v, rd, n), rev, description=t, invalid=~np.isfinite(v))
    if t == "resistor":
        R = get("resistance")
        return ElementPiece("resistor", _pw(0.0, R, n), _pw_rev(0.0, R, n), linear=True, description="resistor",
                            invalid=~(R > 0), exact=lambda i, idx: R[idx] * i)
    if t == "varistor":
        v1, alpha, i1 = get("voltage"), get("exponent"), get("at_current")
        i1 = np.where(np.isfinite(i1), i1, 1e-3)

        def vfun(i):
            sh = (-1,) + (1,) * (np.ndim(i) - 1)
            return v1.reshape(sh) * (i / i1.reshape(sh)) ** (1.0 / alpha.reshape(sh))

        with np.errstate(invalid="ignore", divide="ignore"):
            fwd = chords(vfun, i0, n)
        rev = [(-V, r, -hi, -lo) for V, r, lo, hi in reversed(fwd)]
        note = ("varistor as a piecewise-linear fit, both polarities (" + describe()
                + "; exact law in the detailed engine)")
        def exact(i, idx):
            return np.sign(i) * v1[idx] * (np.abs(i) / i1[idx]) ** (1.0 / alpha[idx])

        def current(u, idx):
            return np.sign(u) * i1[idx] * (np.abs(u) / v1[idx]) ** alpha[idx]

        return ElementPiece("varistor", fwd, rev, description="varistor (fitted)", fitted=True, fit_note=note,
                            exact=exact, current=current,
                            invalid=~((v1 > 0) & (alpha > 0)),
                            refuse=(alpha < FIT_MIN_EXPONENT, f"varistor exponent below {FIT_MIN_EXPONENT:g}: the "
                                    "batch engine's piecewise-linear fit has no stated error there (the detailed "
                                    "engine solves it)"))
    raise ValueError(f"unknown element type {t!r}")


def shockley_current(u, a, i_s, rs):
    """Current [A] of the Shockley law ``u = a·ln(1 + i/I_s) + R_s·i`` at voltage ``u`` [V]:
    ``i = (a/R_s)·W((I_s·R_s/a)·e^((u + R_s·I_s)/a)) − I_s``, W(e^x) = ω(x) the Wright omega
    function (R. M. Corless and D. J. Jeffrey, "The Wright ω function", 2002; T. C. Banwell and
    A. Jayakumar, Electronics Letters 36(4), 2000, the diode with series resistance by Lambert W);
    ``I_s·(e^(u/a) − 1)`` where R_s = 0."""
    from scipy.special import wrightomega

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        pos = rs > 0
        r = np.where(pos, rs, 1.0)
        x = np.log(i_s * r / a) + (u + r * i_s) / a
        return np.where(pos, a / r * wrightomega(x) - i_s, i_s * np.expm1(np.minimum(u / a, 700.0)))


def chain_law(pieces: list, n: int) -> tuple[Law, list, list]:
    """Series chain of element pieces (capacitors excluded): the chain law and per-element (V, r).

    At most one element may have several segments (a fit); the chain's segments follow it.
    Returns (law, element laws, notes).
    """
    multi = [p for p in pieces if len(p.fwd) > 1 or len(p.rev) > 1]
    if len(multi) > 1:
        return _merged_chain_law(pieces, n)
    lead = multi[0] if multi else (pieces[0] if pieces else None)
    linear = all(p.linear for p in pieces)
    reverse = all(p.rev for p in pieces)
    notes = [p.fit_note for p in pieces if p.fitted]
    if linear:
        V = sum(p.fwd[0][0] for p in pieces)
        r = sum(p.fwd[0][1] for p in pieces)
        law = make_law([], False, [(V, r, np.full(n, -np.inf), np.full(n, np.inf))], n)
        els = [ElementLaw(p.type, p.fwd[0][0][:, None] * np.ones((n, 1)), p.fwd[0][1][:, None] * np.ones((n, 1)),
                          np.zeros(n), np.zeros(n), p.description) for p in pieces]
        return law, els, notes

    def combine(side):
        segs_lead = lead.fwd if side == "fwd" else lead.rev
        out = []
        for k, (_V, _r, lo, hi) in enumerate(segs_lead):
            Vs_ = np.zeros(n)
            rs_ = np.zeros(n)
            for p in pieces:
                segs = p.fwd if side == "fwd" else p.rev
                s = segs[k] if len(segs) > 1 else segs[0]
                Vs_ = Vs_ + s[0]
                rs_ = rs_ + s[1]
            out.append((Vs_, rs_, lo, hi))
        return out

    fwd = combine("fwd")
    rev = combine("rev") if reverse else []
    law = make_law(rev, True, fwd, n)
    S = law.n_states
    els = []
    for p in pieces:
        Ve = np.zeros((n, S))
        re = np.zeros((n, S))
        k_seg = 0
        for s in range(S):
            if law.kinds[s] == "block":
                continue
            side_rev = s < law.block
            segs = p.rev if side_rev else p.fwd
            kk = (k_seg if side_rev else s - law.block - 1)
            seg = segs[kk] if len(segs) > 1 else segs[0]
            Ve[:, s], re[:, s] = seg[0], seg[1]
            k_seg += 1 if side_rev else 0
        lo = p.rev[-1][0] if p.rev else np.full(n, -np.inf)
        hi = p.fwd[0][0]
        els.append(ElementLaw(p.type, Ve, re, np.broadcast_to(lo, (n,)).astype(float),
                              np.broadcast_to(hi, (n,)).astype(float), p.description))
    return law, els, notes


def _side_intervals(pieces, side, n):
    """The current intervals of a series chain on one side (``"fwd"``: i ≥ 0, ``"rev"``: i ≤ 0):
    the union of every element's segment ends, sorted per variant; on each interval, every
    element's (V, r). Returns [(lo, hi, [(V, r) per piece])] in increasing current."""
    segs_of = [p.fwd if side == "fwd" else p.rev for p in pieces]
    cuts = [seg[3] for segs in segs_of for seg in segs[:-1]]  # interior ends (upper end of each but the last)
    edge = np.zeros(n)
    far = np.full(n, np.inf if side == "fwd" else -np.inf)
    C = np.sort(np.stack(cuts, axis=1), axis=1) if cuts else np.zeros((n, 0))
    bounds = [edge] + [C[:, k] for k in range(C.shape[1])] + [far] if side == "fwd" else \
        [far] + [C[:, k] for k in range(C.shape[1])] + [edge]
    out = []
    for a, b in zip(bounds[:-1], bounds[1:], strict=True):
        with np.errstate(invalid="ignore"):
            mid = np.where(np.isfinite(a) & np.isfinite(b), 0.5 * (a + b),
                           np.where(np.isfinite(a), a + np.abs(a) + 1.0, b - np.abs(b) - 1.0))
        per = []
        for segs in segs_of:
            V = np.full(n, np.nan)
            r = np.full(n, np.nan)
            for seg in segs:
                lo = np.broadcast_to(seg[2], (n,))
                hi = np.broadcast_to(seg[3], (n,))
                inside = np.isnan(V) & (lo <= mid) & (mid <= hi)
                V = np.where(inside, seg[0], V)
                r = np.where(inside, seg[1], r)
            per.append((V, r))
        out.append((a, b, per))
    return out


def _merged_chain_law(pieces, n):
    """Series chain with several fitted elements: the chain's segments are bounded by the union of
    the elements' segment ends in current (each element is linear on each such interval, so the
    chain, the sum of the element voltages at one current, is linear there too)."""
    notes = [p.fit_note for p in pieces if p.fitted]
    fwd_iv = _side_intervals(pieces, "fwd", n)
    reverse = all(p.rev for p in pieces)
    rev_iv = _side_intervals(pieces, "rev", n) if reverse else []

    def chain(iv):
        return [(sum(V for V, _r in per), sum(r for _V, r in per), a, b) for a, b, per in iv]

    law = make_law(chain(rev_iv), True, chain(fwd_iv), n)
    S = law.n_states
    els = []
    for q, p in enumerate(pieces):
        Ve = np.zeros((n, S))
        re = np.zeros((n, S))
        for s in range(S):
            if law.kinds[s] == "block":
                continue
            iv = rev_iv[s] if s < law.block else fwd_iv[s - law.block - 1]
            Ve[:, s], re[:, s] = iv[2][q]
        lo = p.rev[-1][0] if p.rev else np.full(n, -np.inf)
        hi = p.fwd[0][0]
        els.append(ElementLaw(p.type, Ve, re, np.broadcast_to(lo, (n,)).astype(float),
                              np.broadcast_to(hi, (n,)).astype(float), p.description))
    return law, els, notes
