"""The coil's first state and the motor's speed, for :class:`kickback.circuit.Circuit`.

The first state is the coil current, or its flux linkage λ for a saturating coil
(λ(i) = L0·i/(1 + |i|/I_sat), :mod:`kickback.models.coil`); a DC motor adds its back-EMF k·ω in
series with the coil.
"""

from __future__ import annotations

import numpy as np


class CoilStates:
    """Mixin of :class:`kickback.circuit.Circuit`: the coil in current or flux, the motor speed.

    Reads the circuit's ``L``, ``R``, ``Vs``, ``i_sat``, ``flux``, ``motor``, ``mech``, ``iw``,
    ``on`` and ``i0``.
    """

    def coil_current(self, x0):
        """Coil current [A] from the first state (the current itself, or the flux linkage)."""
        if not self.flux:
            return x0
        from kickback.models.coil import current_from_flux, incremental_inductance

        # the law ends at |λ| = L0·I_sat; trial states of an implicit step may go past it, so
        # continue it linearly there (no physical state comes near)
        lam_max = 0.999 * self.L * self.i_sat
        x = np.asarray(x0, dtype=float)
        xc = np.clip(x, -lam_max, lam_max)
        ic = current_from_flux(xc, self.L, self.i_sat)
        out = np.where(x == xc, ic, ic + (x - xc) / incremental_inductance(ic, self.L, self.i_sat))
        return float(out) if np.ndim(out) == 0 else out

    def coil_state(self, i):
        """The first state for a coil current [A]."""
        if not self.flux:
            return i
        from kickback.models.coil import flux_linkage

        return float(flux_linkage(i, self.L, self.i_sat))

    def coil_energy(self, i):
        """Energy stored in the coil [J] at current ``i`` [A]: ½·L·i², or ∫ i dλ when saturating."""
        if not self.flux:
            return 0.5 * self.L * i * i
        from kickback.models.coil import stored_energy

        return float(stored_energy(i, self.L, self.i_sat))

    def state_gain(self, i: float) -> tuple[float, float]:
        """(di/dx0, dx0/dt per volt across the coil): (1, 1/L) linear; (1/L_inc, 1) in flux."""
        if not self.flux:
            return 1.0, 1.0 / self.L
        from kickback.models.coil import incremental_inductance

        return 1.0 / float(incremental_inductance(i, self.L, self.i_sat)), 1.0

    def speed_of(self, y) -> float:
        """Motor speed [rad/s] in state ``y`` (the fixed speed, or the state)."""
        if self.motor is None:
            return 0.0
        return float(y[self.iw]) if self.mech else self.motor.speed

    def on_speed(self) -> float:
        """Motor speed [rad/s] in the on-state."""
        m = self.motor
        if m is None:
            return 0.0
        if not m.mechanical:
            return m.speed
        if m.viscous_friction == 0:
            return (self.Vs - self.on.node_voltage - self.R * self.i0) / m.back_emf_constant
        return (m.back_emf_constant * self.i0 - m.load_torque) / m.viscous_friction
