"""Figures recorded at the ends of every segment: peaks, extremes, held voltages, conduction.

Segments are split at every extremum of the node voltage and of each chain current, and where a
chain current crosses the conduction threshold, so the extreme values are attained at segment
ends; each end is recorded from both sides (a current may jump when an ideal law takes over).
Element voltages follow :meth:`kickback.chain.Chain.element_voltages`: on the law's piece when
the chain carries current, else the held-off voltage shared in chain order, each element up to
the edge of its zero-current band.
"""

from __future__ import annotations

import numpy as np

from kickback.conventions import CONDUCTION_FRACTION
from kickback.engine.batch_node import law_current
from kickback.standoff import blocked_voltage, chain_blocks, has_diode, rest_node_voltage


def take_rows(law, idx):
    """The law of the variants ``idx`` (as :func:`kickback.engine.batch_modes.take`)."""
    from kickback.engine.batch_laws import Law

    return Law(law.kinds, law.V[idx], law.r[idx], law.Ilo[idx], law.Ihi[idx], law.ulo[idx], law.uhi[idx])


class Record:
    """Extremes over the run, per variant (arrays over the batch)."""

    def __init__(self, bc):
        n = bc.n
        self.bc = bc
        self.vpk = np.full(n, -np.inf)
        self.tpk = np.zeros(n)
        # chains: the active ones, then the lone capacitors
        self.nch = len(bc.chains) + len(bc.lone)
        self.Imax = np.zeros((n, self.nch))
        self.Imin = np.zeros((n, self.nch))
        self.cond = np.zeros((n, self.nch))
        self.nel = [len(bc.case.clamps[k].elements) for k in bc.chain_index] + \
                   [len(bc.case.clamps[k].elements) for k, _c, _r in bc.lone]
        self.vabs = [np.zeros((n, ne)) for ne in self.nel]
        self.held = [np.zeros((n, ne)) for ne in self.nel]
        #: element voltages and the node's rate (NaN: the chain conducts) at a segment's end, for
        #: a local extremum at the boundary confirmed by the next segment's start (:meth:`boundary`)
        self.pend = [np.zeros((n, ne)) for ne in self.nel[:len(bc.chains)]]
        self.pend_dv = [np.full(n, np.nan) for _ in bc.chains]
        self.ppk = [np.zeros((n, ne)) for ne in self.nel]

    # --------------------------------------------------------------- values
    def _element_voltages(self, m, gi, cur, u, vc, state=None):
        """Voltages [V] of the elements of active chain m at current cur, chain voltage u, cap vc;
        ``state`` (optional) the chain's piece in the segment's mode: the element voltages are then
        read on that piece (a rounding-level current of the wrong sign at a segment's end must not
        move the reading to the piece on the other side of zero current — a Zener read at its
        breakdown voltage while it carries 1e-12 A forward)."""
        ch = self.bc.chains[m]
        law = ch.law
        out = []
        nonzero = cur != 0
        rest = np.where(nonzero, 0.0, u - vc)
        seg_kind = np.array([kd == "seg" for kd in law.kinds])
        if state is not None:
            k_st = np.minimum(state, law.n_states - 1)
            on_piece = (state < law.n_states) & seg_kind[k_st]
        # the lowest segment whose current range holds cur (read where the mode's piece is not given)
        holds = seg_kind & (law.Ilo[gi] <= cur[:, None]) & (cur[:, None] <= law.Ihi[gi])
        any_holds = holds.any(axis=1)
        first = np.argmax(holds, axis=1)
        for el in ch.elements:
            if el is None:
                out.append(vc)
                continue
            v_on = np.full(cur.shape, np.nan)
            if state is not None:
                v_on = np.where(on_piece, el.V[gi, k_st] + el.r[gi, k_st] * cur, v_on)
            v_on = np.where(np.isnan(v_on) & any_holds, el.V[gi, first] + el.r[gi, first] * cur, v_on)
            take = np.clip(rest, el.band_lo[gi], el.band_hi[gi])
            rest = rest - take
            out.append(np.where(nonzero, np.nan_to_num(v_on), take))
        d = ch.saturating
        if d is not None:
            others = [j for j, el in enumerate(ch.elements) if el is not None and j != d]
            edges = [ch.elements[j].band_lo[gi] for j in others]
            if all(np.all(np.isfinite(e)) for e in edges):
                total = sum(edges, np.zeros(cur.shape))
                rev = ~nonzero & (u - vc < total)
                for j, e in zip(others, edges, strict=True):
                    out[j] = np.where(rev, e, out[j])
                out[d] = np.where(rev, u - vc - total, out[d])
                if ch.diode is not None and any(ch.exact[j] is not None for j in others):
                    # the leaking elements share with the diode what the others' edges leave
                    fixed = sum((e for j, e in zip(others, edges, strict=True) if ch.exact[j] is None),
                                np.zeros(cur.shape))
                    leak = ~nonzero & (u - vc < fixed)
                    if np.any(leak):
                        for j, e in zip(others, edges, strict=True):
                            out[j] = np.where(leak & (ch.exact[j] is None), e, out[j])
                        self._leak_split(ch, d, others, edges, gi, u - vc, leak, out)
        return out

    @staticmethod
    def _leak_split(ch, d, others, edges, gi, ux, rev, out):
        """The held-off voltage of a chain whose Shockley diode is reverse-saturated, shared by
        the exact laws (as the detailed engine's chain solve shares it): the chain current
        i = I_s·(e^s − 1) with the diode at a·s + R_s·i, the other elements at their exact
        reverse laws (a varistor far below its knee) or their zero-current edges; s by bisection
        on the monotone sum (Shockley, W. Shockley, Bell Syst. Tech. J. 28, 1949; varistor
        i = I_1·(v/V_1)^α, L. M. Levinson and H. R. Philipp, Am. Ceram. Soc. Bull. 65, 1986)."""
        k = np.nonzero(rev)[0]
        g = gi[k]
        a, i_s, rs = (x[g] for x in ch.diode)
        target = ux[k]
        fixed = sum((e[k] for j, e in zip(others, edges, strict=True) if ch.exact[j] is None), np.zeros(k.size))

        def total(s):
            i = i_s * np.expm1(s)
            return a * s + rs * i + fixed + sum(ch.exact[j](i, g) for j in others if ch.exact[j] is not None)

        lo = np.minimum((target - fixed) / a - 1.0, -1e-300)
        hi = np.zeros(k.size)
        with np.errstate(over="ignore", invalid="ignore"):
            for _ in range(200):
                mid = 0.5 * (lo + hi)
                above = total(mid) > target
                hi = np.where(above, mid, hi)
                lo = np.where(above, lo, mid)
                if np.all(hi - lo <= 1e-15 * np.abs(lo)):
                    break
            s = 0.5 * (lo + hi)
            i = i_s * np.expm1(s)
            for j in others:
                if ch.exact[j] is not None:
                    out[j][k] = ch.exact[j](i, g)
            rest = sum((out[j][k] for j in others), np.zeros(k.size))
        out[d][k] = target - rest  # the diode: what the others leave (the sum to the last bit)

    def _update(self, c, gi, cur, vel, keep):
        """Extremes at segment ends (the stand-off is not read there: see :meth:`rest_states`
        and :meth:`_update_at`)."""
        self.Imax[gi, c] = np.where(keep, np.maximum(self.Imax[gi, c], cur), self.Imax[gi, c])
        self.Imin[gi, c] = np.where(keep, np.minimum(self.Imin[gi, c], cur), self.Imin[gi, c])
        for j, vj in enumerate(vel):
            self.vabs[c][gi, j] = np.where(keep, np.maximum(self.vabs[c][gi, j], np.abs(vj)), self.vabs[c][gi, j])
            self.ppk[c][gi, j] = np.where(keep, np.maximum(self.ppk[c][gi, j], vj * cur), self.ppk[c][gi, j])

    def _clamp_of(self, c):
        bc = self.bc
        k = bc.chain_index[c] if c < len(bc.chains) else bc.lone[c - len(bc.chains)][0]
        return bc.case.clamps[k]

    def _hold(self, c, gi, vel, blocking, vmax=None, vmin=None):
        """Raise the stand-off of chain c's elements to their blocked voltages where ``blocking``
        (``gi`` may repeat a variant); with ``vmax``/``vmin`` (points that are maxima/minima of
        the node voltage) only where the element's blocked voltage is at a maximum there: a diode
        at a node minimum, a Zener or unidirectional TVS at a maximum, the others on the side of
        their voltage's sign."""
        cl = self._clamp_of(c)
        for j, vj in enumerate(vel):
            el = cl.elements[j]
            at = blocking
            if vmax is not None:
                if el.type == "diode":
                    at = at & vmin
                elif el.type == "zener" or (el.type == "tvs" and not el.bidirectional):
                    at = at & vmax
                else:
                    at = at & ((vmax & (vj >= 0)) | (vmin & (vj <= 0)))
            held = np.where(at, blocked_voltage(el.type, el.bidirectional, vj), 0.0)
            np.maximum.at(self.held[c], (gi, np.full(gi.shape, j)), held)

    def rest_states(self, gi, X_end):
        """Stand-off in the on-state before the turn-off and in the rest state after it
        (:mod:`kickback.standoff`): capacitors at their on-state voltages, then at their end
        charge with the node at Vs − R·i_end (a chain with a capacitor carries no DC current)."""
        if gi.size == 0:
            return
        bc = self.bc
        G = gi.size
        zero = np.zeros(G)
        v_rest = rest_node_voltage(bc.Vs[gi], bc.R[gi], X_end[:, 0], CONDUCTION_FRACTION * bc.i0[gi])
        for v, X, at_rest in ((bc.v_on[gi], bc.X0[gi], False), (v_rest, X_end, True)):
            for m, ch in enumerate(bc.chains):
                u = v - bc.ref[m] * bc.Vs[gi]
                diode = has_diode(self._clamp_of(m).elements)
                th = CONDUCTION_FRACTION * bc.i0[gi]
                if m in bc.icap:
                    vc = X[:, bc.icap[m]]
                    blocks = np.ones(G, bool) if at_rest else chain_blocks(bc.on_chain_currents[m][gi], th, diode)
                else:
                    vc = zero
                    cur = law_current(take_rows(ch.law, gi), u) if at_rest else bc.on_chain_currents[m][gi]
                    blocks = chain_blocks(cur, th, diode)
                self._hold(m, gi, self._element_voltages(m, gi, zero, u, vc), blocks)
            for q, (_k, _cs, ref) in enumerate(bc.lone):
                c = len(bc.chains) + q
                u = v - ref * bc.Vs[gi]
                self._hold(c, gi, [u] * self.nel[c], np.ones(G, bool))

    def _peak(self, gi, v, time, keep):
        up = keep & (v > self.vpk[gi])
        self.vpk[gi] = np.where(up, v, self.vpk[gi])
        self.tpk[gi] = np.where(up, time, self.tpk[gi])

    # -------------------------------------------------------------- records
    def on_state(self, gi):
        """The on-state at t = 0 (the detailed engine's first sample where the node is continuous)."""
        if gi.size == 0:
            return
        bc = self.bc
        keep = np.ones(gi.size, bool)
        v = bc.v_on[gi]
        self._peak(gi, v, np.zeros(gi.size), keep)
        for m, _ch in enumerate(bc.chains):
            cur = bc.on_chain_currents[m][gi]
            vc = bc.X0[gi, bc.icap[m]] if m in bc.icap else np.zeros(gi.size)
            u = v - bc.ref[m] * bc.Vs[gi]
            self._update(m, gi, cur, self._element_voltages(m, gi, cur, u, vc), keep)
        for q, (_k, _cs, ref) in enumerate(bc.lone):
            u = v - ref * bc.Vs[gi]
            self._update(len(bc.chains) + q, gi, np.zeros(gi.size), [u] * self.nel[len(bc.chains) + q], keep)

    def boundary(self, gi, forms, X, tau, t0, keep, dX, plateau=None, end=False):
        """Record a segment end at τ (arrays over the group ``gi``) with the mode's forms; ``dX`` is
        the state's derivative there (from the exact solution); ``plateau`` is the branch holding
        the node at a vertical law's voltage over this segment (−1: none); ``end``: the segment's
        end (else its start).

        A segment boundary where the node voltage turns (a kink of an algebraic node, e.g. the end
        of the fall) is a local extremum in time: a chain that blocks on both sides holds its
        voltage there (:mod:`kickback.standoff`). The end of a segment leaves the candidate; the
        start of the next one confirms it."""
        bc = self.bc
        G = gi.size
        xi = np.concatenate([X, np.ones((G, 1)), tau[:, None]], axis=1)
        v = np.einsum("gj,gj->g", forms.cv, xi)
        dxi = np.concatenate([dX, np.zeros((G, 1)), np.ones((G, 1))], axis=1)
        dv = np.einsum("gj,gj->g", forms.cv, dxi)
        self._peak(gi, v, t0 + tau, keep)
        for m, _ch in enumerate(bc.chains):
            cur = np.einsum("gj,gj->g", forms.cI[2 + m], xi)
            vc = X[:, bc.icap[m]] if m in bc.icap else np.zeros(G)
            u = v - bc.ref[m] * bc.Vs[gi]
            vel = self._element_voltages(m, gi, cur, u, vc, forms.info[2 + m]["st"])
            self._update(m, gi, cur, vel, keep)
            th = CONDUCTION_FRACTION * bc.i0[gi]
            blocks = self._blocks_at(m, gi, cur, th, forms.info[2 + m]["block"])
            if end:
                self.pend[m][gi] = np.stack(vel, axis=1)
                self.pend_dv[m][gi] = np.where(blocks, dv, np.nan)
            else:
                left = self.pend_dv[m][gi]
                both = np.isfinite(left) & blocks
                vmax, vmin = both & (left >= 0) & (dv <= 0), both & (left <= 0) & (dv >= 0)
                if np.any(vmax | vmin):
                    pend = self.pend[m][gi]
                    self._hold(m, gi, [pend[:, j] for j in range(pend.shape[1])], vmax | vmin, vmax, vmin)
                    self._hold(m, gi, vel, vmax | vmin, vmax, vmin)
                self.pend_dv[m][gi] = np.nan
            if plateau is not None and np.any((plateau >= 0) & (plateau != 2 + m)):
                # the node held flat by another branch's vertical law: a blocking chain holds that
                # voltage over an interval (a plateau is a local maximum in time); the chain that
                # holds the node itself is at its knee there, not blocking
                th = CONDUCTION_FRACTION * bc.i0[gi]
                flat = (plateau >= 0) & (plateau != 2 + m)
                self._hold(m, gi, vel, flat & self._blocks_at(m, gi, cur, th, forms.info[2 + m]["block"]))
        if bc.lone:
            for q, (_k, cs, ref) in enumerate(bc.lone):
                c = len(bc.chains) + q
                u = v - ref * bc.Vs[gi]
                self._update(c, gi, cs[gi] * dv, [u] * self.nel[c], keep)

    def points(self, gi, forms, seg, rc, rt, t0, vmax, node_extremum=None, node_max=None):
        """Record interior points: roots ``rt`` [s] of figure events of the group's variants ``rc``
        (indices into ``gi``; several per variant); ``vmax`` marks the roots of dv/dt at a maximum,
        whose time is the peak time even where rounding cannot tell the value from a nearby one;
        ``node_extremum`` marks the extrema of the node voltage (where a blocking chain's held
        voltages count for the stand-off), ``node_max`` those that are maxima."""
        bc = self.bc
        sub = seg.take(rc)
        X = sub.state(rt)
        dX = sub.deriv(rt)
        P = rc.size
        xi = np.concatenate([X, np.ones((P, 1)), rt[:, None]], axis=1)
        bi = gi[rc]
        v = np.einsum("pj,pj->p", forms.cv[rc], xi)
        # the first time of the largest node voltage among these points, per variant
        order = np.lexsort((rt, -v, rc))
        first = np.ones(P, bool)
        first[1:] = rc[order][1:] != rc[order][:-1]
        best = order[first]
        self._peak(bi[best], v[best], t0[rc[best]] + rt[best], np.ones(best.size, bool))
        tie = vmax & (v >= self.vpk[bi] - 4 * np.spacing(np.abs(self.vpk[bi])))
        if np.any(tie):
            b2 = bi[tie]
            self.vpk[b2] = np.maximum(self.vpk[b2], v[tie])
            self.tpk[b2] = t0[rc[tie]] + rt[tie]
        for m in range(len(bc.chains)):
            cur = np.einsum("pj,pj->p", forms.cI[2 + m][rc], xi)
            vc = X[:, bc.icap[m]] if m in bc.icap else np.zeros(P)
            u = v - bc.ref[m] * bc.Vs[bi]
            vel = self._element_voltages(m, bi, cur, u, vc, forms.info[2 + m]["st"][rc])
            ext = None if node_extremum is None else node_extremum & (
                forms.info[2 + m]["block"][rc] | (bc.chains[m].law.block is None))
            self._update_at(m, bi, cur, vel, ext, node_max)
        if bc.lone:
            dxi = np.concatenate([dX, np.zeros((P, 1)), np.ones((P, 1))], axis=1)
            dv = np.einsum("pj,pj->p", forms.cv[rc], dxi)
            for q, (_k, cs, ref) in enumerate(bc.lone):
                c = len(bc.chains) + q
                u = v - ref * bc.Vs[bi]
                self._update_at(c, bi, cs[bi] * dv, [u] * self.nel[c])

    def _update_at(self, c, bi, cur, vel, node_extremum=None, node_max=None):
        """Like :meth:`_update` for points that may repeat a variant (unbuffered reductions);
        ``node_extremum`` marks the points that are extrema of the node voltage: where the chain
        blocks there, its elements' held voltages are at a local maximum inside a blocking
        interval, which counts for the stand-off (:mod:`kickback.standoff`); a lone capacitor
        never blocks over an interval."""
        bc = self.bc
        col = np.full(bi.shape, c)
        np.maximum.at(self.Imax, (bi, col), cur)
        np.minimum.at(self.Imin, (bi, col), cur)
        for j, vj in enumerate(vel):
            cj = np.full(bi.shape, j)
            np.maximum.at(self.vabs[c], (bi, cj), np.abs(vj))
            np.maximum.at(self.ppk[c], (bi, cj), vj * cur)
        if node_extremum is not None and c < len(bc.chains):
            th = CONDUCTION_FRACTION * bc.i0[bi]
            blocking = node_extremum & self._blocks_at(c, bi, cur, th)
            self._hold(c, bi, vel, blocking, node_max, node_extremum & ~node_max)

    def _blocks_at(self, c, bi, cur, th, block_state=None):
        """Whether chain c does not conduct at these points: its current within the threshold
        (:func:`kickback.standoff.chain_blocks`) and its law off its conducting pieces — a law with
        a zero-current band in its block state, one without (a resistor's) at any state."""
        out = chain_blocks(cur, th, has_diode(self._clamp_of(c).elements))
        if block_state is not None and self.bc.chains[c].law.block is not None:
            out = out & block_state
        return out
