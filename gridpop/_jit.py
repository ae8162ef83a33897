"""numba settings, defined once for every kernel in the package.

``cache=True`` keeps compiled kernels on disk (``__pycache__`` beside the module), so the second
run of a session starts without compiling. ``fastmath`` is off: results must be bit-identical
across machines with the same numba build, and NaN handling must stay IEEE.
"""

from __future__ import annotations

import numba

njit = numba.njit(cache=True, nogil=True)
"""Serial kernel."""

pjit = numba.njit(cache=True, nogil=True, parallel=True)
"""Kernel whose ``numba.prange`` loops run on numba's thread pool."""

prange = numba.prange
