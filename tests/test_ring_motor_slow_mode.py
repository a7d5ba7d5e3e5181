"""A motor's node ring beside a reverse-saturated diode + Zener chain, in closed form (issue 14).

A DC motor near its no-load speed rings its switch node about V_s − k·ω for hundreds of periods
after the coil current's first zero. In the ring's linear model the motor's speed is a real mode
that decays over its mechanical time constant (here 100 s, against a ring of 30 ms). The closed
form (kickback.engine.linring) refused such rings twice over (wide-range cases 4684, 5700, 5995,
8614, motors with a diode + varistor or diode + Zener across the winding, 9–10 s stepped):

- a curved chain's voltage was bounded by ±Σ|modes| about the model's equilibrium x_∞, which the
  slow speed mode (k·ω ≈ V_s) widened into the chain's forward knee; a real mode moves only from
  where it is towards x_∞, as the piecewise-linear branches were already bounded;
- the model was probed (and the energy rates expanded) at x_∞ itself — the motor at rest, the
  chain at 0 V inside its blocking band — which the ring never reaches within its horizon, where
  the chain carries −I_s.

Here the ring starts on the chain's forward knee, is stepped until its upper swing clears the
chain's knee at −V_F (the Zener's forward drop), and is then taken in closed form to its end.

Reference: the node equations written out here (DESIGN §3 with the motor of DESIGN §4),
    L di/dt = V_s − v − R·i − k·ω,   C dv/dt = i − i_ch(t) − i_DZ(v − V_s),   J dω/dt = k·i − b·ω,
the channel's current falling linearly over t_f; the chain a Shockley diode (n, I_s) in series with
a Zener (breakdown V_Z + r_Z·i, forward −V_F + r_Z·i, blocking between), whose current is the
closed form of a diode with a series resistance through the Wright ω function (T. C. Banwell and
A. Jayakumar, "Exact analytical solution for current flow through diode with series
resistance", Electronics Letters 36(4), 2000; R. M. Corless and D. J. Jeffrey, "The Wright ω
function", AISC 2002; scipy.special.wrightomega), with V_T = k_B·T/q at 25 °C (SI 2019 exact
constants); solved with scipy at rtol 1e-11 in pieces between the law's kinks (Radau while the
chain conducts forward, DOP853 elsewhere), the energies as states; the ring's end by the rule of
DESIGN §3 (oscillating energy below 0.1 % of the stored energy, then the next zero of the coil
current), the node's rest V_s − k·ω at the motor's present speed. Demo data.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from ring_stages import assert_energies, solve_in_stages
from scipy.special import wrightomega

from kickback.case import Case, Checks, Clamp, Coil, Element, Motor, Supply, Switch
from kickback.engine.linring import RingSolution
from kickback.simulation import simulate

# demo data (invented): a small fan motor near its no-load speed, a diode + Zener across it
VS, L, R, C = 12.0, 0.2, 40.0, 4.7e-9
VSAT, TF = 0.2, 1e-6
IS, N = 1e-9, 1.8
VZ, RZ, VF = 5.0, 1.0, 0.7  # VF: the Zener's forward drop
K, J, B = 0.05, 1e-4, 1e-6
RING_END = 1e-3  # DESIGN §3: a ring is over below 0.1 % of the stored energy (common practice, no source)
VT = 1.380649e-23 * 298.15 / 1.602176634e-19  # k_B·T/q at 25 °C [V] (SI 2019 exact constants)


def _case():
    sw = Switch("bjt", saturation_voltage=VSAT, fall_time=TF, capacitance=C, rated_voltage=60.0)
    chain = Clamp("DZ", "coil", (Element("diode", name="D1", model="shockley", saturation_current=IS, ideality=N),
                                 Element("zener", name="Z1", voltage=VZ, dynamic_resistance=RZ,
                                         forward_voltage=VF)))
    return Case("fan motor ring beside a diode and Zener (demo data)", Supply(VS), Coil(L, R), sw, (chain,),
                Checks(derating=1.0), motor=Motor(back_emf_constant=K, inertia=J, viscous_friction=B))


def _chain_current(u: float) -> float:
    """Current [A] of the diode + Zener chain at the chain voltage u [V] (u > 0: the diode forward).

    Beyond a knee V₀ (V_Z, or −V_F) the diode's voltage n·V_T·ln(1 + i/I_s) and r_Z·i add up to
    u − V₀: with x = 1 + i/I_s, n·V_T·ln x + r_Z·I_s·x = u − V₀ + r_Z·I_s, solved by
    x = (n·V_T / (r_Z·I_s))·ω(ln(r_Z·I_s / (n·V_T)) + (u − V₀ + r_Z·I_s)/(n·V_T)) (Banwell & Jayakumar)."""
    if -VF < u < VZ:
        return 0.0
    v0 = VZ if u >= VZ else -VF
    a = N * VT
    x = a / (RZ * IS) * float(np.real(wrightomega(math.log(RZ * IS / a) + (u - v0 + RZ * IS) / a)))
    return IS * (x - 1.0)


def _reference():
    i0 = (VS - VSAT) / (R + K * K / B)  # on-state: V_s − V_sat = R·i0 + k·ω0, ω0 = k·i0/b
    w0 = K * i0 / B
    e0 = 0.5 * L * i0 ** 2 + 0.5 * C * VSAT ** 2
    rest = RING_END * e0

    def rhs(t, y):
        i, v, w = y[:3]
        ich = i0 * (1.0 - t / TF) if t < TF else 0.0
        idz = _chain_current(v - VS)
        return [(VS - v - R * i - K * w) / L, (i - ich - idz) / C, (K * i - B * w) / J,
                R * i * i, K * w * i, (v - VS) * idz]

    def knee_z(t, y):
        return y[1] - VS - VZ

    def knee_f(t, y):
        return y[1] - VS + VF

    def below(t, y):  # the rest follows the motor's present speed: V_s − k·ω
        return 0.5 * L * y[0] ** 2 + 0.5 * C * (y[1] - (VS - K * y[2])) ** 2 - rest

    def stiff(t, y):  # the chain forward (~10 Ω against 4.7 nF): Radau
        return t < TF or y[1] - VS >= VZ

    opts = dict(rtol=1e-11, atol=[1e-15, 1e-10, 1e-10, 1e-18, 1e-18, 1e-18])
    pieces, ring_t0 = solve_in_stages(rhs, [i0, VSAT, w0, 0.0, 0.0, 0.0], TF, [knee_z, knee_f], below, stiff,
                                      opts, RING_END)
    peak = max(float(np.max(p.sol(np.linspace(p.t[0], p.t[-1], 64 * len(p.t)))[1])) for p in pieces)
    t, y = float(pieces[-1].t[-1]), pieces[-1].y[:, -1]
    return dict(e0=e0, end=t, peak=peak, res=float(y[3]), motor=float(y[4]), clamp=float(y[5]),
                periods=(t - ring_t0) * math.sqrt(1.0 / (L * C)) / (2 * math.pi), ring_t0=ring_t0)


def test_chain_law_meets_its_voltage():
    # the closed form inverts v(i) = n·V_T·ln(1 + i/I_s) + V₀ + r_Z·i on both sides of the band
    for u in (-1.2, -0.75, 5.02, 5.6):
        i = _chain_current(u)
        v0 = VZ if u > 0 else -VF
        assert N * VT * math.log1p(i / IS) + v0 + RZ * i == pytest.approx(u, rel=1e-12)
    assert _chain_current(-40.0) == pytest.approx(-IS, rel=1e-12)  # saturated in reverse
    assert _chain_current(0.0) == 0.0  # the blocking band


def test_motor_ring_beside_a_saturated_chain_in_closed_form():
    ref = _reference()
    assert ref["periods"] > 100  # a long ring: the closed form's ground
    r = simulate(_case())
    f = r.figures
    # the ring is taken in closed form once its upper swing clears the chain's knee at −V_F: most
    # of it, not stepped (before: 0 closed-form pieces, 5 200 Radau steps)
    closed = [p for p in r.waveforms.phases if isinstance(p.sol, RingSolution)]
    assert closed and sum(p.t1 - p.t0 for p in closed) > 0.5 * (ref["end"] - ref["ring_t0"])
    assert f.end_time_s == pytest.approx(ref["end"], rel=1e-6)
    assert f.peak_voltage_V == pytest.approx(ref["peak"], rel=1e-6)
    assert_energies(f, ref, rel=1e-6)
