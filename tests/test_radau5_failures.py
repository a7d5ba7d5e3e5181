"""kickback's Radau IIA integrator when things go wrong: failures that say why (closed forms for
where they happen), arguments refused with their name, the plain-Python paths and the compile cache."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from radau5_problems import (
    blowup,
    blowup_jac,
    crossings,
    diode_node,
    diode_node_jac,
    linear,
    linear_jac,
    rober,
    rober_jac,
    vdp,
    vdp_jac,
)

from kickback.engine.radau5 import IntegratorArgumentError, solve


# ---------------------------------------------------------------- failures say why
def test_blow_up_ends_with_a_reason_not_a_nan():
    # y' = y^2, y(0) = 1: y = 1/(1 - t) is unbounded at t = 1 (closed form); asked to reach t = 2
    r = solve(blowup, blowup_jac, (0.0, 2.0), [1.0], rtol=1e-6, atol=1e-9)
    assert r.status < 0
    assert "step size underflow" in r.message and "unbounded" in r.message, r.message
    assert np.all(np.isfinite(r.y)), "a failed run keeps only finite accepted steps"
    # it stops at the singularity, with y huge (the position of the pole carries the global error)
    assert abs(r.t[-1] - 1.0) < 1e-6 and r.y[0, -1] > 1e6, f"stopped at t = {r.t[-1]}, y = {r.y[0, -1]}"


def test_too_many_steps_is_reported():
    r = solve(vdp, vdp_jac, (0.0, 2.0), [2.0, 0.0], [1e-6], rtol=1e-6, atol=1e-6, max_steps=20)
    assert r.status == -1 and "too many steps" in r.message and "20 accepted" in r.message
    assert r.counts["n_accepted"] == 20


def test_bad_start_and_bad_arguments():
    r = solve(blowup, blowup_jac, (0.0, 1.0), [np.finfo(float).max])  # y^2 overflows to inf at once
    assert r.status == -3 and "not finite" in r.message
    with pytest.raises(IntegratorArgumentError, match="t_span"):
        solve(blowup, blowup_jac, (1.0, 0.0), [1.0])
    with pytest.raises(IntegratorArgumentError, match="rtol"):
        solve(blowup, blowup_jac, (0.0, 1.0), [1.0], rtol=0.0)
    with pytest.raises(IntegratorArgumentError, match="one entry per event"):
        solve(linear, linear_jac, (0.0, 1.0), [1.0], [-1.0, 0.1], events=crossings, directions=[1], terminal=[0, 0])


def test_max_step_and_first_step_are_kept():
    M = np.array([[-1.0]])
    r = solve(linear, linear_jac, (0.0, 1.0), [1.0], M.ravel(), rtol=1e-6, atol=1e-9, first_step=1e-5,
              max_step=0.05)
    assert r.status == 0, r.message
    assert r.t[1] - r.t[0] == pytest.approx(1e-5)
    assert np.max(np.diff(r.t)) <= 0.05 * (1 + 1e-12)
    assert r.y[0, -1] == pytest.approx(np.exp(-1.0), rel=1e-6)  # closed form


# ---------------------------------------------------------------- the uncompiled path, the cache
def test_plain_python_path_runs_the_same_algorithm():
    kw = dict(rtol=1e-6, atol=1e-9)
    a = solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], **kw)
    b = solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], compiled=False, **kw)
    assert a.counts == b.counts
    np.testing.assert_allclose(b.y, a.y, rtol=1e-12, atol=1e-18)


def test_works_where_no_cache_folder_is_writable(tmp_path):
    # NUMBA_CACHE_DIR below a plain file cannot be created (not even by root); with only that
    # locator allowed numba refuses cache=True, and the switch compiles uncached instead
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    env = dict(os.environ, NUMBA_CACHE_DIR=str(blocker / "cache"),
               NUMBA_CACHE_LOCATOR_CLASSES="UserProvidedCacheLocator")
    code = textwrap.dedent("""
        import numpy as np
        from kickback.engine import radau5_jit
        @radau5_jit.jit
        def twice(x):
            return 2.0 * x
        assert twice(np.ones(2))[0] == 2.0
        assert radau5_jit.CACHE_UNAVAILABLE
        print("ok")
    """)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120,
                         cwd=os.path.dirname(os.path.dirname(__file__)))
    assert out.returncode == 0 and out.stdout.strip() == "ok", out.stderr


def test_wrong_output_shapes_are_refused_before_the_compiled_loop():
    # the compiled loop does not check bounds: a Jacobian of the wrong size must never reach it
    with pytest.raises(IntegratorArgumentError, match=r"jac\(t0, y0, params\) has shape \(3, 3\), expected \(2, 2\)"):
        solve(vdp, rober_jac, (0.0, 1.0), [1.0, 1.0], [1.0])
    with pytest.raises(IntegratorArgumentError, match=r"jac\(t0, y0, params\) failed"):
        solve(blowup, blowup_jac, (0.0, 1.0), [1.0, 1.0])
    with pytest.raises(IntegratorArgumentError, match="events"):
        solve(linear, linear_jac, (0.0, 1.0), [1.0], [-1.0, 0.1], events=crossings, directions=[1, 1, 1],
              terminal=[0, 0, 0])
    with pytest.raises(IntegratorArgumentError, match="atol"):
        solve(blowup, blowup_jac, (0.0, 1.0), [1.0], atol=0.0)
    with pytest.raises(IntegratorArgumentError, match="rhs is a plain Python function"):
        solve(blowup.py_func, blowup_jac, (0.0, 1.0), [1.0])


def test_exponential_law_overflowing_inside_newton_is_handled():
    # C v' = I - Is (exp(v/VT) - 1), v(0) = 0. With w = exp(-v/VT): w' = -(a w - b)/VT, a = (I + Is)/C,
    # b = Is/C, so v = -VT ln(b/a + (1 - b/a) exp(-a t/VT)) (closed form). A first step 4000 times the
    # time constant makes the Newton iterate jump to volts where exp(v/VT) overflows to inf: the
    # step must shrink, with no warning and no NaN.
    i_src, i_s, vt, c = 1e-3, 1e-14, 0.025693, 1e-9
    r = solve(diode_node, diode_node_jac, (0.0, 1e-4), [0.0], [i_src, i_s, vt, c], rtol=1e-8, atol=1e-12,
              first_step=1e-4)
    assert r.status == 0, r.message
    a, b = (i_src + i_s) / c, i_s / c
    exact = -vt * np.log(b / a + (1 - b / a) * np.exp(-a * r.t / vt))
    np.testing.assert_allclose(r.y[0], exact, rtol=1e-6, atol=1e-10)
    assert r.counts["n_newton_fail"] >= 1


def test_newton_divergence_is_named_when_it_ends_a_fixed_step_run():
    # the diode node of the test above at a fixed step 4000 times its time constant: the Newton
    # iteration cannot converge and there is no step control to help — the run stops and says so
    r = solve(diode_node, diode_node_jac, (0.0, 1e-4), [0.0], [1e-3, 1e-14, 0.025693, 1e-9], fixed_step=1e-4)
    assert r.status == -4, r.message
    assert "Newton iteration did not converge" in r.message and "non-finite" in r.message, r.message
    assert np.all(np.isfinite(r.y))


def test_numba_disabled_runs_everything_as_plain_python():
    # NUMBA_DISABLE_JIT=1 (numba's own debugging switch): the same counts as the compiled run
    code = textwrap.dedent("""
        import numpy as np
        from kickback.engine.radau5 import njit_jac, njit_rhs, solve
        @njit_rhs
        def f(t, y, p):
            return np.array([-0.04 * y[0] + 1e4 * y[1] * y[2], 0.04 * y[0] - 1e4 * y[1] * y[2] - 3e7 * y[1] ** 2,
                             3e7 * y[1] ** 2])
        @njit_jac
        def jac(t, y, p):
            return np.array([[-0.04, 1e4 * y[2], 1e4 * y[1]], [0.04, -1e4 * y[2] - 6e7 * y[1], -1e4 * y[1]],
                             [0.0, 6e7 * y[1], 0.0]])
        assert not hasattr(f, "py_func")  # really plain Python
        r = solve(f, jac, (0.0, 1.0), [1.0, 0.0, 0.0], rtol=1e-6, atol=1e-9)
        print(r.counts["n_accepted"], repr(float(r.y[0, -1])))
    """)
    env = dict(os.environ, NUMBA_DISABLE_JIT="1")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=300,
                         cwd=os.path.dirname(os.path.dirname(__file__)))
    assert out.returncode == 0, out.stderr
    steps, y_end = out.stdout.split()
    r = solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], rtol=1e-6, atol=1e-9)
    assert int(steps) == r.counts["n_accepted"]
    assert float(y_end) == pytest.approx(r.y[0, -1], rel=1e-12)
