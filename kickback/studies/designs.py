"""Built-in clamp options sized for a case's coil and switch (used when the case lists none).

Each family is sized to the switch's derated voltage ``V_allow = derating × rated_voltage``,
less the minimum margin that ``choose`` asks of a pick (``checks.min_margin``), so that every
option offered keeps that margin: ``V_allow`` below stands for ``(1 − min_margin) × V_allow``:

* plain diode — the node sits a diode drop above the supply;
* diode + resistor — ``R`` the E12 value below ``(V_allow − V_s − V_f)/i_0``;
* diode + Zener — ``V_Z`` the E24 value below ``V_allow − V_s − V_f``;

where ``V_f`` is the generic diode's drop at the coil's own on-state current ``i_0`` (its Shockley
law), not at the 1 A its terminal point is given at;
* TVS from the switch node to ground — ``V_BR`` the E24 value below ``V_allow``;
* RC snubber across the switch — ``C`` from the allowed overshoot by energy, the node ringing
  about the supply: ``½ L i_0² = ½ C (V_allow − V_s)²``, rounded up to E12, and
  ``R ≈ √(L/C)`` (nearest E12);
* no clamp.

The generic diode (0.9 V at 1 A, n = 1.8, R_s = 50 mΩ) and the ideal Zener/TVS (zero
dynamic resistance) are stated assumptions, not parts: put your own parts in ``[[option]]``.

An option no one would build is flagged, not offered (:func:`impractical`): a snubber capacitor
above :data:`MAX_SNUBBER_CAPACITANCE`.

References
----------
N. Mohan, T. M. Undeland and W. P. Robbins, Power Electronics, 3rd ed., Wiley 2003, ch. 27
(snubber circuits: C from the overshoot by energy balance, R near the characteristic
impedance √(L/C)).
"""

from __future__ import annotations

import math
from dataclasses import replace

from kickback.case import Case, Clamp, Element, Option
from kickback.errors import CaseError
from kickback.studies.eseries import nearest, round_down, round_up

GENERIC_DIODE = dict(type="diode", model="shockley", forward_voltage=0.9, at_current=1.0, ideality=1.8,
                     series_resistance=0.05)
#: a snubber capacitor larger than this is not built [F]: snubbers use film or ceramic capacitors
#: of nanofarads to a few microfarads; tens of microfarads and more means an electrolytic, which
#: does not take a snubber's pulse currents (common practice, no source)
MAX_SNUBBER_CAPACITANCE = 10e-6


def diode_drop(current: float) -> float:
    """The generic diode's forward drop at ``current`` [V] (its Shockley law with series
    resistance, through the terminal point 0.9 V at 1 A).

    .. math:: v = n V_T \\ln(1 + i/I_s) + R_s i
    """
    from kickback.models import element_law

    return float(element_law(Element(**GENERIC_DIODE)).voltage_at(abs(current)))


def impractical(option: Option) -> str | None:
    """Why no one would build ``option`` (None when nothing stands out): a capacitor in a clamp
    above :data:`MAX_SNUBBER_CAPACITANCE`."""
    for cl in option.clamps:
        for el in cl.elements:
            if el.type == "capacitor" and el.capacitance > MAX_SNUBBER_CAPACITANCE:
                from kickback.units import format_quantity

                return (f"{format_quantity(el.capacitance, 'F')} snubber capacitor: above "
                        f"{format_quantity(MAX_SNUBBER_CAPACITANCE, 'F')}, more than a board carries as a snubber "
                        "(film or ceramic parts run to a few µF)")
    return None


def derated_rating(case: Case) -> float | None:
    """The derated switch voltage [V]: ``checks.derating`` × the rated (else breakdown) voltage;
    None when the switch has neither."""
    s = case.switch
    rated = s.rated_voltage if s.rated_voltage is not None else s.breakdown_voltage
    return None if rated is None else case.checks.derating * rated


def allowed_voltage(case: Case) -> float:
    """The switch voltage the built-in options are sized to [V]."""
    v = derated_rating(case)
    if v is None:
        raise CaseError("sizing the built-in clamp options needs switch.rated_voltage (expected a voltage "
                        "rating, or [[option]] clamp sets in the case)", source=case.source, key="switch")
    return v


def on_current(case: Case) -> float:
    """The coil's on-state current [A] (the case's own clamps ignored)."""
    from kickback.circuit import Circuit

    probe = Clamp("probe", "coil", (Element(**GENERIC_DIODE),))
    return Circuit(replace(case, clamps=(probe,), options=())).i0


