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

#: a chain counts as conducting above this fraction of the initial coil current (the same value as
#: kickback.figures.CONDUCTION_FRACTION; the engine layer does not import the figures layer)
CONDUCTION_FRACTION = 1e-6


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
        self.ppk = [np.zeros((n, ne)) for ne in self.nel]

    # --------------------------------------------------------------- values
    def _element_voltages(self, m, gi, cur, u, vc):
        """Voltages [V] of the elements of active chain m at current cur, chain voltage u, cap vc."""
        ch = self.bc.chains[m]
        law = ch.law
        out = []
        nonzero = cur != 0
        rest = np.where(nonzero, 0.0, u - vc)
        for el in ch.elements:
            if el is None:
                out.append(vc)
                continue
            v_on = np.full(cur.shape, np.nan)
            for s, kind in enumerate(law.kinds):
                if kind != "seg":
                    continue
                inside = np.isnan(v_on) & (law.Ilo[gi, s] <= cur) & (cur <= law.Ihi[gi, s])
                v_on = np.where(inside, el.V[gi, s] + el.r[gi, s] * cur, v_on)
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
        return out

    def _update(self, c, gi, cur, vel, keep):
        bc = self.bc
        th = CONDUCTION_FRACTION * bc.i0[gi]
        self.Imax[gi, c] = np.where(keep, np.maximum(self.Imax[gi, c], cur), self.Imax[gi, c])
        self.Imin[gi, c] = np.where(keep, np.minimum(self.Imin[gi, c], cur), self.Imin[gi, c])
        blocking = np.abs(cur) <= th
        k = bc.chain_index[c] if c < len(bc.chains) else bc.lone[c - len(bc.chains)][0]
        for j, vj in enumerate(vel):
            el = bc.case.clamps[k].elements[j]
            held = np.where(blocking, -vj if el.type == "diode" else np.abs(vj), 0.0)
            self.vabs[c][gi, j] = np.where(keep, np.maximum(self.vabs[c][gi, j], np.abs(vj)), self.vabs[c][gi, j])
            self.held[c][gi, j] = np.where(keep, np.maximum(self.held[c][gi, j], held), self.held[c][gi, j])
            self.ppk[c][gi, j] = np.where(keep, np.maximum(self.ppk[c][gi, j], vj * cur), self.ppk[c][gi, j])

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

    def boundary(self, gi, forms, X, tau, t0, keep, dX):
        """Record a segment end at τ (arrays over the group ``gi``) with the mode's forms; ``dX`` is
        the state's derivative there (from the exact solution)."""
        bc = self.bc
        G = gi.size
        xi = np.concatenate([X, np.ones((G, 1)), tau[:, None]], axis=1)
        v = np.einsum("gj,gj->g", forms.cv, xi)
        self._peak(gi, v, t0 + tau, keep)
        for m, _ch in enumerate(bc.chains):
            cur = np.einsum("gj,gj->g", forms.cI[2 + m], xi)
            vc = X[:, bc.icap[m]] if m in bc.icap else np.zeros(G)
            u = v - bc.ref[m] * bc.Vs[gi]
            self._update(m, gi, cur, self._element_voltages(m, gi, cur, u, vc), keep)
        if bc.lone:
            dxi = np.concatenate([dX, np.zeros((G, 1)), np.ones((G, 1))], axis=1)
            dv = np.einsum("gj,gj->g", forms.cv, dxi)
            for q, (_k, cs, ref) in enumerate(bc.lone):
                c = len(bc.chains) + q
                u = v - ref * bc.Vs[gi]
                self._update(c, gi, cs[gi] * dv, [u] * self.nel[c], keep)

    def points(self, gi, forms, seg, rc, rt, t0, vmax, edge=None):
        """Record interior points: roots ``rt`` [s] of figure events of the group's variants ``rc``
        (indices into ``gi``; several per variant); ``vmax`` marks the roots of dv/dt at a maximum,
        whose time is the peak time even where rounding cannot tell the value from a nearby one;
        ``edge`` the chain whose current is at its conduction threshold there (−1: none), which
        counts as blocking at that point whatever the rounding of its current."""
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
            self._update_at(m, bi, cur, self._element_voltages(m, bi, cur, u, vc), None if edge is None else edge == m)
        if bc.lone:
            dxi = np.concatenate([dX, np.zeros((P, 1)), np.ones((P, 1))], axis=1)
            dv = np.einsum("pj,pj->p", forms.cv[rc], dxi)
            for q, (_k, cs, ref) in enumerate(bc.lone):
                c = len(bc.chains) + q
                u = v - ref * bc.Vs[bi]
                self._update_at(c, bi, cs[bi] * dv, [u] * self.nel[c], None if edge is None else edge == c)

    def _update_at(self, c, bi, cur, vel, at_edge=None):
        """Like :meth:`_update` for points that may repeat a variant (unbuffered reductions);
        ``at_edge`` marks points where the chain's current is at its conduction threshold."""
        bc = self.bc
        th = CONDUCTION_FRACTION * bc.i0[bi]
        col = np.full(bi.shape, c)
        np.maximum.at(self.Imax, (bi, col), cur)
        np.minimum.at(self.Imin, (bi, col), cur)
        blocking = np.abs(cur) <= th
        if at_edge is not None:
            blocking |= at_edge
        k = bc.chain_index[c] if c < len(bc.chains) else bc.lone[c - len(bc.chains)][0]
        for j, vj in enumerate(vel):
            el = bc.case.clamps[k].elements[j]
            held = np.where(blocking, -vj if el.type == "diode" else np.abs(vj), 0.0)
            cj = np.full(bi.shape, j)
            np.maximum.at(self.vabs[c], (bi, cj), np.abs(vj))
            np.maximum.at(self.held[c], (bi, cj), held)
            np.maximum.at(self.ppk[c], (bi, cj), vj * cur)
