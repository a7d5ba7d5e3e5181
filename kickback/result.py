"""The result of one simulated turn-off: figures, checks, waveforms and the contract dict."""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

from kickback import __version__
from kickback.case import Case
from kickback.engine.detailed import Waveforms
from kickback.figures import Figures
from kickback.ratings import Check

SCHEMA_VERSION = "1"


@dataclass(frozen=True)
class Result:
    """Outcome of :func:`kickback.simulate`.

    Attributes
    ----------
    case : Case
    figures : Figures
    checks : tuple of Check
    waveforms : Waveforms
    passed : bool or None — every check passes; None when the result failed its audit
        (:mod:`kickback.audit`): such a result carries no verdict
    audit : Audit — ledger, dissipations, the checks the ratings call for, finite figures
    """

    case: Case
    figures: Figures
    checks: tuple[Check, ...]
    waveforms: Waveforms = field(repr=False)
    pwm: tuple = ()  # PwmFigures per duty of the case's [drive]

    @cached_property
    def audit(self):
        """The audit of this result (:func:`kickback.audit.audit_result`)."""
        from kickback.audit import audit_result

        return audit_result(self)

    @property
    def passed(self) -> bool | None:
        """Every check passes (True) or one fails (False); None when the audit failed: the
        figures are not trusted, so no verdict is given."""
        if not self.audit.passed:
            return None
        return all(ck.passed for ck in self.checks)

    def to_dict(self) -> dict:
        """The result contract of DESIGN.md §6 (SI units; None for a time that does not occur).

        Beyond §6's keys: each check row's ``unit`` (SI symbol of its value and limit; K for a
        temperature), each clamp element's ``name`` (the case's, else its type and place in the
        chain, e.g. "zener 2"), and ``models``, the device models and engine that made the figures.
        """
        f = self.figures
        return {
            "version": __version__,
            "title": self.case.title,
            "coil": {
                "initial_current_A": f.initial_current_A,
                "stored_energy_J": f.stored_energy_J,
                "resistance_energy_J": f.resistance_energy_J,
                "decay_s": {"to_10_percent": f.to_10_percent_s, "to_1_percent": f.to_1_percent_s,
                            "to_zero": f.to_zero_s},
                "release_s": f.release_s,
            },
            "switch": {
                "peak_voltage_V": f.peak_voltage_V,
                "peak_time_s": f.peak_time_s,
                "crossover_energy_J": f.crossover_energy_J,
                "avalanche_energy_J": f.avalanche_energy_J,
            },
            "supply": {"energy_J": f.supply_energy_J},
            "clamps": [
                {"name": c.name, "across": c.across, "energy_J": c.energy_J, "peak_current_A": c.peak_current_A,
                 "conduction_s": c.conduction_s,
                 "elements": [{"type": e.type, "name": e.name, "energy_J": e.energy_J,
                               "peak_voltage_V": e.peak_voltage_V, "peak_current_A": e.peak_current_A,
                               "standoff_voltage_V": e.standoff_voltage_V}
                              for e in c.elements]}
                for c in f.clamps
            ],
            "left_in_capacitors_J": f.left_in_capacitors_J,
            "energy_balance_error": f.energy_balance_error,
            "checks": [ck.to_dict() for ck in self.checks],
            "pass": self.passed,
            "models": list(f.models),
            "audit": self.audit.to_dict(),
        } | ({"pwm": [p.to_dict() for p in self.pwm]} if self.pwm else {})

    def details(self) -> dict:
        """Figures beyond the contract: findings, models, the ledger's small terms."""
        f = self.figures
        return {
            "findings": list(f.findings),
            "models": list(f.models),
            "initial_capacitor_energy_J": f.initial_capacitor_energy_J,
            "body_diode_energy_J": f.body_diode_energy_J,
            "left_in_coil_J": f.left_in_coil_J,
            "end_time_s": f.end_time_s,
            "bound_hit": f.bound_hit,
            "engine": self.waveforms.engine,
        }

    def plot(self, ax=None):
        """Switch-node voltage and coil current against time; returns the matplotlib handles.

        Parameters
        ----------
        ax : matplotlib Axes or None — draw into this axes (voltage), with a twin for current;
            None: a new figure with an edge zoom where the time scales differ.
        """
        from kickback.outputs.plots import plot_result

        return plot_result(self, ax=ax)
