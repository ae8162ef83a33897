"""numba settings, defined once for every kernel in the package.

``cache=True`` keeps compiled kernels on disk (``__pycache__`` beside the module), so the second
run of a session starts without compiling. ``fastmath`` is off: results must be bit-identical
across machines with the same numba build, and NaN handling must stay IEEE.

Time to first result (an empty cache) is mostly compiling, so:

- A :func:`pjit` kernel has two variants, each compiled on first use: a serial one for grids
  below :data:`PARALLEL_CELLS` cells and a ``parallel=True`` one above. Compiling a parallel kernel
  costs several times the serial one and, on a small grid, running it in parallel saves less
  than starting the threads costs; a run compiles only the variant its grid uses.
- numba compiles a separate copy of a kernel for every literal constant argument it is called
  with from another kernel (``uniform(key, 0)``, ``uniform(key, 1)``): kernels pass integer
  constants as typed values (``uniform(key, np.int64(0))``), and cast a ``prange`` index
  (unsigned) with ``np.int64`` before handing it on, so that callees are compiled once.
- No kernel gets a C callback wrapper (``no_cfunc_wrapper``): they are called from Python or from
  other kernels, never through a C function pointer, and the wrappers were 4 % of the demo's
  compile time.
- With an empty cache, a run on a small grid compiles in two processes at once
  (:mod:`gridpop.simulation.warmup`); :func:`_lock_cache_files` makes that safe.
"""

from __future__ import annotations

import functools
import inspect
import os
import types

import numba

OPTIONS = {"cache": True, "nogil": True, "no_cfunc_wrapper": True}
"""Every kernel's numba options (numba's type stubs leave ``no_cfunc_wrapper`` out)."""

njit = numba.njit(**OPTIONS)  # type: ignore[call-overload]
"""Serial kernel."""

prange = numba.prange

PARALLEL_CELLS = 32768
"""A :func:`pjit` kernel runs in parallel on a grid of at least this many cells (and when numba
has more than one thread), serially on a smaller one."""


class SizedKernel:
    """A kernel with a serial and a parallel variant, each compiled on its first call.

    Both run the same code, whose ``prange`` loops the serial variant runs as plain loops; the
    kernels are written so that their results do not depend on the number of threads, so the two
    give identical results. Called from Python only: another kernel cannot call it.
    """

    def __init__(self, func, grid: str | None):
        self.py_func = func
        self.__doc__, self.__name__ = func.__doc__, func.__name__
        names = list(inspect.signature(func).parameters)
        if grid is not None and grid not in names:
            raise TypeError(f"{func.__qualname__} has no argument {grid!r}")
        self.grid = None if grid is None else names.index(grid)
        """Position of the argument whose first two axes are the grid; None: no grid."""
        self.parallel = numba.njit(parallel=True, **OPTIONS)(func)  # type: ignore[call-overload]
        # numba's cache tells functions apart by qualified name, not by options: the serial
        # variant is a copy of the function under its own name
        serial = types.FunctionType(func.__code__, func.__globals__, func.__name__,
                                    func.__defaults__, func.__closure__)
        serial.__qualname__ = f"{func.__qualname__}_serial"
        self.serial = njit(serial)

    def __call__(self, *args):
        return self.variant(*args)(*args)

    def variant(self, *args):
        """The dispatcher that :meth:`__call__` uses for these arguments (positional, as
        :meth:`__call__` takes them; enough of them to reach the grid argument): serial below
        :data:`PARALLEL_CELLS` cells of the grid argument or with one thread, parallel above it
        or for a kernel whose work is not a grid."""
        if numba.get_num_threads() == 1:
            return self.serial
        if self.grid is None:
            return self.parallel
        shape = args[self.grid].shape
        return self.parallel if shape[0] * shape[1] >= PARALLEL_CELLS else self.serial


def cache_folder(kernel) -> str:
    """Where numba keeps the kernel's compiled code: ``NUMBA_CACHE_DIR``, or ``__pycache__``
    beside its module, or numba's per-user folder when that is read-only."""
    return kernel._cache._cache_path


def pjit(*, grid: str | None):
    """Kernel whose ``numba.prange`` loops run on numba's thread pool on large grids (see
    :class:`SizedKernel`): ``grid`` names the argument whose first two axes (rows, columns) are
    the grid whose size decides, or is None for work that is not a grid (always parallel)."""
    return lambda func: SizedKernel(func, grid)


def _lock_cache_files() -> bool:
    """Make numba's cache safe for several processes compiling into it at once.

    numba saves a compiled signature by reading the function's index file, picking a data file
    name the index does not use yet and writing the index and then the data file, each replaced
    whole. Two processes saving two signatures of one function at the same moment can both pick
    the same data file, leaving an index entry that names the other signature's code; and a
    reader can find an entry whose data file is not written yet. Here every save of a cache
    entry holds an exclusive ``flock`` on the cache folder and every load a shared one, so each
    sees the index and the data of complete saves only, and loads do not wait for each other.
    Returns False (nothing changed) where ``flock`` does not exist.
    """
    try:
        import fcntl

        from numba.core.caching import IndexDataCacheFile
    except ImportError:
        return False

    def locked(method, mode):
        @functools.wraps(method)
        def under_lock(self, *args):
            try:
                folder = os.open(self._cache_path, os.O_RDONLY)
            except OSError:  # no cache folder yet: nothing to load, and a save creates it first
                return method(self, *args)
            try:
                fcntl.flock(folder, mode)
                return method(self, *args)
            finally:
                os.close(folder)  # releases the lock

        return under_lock

    for name, mode in (("save", fcntl.LOCK_EX), ("load", fcntl.LOCK_SH)):
        setattr(IndexDataCacheFile, name, locked(getattr(IndexDataCacheFile, name), mode))
    return True


CACHE_LOCKED = _lock_cache_files()
"""Whether saves and loads of numba's cache are locked (:func:`_lock_cache_files`)."""
