"""The conventions both engines, the figures and the rating rules share, defined once.

Each is a relative threshold: a fraction of the quantity its comment names. The detailed engine
(:mod:`kickback.engine.detailed`), the batch engine (:mod:`kickback.engine.batch`,
``batch_events``, ``batch_record``), the figures (:mod:`kickback.figures`), the rating rules
(:mod:`kickback.ratings`) and the audit (:mod:`kickback.audit`) import them from here, so that
"at zero", "conducting" or "ring over" mean the same on either engine. The energy ledger's terms
(which energies, in which order, on which side) are defined once in :mod:`kickback.ledger`.

These are numerical conventions of this program (common practice, no source): levels far below
any quantity a reader compares with a rating, and far above the rounding of the solvers.
"""

from __future__ import annotations

#: current below which the coil counts as "at zero", relative to the initial current
ZERO_FRACTION = 1e-9
#: the ring is over (a run ends) once the energy still oscillating — coil plus capacitors — is
#: below this fraction of the energy at the start; a coil current above this fraction of the
#: initial current at the time bound marks the run as stopped by its bound
RING_END_FRACTION = 1e-3
#: a clamp chain counts as conducting above this fraction of the initial coil current
CONDUCTION_FRACTION = 1e-6
#: a clamp conducting more than this fraction of the coil current in the DC on-state is reported
#: (a finding and a failed check)
ON_STATE_FRACTION = 1e-4
#: an on-state current up to this multiple of the chain's reverse leakage is leakage, not conduction
LEAKAGE_MARGIN = 1.01
#: an avalanche energy (either sign) at most this fraction of the stored energy counts as none
#: (rounding): no finding, and an unrated switch passes its avalanche check
AVALANCHE_NEGLIGIBLE = 1e-9
