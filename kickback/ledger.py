"""The energy ledger of one turn-off, defined once (DESIGN.md §3) and read by every output.

Stored at start (coil and capacitors) + delivered by the supply = dissipated in the coil
resistance, the switch (turn-off crossover, avalanche, body diode) and each clamp element
+ converted by a motor's back-EMF + left in capacitors and in the coil. The terms come in that
order, each with its side: ``"in"``, ``"out"`` or ``"left"``.

The text table and the HTML report (table, bars, summary sentence) read :func:`ledger_terms`;
the JSON lists no terms, and its ``energy_balance_error`` is :func:`ledger_residual` of them.
"""

from __future__ import annotations

from dataclasses import dataclass

from kickback.case import part_label

#: the energy left in the coil is a ledger term above this fraction of the input
LEFT_IN_COIL_SHOWN = 1e-9


@dataclass(frozen=True)
class LedgerTerm:
    """One term of the energy ledger.

    Attributes
    ----------
    key : str
        Stable identifier (``"stored_coil"``, ``"supply"``, ``"coil_resistance"``,
        ``"switch_crossover"``, ``"switch_avalanche"``, ``"switch_body_diode"``, ``"motor"``,
        ``"clamp[k].element[j]"``, ``"left_capacitors"``, ``"left_coil"``).
    side : str
        ``"in"``, ``"out"`` (dissipated or converted) or ``"left"`` (still stored at the end).
    label : str
        Words for a reader.
    energy_J : float
        The energy [J].
    """

    key: str
    side: str
    label: str
    energy_J: float


def ledger_terms(figures, case) -> tuple[LedgerTerm, ...]:
    """The ordered ledger terms of a turn-off's figures.

    Parameters
    ----------
    figures : kickback.figures.Figures
        The turn-off's figures.
    case : kickback.case.Case
        Its case (a ``[motor]`` adds the back-EMF term, shown even when it is zero).

    Returns
    -------
    tuple of LedgerTerm
        In order: what goes in, what goes out, what is left. A switch body-diode term appears
        when it is not exactly zero, the energy left in the coil above :data:`LEFT_IN_COIL_SHOWN`
        of the input (below it is the rounding of a current "at zero", ~1e-18 of the input).
    """
    f = figures
    terms = [LedgerTerm("stored_coil", "in", "stored in the coil", f.stored_energy_J),
             LedgerTerm("stored_capacitors", "in", "stored in capacitors", f.initial_capacitor_energy_J),
             LedgerTerm("supply", "in", "from the supply", f.supply_energy_J),
             LedgerTerm("coil_resistance", "out", "coil resistance", f.resistance_energy_J),
             LedgerTerm("switch_crossover", "out", "switch: turn-off crossover", f.crossover_energy_J),
             LedgerTerm("switch_avalanche", "out", "switch: avalanche", f.avalanche_energy_J)]
    if f.body_diode_energy_J:
        terms.append(LedgerTerm("switch_body_diode", "out", "switch: body diode", f.body_diode_energy_J))
    if case.motor is not None:
        terms.append(LedgerTerm("motor", "out", "to the motor (back-EMF)", f.motor_energy_J))
    for k, cl in enumerate(f.clamps):
        for j, el in enumerate(cl.elements):
            if el.type != "capacitor":  # a capacitor's energy is in the stored/left terms
                terms.append(LedgerTerm(f"clamp[{k}].element[{j}]", "out", part_label(cl.name, el.name), el.energy_J))
    terms.append(LedgerTerm("left_capacitors", "left", "left in capacitors", f.left_in_capacitors_J))
    stored = f.stored_energy_J + f.initial_capacitor_energy_J + max(f.supply_energy_J, 0.0)
    if abs(f.left_in_coil_J) > LEFT_IN_COIL_SHOWN * stored:
        terms.append(LedgerTerm("left_coil", "left", "left in the coil", f.left_in_coil_J))
    return tuple(terms)


def balance_residual(stored, capacitors, supply, out):
    """The ledger's relative residual from its sums, as both engines' figures form it (scalars or
    (n,) arrays): (stored + capacitors + supply − out) / (stored + capacitors + max(supply, 0)),
    the denominator being :func:`ledger_input`'s reference.

    Parameters
    ----------
    stored : coil energy at the start [J]
    capacitors : capacitor energy at the start [J]
    supply : energy the supply delivered [J] (negative: it took energy back)
    out : everything dissipated, converted and left at the end, summed [J]
    """
    import numpy as np

    given = np.maximum(supply, 0.0) if isinstance(supply, np.ndarray) else max(supply, 0.0)
    return (stored + capacitors + supply - out) / (stored + capacitors + given)


def ledger_input(terms) -> float:
    """The ledger's reference [J]: everything stored at start plus the supply's energy when it
    delivers (a supply that takes energy back is not an input)."""
    return sum(t.energy_J if t.key != "supply" else max(t.energy_J, 0.0) for t in terms if t.side == "in")


def ledger_residual(terms) -> float:
    """Relative residual of the ledger, (in − out − left) / :func:`ledger_input`."""
    net = sum(t.energy_J if t.side == "in" else -t.energy_J for t in terms)
    return net / ledger_input(terms)
