"""One place for numba options and the kernel cache location.

numba's on-disk cache keys a function on the source of *its own* file only, so
editing a helper in another module can leave a stale cached caller.  We
therefore point ``NUMBA_CACHE_DIR`` at a folder keyed on a hash of every
source file that may define kernels or constants they read (KERNEL_PACKAGES,
this file and limits.py): any edit
to any kernel starts a fresh cache.  Kernels must live in those folders.
Set ``NUMBA_CACHE_DIR`` yourself to override.
"""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

_PKG = Path(__file__).resolve().parent


#: sub-packages whose modules may define numba kernels
KERNEL_PACKAGES = ("geometry", "sampling", "materials", "integrator")


def _source_hash() -> str:
    h = hashlib.sha256()
    files = [_PKG / "_jit.py", _PKG / "limits.py"] + [p for d in KERNEL_PACKAGES for p in (_PKG / d).rglob("*.py")]
    for path in sorted(files):
        h.update(path.relative_to(_PKG).as_posix().encode())
        h.update(path.read_bytes())
    return h.hexdigest()


def _cache_dir() -> str:
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return os.path.join(base, "refrender", "numba-" + _source_hash()[:16])


if "NUMBA_CACHE_DIR" not in os.environ:
    os.environ["NUMBA_CACHE_DIR"] = _cache_dir()
# LLVM optimisation level 2 instead of numba's default 3: measured on the demo
# scene, cold compile 56 s instead of 61 s with equal or better speed (3.2 vs
# 2.9 Mrays/s); level 1 was slower.  Set NUMBA_OPT yourself to override (it
# takes effect only if numba has not been imported before refrender).
os.environ.setdefault("NUMBA_OPT", "2")

import numba  # noqa: E402  (must follow the environment set-up)

numba.config.CACHE_DIR = os.environ["NUMBA_CACHE_DIR"]

#: Options of every kernel.  ``error_model='numpy'`` makes 1/0 give inf
#: instead of raising; no fastmath, so NaN/inf checks on radiance still work
#: and results do not depend on reassociation.  No kernel is used as a
#: first-class function value, so none needs the C-callable wrapper
#: (``no_cfunc_wrapper``: less to lower and compile).
KERNEL_OPTIONS = dict(cache=True, nogil=True, error_model="numpy", no_cfunc_wrapper=True)

#: Small helpers: compiled separately, LLVM inlines them where it pays.
INLINE_OPTIONS = dict(cache=True, nogil=True, error_model="numpy", no_cfunc_wrapper=True)

#: The innermost traversal helpers that take arrays: inlined at the numba IR
#: level, which removes per-call reference counting of the array arguments
#: (measured 1.9x on traversal).  Costs compile time, so used sparingly.
HOT_OPTIONS = dict(cache=True, nogil=True, error_model="numpy", inline="always",
                   no_cfunc_wrapper=True)


def kernel(fn=None, **extra):
    """``numba.njit`` with the project's kernel options."""
    opts = dict(KERNEL_OPTIONS, **extra)
    if fn is None:
        return lambda f: numba.njit(**opts)(f)
    return numba.njit(**opts)(fn)


class _Helper(numba.core.registry.CPUDispatcher):
    """A helper compiled without its Python entry point (see inline).

    Calls from Python go to a twin dispatcher that has one; it is not cached,
    because numba's cache index does not tell the two builds apart.
    """

    def __call__(self, *args, **kwargs):
        twin = self.__dict__.get("_py_twin")
        if twin is None:
            twin = numba.njit(**dict(INLINE_OPTIONS, cache=False))(self.py_func)
            self.__dict__["_py_twin"] = twin
        return twin(*args, **kwargs)


def inline(fn):
    """``numba.njit`` for a small helper.

    Helpers are called from kernels: they are built without the Python
    wrapper, which saves a good part of the cold compile time; calling one
    from Python still works (see _Helper).
    """
    d = numba.njit(no_cpython_wrapper=True, **INLINE_OPTIONS)(fn)
    d.__class__ = _Helper
    return d


def hot(fn):
    """``numba.njit`` for a helper of the traversal inner loop (IR-inlined)."""
    return numba.njit(**HOT_OPTIONS)(fn)
