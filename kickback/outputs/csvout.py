"""Waveforms as CSV: one row per sample, units in the header."""

from __future__ import annotations

import csv
import io

import numpy as np

from kickback.figures import chain_signals


def csv_unit(unit: str) -> tuple[str, float]:
    """A column's unit as the CSV header shows it, and the offset to add to SI values: kelvin
    is shown in °C like every other output (t/°C = T/K − 273.15, BIPM SI Brochure, 9th ed.);
    a plain number reads ``1``."""
    if unit == "K":
        return "°C", -273.15
    return unit or "1", 0.0


def csv_cell(x: float | None, offset: float = 0.0) -> str:
    """One numeric cell (9 significant digits); empty for a value that does not occur."""
    if x is None or x != x:
        return ""
    return f"{x + offset:.9g}"


def waveform_columns(result) -> list[tuple[str, np.ndarray]]:
    """Named columns (header with unit) of a result's waveforms."""
    w = result.waveforms
    c = w.circuit
    cols = [("time [s]", w.t), ("coil current [A]", w.i_coil), ("switch node [V]", w.v),
            ("switch current [A]", w.i_channel + w.i_offstate)]
    for k, ch in enumerate(c.chains):
        ic, _, volts = chain_signals(w, k)
        for j, el in enumerate(ch.clamp.elements):
            label = f"{ch.name}/{el.name or f'{el.type} {j + 1}'}"
            cols.append((f"{label} current [A]", np.asarray(ic, dtype=float)))
            cols.append((f"{label} voltage [V]", np.asarray(volts[j], dtype=float)))
    return cols


def waveforms_csv(result) -> str:
    """CSV text of the waveforms; the first line names each column with its unit."""
    cols = waveform_columns(result)
    buf = io.StringIO()
    wr = csv.writer(buf, lineterminator="\n")
    wr.writerow([name for name, _ in cols])
    data = np.column_stack([np.broadcast_to(col, cols[0][1].shape) for _, col in cols])
    for row in data:
        wr.writerow([f"{x:.9g}" for x in row])
    return buf.getvalue()
