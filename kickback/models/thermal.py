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


def foster_stages(t, p, r, tau, start=None) -> np.ndarray:
    """Temperature rise [K] of each stage of a Foster network driven by the power p(t) [W], exact
    for p linear between the samples.

    Parameters
    ----------
    t : array
        Sample times [s], non-decreasing (a repeated time is a step of zero length).
    p : array
        Power [W] at the samples.
    r : sequence of float
        Stage resistances [K/W].
    tau : sequence of float
        Stage time constants [s].
    start : sequence of float, optional
        Each stage's rise at ``t[0]`` [K] (default 0: the network starts at ambient).

    Returns
    -------
    ndarray
        Shape (stages, samples) [K].

    Each stage obeys τ·dT/dt = R·p − T; over a step of length h with p = p_n + m·s,

    .. math:: T_{n+1} = a T_n + R\\,[p_n (1 - a) + m (h - \\tau (1 - a))], \\quad a = e^{-h/\\tau}
    """
    t = np.asarray(t, dtype=float)
    p = np.asarray(p, dtype=float)
    start = np.zeros(len(r)) if start is None else np.asarray(start, dtype=float)
    out = np.zeros((len(r), t.size))
    h = np.diff(t)
    m = np.diff(p) / np.where(h > 0, h, 1.0)
    for k, (rk, tk) in enumerate(zip(r, tau, strict=True)):
        a = np.exp(-h / tk)
        one_minus_a = -np.expm1(-h / tk)
        inc = rk * (p[:-1] * one_minus_a + m * (h - tk * one_minus_a))
        temp = out[k]
        temp[0] = start[k]
        for n in range(h.size):
            temp[n + 1] = a[n] * temp[n] + inc[n]
    return out


def foster_response(t, p, r, tau, start=None) -> np.ndarray:
    """Temperature rise [K] of a Foster network driven by the power p(t) [W], exact for p linear
    between the samples: the sum of :func:`foster_stages` (``start``: each stage's rise at
    ``t[0]``, default 0)."""
    return foster_stages(t, p, r, tau, start).sum(axis=0)


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


def foster_periodic_stages(t, p, r, tau) -> np.ndarray:
    """Each stage's periodic steady-state rise [K] over one period ``t[0] … t[-1]`` for a power
    waveform repeated every period, exact for a Foster network (p linear between samples);
    shape (stages, samples).

    Each stage's start value satisfies ``T0 = a·T0 + T_1(T)`` with ``a = e^{-T/τ}`` and
    ``T_1`` the response from zero — the sum of the geometric series of every earlier period's
    contribution — so ``T0 = T_1(T)/(1 − a)``.
    """
    t = np.asarray(t, dtype=float)
    period = t[-1] - t[0]
    first = foster_stages(t, p, r, tau)
    tau = np.asarray(tau, dtype=float)[:, None]
    t0 = first[:, -1:] / -np.expm1(-period / tau)
    return first + t0 * np.exp(-(t - t[0])[None, :] / tau)


def foster_periodic(t, p, r, tau) -> np.ndarray:
    """Periodic steady-state temperature rise [K] over one period ``t[0] … t[-1]`` for a power
    waveform repeated every period, exact for a Foster network (the sum of
    :func:`foster_periodic_stages`)."""
    return foster_periodic_stages(t, p, r, tau).sum(axis=0)


def foster_peak(t, p, r, tau, start=None) -> float:
    """Largest temperature rise [K] of a Foster network driven by p(t) [W] (p linear between the
    samples), found between the samples too: in every step where the rise turns from growing to
    falling, the exact in-step solution of :func:`foster_stages` is maximised.

    Parameters
    ----------
    t, p, r, tau, start
        As for :func:`foster_stages`.

    Returns
    -------
    float
        The largest rise [K] (0 for an empty record).
    """
    from scipy.optimize import minimize_scalar

    t = np.asarray(t, dtype=float)
    p = np.asarray(p, dtype=float)
    if t.size == 0:
        return 0.0
    st = foster_stages(t, p, r, tau, start)
    total = st.sum(axis=0)
    best = float(total.max(initial=0.0))
    r_arr = np.asarray(r, dtype=float)[:, None]
    tau_arr = np.asarray(tau, dtype=float)[:, None]
    slope = np.sum((r_arr * p[None, :] - st) / tau_arr, axis=0)  # dT/dt at each sample, from the right law
    h = np.diff(t)
    turn = np.flatnonzero((slope[:-1] > 0) & (slope[1:] < 0) & (h > 0))
    for n in turn:
        m = (p[n + 1] - p[n]) / h[n]

        def neg(s, n=n, m=m):
            a = np.exp(-s / tau_arr[:, 0])
            return -float(np.sum(a * st[:, n] + r_arr[:, 0] * (p[n] * (1 - a) + m * (s - tau_arr[:, 0] * (1 - a)))))

        res = minimize_scalar(neg, bounds=(0.0, float(h[n])), method="bounded",
                              options={"xatol": 1e-12 * max(float(h[n]), 1e-300)})
        best = max(best, -float(res.fun))
    return best
