"""The DC on-state before turn-off: the coil current and the switch-node voltage at which the
coil, the switch's on-state law and every resistive clamp chain balance (used by
:class:`kickback.circuit.Circuit` and the final turn-off after a ``[drive]``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from kickback.case import Case
from kickback.chain import Chain
from kickback.errors import CaseError
from kickback.nodebalance import solve_monotone


@dataclass(frozen=True)
class OnState:
    """DC on-state before turn-off.

    Parameters
    ----------
    coil_current : float — [A]
    node_voltage : float — [V] switch-node voltage
    switch_current : float — [A] channel current
    chain_currents : tuple of float — [A] each clamp chain's current (from sw to its far end)
    chain_voltages : tuple of float — [V] each chain's voltage (sw minus its far end)
    """

    coil_current: float
    node_voltage: float
    switch_current: float
    chain_currents: tuple[float, ...]
    chain_voltages: tuple[float, ...]


def solve_on_state(case: Case, on_law, chains: list[Chain]) -> OnState:
    """Solve the DC on-state before turn-off: the coil, the switch's on-state law and every
    resistive chain in balance at the switch node (capacitors carry no DC current).

    Parameters
    ----------
    case : Case
        The case (supply, coil, motor, and its source for messages).
    on_law : PiecewiseLinearLaw
        The switch's on-state law, current for the node voltage [V → A].
    chains : list of Chain
        The clamp chains, in the case's order.

    Returns
    -------
    OnState
        Coil, switch and chain currents [A] and voltages [V].

    Raises
    ------
    CaseError
        No finite on-state: ideal laws hold the node at different voltages, or a coil with no
        resistance meets a switch law that takes any current at the supply.
    """
    vs, r = case.supply.voltage, case.coil.resistance
    given = case.coil.initial_current
    on = on_law

    def branches(v):
        out = [float(on.current(v))]
        out += [0.0 if ch.capacitance is not None else float(ch.current(v - vs * ch.reference))
                for ch in chains]
        return out

    m = case.motor

    def coil(v):
        if given is not None:
            return given
        if m is None:
            return (vs - v) / r
        if not m.mechanical:
            return (vs - v - m.back_emf_constant * m.speed) / r
        k, b, tl = m.back_emf_constant, m.viscous_friction, m.load_torque
        if b == 0:
            return tl / k  # no friction: the speed settles where the torque meets the load
        # k·i = B·ω + T_L and V − v = R·i + k·ω (DC machine in steady state)
        return (vs - v + k * tl / b) / (r + k * k / b)

    def resid(v):
        return sum(branches(v)) - coil(v)

    # a coil with no resistance (and no back-EMF drop that depends on its current) holds the
    # node at the supply less the back-EMF: the coil is then the vertical law, and the switch
    # and clamps set its current (a MOSFET's R_on limits it)
    pinned_coil = given is None and r == 0 and (m is None or not m.mechanical)
    if pinned_coil:
        v = vs - (m.back_emf_constant * m.speed if m is not None else 0.0)
        cur = branches(v)
        i_coil = sum(cur)
        if not math.isfinite(i_coil):
            raise CaseError("with zero coil resistance the on-state current is unbounded: the switch's "
                            "on-state law takes any current at the supply voltage (expected "
                            "coil.resistance > 0, coil.initial_current, or a MOSFET with "
                            "switch.on_resistance > 0)", source=case.source, key="coil.resistance")
        chain_v = tuple(v - vs * ch.reference for ch in chains)
        return OnState(i_coil, v, cur[0], tuple(cur[1:]), chain_v)
    thresholds = [on.v_fwd] + ([on.v_rev] if math.isfinite(on.v_rev) else [])
    for ch in chains:
        thresholds += [t + vs * ch.reference for t in ch.thresholds()] if ch.capacitance is None else []
    v = solve_monotone(resid, thresholds, vs)
    cur = branches(v)
    i_coil = coil(v)
    # a vertical on-state law takes what the others leave
    vertical_switch = on.r_fwd == 0 and abs(v - on.v_fwd) < 1e-12 * max(1, abs(v))
    i_sw = i_coil - sum(cur[1:]) if vertical_switch else cur[0]
    bad = [k for k, x in enumerate(cur) if not math.isfinite(x) and not (k == 0 and vertical_switch)]
    if bad or not math.isfinite(i_sw):
        # the clamps in the conflict: those with no finite current, and those held at their
        # own vertical voltage against the switch
        bad += [k + 1 for k, ch in enumerate(chains) if ch.capacitance is None and k + 1 not in bad
                and any(abs(v - x - vs * ch.reference) < 1e-9 * max(1.0, abs(v)) for x in ch.thresholds())]
        names = [chains[k - 1].name for k in bad if k > 0]
        what = f"clamp {', '.join(names)}" if names else "the switch"
        raise CaseError(f"no DC on-state: {what} would carry an unbounded current while the switch is on "
                        "(two ideal laws hold the switch node at different voltages; expected a series "
                        "resistance in the clamp, or a clamp that blocks the supply voltage)",
                        source=case.source, key=(chains[bad[-1] - 1].clamp.path or "clamp")
                        if names else "switch")
    chain_v = tuple(v - vs * ch.reference for ch in chains)
    return OnState(i_coil, v, i_sw, tuple(cur[1:]), chain_v)
