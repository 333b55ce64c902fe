"""Invented section files for the io and thermo tests.

The ocean here is made up: a smooth stratification (warm, salty surface over
cold deep water) on an invented line of stations. Nothing is a real cruise.
Files are written atomically (temporary name, then rename).
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import gsw
import netCDF4
import numpy as np

DEFAULT_NAMES = {
    "pressure": "pres",
    "salinity": "psal",
    "temperature": "temp",
    "latitude": "lat",
    "longitude": "lon",
    "bottom_depth": "depth",
    "station": "station_name",
}
STANDARD = {
    "pressure": "sea_water_pressure",
    "latitude": "latitude",
    "longitude": "longitude",
    "bottom_depth": "sea_floor_depth_below_sea_surface",
}
SALINITY_STANDARD = {
    "practical": "sea_water_practical_salinity",
    "absolute": "sea_water_absolute_salinity",
}
TEMPERATURE_STANDARD = {
    "in-situ": "sea_water_temperature",
    "potential": "sea_water_potential_temperature",
    "conservative": "sea_water_conservative_temperature",
}
UNITS = {
    "pressure": "dbar",
    "salinity": "1",
    "temperature": "degC",
    "latitude": "degrees_north",
    "longitude": "degrees_east",
    "bottom_depth": "m",
}


def invented_section(
    n: int = 5,
    *,
    dp: float = 2.0,
    bottoms: Sequence[float] | None = None,
    lat0: float = 24.0,
    lon0: float = -40.0,
    dlon: float = 0.5,
    above_bottom: float = 8.0,
) -> dict[str, np.ndarray]:
    """A stably stratified invented section sampled every ``dp`` dbar.

    Parameters
    ----------
    n : int
        Number of stations.
    dp : float
        Sampling interval, dbar.
    bottoms : sequence of float, optional
        Bottom depth of each station, m (default 1000 .. 1200 m).
    lat0, lon0 : float
        Position of the first station, degrees_north and degrees_east.
    dlon : float
        Longitude step between stations, degrees.
    above_bottom : float
        How far above the bottom each cast ends, dbar.

    Returns
    -------
    dict
        station (list of str), lat, lon (station,), pressure, salinity
        (practical), temperature (in situ, degC) as (station, level) with NaN
        below each cast, bottom_depth (station,) in m.
    """
    if bottoms is None:
        bottoms = [1000.0 + 200.0 * np.sin(np.pi * i / max(n - 1, 1)) for i in range(n)]
    bottoms = np.asarray(bottoms, dtype=float)
    lat = lat0 + 0.05 * np.arange(n)
    lon = lon0 + dlon * np.arange(n)
    bottom_p = gsw.p_from_z(-bottoms, lat)
    ends = np.floor((bottom_p - above_bottom) / dp) * dp
    levels = np.arange(int(ends.max() / dp) + 1) * dp
    P = np.tile(levels, (n, 1))
    P[P > ends[:, None]] = np.nan
    i = np.arange(n)[:, None]
    T = 4.0 + 18.0 * np.exp(-P / 600.0) + 0.3 * i * np.exp(-P / 400.0)
    S = 34.9 + 0.9 * np.exp(-P / 500.0) + 0.02 * i * np.exp(-P / 400.0)
    return {
        "station": [f"S{k + 1:02d}" for k in range(n)],
        "lat": lat,
        "lon": lon,
        "pressure": P,
        "salinity": S,
        "temperature": T,
        "bottom_depth": bottoms,
    }


def _replace(tmp: str, path: Path) -> Path:
    os.replace(tmp, path)
    return path


def write_netcdf(
    path: str | os.PathLike,
    sec: Mapping[str, object],
    *,
    names: Mapping[str, str] | None = None,
    units: Mapping[str, str] | None = None,
    standard_names: Mapping[str, str | None] | None = None,
    salinity_kind: str = "practical",
    temperature_kind: str = "in-situ",
    layout: str = "1d",
    fill_value: float | None = None,
    with_ids: bool = True,
    with_bottom: bool = True,
    drop: Sequence[str] = (),
    pressure_axis_only: bool = False,
    single: bool = False,
) -> Path:
    """Write an invented section as a CF-NetCDF profile file.

    Parameters
    ----------
    path : path
        Target file.
    sec : mapping
        As returned by :func:`invented_section` (values in the units written).
    names : mapping, optional
        Quantity to variable name (defaults :data:`DEFAULT_NAMES`).
    units : mapping, optional
        Quantity to units attribute (defaults :data:`UNITS`).
    standard_names : mapping, optional
        Quantity to standard_name (None leaves the attribute off).
    salinity_kind, temperature_kind : str
        Which standard names salinity and temperature carry.
    layout : {"1d", "2d"}
        Shared pressure levels (1-D) or per-station pressure (2-D).
    fill_value : float, optional
        Write missing values as this _FillValue instead of NaN.
    with_ids, with_bottom : bool
        Write the profile_id and bottom depth variables.
    drop : sequence of str
        Quantities to leave out.
    pressure_axis_only : bool
        Give pressure axis = "Z" and no standard_name.
    single : bool
        Write a single profile (scalar latitude and longitude, no station
        dimension); ``sec`` must hold one station.

    Returns
    -------
    Path
        The written file.
    """
    path = Path(path)
    names = {**DEFAULT_NAMES, **(names or {})}
    units = {**UNITS, **(units or {})}
    std = {
        **STANDARD,
        "salinity": SALINITY_STANDARD[salinity_kind],
        "temperature": TEMPERATURE_STANDARD[temperature_kind],
        **(standard_names or {}),
    }
    P = np.asarray(sec["pressure"], dtype=float)
    n, m = P.shape
    tmp = f"{path}.part"
    with netCDF4.Dataset(tmp, "w") as nc:
        nc.featureType = "profile"
        nc.Conventions = "CF-1.8"
        nc.createDimension("z", m)
        if not single:
            nc.createDimension("profile", n)
        prof_dims = ("z",) if single else ("profile", "z")
        stat_dims = () if single else ("profile",)

        def var(quantity, dims, values):
            if quantity in drop:
                return
            kwargs = {}
            data = np.asarray(values, dtype=float)
            if fill_value is not None:
                kwargs["fill_value"] = fill_value
                data = np.where(np.isfinite(data), data, fill_value)
            v = nc.createVariable(names[quantity], "f8", dims, **kwargs)
            if fill_value is None:
                v.set_auto_mask(False)
            if std.get(quantity):
                v.standard_name = std[quantity]
            if units.get(quantity) is not None:
                v.units = units[quantity]
            if quantity == "pressure":
                v.positive = "down"
                if pressure_axis_only:
                    v.axis = "Z"
                    if "standard_name" in v.ncattrs():
                        v.delncattr("standard_name")
            if data.ndim == len(dims) + 1:  # a single profile from a one-station section
                data = data[0]
            v[...] = data

        if layout == "1d":
            levels = np.max(np.where(np.isfinite(P), P, -np.inf), axis=0)
            var("pressure", ("z",), np.where(np.isfinite(levels), levels, np.nan))
        else:
            var("pressure", prof_dims, P)
        var("salinity", prof_dims, sec["salinity"])
        var("temperature", prof_dims, sec["temperature"])
        var("latitude", stat_dims, sec["lat"])
        var("longitude", stat_dims, sec["lon"])
        if with_bottom and "bottom_depth" in sec:
            var("bottom_depth", stat_dims, sec["bottom_depth"])
        if with_ids:
            nc.createDimension("name_strlen", 8)
            ids = nc.createVariable(names["station"], "S1", (*stat_dims, "name_strlen"))
            ids.cf_role = "profile_id"
            ids._Encoding = "ascii"
            station = list(sec["station"])
            ids[...] = np.array(station[0] if single else station, dtype="S8")
    return _replace(tmp, path)


def station_slice(sec: Mapping[str, object], i: int) -> dict[str, object]:
    """The one-station section of station ``i`` (trailing missing levels dropped)."""
    P = np.asarray(sec["pressure"])[i]
    keep = slice(0, int(np.flatnonzero(np.isfinite(P))[-1]) + 1)
    return {
        "station": [sec["station"][i]],
        "lat": np.asarray(sec["lat"])[i : i + 1],
        "lon": np.asarray(sec["lon"])[i : i + 1],
        "pressure": np.asarray(sec["pressure"])[i : i + 1, keep],
        "salinity": np.asarray(sec["salinity"])[i : i + 1, keep],
        "temperature": np.asarray(sec["temperature"])[i : i + 1, keep],
        "bottom_depth": np.asarray(sec["bottom_depth"])[i : i + 1],
    }


def write_casts(
    folder: str | os.PathLike,
    sec: Mapping[str, object],
    file_names: Sequence[str] | None = None,
    **kwargs: object,
) -> list[Path]:
    """Write one single-profile CF-NetCDF file per station into ``folder``.

    Parameters
    ----------
    folder : path
        Target folder (created).
    sec : mapping
        As returned by :func:`invented_section`.
    file_names : sequence of str, optional
        One name per station (default ``cast1.nc``, ``cast2.nc``, ...).
    **kwargs
        Passed to :func:`write_netcdf`.

    Returns
    -------
    list of Path
        The files, in station order.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    n = len(sec["station"])
    file_names = file_names or [f"cast{i + 1}.nc" for i in range(n)]
    return [
        write_netcdf(folder / name, station_slice(sec, i), single=True, **kwargs)
        for i, name in enumerate(file_names)
    ]


