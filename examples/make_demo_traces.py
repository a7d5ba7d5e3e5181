"""Write the two demo traces in this folder (demo data: invented scenarios, not measurements).

* ``valve_rise_trace.csv`` — switch-on of an invented 24 V solenoid valve whose core saturates
  (L0 = 150 mH, I_sat = 1.5 A, R = 36 Ω), read as the voltage across a 0.5 Ω shunt on an
  8-bit input with noise; 2 ms before the trigger.
* ``valve_decay_trace.csv`` — switch-off of the same kind of coil, warm (R = 38 Ω) and at a
  working-point inductance of 112 mH, into a diode + Zener clamp that holds the switch node
  about 21 V (+ 1.5 Ω·i) above the supply; the coil current in mA, 1 ms before the trigger.

Run from the repository root:  python examples/make_demo_traces.py
Use them:
  kickback fit examples/valve_rise_trace.csv --kind rise --supply 24V --shunt 0.5ohm --saturating --trigger 2ms
  kickback fit examples/valve_decay_trace.csv --kind decay --supply 24V
  kickback run cases/irrigation_valve.toml --measured examples/valve_decay_trace.csv --out out

The waveforms are computed here with scipy alone (not with kickback), from the laws written
out below, so the demo can also serve as an outside check of the fit.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

HERE = Path(__file__).resolve().parent
RNG = np.random.default_rng(20240611)  # fixed random state: the files are reproducible


def quantize(x, full_scale, bits=8):
    """Round to the steps of a ``bits``-bit input spanning 0 … full_scale (with a few steps below 0)."""
    lsb = full_scale / 2**bits
    return np.clip(np.round(x / lsb), -8, 2**bits - 1) * lsb


def rise_trace():
    v, r, l0, i_sat, shunt = 24.0, 36.0, 0.150, 1.5, 0.5
    # flux linkage λ = L0·i/(1 + i/I_sat) for i >= 0, so i(λ) = λ/(L0 − λ/I_sat)
    def rhs(_t, lam):
        i = lam / (l0 - lam / i_sat)
        return v - (r + shunt) * i

    t = np.arange(-2e-3, 18e-3, 8e-6)
    sol = solve_ivp(rhs, (0.0, t[-1]), [0.0], t_eval=t[t >= 0], rtol=1e-10, atol=1e-14, method="LSODA")
    lam = np.concatenate([np.zeros(np.count_nonzero(t < 0)), sol.y[0]])
    i = lam / (l0 - lam / i_sat)
    v_shunt = quantize(shunt * i + RNG.normal(0.0, 1.5e-3, t.size), full_scale=0.4)
    lines = ["# kickback demo data: invented scenario, not a measurement",
             "Instrument,demo recorder (invented)",
             "Sample interval,8e-06",
             "Trigger at,2 ms after the record start",
             "time (ms),Vshunt (mV)"]
    lines += [f"{(tk + 2e-3) * 1e3:.3f},{vk * 1e3:.3f}" for tk, vk in zip(t, v_shunt, strict=True)]
    return "\n".join(lines) + "\n"


def decay_trace():
    v, r, ind, vz, rz = 24.0, 38.0, 0.112, 21.0, 1.5
    i0 = v / r
    # L·di/dt = −R·i − (Vz + Rz·i) while i > 0: an exponential towards −Vz/(R + Rz)
    tau = ind / (r + rz)
    i_inf = -vz / (r + rz)
    t = np.arange(-1e-3, 9e-3, 4e-6)
    i = np.where(t <= 0, i0, np.maximum(i_inf + (i0 - i_inf) * np.exp(-np.maximum(t, 0) / tau), 0.0))
    i_meas = quantize(i + RNG.normal(0.0, 2e-3, t.size), full_scale=0.8)
    lines = ["# kickback demo data: invented scenario, not a measurement",
             "# coil current at switch-off, t = 0 at the gate edge",
             "t [s];I_coil [mA]"]
    lines += [f"{tk:.6e};{ik * 1e3:.2f}".replace(".", ",") for tk, ik in zip(t, i_meas, strict=True)]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    for name, text in (("valve_rise_trace.csv", rise_trace()), ("valve_decay_trace.csv", decay_trace())):
        (HERE / name).write_text(text, encoding="utf-8")
        print(f"wrote {HERE / name}")
