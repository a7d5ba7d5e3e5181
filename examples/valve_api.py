"""Use kickback from Python: load a demo case, simulate, read figures, vary the Zener voltage.

Run from the repository root:  python examples/valve_api.py
(The irrigation valve case is demo data, an invented scenario.)
"""

from dataclasses import replace
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

from kickback import load_case, simulate  # noqa: E402

case = load_case(Path(__file__).resolve().parent.parent / "cases" / "irrigation_valve.toml")
result = simulate(case)
f = result.figures
print(f"{case.title}")
print(f"  peak switch-node voltage {f.peak_voltage_V:.2f} V at {f.peak_time_s * 1e9:.0f} ns")
print(f"  coil current to zero in {f.to_zero_s * 1e3:.3f} ms, release after {f.release_s * 1e3:.3f} ms")
print(f"  energy balance residual {f.energy_balance_error:.1e}; all checks pass: {result.passed}")

# The release-versus-voltage trade-off by hand: a higher Zener voltage releases faster
# but puts more voltage on the switch.
clamp = case.clamps[0]
diode, zener = clamp.elements
for vz in (12.0, 16.0, 20.0, 24.0):
    variant = replace(case, clamps=(replace(clamp, elements=(diode, replace(zener, voltage=vz))),))
    r = simulate(variant)
    print(f"  Zener {vz:4.0f} V: peak {r.figures.peak_voltage_V:6.2f} V, release {r.figures.release_s * 1e3:6.3f} ms,"
          f" {'pass' if r.passed else 'FAIL'}")

fig, axes = result.plot()
fig.savefig("valve_waveforms.png", dpi=120)
print("  wrote valve_waveforms.png")
