"""The coil's first state and the motor's speed, for :class:`kickback.circuit.Circuit`.

The first state is the coil current, or its flux linkage λ for a saturating coil
(λ(i) = L0·i/(1 + |i|/I_sat), :mod:`kickback.models.coil`); a DC motor adds its back-EMF k·ω in
series with the coil.
"""

from __future__ import annotations

import math

import numpy as np

#: the exponents of the stored energy's power series above 2 (models.coil._log_series)
_POWERS = np.arange(11.0, 2.0, -1.0)


class CoilStates:
    """Mixin of :class:`kickback.circuit.Circuit`: the coil in current or flux, the motor speed.

    Reads the circuit's ``L``, ``R``, ``Vs``, ``i_sat``, ``flux``, ``motor``, ``mech``, ``iw``,
    ``k_emf``, ``on`` and ``i0``.
    """

    def coil_current(self, x0):
        """Coil current [A] from the first state (the current itself, or the flux linkage)."""
        if not self.flux:
            return x0
        if np.ndim(x0) == 0:
            return self._coil_current_scalar(float(x0))
        from kickback.models.coil import current_from_flux, incremental_inductance

        # the law ends at |λ| = L0·I_sat; trial states of an implicit step may go past it, so
        # continue it linearly there (no physical state comes near)
        lam_max = 0.999 * self.L * self.i_sat
        x = np.asarray(x0, dtype=float)
        xc = np.clip(x, -lam_max, lam_max)
        ic = current_from_flux(xc, self.L, self.i_sat)
        out = np.where(x == xc, ic, ic + (x - xc) / incremental_inductance(ic, self.L, self.i_sat))
        return float(out) if np.ndim(out) == 0 else out

    def _coil_current_scalar(self, x: float) -> float:
        """:meth:`coil_current` of one flux linkage [Wb], in plain float arithmetic: the same
        operations in the same order as the array path (``models.coil.current_from_flux`` and
        ``incremental_inductance``), so the same bits, without numpy's per-call cost on a scalar
        (the state equations call it at every evaluation: 20 of 28 µs of one ``rhs``)."""
        if math.isnan(x):
            return math.nan
        L, i_sat = self.L, self.i_sat
        lam_max = 0.999 * L * i_sat
        xc = min(max(x, -lam_max), lam_max)  # np.clip
        den = L * i_sat - abs(xc)
        ic = xc * i_sat / den if den > 0 else math.copysign(math.inf, xc)
        if x == xc:
            return ic
        return ic + (x - xc) / (L / (1.0 + abs(ic) / i_sat) ** 2)

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
        if np.ndim(i) == 0:
            return self._coil_energy_scalar(float(i))
        from kickback.models.coil import stored_energy

        return float(stored_energy(i, self.L, self.i_sat))

    def _coil_energy_scalar(self, i: float) -> float:
        """:meth:`coil_energy` of one current [A] in plain float arithmetic: the operations of
        ``models.coil.stored_energy`` (and its ``_log_series``) in the same order, so the same
        bits, at a twentieth of numpy's cost on a scalar (the ring's end event reads it at every
        step)."""
        from kickback.models.coil import _SERIES_LIMIT

        x = abs(i) / self.i_sat
        if x < _SERIES_LIMIT:
            # numpy's power loop for x³…x¹¹ (Python's pow() differs in the last bit), its
            # squaring by multiplication for x²
            powers = [*(x ** _POWERS).tolist(), x * x]
            series = 0.0
            for k, xk in zip(range(11, 1, -1), powers, strict=True):
                series += (-1) ** k * (k - 1) / k * xk
            bracket = series
        else:
            bracket = float(np.log1p(x)) - x / (1.0 + x)
        return self.L * self.i_sat * self.i_sat * bracket

    def state_gain(self, i: float) -> tuple[float, float]:
        """(di/dx0, dx0/dt per volt across the coil): (1, 1/L) linear; (1/L_inc, 1) in flux."""
        if not self.flux:
            return 1.0, 1.0 / self.L
        # past the law's end (|λ| > 0.999·L0·I_sat, trial states only) :meth:`coil_current` is
        # continued linearly with the slope at the end: di/dλ is that slope there, not the one
        # at the continued current (90× too large once, wide-range case 197)
        i_end = self._end_current()
        if np.ndim(i) == 0:
            # models.coil.incremental_inductance in plain floats (numpy squares a scalar by pow(),
            # as Python does): the same bits
            return 1.0 / (self.L / (1.0 + min(abs(float(i)), i_end) / self.i_sat) ** 2), 1.0
        from kickback.models.coil import incremental_inductance

        i = np.clip(i, -i_end, i_end)
        return 1.0 / float(incremental_inductance(i, self.L, self.i_sat)), 1.0

    def _end_current(self) -> float:
        """[A] the coil current at the end of the flux law's range, |λ| = 0.999·L0·I_sat (the
        scalar path of :meth:`coil_current` at the clip)."""
        lam_max = 0.999 * self.L * self.i_sat
        return lam_max * self.i_sat / (self.L * self.i_sat - lam_max)

    def speed_of(self, y) -> float:
        """Motor speed [rad/s] in state ``y`` (the fixed speed, or the state)."""
        if self.motor is None:
            return 0.0
        return float(y[self.iw]) if self.mech else self.motor.speed

    def ring_rest(self, y, v_fin):
        """Node voltage [V] a ring settles to from state ``y`` (one state, or states as columns).

        ``v_fin`` [V], the rest at the on-state speed; with a mechanical motor the rest follows
        its present speed ω instead (V_s − k·ω: the node's voltage once no current flows), so a
        motor braked or slowing down is no ring (wide-range case 982 ran to its time bound at rest).
        """
        return self.Vs - self.k_emf * y[self.iw] if self.mech else v_fin

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
