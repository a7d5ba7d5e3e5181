"""The stepping loop of the 3-stage Radau IIA integrator (order 5), written for numba.

One function, :func:`integrate_loop`, holds the whole step: simplified Newton iterations on the
transformed stage system, the collocation-residual check for a kept Jacobian, the filtered
error estimate, the step-size control, dense output and event location. It takes the
right-hand side, Jacobian and event functions as arguments of a fixed type
(``f(t, y, params)`` on float64 arrays), so one compiled (and cached) loop serves every problem;
``kickback.engine.radau5`` compiles it and turns its status into a result.

Algorithm (Hairer & Wanner, Solving ODEs II, 2nd ed. 1996, §IV.8):

* Newton: :math:`(h^{-1}\\Lambda \\otimes I - I \\otimes J)\\,\\Delta W = -h^{-1}(\\Lambda \\otimes I) W
  + (T^{-1} \\otimes I) F(Z)`, :math:`Z = (T \\otimes I) W` — one real and one complex LU;
  rate :math:`\\Theta_k = \\|\\Delta Z^k\\| / \\|\\Delta Z^{k-1}\\|`, :math:`\\eta_k = \\Theta_k/(1-\\Theta_k)`,
  stop when :math:`\\eta_k \\|\\Delta Z^k\\| \\le \\kappa\\,\\mathrm{Tol}`; give up when
  :math:`\\Theta_k \\ge 1` or :math:`\\Theta_k^{k_{max}-k}/(1-\\Theta_k)\\|\\Delta Z^k\\| > \\kappa\\,\\mathrm{Tol}`;
  :math:`\\eta_0 = \\max(\\eta_{old}, \\epsilon)^{0.8}`.
* Error: :math:`\\mathrm{err} = (I - h\\gamma_0 J)^{-1}[h\\gamma_0 f(t_0, y_0) + \\sum e_i Z_i]`, and on a
  first or rejected step with err ≥ 1 the second pass with :math:`f(t_0, y_0 + \\mathrm{err})`.
* Step: :math:`h_{new} = h \\min(\\mathrm{fac}\\,\\mathrm{err}^{-1/4},\\;
  \\mathrm{fac}\\,(h/h_{acc})(\\mathrm{err}_{acc}/\\mathrm{err}^2)^{1/4})` (Gustafsson's predictive
  controller), fac = 0.9·(2k_max+1)/(2k_max+k).
* Jacobian kept after a step whose Newton rate was ≤ 1e-3; LU kept when h would change by a
  factor in [1, 1.2].
* Residual check (kickback's addition, see ``radau_check.py``): a simplified Newton iteration
  whose Jacobian is far from the true one (a clamp law switching off inside the step) makes tiny
  corrections and "converges" on a wrong stage solution. ``residual_check = 1``: a step
  converged with a kept Jacobian must have a collocation residual
  :math:`Z - h(A \\otimes I)F(Z)` within the error tolerance, else the Jacobian is refreshed and
  the step repeated. ``residual_check = 2``: every converged step takes one more Newton
  correction with the Jacobian at its end point; it must be within the tolerance, else the
  step is halved (the end Jacobian and its factors serve the next step).
"""

from __future__ import annotations

import numpy as np

from kickback.engine.radau5_newton import newton_correction, newton_matrices
from kickback.engine.radau5_store import EPS, bracket_step, first_step_guess, first_trial, grow1, grow2, grow3
from kickback.engine.radau5_tableau import DENSE, GAMMA, TI, A, C, E, dense_eval, lu_solve

NEWTON_MAX = 7
SAFETY = 0.9
FAC_MIN = 0.2
FAC_MAX = 8.0
THETA_KEEP_JAC = 1e-3
LU_KEEP_LOW = 1.0
LU_KEEP_HIGH = 1.2
#: collocation residual (RMS, in units of the error scale) accepted for a kept Jacobian
RESIDUAL_LIMIT = 1.0
#: counters returned by the loop (indices)
NFEV, NJEV, NLU, NACC, NREJ, NNEWTON_FAIL, NRESIDUAL_REJECT, NNEWTON_ITER, REASON = range(9)
#: reason of the last failed attempt
R_NONE, R_NEWTON, R_ERROR, R_NONFINITE, R_SINGULAR, R_RESIDUAL = range(6)
#: status codes
ST_DONE, ST_EVENT, ST_TOO_MANY, ST_UNDERFLOW, ST_BAD_START, ST_FIXED_FAILED = 0, 1, -1, -2, -3, -4


