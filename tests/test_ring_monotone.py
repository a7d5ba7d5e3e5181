"""The closed-form ring's bound on a monotone curved chain's departure from its tangent
(:func:`kickback.engine.linring_held.monotone_departure`): a varistor, or a diode in series with a
varistor, far below its knee during a ring (wide-range case 8553: a 0.9 s ring beside a 99 V
varistor was stepped by Radau, 246 000 evaluations, because only a lone Shockley diode's chain
was accepted as curved; now solved in closed form, 8.5 -> 0.8 s CPU, figures within 2.3e-9).

Reference, written here: the varistor's power law i = I_1·sign(u)·|u/V_1|^α (L. M. Levinson and
H. R. Philipp, "Zinc oxide varistors — a review", Am. Ceram. Soc. Bull. 65(4), 1986) and, for a
constant-drop diode in series, i = i_var(u − V_f) for u > V_f, else 0 (an ideal diode with a
fixed forward drop: A. S. Sedra and K. C. Smith, Microelectronic Circuits, ch. 4); the departure
|i(u) − i(u₀) − i'(u₀)·(u − u₀)| maximised on a dense grid (2·10⁵ points) of the interval. The
bound must hold (it is what the closed form relies on) and be tight to a small factor. The
component values are invented demo values.
"""

from __future__ import annotations

import numpy as np
import pytest

from kickback import load_case
from kickback.circuit import Circuit
from kickback.engine.linring_held import monotone_departure

I1 = 1e-3  # [A] the varistor's reference current (the case leaves it at its 1 mA default)
VS, V1, ALPHA, VF = 54.7, 99.4, 38.8, 1.0

CASE = f"""
title = "demo: varistor far below its knee across a ringing coil (demo data)"
[supply]
voltage = "{VS!r} V"
[coil]
inductance = "0.16 H"
resistance = "10.6 Ω"
[switch]
type = "ideal"
capacitance = "2e-9 F"
[[clamp]]
name = "V"
across = "coil"
{{diode}}
[[clamp.element]]
type = "varistor"
voltage = "{V1!r} V"
exponent = {ALPHA!r}
"""
DIODE = f"""[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "{VF!r} V"
"""


def _law(u, diode):
    x = u - VF if diode else u
    i = I1 * np.sign(x) * np.abs(x / V1) ** ALPHA
    return np.where(x > 0, i, 0.0) if diode else i


@pytest.mark.parametrize("diode", [False, True])
@pytest.mark.parametrize("u0, u_inf, bound", [(20.0, 0.0, 60.0), (-30.0, 5.0, 70.0), (60.0, 0.0, 75.0),
                                              (2.0, 0.0, 40.0)])
def test_bound_holds_and_is_tight(diode, u0, u_inf, bound):
    c = Circuit(load_case(CASE.format(diode=DIODE if diode else "")))
    k = c.active_chains[0]
    y0 = c.initial_state().copy()
    y0[1] = VS + u0  # the node voltage (a capacitive node: the second state)
    got = monotone_departure(c, k, 0.0, y0, u_inf, bound)
    lo, hi = min(u_inf - bound, u0), max(u_inf + bound, u0)
    u = np.linspace(lo, hi, 200_001)
    h = 1e-6 * max(abs(u0), 1.0)
    g0 = (_law(np.array(u0 + h), diode) - _law(np.array(u0 - h), diode)) / (2 * h)
    dep = float(np.max(np.abs(_law(u, diode) - _law(np.array(u0), diode) - g0 * (u - u0))))
    assert dep > 0
    assert got >= dep * (1 - 1e-9)
    assert got <= 3.0 * dep
