"""Figures of the periodic steady state: a few cycles and the junction temperature."""

from __future__ import annotations

import numpy as np

from kickback.figures import chain_signals
from kickback.outputs import style
from kickback.units import format_quantity as q


def pwm_figure(result, n_cycles: int = 3):
    """Coil current, switch-node voltage and clamp current over a few steady-state cycles per
    duty, and the switch's junction temperature when it has a Foster network."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    from kickback.models.thermal import foster_periodic

    case = result.case
    thermal = case.switch.thermal_resistance is not None
    rows = 4 if thermal else 3
    fig = Figure(figsize=(11.5, 2.3 * rows), layout="constrained")
    axes = fig.subplots(rows, 1, sharex=True)
    for n, pf in enumerate(result.pwm):
        w = pf.cycle
        period = 1.0 / pf.frequency_Hz
        t = np.concatenate([w.t + k * period for k in range(n_cycles)])

        def rep(x):
            return np.tile(np.asarray(x, dtype=float), n_cycles)

        line = style.series_style(n) | {"lw": 1.4}
        label = f"duty {pf.duty:g}"
        axes[0].plot(t, rep(w.i_coil), label=label, **line)
        axes[1].plot(t, rep(w.v), label=label, **line)
        for k, ch in enumerate(w.circuit.chains):
            ic = chain_signals(w, k)[0]
            axes[2].plot(t, rep(ic), label=f"{label}: {ch.name}",
                         **(line if k == 0 else style.series_style(n + k * len(result.pwm))))
        if thermal:
            s = case.switch
            p = np.clip(w.v * (w.i_channel + w.i_offstate), 0.0, None)
            tj = case.checks.ambient_temperature + foster_periodic(w.t, p, s.thermal_resistance, s.thermal_tau)
            axes[3].plot(t, rep(tj) - 273.15, label=label, **line)
    labels = [("coil current", "A"), ("switch-node voltage", "V"), ("clamp current", "A")]
    if thermal:
        labels.append(("switch junction\ntemperature", "°C"))
    for ax, (name, unit) in zip(axes, labels, strict=True):
        ax.set_ylabel(name)
        ax.yaxis.set_major_formatter(EngFormatter(unit=unit))
        ax.grid(True, lw=0.3)
    if case.switch.rated_voltage:
        lim = case.switch.rated_voltage * case.checks.derating
        axes[1].axhline(lim, label=f"switch rating × {case.checks.derating:g} = {q(lim, 'V')}", **style.LIMIT)
    style.outside_legend(axes[0], title="in every panel", title_fontsize=8)
    if case.switch.rated_voltage:
        handles, labels = axes[1].get_legend_handles_labels()
        style.outside_legend(axes[1], handles[-1:], labels[-1:])
    if len(result.pwm[0].cycle.circuit.chains) > 1:  # several clamps: name each line
        style.outside_legend(axes[2])
    axes[-1].xaxis.set_major_formatter(EngFormatter(unit="s"))
    axes[-1].set_xlabel("time from turn-on (steady state)")
    style.title(fig, f"{case.title} — {n_cycles} steady-state cycles at {pf.frequency_Hz / 1e3:g} kHz")
    return fig
