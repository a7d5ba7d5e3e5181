"""Figures of a batch run as columns (arrays over the variants), and one variant as Figures.

Column names follow the result contract (DESIGN.md §6) with dots for nesting:
``coil.decay_s.to_zero``, ``switch.peak_voltage_V``, ``clamps[0].elements[1].energy_J`` … A time
that does not occur is NaN in a column (None in :class:`~kickback.figures.Figures`); a variant
that was not simulated has NaN everywhere and says why in its status.
"""

from __future__ import annotations

import os

import numpy as np

from kickback.conventions import ZERO_FRACTION
from kickback.figures import ClampFigures, ElementFigures, Figures, turnoff_findings
from kickback.ledger import balance_residual


def columns(bc, st) -> dict:
    """Every figure of every variant of the batch: name → (n,) array."""
    n = bc.n
    rec = st.rec
    out = {}
    X = st.X
    # with no node capacitance the node voltage does not enter the capacitor energy
    v_end = X[:, 1] if bc.capacitive else bc.Vs.copy()
    cap_end = bc.capacitor_energy(v_end, X)
    coil_end = 0.5 * bc.L * X[:, 0] ** 2
    E = st.E
    e_el_total = np.zeros(n)
    out["coil.initial_current_A"] = bc.i0.copy()
    out["coil.stored_energy_J"] = bc.stored.copy()
    out["coil.resistance_energy_J"] = E["R"].copy()
    out["coil.decay_s.to_10_percent"] = st.t10.copy()
    out["coil.decay_s.to_1_percent"] = st.t1.copy()
    out["coil.decay_s.to_zero"] = st.tz.copy()
    rel = bc.release_current
    has = np.isfinite(rel) & (bc.i0 >= np.nan_to_num(rel, nan=np.inf))
    below_end = np.abs(X[:, 0]) < np.nan_to_num(rel, nan=0.0)
    out["coil.release_s"] = np.where(has & below_end & np.isfinite(st.trel), st.trel + bc.release_delay, np.nan)
    out["switch.peak_voltage_V"] = rec.vpk.copy()
    out["switch.peak_time_s"] = rec.tpk.copy()
    out["switch.crossover_energy_J"] = E["ch"].copy()
    out["switch.avalanche_energy_J"] = E["av"].copy()
    out["switch.body_diode_energy_J"] = E["bd"].copy()
    out["supply.energy_J"] = E["sup"].copy()
    for k, cl in enumerate(bc.case.clamps):
        if k in bc.chain_index:
            m = bc.chain_index.index(k)
            c = m
            on_i = bc.on_chain_currents[m]
        else:
            q = [x[0] for x in bc.lone].index(k)
            c = len(bc.chains) + q
            m = None
            on_i = np.zeros(n)
        ipk = np.maximum(np.abs(rec.Imax[:, c]), np.abs(rec.Imin[:, c]))
        energy = np.zeros(n)
        for j, el in enumerate(cl.elements):
            ej = st.E_el[m][j] if (m is not None and el.type != "capacitor") else np.zeros(n)
            energy = energy + ej
            pre = f"clamps[{k}].elements[{j}]."
            held = rec.held[c][:, j].copy()  # kickback.standoff's definition (batch_record)
            ppk = rec.ppk[c][:, j]
            out[pre + "energy_J"] = ej.copy()
            out[pre + "peak_voltage_V"] = rec.vabs[c][:, j].copy()
            out[pre + "peak_current_A"] = ipk.copy()
            out[pre + "standoff_voltage_V"] = held
            out[pre + "peak_power_W"] = ppk.copy()
            with np.errstate(invalid="ignore", divide="ignore"):
                out[pre + "pulse_width_s"] = np.where((ppk > 0) & (ej > 0), ej / np.where(ppk > 0, ppk, 1.0), np.nan)
        e_el_total = e_el_total + energy
        out[f"clamps[{k}].energy_J"] = energy
        out[f"clamps[{k}].peak_current_A"] = ipk
        out[f"clamps[{k}].conduction_s"] = rec.cond[:, c].copy()
        out[f"clamps[{k}].on_state_current_A"] = on_i.copy()
    out["left_in_capacitors_J"] = cap_end
    out["left_in_coil_J"] = coil_end
    out["initial_capacitor_energy_J"] = bc.cap0.copy()
    spent = E["R"] + E["ch"] + E["av"] + E["bd"] + e_el_total + cap_end + coil_end
    out["energy_balance_error"] = balance_residual(bc.stored, bc.cap0, E["sup"], spent)
    out["end_time_s"] = st.t.copy()
    out["bound_hit"] = st.bound_hit.astype(float)
    for key, val in out.items():
        out[key] = np.where(bc.ok, val, np.nan)
    return out


