"""Junction temperature: Foster thermal networks and pulse-rating rescaling.

A Foster network is a sum of first-order stages, each a thermal resistance R_k [K/W] with a
time constant τ_k [s]; its step response is the transient thermal impedance

.. math:: Z_{th}(t) = \\sum_k R_k (1 - e^{-t/\\tau_k})

References
----------
JEDEC JESD51-14, Transient dual interface test method for the measurement of the thermal
resistance junction-to-case (Foster and Cauer network representations); D. C. Wunsch and
R. R. Bell, "Determination of threshold failure levels of semiconductor diodes and transistors
due to pulse voltages", IEEE Trans. Nucl. Sci. NS-15(6), 1968 (P ∝ t^(−1/2)).
"""

from __future__ import annotations

import numpy as np


def foster_impedance(t, r, tau):
    """Transient thermal impedance Z_th(t) [K/W] of a Foster network.

    Parameters
    ----------
    t : float or array — [s]
    r : sequence of float — [K/W] stage resistances
    tau : sequence of float — [s] stage time constants
    """
    t = np.asarray(t, dtype=float)[..., None]
    return np.sum(np.asarray(r) * -np.expm1(-t / np.asarray(tau)), axis=-1)


def foster_response(t, p, r, tau) -> np.ndarray:
    """Temperature rise [K] of a Foster network driven by the power p(t) [W], exact for p linear
    between the samples.

    Each stage obeys τ·dT/dt = R·p − T; over a step of length h with p = p_n + m·s,

    .. math:: T_{n+1} = a T_n + R\\,[p_n (1 - a) + m (h - \\tau (1 - a))], \\quad a = e^{-h/\\tau}
    """
    t = np.asarray(t, dtype=float)
    p = np.asarray(p, dtype=float)
    out = np.zeros_like(t)
    for rk, tk in zip(r, tau, strict=True):
        h = np.diff(t)
        a = np.exp(-h / tk)
        one_minus_a = -np.expm1(-h / tk)
        m = np.diff(p) / np.where(h > 0, h, 1.0)
        inc = rk * (p[:-1] * one_minus_a + m * (h - tk * one_minus_a))
        temp = np.empty_like(t)
        temp[0] = 0.0
        for n in range(h.size):
            temp[n + 1] = a[n] * temp[n] + inc[n]
        out += temp
    return out


def rectangular_equivalent(t, p) -> tuple[float, float]:
    """Equivalent rectangular pulse of a power waveform: (peak power [W], width [s] = energy/peak)."""
    p = np.asarray(p, dtype=float)
    peak = float(np.max(p, initial=0.0))
    if peak <= 0:
        return 0.0, 0.0
    energy = float(np.trapezoid(np.clip(p, 0.0, None), t))
    return peak, energy / peak


def wunsch_bell_rating(rated_power: float, rated_width: float, width: float) -> float:
    """A peak pulse power rating moved to another rectangular pulse width [W], P ∝ t^(−1/2)
    (Wunsch and Bell 1968; an approximation for adiabatic heating of a junction)."""
    return rated_power * np.sqrt(rated_width / width)


def foster_periodic(t, p, r, tau) -> np.ndarray:
    """Periodic steady-state temperature rise [K] over one period ``t[0] … t[-1]`` for a power
    waveform repeated every period, exact for a Foster network (p linear between samples).

    Each stage's start value satisfies ``T0 = a·T0 + T_1(T)`` with ``a = e^{-T/τ}`` and
    ``T_1`` the response from zero, so ``T0 = T_1(T)/(1 − a)``.
    """
    t = np.asarray(t, dtype=float)
    period = t[-1] - t[0]
    out = np.zeros_like(t)
    for rk, tk in zip(r, tau, strict=True):
        first = foster_response(t, p, (rk,), (tk,))
        t0 = first[-1] / -np.expm1(-period / tk)
        out += first + t0 * np.exp(-(t - t[0]) / tk)
    return out