def builtin_options(case: Case) -> tuple[Option, ...]:
    """The built-in families, sized for ``case`` (see the module docstring)."""
    v_allow = (1.0 - case.checks.min_margin) * allowed_voltage(case)
    vs = case.supply.voltage
    i0 = on_current(case)
    L = case.coil.inductance
    head = v_allow - vs - diode_drop(i0)
    d = Element(**GENERIC_DIODE, name="D")
    opts = [Option("plain diode", (Clamp("D", "coil", (d,)),))]
    if head > 0:
        r = round_down(head / i0, "E12")
        opts.append(Option(f"diode + {_eng(r, 'Ω')}", (Clamp("D+R", "coil", (d, Element(
            "resistor", name="R", resistance=r))),)))
        vz = round_down(head, "E24")
        opts.append(Option(f"diode + {_eng(vz, 'V')} Zener", (Clamp("D+Z", "coil", (d, Element(
            "zener", name="Z", voltage=vz))),)))
    if v_allow > 1.1 * vs:
        vt = round_down(v_allow, "E24")
        if vt > 1.05 * vs:
            opts.append(Option(tvs_option_name(vt, vs), (Clamp("TVS", "switch", (Element(
                "tvs", name="TVS", voltage=vt),)),)))
        c = round_up(L * i0 * i0 / (v_allow - vs) ** 2, "E12")
        r = nearest(math.sqrt(L / c), "E12")
        opts.append(Option(f"RC {_eng(r, 'Ω')} + {_eng(c, 'F')} across switch", (Clamp("RC", "switch", (
            Element("resistor", name="R", resistance=r), Element("capacitor", name="C", capacitance=c))),)))
    opts.append(Option("no clamp", ()))
    return tuple(opts)


def tvs_option_name(v_clamp: float, supply: float) -> str:
    """A built-in TVS option in a datasheet's words: the ideal TVS clamps at its breakdown voltage
    (V_C = V_BR at any current), and a part for it must stand off the supply (V_WM ≥ V_s), which
    sits across it whenever the switch is off."""
    return f"TVS to ground (clamping {_eng(v_clamp, 'V')}; stand-off ≥ {_eng(supply, 'V')})"


def _eng(x: float, unit: str) -> str:
    from kickback.units import format_quantity

    return format_quantity(x, unit, digits=3)


def _rated_like(case: Case, kind: str) -> dict:
    """Ratings of the case's own element of this type, carried over to candidates of the type."""
    keys = ("rated_reverse_voltage", "rated_surge_current", "rated_pulse_energy", "rated_peak_power",
            "rated_pulse_width", "rated_energy", "rated_voltage")
    for cl in case.clamps:
        for el in cl.elements:
            if el.type == kind:
                return {k: getattr(el, k) for k in keys if getattr(el, k) is not None}
    return {}


def family_candidates(case: Case) -> dict[str, list[tuple[float, str, Option]]]:
    """Each family's candidates over standard values: family → [(sizing value, unit, option)].

    Zener and TVS voltages run over E24, resistors and capacitors over E12, from well inside to
    somewhat beyond the derated switch voltage, so that the trade-off shows both sides of the
    limit. Ratings given on the case's own elements of a type are carried over to candidates.
    """
    from kickback.studies.eseries import values_between

    v_allow = allowed_voltage(case)
    vs = case.supply.voltage
    i0 = on_current(case)
    L = case.coil.inductance
    head = max(v_allow - vs - diode_drop(i0), 0.1 * vs)
    d = Element(**(GENERIC_DIODE | _rated_like(case, "diode")), name="D")
    out: dict[str, list] = {"plain diode": [(0.0, "", Option("plain diode", (Clamp("D", "coil", (d,)),)))]}
    out["diode + resistor"] = [
        (r, "Ω", Option(f"diode + {_eng(r, 'Ω')}", (Clamp("D+R", "coil", (d, Element(
            "resistor", name="R", resistance=r, **_rated_like(case, "resistor")))),)))
        for r in values_between(0.05 * head / i0, 1.3 * head / i0, "E12")]
    out["diode + Zener"] = [
        (vz, "V", Option(f"diode + {_eng(vz, 'V')} Zener", (Clamp("D+Z", "coil", (d, Element(
            "zener", name="Z", voltage=vz, **_rated_like(case, "zener")))),)))
        for vz in values_between(max(0.1 * vs, 2.0), 1.3 * head, "E24")]
    out["TVS to ground"] = [
        (vt, "V", Option(tvs_option_name(vt, vs), (Clamp("TVS", "switch", (Element(
            "tvs", name="TVS", voltage=vt, **_rated_like(case, "tvs")),)),)))
        for vt in values_between(1.1 * vs, 1.3 * v_allow, "E24")]
    c_rule = L * i0 * i0 / max(v_allow - vs, 0.05 * vs) ** 2
    rc = []
    for c in values_between(0.1 * c_rule, 10 * c_rule, "E12"):
        r = nearest(math.sqrt(L / c), "E12")
        rc.append((c, "F", Option(f"RC {_eng(r, 'Ω')} + {_eng(c, 'F')} across switch", (Clamp("RC", "switch", (
            Element("resistor", name="R", resistance=r, **_rated_like(case, "resistor")),
            Element("capacitor", name="C", capacitance=c, **_rated_like(case, "capacitor")))),))))
    out["RC snubber"] = rc
    return out
