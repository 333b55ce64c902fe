"""Compiled kernels: the one place that says how sectionkit compiles its inner loops.

The grid-point loops of the operator build (pair means, class weights, class
integrals, dynamic-height integration) run as numba kernels: one pass over a
(pair, level) array instead of a chain of numpy passes that each write a fresh
array. A kernel keeps the arithmetic of the numpy formula it replaces, in the
same order, without fast-math (no reassociation, no fused multiply-add), so its
results do not depend on the processor; compiled code is cached on disk beside
the module (numba's ``cache=True``), so only the first run on a machine pays
the compilation. Kernels release the GIL: dask's threaded workers run them in
parallel.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, TypeVar

import numba

F = TypeVar("F", bound=Callable[..., Any])


def kernel(func: F) -> F:
    """Compile ``func`` as a sectionkit kernel (numba, cached, GIL released, IEEE arithmetic).

    ``error_model="numpy"``: a division by zero gives inf or NaN as numpy does,
    rather than raising.
    """
    return numba.njit(cache=True, nogil=True, fastmath=False, error_model="numpy")(func)
