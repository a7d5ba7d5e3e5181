"""The closed-form ring's Shockley diodes: a diode far enough in reverse is flat (it carries
−I_s), so the ring stays affine; a capacitor behind it is *held* and drains at that constant
current (a ramp). Used by :mod:`kickback.engine.linring`.

References
----------
A. S. Sedra and K. C. Smith, Microelectronic Circuits, ch. 4 (the diode's exponential law and
its saturation current).
"""

from __future__ import annotations

import math

#: a curved law (a reverse-biased Shockley diode) may depart from its tangent by at most this
#: fraction of the start current over the whole ring
CURVED_TOL = 1e-12


def held_states(c, curved, t, y) -> list[int]:
    """Capacitor states held behind a Shockley diode that blocks at ``(t, y)``: the chain's
    conductance times the voltage scale is below :data:`CURVED_TOL` of the start current (the
    departure over the ring is verified afterwards)."""
    out = []
    for k in curved:
        icap = c.icap.get(k)
        if icap is None:
            continue
        ch = c.chains[k]
        u = c.node_voltage(t, y) - c.Vs * ch.reference - float(y[icap])
        if ch.conductance_at(u) * c.v_scale <= CURVED_TOL * abs(c.i0):
            out.append(icap)
    return out


def curved_retry(c, curved):
    """[s] how long to step before trying again when the model failed with a Shockley diode
    still conducting at the ring's start (its conductance damps the linearisation and hides the
    ring): twenty periods of the coil with the node capacitance; None (no second try) without
    curved laws or without node capacitance."""
    if not curved or not c.capacitive or not c.C_node > 0:
        return None
    return 20 * 2 * math.pi * math.sqrt(c.L * c.C_node)


def shockley(ch) -> bool:
    """The chain's one curved law is a Shockley diode, the others piecewise linear with no
    blocking band in reverse (a resistor, a capacitor; or reverse blocked throughout): its
    current is then a convex function of the chain voltage, which :func:`curved_departure`
    needs."""
    from kickback.models.diode import ShockleyDiode

    if ch._smooth is None or not isinstance(ch._smooth[0], ShockleyDiode):
        return False
    rest = ch._smooth[1]
    return rest.v_rev == rest.v_fwd or rest.v_rev == -math.inf


def curved_departure(c, k, t0, y0, u_inf, bound) -> float:
    """Largest departure [A] of chain ``k``'s current from its tangent at the state ``y0`` over the
    chain voltages ``u_inf ± bound`` [V], widened to take in the tangent point. The law is convex
    (:func:`shockley`): its departure from a tangent is largest at an end of the interval."""
    ch = c.chains[k]
    v_cap = float(y0[c.icap[k]]) if k in c.icap else 0.0
    u0 = c.node_voltage(t0, y0) - c.Vs * ch.reference - v_cap
    i0, g0 = ch.current_at(u0), ch.conductance_at(u0)
    lo, hi = min(u_inf - bound, u0), max(u_inf + bound, u0)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return math.inf
    return max(abs(ch.current_at(u) - i0 - g0 * (u - u0)) for u in (lo, hi))


def monotone_departure(c, k, t0, y0, u_inf, bound) -> float:
    """Bound [A] on the departure of chain ``k``'s current from its tangent at the state ``y0``
    over the chain voltages ``u_inf ± bound`` [V] (widened to take in the tangent point), for a
    curved chain with no capacitor that is not a lone Shockley diode (a varistor, a diode in
    series with a varistor): its law i(u) is only known to be non-decreasing (a passive chain),
    so on [lo, hi] i(lo) ≤ i(u) ≤ i(hi) and

        |i(u) − i(u₀) − g₀·(u − u₀)| ≤ max(i(hi) − i(u₀), i(u₀) − i(lo)) + g₀·max(hi − u₀, u₀ − lo).

    Far below its knee a varistor's current over a whole ring is ~1e-11 A, which this keeps
    below :data:`CURVED_TOL` of the start current."""
    ch = c.chains[k]
    u0 = c.node_voltage(t0, y0) - c.Vs * ch.reference
    i0, g0 = ch.current_at(u0), ch.conductance_at(u0)
    lo, hi = min(u_inf - bound, u0), max(u_inf + bound, u0)
    if not (math.isfinite(lo) and math.isfinite(hi) and math.isfinite(g0)):
        return math.inf
    i_lo, i_hi = ch.current_at(lo), ch.current_at(hi)
    d = max(i_hi - i0, i0 - i_lo) + abs(g0) * max(hi - u0, u0 - lo)
    return d if math.isfinite(d) else math.inf
