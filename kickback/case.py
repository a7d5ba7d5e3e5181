"""The case: what is simulated, as frozen dataclasses in SI units.

Loading and validation of the TOML case file live in :mod:`kickback.caseio`;
this module holds the data types and the error type only.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from kickback.errors import CaseError  # noqa: F401  (re-exported)

#: Element types a clamp chain may hold.
ELEMENT_TYPES = ("diode", "zener", "tvs", "resistor", "capacitor", "varistor")
SWITCH_TYPES = ("ideal", "bjt", "mosfet")
ACROSS = ("coil", "switch")


@dataclass(frozen=True)
class Supply:
    voltage: float  # [V]


@dataclass(frozen=True)
class Coil:
    inductance: float  # [H]
    resistance: float  # [ohm]
    capacitance: float = 0.0  # [F] winding capacitance, + to sw
    release_current: float | None = None  # [A]
    release_delay: float = 0.0  # [s]
    initial_current: float | None = None  # [A]; None: DC on-state
    saturation_current: float | None = None  # [A] Frölich–Kennelly saturation; None: linear coil


@dataclass(frozen=True)
class Switch:
    type: str  # ideal | bjt | mosfet
    on_resistance: float = 0.0  # [ohm] mosfet
    saturation_voltage: float = 0.0  # [V] bjt
    fall_time: float = 0.0  # [s]; 0: instant
    capacitance: float = 0.0  # [F] output capacitance sw -> ground
    breakdown_voltage: float | None = None  # [V]; None: never breaks down
    avalanche_resistance: float = 0.0  # [ohm] slope above breakdown
    body_diode_voltage: float | None = None  # [V] mosfet reverse conduction (None: 0.7 V)
    rated_voltage: float | None = None  # [V]
    rated_avalanche_energy: float | None = None  # [J] single pulse; None: not rated
    thermal_resistance: tuple[float, ...] | None = None  # [K/W] Foster stages
    thermal_tau: tuple[float, ...] | None = None  # [s] Foster time constants
    max_junction_temperature: float | None = None  # [K]
    rated_repetitive_avalanche_energy: float | None = None  # [J] per cycle
    # on-state drive (optional): BJT base drive, MOSFET gate drive
    gain: float | None = None  # BJT current gain β at the on-state current
    drive_voltage: float | None = None  # [V] BJT base drive source
    base_resistance: float | None = None  # [Ω]
    base_emitter_voltage: float = 0.7  # [V] (common practice, no source)
    overdrive: float = 1.5  # required I_B / (I_C/β) (common practice 1.5–2, no source)
    gate_voltage: float | None = None  # [V] MOSFET gate drive
    on_resistance_gate_voltage: float | None = None  # [V] gate voltage R_on is specified at


@dataclass(frozen=True)
class Element:
    """One two-terminal element of a clamp chain; fields unused by a type stay None."""

    type: str
    name: str | None = None
    # diode
    model: str = "shockley"  # shockley | constant-drop
    forward_voltage: float | None = None  # [V] diode terminal point / drop; zener/tvs forward drop
    at_current: float | None = None  # [A] diode: current of the terminal point; varistor: 1 mA
    ideality: float | None = None
    saturation_current: float | None = None  # [A]
    series_resistance: float = 0.0  # [ohm]
    temperature: float | None = None  # [K] junction temperature for V_T; None: 25 degC
    rated_reverse_voltage: float | None = None  # [V]
    rated_surge_current: float | None = None  # [A]
    rated_average_current: float | None = None  # [A] repetitive switching
    # zener / tvs / varistor
    #: [V] breakdown at zero current (zener/tvs), V_Z at test_current when a zener gives one,
    #: or the voltage at at_current (varistor)
    voltage: float | None = None
    dynamic_resistance: float = 0.0  # [ohm]
    bidirectional: bool = False
    rated_pulse_energy: float | None = None  # [J]
    rated_peak_power: float | None = None  # [W]
    rated_pulse_width: float | None = None  # [s]
    exponent: float | None = None  # varistor alpha
    # zener / tvs as a datasheet gives them (the law follows from them: models.breakdown.breakdown_line)
    standoff_voltage: float | None = None  # [V] tvs working (stand-off) voltage V_WM
    breakdown_voltage: float | None = None  # [V] tvs breakdown voltage V_BR at test_current
    test_current: float | None = None  # [A] tvs I_T of V_BR; zener I_ZT of voltage (then V_Z at I_ZT)
    clamping_voltage: float | None = None  # [V] tvs V_C at peak_pulse_current
    peak_pulse_current: float | None = None  # [A] tvs I_PP
    impedance: float | None = None  # [ohm] zener Z_ZT at test_current
    # resistor / varistor
    resistance: float | None = None  # [ohm]
    rated_energy: float | None = None  # [J]
    # capacitor
    capacitance: float | None = None  # [F]
    rated_voltage: float | None = None  # [V]
    thermal_resistance: tuple[float, ...] | None = None  # [K/W] Foster stages
    thermal_tau: tuple[float, ...] | None = None  # [s] Foster time constants
    max_junction_temperature: float | None = None  # [K]
    #: key path in the case file, e.g. "clamp[0].element[1]" (for messages)
    path: str = ""


@dataclass(frozen=True)
class Clamp:
    name: str
    across: str  # coil | switch
    elements: tuple[Element, ...]
    path: str = ""

    def element_label(self, j: int) -> str:
        """How the ledger and the checks name element ``j``: see :func:`part_label`."""
        el = self.elements[j]
        return part_label(self.name, el.name or f"{el.type} {j + 1}")


def part_label(clamp: str, element: str) -> str:
    """A clamp element's name in the ledger and the checks: "clamp: element", or the clamp's name
    alone when the element has the same name (a one-part clamp named as its part: "D1", not
    "D1: D1")."""
    return clamp if element == clamp else f"{clamp}: {element}"


@dataclass(frozen=True)
class Option:
    """An alternative clamp set for comparison (``[[option]]`` in the case file)."""

    name: str
    clamps: tuple[Clamp, ...] = ()


@dataclass(frozen=True)
class Motor:
    """A DC motor winding (``[motor]``): back-EMF k·ω in series with the coil's L and R.

    Either a fixed ``speed`` or a mechanical model (``inertia``, ``viscous_friction``,
    ``load_torque``) whose speed follows J·dω/dt = k·i − B·ω − T_L.
    """

    back_emf_constant: float  # [V·s/rad] = [N·m/A]
    speed: float | None = None  # [rad/s] fixed
    inertia: float | None = None  # [kg·m²]
    viscous_friction: float = 0.0  # [N·m·s/rad]
    load_torque: float = 0.0  # [N·m]

    @property
    def mechanical(self) -> bool:
        return self.inertia is not None


@dataclass(frozen=True)
class Drive:
    """Repetitive switching (``[drive]``): the periodic steady state at each duty."""

    frequency: float  # [Hz]
    duties: tuple[float, ...]  # on-time fraction(s) of the period, in (0, 1)
    final_turn_off: bool = True  # also simulate the last turn-off from the steady-state peak


@dataclass(frozen=True)
class Tolerance:
    """The spread of one case value (``[tolerance."key.path"]``) or of the coil temperature.

    ``low``/``high`` are the band's absolute ends [SI]; a normal distribution puts them at
    ``±k_sigma`` standard deviations about their midpoint.
    """

    path: str  # case key path, or "coil_temperature"
    low: float
    high: float
    distribution: str = "uniform"  # uniform | normal
    k_sigma: float = 3.0
    reference: float | None = None  # [K] coil_temperature only: temperature of coil.resistance
    line: int | None = None  # where it was given, for messages


@dataclass(frozen=True)
class Checks:
    derating: float = 0.8  # fraction of voltage/current ratings allowed (common practice, no source)
    energy_derating: float | None = None  # fraction of energy ratings allowed; None: same as derating
    max_release_time: float | None = None  # [s]
    max_peak_voltage: float | None = None  # [V]
    max_decay_time: float | None = None  # [s] to zero
    max_clamp_energy: float | None = None  # [J] per clamp
    ambient_temperature: float = 298.15  # [K] for junction temperatures (25 °C unless given)
    #: choose: the least switch-voltage margin under the derated limit a choice must keep, as a
    #: fraction of it (5 %: the ±5 % voltage tolerance of an E24 Zener or TVS, IEC 60063 — the
    #: default itself is common practice, no source)
    min_margin: float = 0.05

    @property
    def energy_fraction(self) -> float:
        return self.derating if self.energy_derating is None else self.energy_derating


@dataclass(frozen=True)
class Case:
    title: str
    supply: Supply
    coil: Coil
    switch: Switch
    clamps: tuple[Clamp, ...] = ()
    checks: Checks = field(default_factory=Checks)
    source: str = "<case>"  # file name used in messages
    text: str = ""  # the case text as loaded
    options: tuple[Option, ...] = ()  # alternative clamp sets to compare
    tolerances: tuple[Tolerance, ...] = ()  # spreads for the tolerance study
    drive: Drive | None = None  # repetitive switching
    motor: Motor | None = None  # the coil is a DC motor winding
    notes: tuple[str, ...] = ()  # loader notes for stderr (a plain number far from its key's usual range)