def figures_of(bc, cols, k: int = 0) -> Figures:
    """The :class:`~kickback.figures.Figures` of variant ``k`` (descriptions from the case's laws)."""
    from kickback.models import element_law
    from kickback.models.switch import switch_law

    case = bc.case

    def f(name):
        return float(cols[name][k])

    def opt(name):
        x = f(name)
        return None if np.isnan(x) else x

    s = case.switch
    clamps = []
    i0 = f("coil.initial_current_A")
    for q, cl in enumerate(case.clamps):
        els = []
        for j, el in enumerate(cl.elements):
            pre = f"clamps[{q}].elements[{j}]."
            law = element_law(el) if el.type != "capacitor" else None
            desc = law.description if law is not None else f"capacitor ({el.capacitance:.4g} F)"
            els.append(ElementFigures(el.type, el.name or f"{el.type} {j + 1}", desc, f(pre + "energy_J"),
                                      f(pre + "peak_voltage_V"), f(pre + "peak_current_A"),
                                      f(pre + "standoff_voltage_V"), f(pre + "peak_power_W"),
                                      opt(pre + "pulse_width_s")))
        on_i = f(f"clamps[{q}].on_state_current_A")
        clamps.append(ClampFigures(cl.name, cl.across, f(f"clamps[{q}].energy_J"), f(f"clamps[{q}].peak_current_A"),
                                   f(f"clamps[{q}].conduction_s"), on_i, tuple(els)))
    bound = bool(f("bound_hit"))
    e_av = f("switch.avalanche_energy_J")
    findings = turnoff_findings(case, i0, [cf.on_state_current_A for cf in clamps],
                                lambda q: float(bc.on_chain_voltages[bc.chain_index.index(q)][k]),
                                bound_hit=bound, end_time=f("end_time_s"), avalanche_energy=e_av,
                                stored=f("coil.stored_energy_J"), peak_voltage=f("switch.peak_voltage_V"))
    sw = switch_law(s.type, on_resistance=s.on_resistance, saturation_voltage=s.saturation_voltage,
                    fall_time=s.fall_time, breakdown_voltage=s.breakdown_voltage,
                    avalanche_resistance=s.avalanche_resistance, body_diode_voltage=s.body_diode_voltage)
    models = [sw.description] + [element_law(el).description for cl in case.clamps for el in cl.elements
                                 if el.type != "capacitor"]
    models += list(bc.fit_notes)
    models.append("batch engine: exact piecewise-linear solution, closed form per conduction state; "
                  f"current 'at zero' below {ZERO_FRACTION:g} × initial")
    return Figures(
        initial_current_A=i0, stored_energy_J=f("coil.stored_energy_J"),
        initial_capacitor_energy_J=f("initial_capacitor_energy_J"), resistance_energy_J=f("coil.resistance_energy_J"),
        to_10_percent_s=opt("coil.decay_s.to_10_percent"), to_1_percent_s=opt("coil.decay_s.to_1_percent"),
        to_zero_s=opt("coil.decay_s.to_zero"), release_s=opt("coil.release_s"),
        peak_voltage_V=f("switch.peak_voltage_V"), peak_time_s=f("switch.peak_time_s"),
        crossover_energy_J=f("switch.crossover_energy_J"), avalanche_energy_J=e_av,
        body_diode_energy_J=f("switch.body_diode_energy_J"), supply_energy_J=f("supply.energy_J"),
        clamps=tuple(clamps), left_in_capacitors_J=f("left_in_capacitors_J"), left_in_coil_J=f("left_in_coil_J"),
        energy_balance_error=f("energy_balance_error"), end_time_s=f("end_time_s"), bound_hit=bound,
        findings=tuple(findings), models=tuple(models))


#: variants simulated together (bounds the working memory; ~1–2 kB per variant and event)
CHUNK = 10_000


