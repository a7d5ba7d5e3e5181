"""The compile switch of the Radau IIA integrator: numba ``njit`` with an on-disk cache.

numba caches a compiled function next to its module (``__pycache__``) or, when that folder is
not writable, in a user-wide cache folder (``NUMBA_CACHE_DIR`` when set). Where neither can be
written, caching is impossible and numba refuses ``cache=True`` at decoration; the function is
then compiled in memory for each process (slower to start, same results).
"""

from __future__ import annotations

import numba

#: True when the last decorated function could not be cached (no writable cache folder)
CACHE_UNAVAILABLE = False


def jit(fn=None, *, signature=None):
    """``numba.njit(signature, cache=True)``, falling back to an uncached compile.

    Parameters
    ----------
    fn : callable
        Plain Python function (kept as ``.py_func`` on the result for the uncompiled path).
    signature : tuple of numba types, optional
        Argument types for an eager, cacheable compile (needed for first-class function
        arguments: their type then does not depend on the function object passed).
    """
    global CACHE_UNAVAILABLE

    def wrap(f):
        global CACHE_UNAVAILABLE
        args = () if signature is None else (signature,)
        try:
            return numba.njit(*args, cache=True)(f)
        except RuntimeError:  # "cannot cache function ...: no locator available"
            CACHE_UNAVAILABLE = True
            return numba.njit(*args, cache=False)(f)

    return wrap if fn is None else wrap(fn)
