"""One turn-off by the batch engine, as a :class:`~kickback.result.Result` like the detailed one.

The figures are the batch engine's exact ones (:mod:`kickback.figures_batch`); the checks are
:func:`kickback.ratings.rating_checks` on them; the waveforms are the exact solution sampled on
every segment (for plots and CSV output — no figure is taken from the samples).
"""

from __future__ import annotations

import numpy as np

from kickback.case import Case
from kickback.circuit import Circuit
from kickback.engine.batch import energy_increments, run
from kickback.engine.batch_params import BatchCircuit, value_getter
from kickback.engine.detailed import Waveforms
from kickback.errors import SolverError
from kickback.figures_batch import columns, figures_of
from kickback.ratings import rating_checks, with_switch_findings
from kickback.result import Result

#: samples per segment of the returned waveforms (uniform, plus a geometric run near its start)
SAMPLES = 24


def simulate_batch(case: Case) -> Result:
    """Simulate ``case`` with the batch engine.

    Raises
    ------
    CaseError — the case cannot be simulated as given (as for the detailed engine)
    SolverError — the batch engine does not cover the case, or could not finish; says why
    """
    circuit = Circuit(case)
    bc = BatchCircuit(case, 1, value_getter(case, {}, 1))
    if not bc.ok[0]:
        raise SolverError(f"batch engine: {bc.why[0]}")
    st = run(bc)
    if not bc.ok[0]:
        raise SolverError(f"batch engine: {bc.why[0]}")
    cols = columns(bc, st)
    figures = with_switch_findings(case, figures_of(bc, cols))
    checks = rating_checks(case, figures)
    return Result(case, figures, tuple(checks), _waveforms(bc, st, circuit, cols))


def _waveforms(bc, st, circuit, cols) -> Waveforms:
    ts, ys, vs, ich, ioff, chains = [], [], [], [], [], []
    acc = np.zeros(5 + sum(1 for ch in bc.chains for el in ch.elements if el is not None))
    frac = np.unique(np.concatenate([np.linspace(0.0, 1.0, SAMPLES), np.geomspace(1e-6, 1.0, 8)]))
    for t0, tau, seg, fs, _mode in st.trace:
        K = frac.size
        taus = tau * frac
        rows = np.zeros(K, int)
        sk = seg.take(rows)
        X = sk.state(taus)
        xi = np.concatenate([X, np.ones((K, 1)), taus[:, None]], axis=1)
        fk = _rep(fs, K)
        M2 = sk.moments(taus)
        if not np.all(np.isfinite(M2)):
            raise SolverError("batch engine: the waveform's energies could not be integrated "
                              "(the energy quadrature of a segment needed more than 10⁵ panels)")
        inc, els = energy_increments(bc, rows, fk, M2)
        el_rows = [val for m, row in enumerate(els) for j, val in enumerate(row)
                   if bc.chains[m].elements[j] is not None]
        e = np.stack([inc[k] for k in ("R", "sup", "ch", "av", "bd")] + el_rows, axis=0)
        y = np.concatenate([X.T, acc[:, None] + e], axis=0)
        acc = acc + e[:, -1]
        ts.append(t0 + taus)
        ys.append(y)
        vs.append(np.einsum("gj,gj->g", fk.cv, xi))
        ich.append(np.einsum("gj,gj->g", fk.cI[0], xi))
        ioff.append(np.einsum("gj,gj->g", fk.cI[1], xi))
        chains.append([np.einsum("gj,gj->g", c, xi) for c in fk.cI[2:]])
    t = np.concatenate(ts)
    y = np.concatenate(ys, axis=1)
    n_act = len(bc.chains)
    i_chains = [np.concatenate([c[m] for c in chains]) for m in range(n_act)]
    events = {"10%": _opt(cols["coil.decay_s.to_10_percent"]), "1%": _opt(cols["coil.decay_s.to_1_percent"]),
              "zero": _opt(cols["coil.decay_s.to_zero"])}
    return Waveforms(circuit, t, y, np.concatenate(vs), np.concatenate(ich), np.concatenate(ioff), i_chains,
                     events, [float(cols["switch.peak_time_s"][0])], bool(st.bound_hit[0]), [], 0.0, 0, "batch")


def _opt(a):
    x = float(a[0])
    return None if np.isnan(x) else x


def _rep(fs, K):
    from kickback.engine.batch_modes import Forms

    r = np.zeros(K, int)
    return Forms(cv=fs.cv[r], cI=[c[r] for c in fs.cI], F=fs.F[r], dyn=fs.dyn[r],
                 info=[{k: v[r] for k, v in d.items()} for d in fs.info], ilim=fs.ilim[r],
                 offf=[o[r] for o in fs.offf], nopath=fs.nopath[r], nX=fs.nX)
