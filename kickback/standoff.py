"""Stand-off: the voltage a clamp element holds off, defined once for both engines.

The stand-off of an element is the largest voltage it holds in its blocking direction while its
chain does not conduct, taken at

1. the on-state before the turn-off (capacitors at their on-state voltages);
2. the rest state after the transient: every capacitor keeps the charge it ends with, the node is
   back at its DC value ``Vs − R·i_end`` (the supply, once the coil current is gone: an end
   current below the conduction threshold counts as none); a chain
   with a capacitor carries no DC current there;
3. every local maximum in time of that voltage inside an interval in which the chain does not
   conduct — not at the instants where the chain starts or stops conducting: there a Zener, TVS
   or varistor sits at its knee, its conduction threshold, which is not a voltage it holds off.

The blocking direction: a diode blocks in reverse (−v); a Zener or unidirectional TVS in the
direction of its breakdown (+v); a bidirectional TVS, a varistor and a capacitor either way
(|v|); a resistor holds off nothing (its voltage is its current times its resistance).

A chain does not conduct while its current is at most ``CONDUCTION_FRACTION`` × i0, or while
its current is negative and it has a diode (a reverse diode passes only its leakage — with a
large Shockley saturation current that leakage is above the threshold and the diode still blocks).

References
----------
DESIGN.md §3 (the on-state tells what each clamp element must stand off) and issue 14/15 (the
charged capacitor of a diode + R + C chain after the transient; the bidirectional TVS).
"""

from __future__ import annotations

import numpy as np

#: element types that block either way (|v|)
_BOTH_WAYS = ("varistor", "capacitor")


def blocked_voltage(kind: str, bidirectional: bool, v):
    """Voltage [V] an element holds in its blocking direction (≥ 0) at element voltage ``v`` [V].

    Parameters
    ----------
    kind : str
        Element type (``diode``, ``zener``, ``tvs``, ``resistor``, ``capacitor``, ``varistor``).
    bidirectional : bool
        A bidirectional TVS (ignored for other types).
    v : float or array
        Element voltage [V], positive in the chain's conducting direction (DESIGN §3).
    """
    v = np.asarray(v, dtype=float)
    if kind == "diode":
        out = -v
    elif kind == "resistor":
        out = np.zeros_like(v)
    elif kind in _BOTH_WAYS or (kind == "tvs" and bidirectional):
        out = np.abs(v)
    else:  # zener, unidirectional tvs: the breakdown direction
        out = v
    return np.maximum(out, 0.0)


def chain_blocks(current, threshold, has_diode: bool):
    """Whether a chain does not conduct (bool array): ``|i| ≤ threshold`` [A], or ``i < 0`` in a
    chain with a diode (reverse leakage)."""
    i = np.asarray(current, dtype=float)
    out = np.abs(i) <= threshold
    if has_diode:
        out = out | (i < 0)
    return out


def has_diode(elements) -> bool:
    """Whether a chain (its case elements) has a diode that blocks its reverse current."""
    return any(el.type == "diode" for el in elements)


def rest_node_voltage(vs, r, i_end, threshold):
    """Node voltage [V] at rest after the transient: the supply ``vs`` less the coil's resistive
    drop ``r·i_end`` where a DC path keeps a current; an end current within ``threshold`` [A]
    (the conduction threshold: the run ended with the current 'at zero') counts as none."""
    i = np.asarray(i_end, dtype=float)
    return vs - r * np.where(np.abs(i) <= threshold, 0.0, i)


def interior_maxima(held, blocking):
    """Samples that are local maxima of ``held`` strictly inside a run of blocking samples
    (bool array): blocking with both neighbours blocking, not below the previous sample and above
    the next (a peak, or the last sample of a plateau that then falls — not a plateau the run ends
    on, such as a Zener at its knee while its current dies away)."""
    h = np.asarray(held, dtype=float)
    b = np.asarray(blocking, dtype=bool)
    out = np.zeros(h.shape, bool)
    if h.size < 3:
        return out
    inner = b[1:-1] & b[:-2] & b[2:]
    out[1:-1] = inner & (h[1:-1] >= h[:-2]) & (h[1:-1] > h[2:])
    return out
