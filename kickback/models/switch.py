"""The low-side switch: on-state law, linear current fall, avalanche and body diode."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kickback.models.base import LinearPieces

#: MOSFET body-diode drop when the case gives none (common practice, no source).
DEFAULT_BODY_DIODE_DROP = 0.7


@dataclass(frozen=True)
class SwitchLaw:
    """Device laws of the switch between ``sw`` and ground.

    Parameters
    ----------
    on_state : LinearPieces — on-state law (ideal: 0 V; BJT: V_CE(sat); MOSFET: R_DS(on))
    fall_time : float — [s] linear fall of the channel current (0: instant)
    off_state : LinearPieces — avalanche above V_BR (slope r_av) and, for a MOSFET, the body
        diode below −V_bd
    description : str
    """

    on_state: LinearPieces
    fall_time: float
    off_state: LinearPieces
    description: str

    def current_limit(self, t, i_on: float):
        """Channel current ceiling during turn-off.

        Parameters
        ----------
        t : float or array — [s] time since the turn-off command
        i_on : float — [A] channel current just before turn-off

        Returns
        -------
        float or array — [A]

        .. math:: I_{lim}(t) = I_{on}\\,\\max(0, 1 - t/t_f)

        References
        ----------
        N. Mohan, T. M. Undeland and W. P. Robbins, Power Electronics, 3rd ed., Wiley 2003,
        ch. 2 (linearised switching waveforms).
        """
        if self.fall_time <= 0:
            return np.zeros_like(np.asarray(t, dtype=float))
        return i_on * np.clip(1.0 - np.asarray(t, dtype=float) / self.fall_time, 0.0, 1.0)

    def channel_current(self, v, t, i_on: float, r_min: float = 0.0):
        """Channel current [A] at node voltage ``v`` [V] and time ``t`` [s] after turn-off: the
        on-state law under the falling ceiling, and none once the fall has ended (the channel is
        off; a negative node voltage then finds the body diode, not the channel)."""
        i = np.minimum(self.on_state.current(v, r_min), self.current_limit(t, i_on))
        return np.where(np.asarray(t, dtype=float) < self.fall_time, i, 0.0)


def switch_law(kind: str, *, on_resistance: float = 0.0, saturation_voltage: float = 0.0,
               fall_time: float = 0.0, breakdown_voltage: float | None = None,
               avalanche_resistance: float = 0.0, body_diode_voltage: float | None = None) -> SwitchLaw:
    """Build the switch laws for ``kind`` in ``ideal | bjt | mosfet`` (values in SI)."""
    v_br = math.inf if breakdown_voltage is None else breakdown_voltage
    if kind == "mosfet":
        on = LinearPieces(0.0, on_resistance, 0.0, on_resistance)
        vbd = DEFAULT_BODY_DIODE_DROP if body_diode_voltage is None else body_diode_voltage
        off = LinearPieces(v_br, avalanche_resistance, -vbd, on_resistance)
        desc = f"MOSFET (R_on = {on_resistance:.3g} Ω, body diode {vbd:.2g} V + R_on)"
    elif kind == "bjt":
        on = LinearPieces(saturation_voltage, 0.0, -math.inf, 0.0)
        off = LinearPieces(v_br, avalanche_resistance, -math.inf, 0.0)
        desc = f"BJT (V_sat = {saturation_voltage:.3g} V)"
    elif kind == "ideal":
        on = LinearPieces(0.0, 0.0, 0.0, 0.0)
        off = LinearPieces(v_br, avalanche_resistance, -math.inf, 0.0)
        desc = "ideal switch (0 V on)"
    else:
        raise ValueError(f"unknown switch type {kind!r}")
    if fall_time > 0:
        desc += f", current falls linearly over {fall_time:.3g} s"
    else:
        desc += ", instant turn-off"
    if math.isfinite(v_br):
        desc += f", avalanche at {v_br:.4g} V + {avalanche_resistance:.3g} Ω·i"
    return SwitchLaw(on, fall_time, off, desc)
