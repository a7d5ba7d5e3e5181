"""Conduction states of a piecewise-linear circuit and the linear system each one gives.

A *mode* is, for every branch, the state of its law in use (a segment or the zero-current
block; for the switch channel also "limited" by the falling current, or "off"), and at most one
branch on an ideal (vertical) segment that holds the node at its voltage. The mode right after a
time t is found from the state advanced by a tiny step along its motion (a *probe*, ~1e-11 of the
case's time scale), which settles ties at thresholds (coincident events, a current reaching zero,
the start of the fall) by the direction the circuit moves in.

In a mode every quantity is affine in ``ξ = (x, 1, τ)``: node voltage, branch currents, the state
derivative ``x' = F ξ`` and every event function; the energies are quadratic forms in ξ.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kickback.engine.batch_laws import Law
from kickback.engine.batch_node import law_current, solve_node


def take(law: Law, idx) -> Law:
    """The law of the variants ``idx``."""
    return Law(law.kinds, law.V[idx], law.r[idx], law.Ilo[idx], law.Ihi[idx], law.ulo[idx], law.uhi[idx])


def locate(law: Law, u):
    """State index holding branch voltage ``u`` (ties: the lower state) and the index of a
    vertical segment within ``1e-12`` of ``u``, or overshot at the top, or at the bottom (a node
    moving past a lowest vertical piece, such as a forward-biased TVS; −1: none)."""
    S = law.n_states
    st = np.minimum(np.sum(law.uhi < u[:, None], axis=1), S - 1)
    seg = np.array([kd == "seg" for kd in law.kinds])
    ks = np.arange(S)
    V = law.V
    tol = 1e-12 * np.maximum(1.0, np.abs(np.where(np.isfinite(V), V, 0.0)))
    uu = u[:, None]
    near = seg & (law.r == 0) & ((uu >= V - tol) | (ks == 0)) & ((uu <= V + tol) | (ks == S - 1))
    vert = np.where(near.any(axis=1), np.argmax(near, axis=1), -1)  # the lowest such state
    return st, vert


@dataclass
class Mode:
    """The mode of a group of variants: state per branch (G, B), pinned branch (G,) or −1."""

    states: np.ndarray
    pin: np.ndarray


class Modes:
    """Classification and assembly for the variants ``idx`` of a batch circuit."""

    def __init__(self, bc, idx):
        self.bc, self.idx = bc, idx
        self.laws = [take(law, idx) for law in bc.laws]
        self.S0 = bc.on_law.n_states
        self.LIM, self.OFF = self.S0, self.S0 + 1
        self.Vs, self.L, self.R = bc.Vs[idx], bc.L[idx], bc.R[idx]
        self.tf, self.i_on = bc.tf[idx], bc.i_on[idx]
        self.nX = bc.nX
        self.B = len(self.laws)

    # ---------------------------------------------------------------- probe
    def i_lim(self, t):
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.tf > 0, self.i_on * np.clip(1.0 - t / np.where(self.tf > 0, self.tf, 1.0), 0, 1), 0.0)

    def classify(self, X, t, Xdot, delta):
        """Mode valid just after t; returns (Mode, X with the node snapped to a pin, ok)."""
        Xp = X + delta[:, None] * Xdot
        tp = t + delta
        in_fall = (self.tf > 0) & (tp < self.tf)
        lim = self.i_lim(tp)
        G = X.shape[0]
        states = np.zeros((G, self.B), int)
        pin = np.full(G, -1)
        Xs = X.copy()
        offs = self.bc.offsets(Xp, self.idx)
        ip = Xp[:, 0]
        if not self.bc.capacitive:
            limits = [lim] + [None] * (self.B - 1)
            active = [in_fall] + [None] * (self.B - 1)
            # the states are read inside the interval between knots that holds v: v itself may
            # round onto a knot (and a tie there reads the lower, blocking state)
            v, ok, pin, _cur, u_in = solve_node(self.laws, offs, ip, 0.0, limits, active)
        else:
            v = Xp[:, 1]
            u_in = v
            ok = np.ones(G, bool)
        # channel
        st0, vert0 = locate(self.laws[0], v)
        if not self.bc.capacitive:
            st0 = locate(self.laws[0], u_in)[0]
        on_cur = law_current(self.laws[0], u_in, 1)
        states[:, 0] = np.where(in_fall, np.where(on_cur < lim, st0, self.LIM), self.OFF)
        if not self.bc.capacitive:
            states[:, 0] = np.where(in_fall & (pin == 0), np.maximum(vert0, 0), states[:, 0])
            for b in range(1, self.B):
                vert = locate(self.laws[b], v - offs[b])[1]
                st = locate(self.laws[b], u_in - offs[b])[0]
                states[:, b] = np.where(pin == b, np.maximum(vert, 0), st)
            return Mode(states, pin), Xs, ok
        # capacitive: other branches first at v, then vertical candidates by their pinned current
        verts = [vert0]
        for b in range(1, self.B):
            st, vert = locate(self.laws[b], v - offs[b])
            states[:, b] = st
            verts.append(vert)
        cur = [self._current(b, states[:, b], v - offs[b], lim) for b in range(self.B)]
        cur[0] = np.where(states[:, 0] == self.LIM, lim, np.where(states[:, 0] == self.OFF, 0.0, cur[0]))
        for b in range(self.B):
            vb = verts[b]
            cand = (vb >= 0) & (pin < 0)
            k = np.maximum(vb, 0)
            law = self.laws[b]
            rows = np.arange(G)
            if b == 0:
                # the channel's vertical piece holds the node only at its own voltage: above it the
                # falling current limit governs (state LIM), however little current the coil
                # carries — an ideal switch does not snap a ringing node down to 0 V
                Vk = law.V[rows, k]
                cand &= in_fall & (np.abs(v - Vk) <= 1e-12 * np.maximum(1.0, np.abs(Vk)))
            if not np.any(cand):
                continue
            others = sum(cur[j] for j in range(self.B) if j != b)
            ip_b = ip - others
            lo, hi = law.Ilo[rows, k], law.Ihi[rows, k]
            if b == 0:
                hold = cand & (ip_b <= lim) & (ip_b >= lo)
                states[:, 0] = np.where(cand & (ip_b > lim), self.LIM, states[:, 0])
            else:
                hold = cand & (ip_b >= lo) & (ip_b <= hi)
            below = cand & (ip_b < lo)
            # (a vertical piece the node sits on but whose current would exceed its top — a
            # forward-biased TVS at −0.7 V as the node turns upwards — is left upwards: never kept
            # unpinned, which would hold no current while the node moves off its voltage)
            above = cand & (ip_b > hi) & (b != 0)
            states[:, b] = np.where(hold, k, np.where(below, np.maximum(k - 1, 0),
                                                      np.where(above, np.minimum(k + 1, law.n_states - 1),
                                                               states[:, b])))
            pin = np.where(hold, b, pin)
            vp = law.V[rows, k] + offs[b]
            Xs[:, 1] = np.where(hold | (below & (v > vp)) | (above & (v < vp)),
                                law.V[rows, k] + self.bc.offsets(X, self.idx)[b], Xs[:, 1])
        return Mode(states, pin), Xs, ok

    def _current(self, b, st, u, lim):
        law = self.laws[b]
        rows = np.arange(st.shape[0])
        k = np.minimum(st, law.n_states - 1)
        V, r = law.V[rows, k], law.r[rows, k]
        seg = np.array([kd == "seg" for kd in law.kinds])[k] & (st < law.n_states)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(seg & (r > 0), (u - V) / np.where(r > 0, r, 1.0), 0.0)

    # -------------------------------------------------------------- assembly
    def assemble(self, mode: Mode, t0):
        """Affine forms of the mode: node voltage, branch currents, x' = F ξ, dynamic states."""
        bc = self.bc
        G = t0.shape[0]
        nX, nxi = self.nX, self.nX + 2
        i1, it = nX, nX + 1
        rows = np.arange(G)

        def unit(j, scale=1.0):
            e = np.zeros((G, nxi))
            e[:, j] = scale
            return e

        one = unit(i1)
        offf = [np.zeros((G, nxi)), np.zeros((G, nxi))]
        for m, ref in enumerate(bc.ref):
            o = unit(i1, ref * self.Vs)
            if m in bc.icap:
                o[:, bc.icap[m]] = 1.0
            offf.append(o)
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = np.where(self.tf > 0, self.i_on / np.where(self.tf > 0, self.tf, 1.0), 0.0)
        ilim = unit(i1, self.i_on - slope * t0) - unit(it, slope)
        info = []
        for b in range(self.B):
            law = self.laws[b]
            st = mode.states[:, b]
            k = np.minimum(st, law.n_states - 1)
            special = st >= law.n_states
            kind_seg = np.array([kd == "seg" for kd in law.kinds])[k] & ~special
            V, r = law.V[rows, k], law.r[rows, k]
            vertical = kind_seg & (r == 0)
            info.append(dict(st=st, k=k, seg=kind_seg & ~vertical, vert=vertical, V=V, r=r,
                             lim=(b == 0) & (st == self.LIM), off=(b == 0) & (st == self.OFF),
                             block=~kind_seg & ~special, Ilo=law.Ilo[rows, k], Ihi=law.Ihi[rows, k]))
        pinned = mode.pin >= 0
        if bc.capacitive:
            cv = unit(bc.iv)
        else:
            gsum = np.zeros(G)
            num = unit(0)
            for b, d in enumerate(info):
                g = np.where(d["seg"], 1.0 / np.where(d["seg"], d["r"], 1.0), 0.0)
                gsum = gsum + g
                Vf = np.where(d["seg"], d["V"], 0.0)
                num = num + g[:, None] * (offf[b] + Vf[:, None] * one)
                if b == 0:
                    num = num - d["lim"][:, None] * ilim
            with np.errstate(invalid="ignore", divide="ignore"):
                cv = num / np.where(gsum > 0, gsum, 1.0)[:, None]
            nopath = ~pinned & ~(gsum > 0)
            cv[nopath] = 0.0
        if bc.capacitive:
            nopath = np.zeros(G, bool)
        if np.any(pinned):
            vp = np.zeros(G)
            for b, d in enumerate(info):
                vp = np.where(mode.pin == b, np.where(d["vert"], d["V"], 0.0) + offf[b][:, i1], vp)
            cv = np.where(pinned[:, None], vp[:, None] * one, cv)
        cI = []
        for b, d in enumerate(info):
            g = np.where(d["seg"], 1.0 / np.where(d["seg"], d["r"], 1.0), 0.0)
            Vf = np.where(d["seg"], d["V"], 0.0)
            f = g[:, None] * (cv - offf[b] - Vf[:, None] * one)
            if b == 0:
                f = np.where(d["lim"][:, None], ilim, f)
            cI.append(f)
        if np.any(pinned):
            for b in range(self.B):
                rest = unit(0) - sum(cI[j] for j in range(self.B) if j != b)
                cI[b] = np.where((mode.pin == b)[:, None], rest, cI[b])
        F = np.zeros((G, nX, nxi))
        F[:, 0] = (unit(i1, self.Vs) - cv - unit(0, self.R)) / self.L[:, None]
        dyn = np.zeros((G, nX), bool)
        dyn[:, 0] = True
        if bc.capacitive:
            free = ~pinned
            F[:, bc.iv] = np.where(free[:, None], (unit(0) - sum(cI)) / bc.C_node[self.idx][:, None], 0.0)
            dyn[:, bc.iv] = free
        for m in bc.cap_chains:
            b = 2 + m
            conducting = ~info[b]["block"]
            F[:, bc.icap[m]] = np.where(conducting[:, None], cI[b] / bc.chains[m].capacitance[self.idx][:, None], 0.0)
            dyn[:, bc.icap[m]] = conducting
        return Forms(cv=cv, cI=cI, F=F, dyn=dyn, info=info, ilim=ilim, offf=offf, nopath=nopath, nX=nX)


@dataclass
class Forms:
    """Affine forms over ξ = (x, 1, τ) of one mode (arrays (G, nξ) unless noted)."""

    cv: np.ndarray
    cI: list
    F: np.ndarray  # (G, nX, nξ)
    dyn: np.ndarray  # (G, nX) bool
    info: list
    ilim: np.ndarray
    offf: list
    nopath: np.ndarray
    nX: int

    def d(self, c):
        """Time derivative of the form ``c``: ``c_x·F + c_τ``."""
        out = np.einsum("gj,gjk->gk", c[:, :self.nX], self.F)
        out[:, self.nX] += c[:, self.nX + 1]
        return out

    @property
    def A(self):
        return self.F[:, :, :self.nX]

    @property
    def b0(self):
        return self.F[:, :, self.nX]

    @property
    def b1(self):
        return self.F[:, :, self.nX + 1]