def normalize_variations(case, variations) -> tuple[dict, int]:
    """Check the key paths and lengths of ``variations``; returns ({path: float array}, n).

    Raises
    ------
    CaseError — an unknown key path, a value that is not numeric, a key that does not apply to
    the case (:func:`kickback.casevary.resolve`: a BJT's key on a MOSFET, a resistor's key on a
    Zener — a value no engine would read), a value its key's own rule refuses
    (:func:`kickback.casevary.check_each`: a negative inductance, a derating above 1), or arrays
    of unequal length.
    """
    from kickback.casevary import check_each, resolve
    from kickback.errors import CaseError
    from kickback.keypath import get_value, set_value

    out = {}
    n = None
    for key, values in variations.items():
        path = ".".join(p.strip() for p in str(key).split("."))
        get_value(case, path)  # raises CaseError for a path the case does not have
        resolve(case, path)  # and for a key the case file would refuse for this case
        a = np.atleast_1d(np.asarray(values, dtype=float))
        if a.ndim != 1:
            raise CaseError(f"the values of {path!r} must be a 1-D sequence (got shape {a.shape})", key=path)
        check_each(case, path, a)  # each value passes its key's own rule, as in the case file
        set_value(case, path, float(a[0]) if a.size else 0.0)  # raises for a non-numeric key
        if n is None:
            n = a.size
        elif a.size != n:
            raise CaseError(f"{path!r} has {a.size} values, the other keys {n} (expected equal lengths)", key=path)
        out[path] = a
    return out, (1 if n is None else n)


def run_columns(case, variations, *, chunk: int = CHUNK, progress=None, workers: int | None = None):
    """Simulate every variant with the batch engine, chunk by chunk.

    Parameters
    ----------
    case : Case — the base case
    variations : dict — key path → (n,) values (see :func:`normalize_variations`)
    chunk : int — variants per batch (memory is bounded by this × the workers, not by n)
    progress : callable or None — called with (done, n) after each batch
    workers : int or None — processes to share the chunks (None: one per CPU when there are at
        least :data:`PARALLEL_MIN` variants; 1: in this process). From :data:`PARALLEL_MIN`
        variants the chunks are at most n / :data:`PARALLEL_SPLIT` long, whatever the workers, so
        that the same variants give the same numbers to the last bit (:mod:`kickback.parallel`).

    Returns
    -------
    (columns, ok, why, fits) — figure columns (n,), bool ok (n,), reasons (n,) object, fit notes
    """
    from kickback.engine.batch_params import value_getter

    var, n = normalize_variations(case, variations)
    get_all = value_getter(case, var, n)
    cap = np.nan_to_num(get_all("coil.capacitance")) + np.nan_to_num(get_all("switch.capacitance"))
    for k, cl in enumerate(case.clamps):
        if all(el.type == "capacitor" for el in cl.elements):
            cap = cap + sum(np.nan_to_num(get_all(f"clamp[{k}].element[{j}].capacitance"))
                            for j in range(len(cl.elements)))
    if workers is None:
        workers = (os.cpu_count() or 1) if n >= PARALLEL_MIN else 1
    workers = max(1, int(workers))
    if n >= PARALLEL_MIN:  # cut by n alone, never by the workers: the same chunks, the same last bits
        chunk = max(1, min(chunk, -(-n // PARALLEL_SPLIT)))
    jobs = []
    for flag in (False, True):
        rows_all = np.nonzero((cap > 0) == flag)[0]
        jobs += [rows_all[s:s + chunk] for s in range(0, rows_all.size, chunk)]
    cols: dict = {}
    ok = np.zeros(n, bool)
    why = np.full(n, "", dtype=object)
    fits: list = []
    done = 0
    for rows, (c, ok_r, why_r, notes) in zip(jobs, _map_chunks(case, var, jobs, workers), strict=True):
        for key, val in c.items():
            if key not in cols:
                cols[key] = np.full(n, np.nan)
            cols[key][rows] = val
        ok[rows] = ok_r
        why[rows] = why_r
        fits += [note for note in notes if note not in fits]
        done += rows.size
        if progress is not None:
            progress(done, n)
    return cols, ok, why, fits


#: variants from which run_columns shares the work among the CPUs by default
PARALLEL_MIN = 5_000
#: chunks a large run is cut into at least (fixed, so that results do not depend on the workers)
PARALLEL_SPLIT = 8


def _map_chunks(case, var, jobs, workers):
    """Each chunk's (columns, ok, why, fit notes), in order, through :mod:`kickback.parallel`
    (the current executor, else ``workers`` processes of the persistent pool if > 1)."""
    from kickback.parallel import map_ordered

    args = [(case, {k: v[rows] for k, v in var.items()}, rows.size) for rows in jobs]
    yield from map_ordered(_run_chunk_args, args, workers=workers, group=1)


def _run_chunk_args(args):
    return _run_chunk(*args)


def _run_chunk(case, var, n):
    """One batch: (columns, ok, why, fit notes) of its n variants."""
    from kickback.engine.batch import run
    from kickback.engine.batch_params import BatchCircuit, value_getter

    bc = BatchCircuit(case, n, value_getter(case, var, n))
    st = run(bc)
    return columns(bc, st), bc.ok, bc.why, list(bc.fit_notes)
