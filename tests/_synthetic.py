"""Small synthetic sections for engine tests (canonical Dataset, no files)."""

from __future__ import annotations

import gsw
import numpy as np
import xarray as xr


def canonical_section(
    sa: np.ndarray,
    ct: np.ndarray,
    p: np.ndarray,
    lon: np.ndarray,
    lat: np.ndarray,
    bottom: np.ndarray | None = None,
    name: str = "test",
) -> xr.Dataset:
    """Wrap arrays (station, pressure) as the canonical gridded section."""
    lon = np.asarray(lon, float)
    lat = np.asarray(lat, float)
    if bottom is None:
        finite = np.isfinite(sa)
        bottom = np.array([p[np.flatnonzero(row)[-1]] for row in finite])
    bottom = np.asarray(bottom, float)
    return xr.Dataset(
        {
            "SA": (("station", "pressure"), sa, {"units": "g/kg"}),
            "CT": (("station", "pressure"), ct, {"units": "degC"}),
            "lat": ("station", lat, {"units": "degrees_north"}),
            "lon": ("station", lon, {"units": "degrees_east"}),
            "bottom_pressure": ("station", bottom, {"units": "dbar"}),
            "bottom_depth": ("station", -gsw.z_from_p(bottom, lat), {"units": "m"}),
        },
        coords={"pressure": p, "station": [str(i + 1) for i in range(lon.size)]},
        attrs={"section": name, "dp": float(p[1] - p[0])},
    )


def thermocline_section(
    n: int = 6,
    dp: float = 10.0,
    lat0: float = 30.0,
    lon0: float = -40.0,
    lon1: float = -35.0,
    bottoms: np.ndarray | None = None,
    tilt: float = 300.0,
    name: str = "test",
) -> xr.Dataset:
    """A west-to-east line whose thermocline deepens eastward by ``tilt`` metres.

    The eastern stations are warmer at depth, so relative to the deep water
    the upper ocean flows north (to the left of an eastward line) in the
    northern hemisphere.
    """
    bottoms = np.linspace(3000.0, 4800.0, n) if bottoms is None else np.asarray(bottoms, float)
    p = np.arange(0.0, bottoms.max() + dp, dp)
    x = np.linspace(0.0, 1.0, n)[:, None]
    ct = 2.0 + 18.0 * np.exp(-p / (700.0 + tilt * x))
    sa = 34.9 + 1.2 * np.exp(-p / 900.0) + 0.05 * x
    below = p[None, :] > bottoms[:, None]
    ct = np.where(below, np.nan, ct)
    sa = np.where(below, np.nan, sa)
    return canonical_section(sa, ct, p, np.linspace(lon0, lon1, n), np.full(n, lat0), bottoms,
                             name)


def invented_line(n: int, lat0: float, dp: float = 10.0, pmax: float = 4000.0) -> xr.Dataset:
    """A canonical gridded section (docs/CONTRACTS-INTERNAL.md), made up."""
    p = np.arange(0.0, pmax + dp / 2, dp)
    lon = np.linspace(-40.0, -35.0, n)
    lat = np.full(n, lat0)
    bottoms = np.linspace(2600.0, pmax - 5.0, n)
    x = np.linspace(0.0, 1.0, n)[:, None]
    ct = 2.0 + 18.0 * np.exp(-p / (700.0 + 300.0 * x))
    sa = 34.9 + 1.2 * np.exp(-p / 900.0) + 0.1 * x
    below = p[None, :] > bottoms[:, None]
    return xr.Dataset(
        {
            "SA": (("station", "pressure"), np.where(below, np.nan, sa)),
            "CT": (("station", "pressure"), np.where(below, np.nan, ct)),
            "lat": ("station", lat),
            "lon": ("station", lon),
            "bottom_pressure": ("station", bottoms),
            "bottom_depth": ("station", -gsw.z_from_p(bottoms, lat)),
        },
        coords={"pressure": p, "station": [f"K{i + 1}" for i in range(n)]},
        attrs={"section": "line", "dp": dp},
    )