def write_csv(
    path: str | os.PathLike,
    sec: Mapping[str, object],
    *,
    headers: Mapping[str, str] | None = None,
    with_bottom: bool = True,
    delimiter: str = ",",
) -> Path:
    """Write an invented section as a long-form CSV, one row per sample.

    Parameters
    ----------
    path : path
        Target file.
    sec : mapping
        As returned by :func:`invented_section` (values in the units written).
    headers : mapping, optional
        Canonical column to header name.
    with_bottom : bool
        Write the bottom_depth column.
    delimiter : str
        Field separator.

    Returns
    -------
    Path
        The written file.
    """
    path = Path(path)
    keys = ["station", "lat", "lon", "pressure", "temperature", "salinity"]
    if with_bottom:
        keys.append("bottom_depth")
    head = {k: k for k in keys}
    head.update(headers or {})
    lines = [delimiter.join(head[k] for k in keys)]
    P = np.asarray(sec["pressure"])
    for i, sid in enumerate(sec["station"]):
        for j in range(P.shape[1]):
            if not (
                np.isfinite(P[i, j])
                or np.isfinite(sec["salinity"][i][j])
                or np.isfinite(sec["temperature"][i][j])
            ):
                continue
            row = {
                "station": sid,
                "lat": repr(float(sec["lat"][i])),
                "lon": repr(float(sec["lon"][i])),
                "pressure": repr(float(P[i, j])),
                "temperature": repr(float(sec["temperature"][i][j])),
                "salinity": repr(float(sec["salinity"][i][j])),
            }
            if with_bottom:
                row["bottom_depth"] = repr(float(sec["bottom_depth"][i]))
            lines.append(delimiter.join(row[k] for k in keys))
    tmp = f"{path}.part"
    with open(tmp, "w", encoding="utf-8") as fh:
        fh.write("\n".join(lines) + "\n")
    return _replace(tmp, path)
