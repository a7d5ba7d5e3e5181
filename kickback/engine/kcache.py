"""numba's on-disk cache of the compiled circuit, invalidated by the modules it calls into.

numba keys a cached function by the source of the file that defines it only; a function that
calls into another module (RHS in ``kcircuit`` calling the chain solve in ``kseries`` and the laws
in ``klaws``) was loaded from the cache unchanged after an edit of the callee's module: stale
code, silently (a test of a changed law then ran the old one). This module registers, ahead of
numba's own, a cache locator for the files listed in :data:`DEPENDS` whose source stamp is the
digest of the file together with the files it calls into. It uses numba's cache-locator classes
(``numba.core.caching``), not a public interface: where they are missing, nothing is registered
and numba's own keying applies (the stale-cache hazard then remains; clear ``__pycache__``
after editing a callee).
"""

from __future__ import annotations

import hashlib
import os

_HERE = os.path.dirname(os.path.abspath(__file__))
#: file -> the files (same folder) whose compiled functions it calls
DEPENDS = {
    "kcircuit.py": ("kbase.py", "knode.py", "kfloat.py", "kchain.py", "kseries.py", "klaws.py"),
    "knode.py": ("kbase.py", "kfloat.py", "kchain.py", "kseries.py", "klaws.py"),
    "kfloat.py": ("kbase.py", "kchain.py", "kseries.py", "klaws.py"),
    "kbase.py": ("kchain.py", "kseries.py", "klaws.py"),
    "kchain.py": ("kseries.py", "klaws.py"),
    "kseries.py": ("klaws.py",),
}
REGISTERED = False


def _stamp(py_file: str) -> bytes:
    h = hashlib.sha256()
    for name in (os.path.basename(py_file), *DEPENDS[os.path.basename(py_file)]):
        with open(os.path.join(_HERE, name), "rb") as f:
            h.update(f.read())
    return h.digest()


def _ours(py_file: str) -> bool:
    return os.path.dirname(os.path.abspath(py_file)) == _HERE and os.path.basename(py_file) in DEPENDS


def register() -> None:
    """Put the dependency-aware locators first in numba's list (once; no-op if numba's cache
    classes are not where this version expects them)."""
    global REGISTERED
    if REGISTERED:
        return
    try:
        from numba.core import caching
        impl, user, tree = caching.CacheImpl, caching.UserProvidedCacheLocator, caching.InTreeCacheLocator
    except (ImportError, AttributeError):  # pragma: no cover - another numba layout
        return

    class UserDirLocator(user):
        @classmethod
        def from_function(cls, py_func, py_file):
            return super().from_function(py_func, py_file) if _ours(py_file) else None

        def get_source_stamp(self):
            return _stamp(self._py_file)

    class TreeLocator(tree):
        @classmethod
        def from_function(cls, py_func, py_file):
            return super().from_function(py_func, py_file) if _ours(py_file) else None

        def get_source_stamp(self):
            return _stamp(self._py_file)

    impl._locator_classes = [UserDirLocator, TreeLocator, *impl._locator_classes]
    REGISTERED = True
