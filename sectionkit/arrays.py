"""Plain numpy arrays of xarray variables, with named core dimensions last.

The kernels take the vertical axis last and broadcast leading dimensions;
this is the one step from a named variable to such an array.
"""

from __future__ import annotations

import numpy as np
import xarray as xr


def core_last(variable: xr.DataArray | xr.Variable, *core: str) -> np.ndarray:
    """The values of ``variable`` with the dimensions ``core`` last, in that order.

    Parameters
    ----------
    variable : xr.DataArray or xr.Variable
        Any variable holding every dimension of ``core``; any unit.
    *core : str
        The core dimension names, e.g. ``"station", "pressure"``.

    Returns
    -------
    ndarray
        The values themselves when the dimensions are already in that order
        (no copy, no xarray transpose), else the transposed values.
    """
    if variable.dims[len(variable.dims) - len(core):] == core:
        return variable.values
    return variable.transpose(..., *core).values
