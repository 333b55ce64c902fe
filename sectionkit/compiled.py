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
from llvmlite import ir
from numba.core import types
from numba.extending import intrinsic

F = TypeVar("F", bound=Callable[..., Any])


def kernel(func: F | None = None, *, inline: bool = False) -> Any:
    """Compile ``func`` as a sectionkit kernel (numba, cached, GIL released, IEEE arithmetic).

    ``error_model="numpy"``: a division by zero gives inf or NaN as numpy does,
    rather than raising. ``@kernel(inline=True)`` marks a small per-point
    function to be inlined into the kernels that call it (numba's
    ``inline="always"``), so their loops can be vectorized across points
    (each point's arithmetic unchanged).
    """
    options = dict(cache=True, nogil=True, fastmath=False, error_model="numpy")
    if inline:
        options["inline"] = "always"
    if func is None:
        return lambda f: numba.njit(**options)(f)
    return numba.njit(**options)(func)


@intrinsic
def ieee_sqrt(typingctx: Any, x: Any) -> Any:
    """Square root of a float64 as the LLVM instruction ``llvm.sqrt`` (for use in kernels).

    IEEE 754 requires the square root to be correctly rounded, so this is the
    value of ``math.sqrt`` (NaN for a negative number, as the C library), but
    unlike numba's ``math.sqrt`` (a call into the C library, which may set
    ``errno``) the compiler may evaluate it on several numbers at once: a loop
    that uses it can be vectorized, with each result unchanged.
    """
    if not isinstance(x, types.Float):
        return None
    sig = types.float64(types.float64)

    def codegen(context: Any, builder: Any, signature: Any, args: Any) -> Any:
        value = context.cast(builder, args[0], signature.args[0], types.float64)
        sqrt = builder.module.declare_intrinsic("llvm.sqrt", [ir.DoubleType()])
        return builder.call(sqrt, [value])

    return sig, codegen
