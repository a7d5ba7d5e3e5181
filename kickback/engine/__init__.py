"""Engines integrate a :class:`~kickback.circuit.Circuit` and return :class:`Waveforms`."""

from kickback.engine.detailed import Waveforms, integrate

__all__ = ["Waveforms", "integrate"]