def integrate_loop(rhs, jac, events, t0, t_end, y0, params, rtol, atol, first_step, max_step, max_steps,
                   ev_dir, ev_term, fixed_step, residual_check, newton_tol):
    n = y0.size
    cnt = np.zeros(9, np.int64)
    t = t0
    y = y0.copy()
    f0 = rhs(t, y, params)
    cnt[NFEV] += 1
    scale = atol + rtol * np.abs(y)
    cap = 64
    ts = np.empty(cap)
    hs = np.zeros(cap)
    ys = np.empty((cap, n))
    dc = np.zeros((cap, 3, n))
    ts[0] = t
    ys[0] = y
    nst = 1
    nev = ev_dir.size
    ecap = 8
    ev_i = np.empty(ecap, np.int64)
    ev_t = np.empty(ecap)
    ev_y = np.empty((ecap, n))
    ne = 0
    if not np.all(np.isfinite(f0)):
        cnt[REASON] = R_NONFINITE
        return ST_BAD_START, ts[:1].copy(), hs[:1].copy(), ys[:1].copy(), dc[:1].copy(), ev_i[:0].copy(), \
            ev_t[:0].copy(), ev_y[:0].copy(), cnt
    g_old = events(t, y, params) if nev > 0 else np.zeros(0)
    J = jac(t, y, params)
    cnt[NJEV] += 1
    jac_fresh = True
    if max_step <= 0.0:
        max_step = np.inf
    if fixed_step > 0.0:
        h = fixed_step
    elif first_step > 0.0:
        h = first_step
    else:
        h0 = first_trial(y, f0, scale, t_end - t0)
        f1 = rhs(t + h0, y + h0 * f0, params)
        cnt[NFEV] += 1
        h = first_step_guess(y, f0, f1, h0, scale, 3.0)
    h = min(h, max_step)
    lur = np.empty((n, n))
    luc = np.empty((n, n), np.complex128)
    pivr = np.empty(n, np.int64)
    pivc = np.empty(n, np.int64)
    lur2 = np.empty((n, n))
    luc2 = np.empty((n, n), np.complex128)
    pivr2 = np.empty(n, np.int64)
    pivc2 = np.empty(n, np.int64)
    end_ok = False
    J_end = J
    h_lu = -1.0
    Z = np.zeros((3, n))
    W = np.zeros((3, n))
    F = np.zeros((3, n))
    dZ = np.zeros((3, n))
    br = np.empty(n)
    bc = np.empty(n, np.complex128)
    y_new = np.empty(n)
    tmp = np.empty(n)
    d_prev = np.zeros((3, n))
    y_prev = y.copy()
    h_prev = 0.0
    have_prev = False
    eta_old = 1.0
    first = True
    rejected = False
    h_acc = 0.0
    err_acc = 0.0
    status = ST_DONE
    while True:
        if t >= t_end:
            break
        if cnt[NACC] >= max_steps:
            status = ST_TOO_MANY
            break
        if not (h > 10.0 * EPS * abs(t)) or not np.isfinite(h):
            status = ST_UNDERFLOW
            break
        end_ok = False
        last = t + h >= t_end
        if last:
            h = t_end - t
        if h != h_lu:
            cnt[NLU] += 1
            if not newton_matrices(J, h, lur, pivr, luc, pivc):
                cnt[REASON] = R_SINGULAR
                h_lu = -1.0
                if fixed_step > 0.0:
                    status = ST_FIXED_FAILED
                    break
                h *= 0.5
                continue
            h_lu = h
        # starting values: the previous step's collocation polynomial, extrapolated
        for i in range(3):
            if have_prev:
                dense_eval(1.0 + C[i] * h / h_prev, y_prev, d_prev, tmp)
                Z[i] = tmp - y
            else:
                Z[i] = 0.0
        for i in range(3):
            W[i] = TI[i, 0] * Z[0] + TI[i, 1] * Z[1] + TI[i, 2] * Z[2]
        scale = atol + rtol * np.abs(y)
        # simplified Newton iteration on the transformed system
        conv = False
        eta = max(eta_old, EPS) ** 0.8
        dn_old = 0.0
        theta = 0.0
        nit = 0
        for k in range(NEWTON_MAX):
            nit = k + 1
            for i in range(3):
                F[i] = rhs(t + C[i] * h, y + Z[i], params)
            cnt[NFEV] += 3
            cnt[NNEWTON_ITER] += 1
            if not np.all(np.isfinite(F)):
                cnt[REASON] = R_NONFINITE
                break
            dn = newton_correction(F, W, h, lur, pivr, luc, pivc, br, bc, dZ, scale)
            if not np.isfinite(dn):
                cnt[REASON] = R_NONFINITE
                break
            if k > 0:
                theta = dn / dn_old
                if theta >= 1.0 or theta ** (NEWTON_MAX - 1 - k) / (1.0 - theta) * dn > newton_tol:
                    cnt[REASON] = R_NEWTON
                    break
                eta = theta / (1.0 - theta)
            for j in range(n):
                W[0, j] += br[j]
                W[1, j] += bc[j].real
                W[2, j] += bc[j].imag
            Z += dZ
            if eta * dn <= newton_tol or dn == 0.0:
                conv = True
                break
            dn_old = dn
        if not conv and nit == NEWTON_MAX and cnt[REASON] != R_NONFINITE:
            cnt[REASON] = R_NEWTON
        if conv and (residual_check == 2 or (residual_check == 1 and not jac_fresh)):
            for i in range(3):
                F[i] = rhs(t + C[i] * h, y + Z[i], params)
            cnt[NFEV] += 3
            if residual_check == 1:
                res = 0.0
                for i in range(3):
                    for j in range(n):
                        r = Z[i, j] - h * (A[i, 0] * F[0, j] + A[i, 1] * F[1, j] + A[i, 2] * F[2, j])
                        res += (r / scale[j]) ** 2
                res = np.sqrt(res / (3 * n))
            else:
                # one more Newton correction, with the Jacobian at the step's end point
                J_end = jac(t + h, y + Z[2], params)
                cnt[NJEV] += 1
                end_ok = newton_matrices(J_end, h, lur2, pivr2, luc2, pivc2)
                cnt[NLU] += 1
                res = newton_correction(F, W, h, lur2, pivr2, luc2, pivc2, br, bc, dZ, scale) if end_ok else np.inf
            if not (res <= RESIDUAL_LIMIT):
                conv = False
                cnt[NRESIDUAL_REJECT] += 1
                cnt[REASON] = R_RESIDUAL
        if not conv:
            cnt[NNEWTON_FAIL] += 1
            if fixed_step > 0.0:
                status = ST_FIXED_FAILED
                break
            if not jac_fresh:
                J = jac(t, y, params)
                cnt[NJEV] += 1
                jac_fresh = True
            else:
                h *= 0.5
            h_lu = -1.0
            rejected = True
            continue
        eta_old = eta
        y_new[:] = y + Z[2]
        # embedded error estimate, filtered through (I - h gamma0 J)^-1
        ez = E[0] * Z[0] + E[1] * Z[1] + E[2] * Z[2]
        err = f0 + (GAMMA / h) * ez
        lu_solve(lur, pivr, err)
        sc = atol + rtol * np.maximum(np.abs(y), np.abs(y_new))
        en = np.sqrt(np.mean((err / sc) ** 2))
        if en >= 1.0 and (first or rejected) and fixed_step <= 0.0:
            fe = rhs(t, y + err, params)
            cnt[NFEV] += 1
            err = fe + (GAMMA / h) * ez
            lu_solve(lur, pivr, err)
            en = np.sqrt(np.mean((err / sc) ** 2))
        if not np.isfinite(en):
            en = np.inf
        fac = min(SAFETY, SAFETY * (2 * NEWTON_MAX + 1) / (2 * NEWTON_MAX + nit))
        en_c = max(en, 1e-10)
        factor = fac * en_c ** -0.25
        if en >= 1.0 and fixed_step <= 0.0:
            cnt[NREJ] += 1
            cnt[REASON] = R_ERROR
            h *= 0.1 if first else max(FAC_MIN, factor)
            rejected = True
            if not jac_fresh:
                J = jac(t, y, params)
                cnt[NJEV] += 1
                jac_fresh = True
                h_lu = -1.0
            continue
        # accepted
        if not first:
            factor = min(factor, fac * (h / h_acc) * (err_acc / en_c ** 2) ** 0.25)
        factor = min(FAC_MAX, max(FAC_MIN, factor))
        h_acc = h
        err_acc = max(1e-2, en)
        for i in range(3):
            d_prev[i] = DENSE[i, 0] * Z[0] + DENSE[i, 1] * Z[1] + DENSE[i, 2] * Z[2]
        y_prev[:] = y
        t_old = t
        t = t_end if last else t + h
        y[:] = y_new
        h_prev = h
        have_prev = True
        first = False
        rejected = False
        cnt[NACC] += 1
        if nst == cap:
            cap *= 2
            ts = grow1(ts, cap)
            hs = grow1(hs, cap)
            ys = grow2(ys, cap)
            dc = grow3(dc, cap)
        ts[nst] = t
        hs[nst] = h
        ys[nst] = y
        dc[nst] = d_prev
        nst += 1
        # events: sign changes over the step, roots on the collocation polynomial
        if nev > 0:
            g_new = events(t, y, params)
            th_stop = 2.0
            n_found = 0
            found_i = np.empty(nev, np.int64)
            found_th = np.empty(nev)
            for e in range(nev):
                up = g_old[e] < 0.0 <= g_new[e]
                down = g_old[e] > 0.0 >= g_new[e]
                if not ((up and ev_dir[e] >= 0) or (down and ev_dir[e] <= 0)):
                    continue
                a, b, ga, gb = 0.0, 1.0, g_old[e], g_new[e]
                side = 0
                for _ in range(200):
                    if (b - a) * h <= 4.0 * EPS * max(abs(t), abs(t_old)) + 1e-300:
                        break
                    m = bracket_step(ga, gb, a, b)
                    dense_eval(m, y_prev, d_prev, tmp)
                    gm = events(t_old + m * h, tmp, params)[e]
                    if (gm < 0.0) == (ga < 0.0) and gm != 0.0:
                        a, ga = m, gm
                        if side == -1:
                            gb *= 0.5
                        side = -1
                    else:
                        b, gb = m, gm
                        if side == 1:
                            ga *= 0.5
                        side = 1
                found_i[n_found] = e
                found_th[n_found] = b
                n_found += 1
                if ev_term[e] != 0 and b < th_stop:
                    th_stop = b
            for q in range(n_found):
                if found_th[q] > th_stop:
                    continue
                if ne == ecap:
                    ecap *= 2
                    ev_i = grow1(ev_i, ecap)
                    ev_t = grow1(ev_t, ecap)
                    ev_y = grow2(ev_y, ecap)
                dense_eval(found_th[q], y_prev, d_prev, tmp)
                ev_i[ne] = found_i[q]
                ev_t[ne] = t_old + found_th[q] * h
                ev_y[ne] = tmp
                ne += 1
            g_old = g_new
            if th_stop <= 1.0:
                dense_eval(th_stop, y_prev, d_prev, tmp)
                t = t_old + th_stop * h
                y[:] = tmp
                ts[nst - 1] = t
                ys[nst - 1] = y
                status = ST_EVENT
                break
        f0 = rhs(t, y, params)
        cnt[NFEV] += 1
        if fixed_step > 0.0:
            h = fixed_step
            J = jac(t, y, params)
            cnt[NJEV] += 1
            h_lu = -1.0
            continue
        h_new = min(h * factor, max_step)
        if residual_check == 2 and end_ok:
            # the Jacobian and matrices of the check belong to the new start point
            J = J_end
            lur, lur2 = lur2, lur
            luc, luc2 = luc2, luc
            pivr, pivr2 = pivr2, pivr
            pivc, pivc2 = pivc2, pivc
            h_lu = h
            jac_fresh = True
            if LU_KEEP_LOW <= h_new / h <= LU_KEEP_HIGH:
                h_new = h
            h = h_new
            continue
        keep = theta <= THETA_KEEP_JAC
        if keep and LU_KEEP_LOW <= h_new / h <= LU_KEEP_HIGH:
            h_new = h
        if keep:
            jac_fresh = False
        else:
            J = jac(t, y, params)
            cnt[NJEV] += 1
            jac_fresh = True
            h_lu = -1.0
        h = h_new
    return status, ts[:nst].copy(), hs[:nst].copy(), ys[:nst].copy(), dc[:nst].copy(), ev_i[:ne].copy(), \
        ev_t[:ne].copy(), ev_y[:ne].copy(), cnt
