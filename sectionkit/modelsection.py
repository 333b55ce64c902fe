"""Model-output sections: a fixed line of stations with a time dimension.

Ocean model output sampled along a line is a section whose stations never
move: temperature and salinity on (time, station, level) with a fixed land
mask. :func:`model_section` turns it into the canonical section of
docs/CONTRACTS-INTERNAL.md with the time (and any other leading) dimension
kept, lazily when the input is dask-backed; :func:`section_time_series` then
gives every budget as a time series through :mod:`sectionkit.xr`.

Conversion rules (stated, since they shape the numbers):

- variables are found by CF ``standard_name`` (DESIGN.md §3, plus
  ``sea_water_salinity``, taken as practical salinity as in most model
  output);
- a depth coordinate (m, positive down unless ``positive = "up"``) becomes
  pressure with ``gsw.p_from_z`` at each station's latitude;
- practical salinity becomes Absolute Salinity with ``gsw.SA_from_SP`` at
  each station's position; potential temperature becomes Conservative
  Temperature with ``gsw.CT_from_pt``, in-situ temperature with
  ``gsw.CT_from_t`` (kelvin converted);
- the land mask is the first record's (it must not change with time); a
  station's last wet level is its deepest finite sample;
- profiles are interpolated linearly in pressure onto 0, dp, 2 dp, ...;
  above the shallowest model level the shallowest value is used, and below
  the deepest wet level the deepest value continues down to the sea floor
  (``sea_floor_depth_below_sea_surface`` when given, else the deepest wet
  level), as for casts in DESIGN.md §3.

Invented model lines for tests and benchmarks live in ``tests/_synthetic.py``.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import gsw
import numpy as np
import xarray as xr

from sectionkit.config import Config
from sectionkit.errors import SectionDataError
from sectionkit.io.netcdf import STANDARD_NAMES
from sectionkit.thermo import absolute_salinity, conservative_temperature

__all__ = [
    "interpolation_weights",
    "interpolate_profiles",
    "model_section",
    "section_time_series",
]

TEMPERATURE_NAMES = (
    "sea_water_conservative_temperature",
    "sea_water_potential_temperature",
    "sea_water_temperature",
)
SALINITY_NAMES = (
    "sea_water_absolute_salinity",
    "sea_water_practical_salinity",
    "sea_water_salinity",
)
BOTTOM_DEPTH_MISMATCH = 10.0  # m: a sea floor this much above the deepest wet level is an error


# ------------------------------------------------------------------ kernels
def interpolation_weights(
    p_src: np.ndarray, last: np.ndarray, bottom: np.ndarray, grid: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Linear-in-pressure interpolation from model levels onto a pressure grid.

    Parameters
    ----------
    p_src : ndarray (station, level)
        Pressure of each model level at each station, dbar, increasing.
    last : ndarray (station,) of int
        Index of each station's deepest wet level.
    bottom : ndarray (station,)
        Sea-floor pressure of each station, dbar.
    grid : ndarray (pressure,)
        Target pressures, dbar, increasing.

    Returns
    -------
    lo : ndarray (station, pressure) of int
        Index of the model level at or above each target.
    w : ndarray (station, pressure)
        Weight of level ``lo + 1``, dimensionless (0 above the shallowest
        level, 1 on the deepest wet level and below it: constant extension).
    wet : ndarray (station, pressure) of bool
        True where the target lies above the sea floor.
    """
    n_station, n_level = p_src.shape
    lo = np.zeros((n_station, grid.size), dtype=int)
    w = np.zeros((n_station, grid.size))
    for s in range(n_station):
        ps = p_src[s, : last[s] + 1]
        k = np.clip(np.searchsorted(ps, grid, side="right") - 1, 0, max(ps.size - 2, 0))
        if ps.size > 1:
            frac = (grid - ps[k]) / (ps[k + 1] - ps[k])
            w[s] = np.clip(frac, 0.0, 1.0)
        lo[s] = k
    wet = grid[None, :] <= bottom[:, None] + 1e-9
    return lo, w, wet


def interpolate_profiles(
    values: np.ndarray, lo: np.ndarray, w: np.ndarray, wet: np.ndarray
) -> np.ndarray:
    """Apply :func:`interpolation_weights` to profiles with any leading dimensions.

    Parameters
    ----------
    values : ndarray (..., station, level)
        Model-level values, any unit.
    lo, w, wet : ndarray (station, pressure)
        From :func:`interpolation_weights`.

    Returns
    -------
    ndarray (..., station, pressure)
        Values on the pressure grid, same unit; NaN below the sea floor.
    """
    values = np.asarray(values, dtype=float)
    if values.shape[-1] == 1:
        out = np.broadcast_to(values, values.shape[:-1] + (lo.shape[-1],))
    else:
        idx = np.broadcast_to(lo, values.shape[:-2] + lo.shape)
        v_lo = np.take_along_axis(values, idx, axis=-1)
        v_hi = np.take_along_axis(values, idx + 1, axis=-1)
        out = np.where(w == 0.0, v_lo, np.where(w == 1.0, v_hi, v_lo + w * (v_hi - v_lo)))
    return np.where(wet, out, np.nan)


# ------------------------------------------------------------------ finding variables
def _by_standard_name(ds: xr.Dataset, names: Sequence[str], what: str) -> tuple[str, str]:
    for standard in names:
        for var in ds.variables:
            if ds[var].attrs.get("standard_name") == standard:
                return str(var), standard
    raise SectionDataError(
        f"the model output has no {what} variable (looked for standard_name "
        f"{' or '.join(names)}); set the standard_name attribute of the right variable"
    )


def _vertical(ds: xr.Dataset, field: xr.DataArray, station_dim: str) -> tuple[str, np.ndarray, str]:
    """Name of the vertical dimension, its values and kind ('depth' or 'pressure')."""
    for dim in field.dims:
        if dim == station_dim or dim not in ds.coords:
            continue
        coord = ds[dim]
        standard = coord.attrs.get("standard_name", "")
        units = str(coord.attrs.get("units", "")).lower()
        if standard == "sea_water_pressure" or units in ("dbar", "decibar"):
            return str(dim), np.asarray(coord.values, dtype=float), "pressure"
        if standard == "depth" or (coord.attrs.get("axis") == "Z" and units in ("m", "meter",
                                                                              "meters", "metre")):
            z = np.asarray(coord.values, dtype=float)
            if coord.attrs.get("positive", "down") == "up":
                z = -z
            return str(dim), z, "depth"
    raise SectionDataError(
        f"no vertical coordinate found among the dimensions {field.dims} of "
        f"{field.name!r}; expected a depth (standard_name depth, m) or pressure "
        "(standard_name sea_water_pressure, dbar) coordinate"
    )


def _celsius(da: xr.DataArray) -> xr.DataArray:
    units = str(da.attrs.get("units", "degC")).strip().lower()
    if units in ("k", "kelvin"):
        return da - 273.15
    return da


# ------------------------------------------------------------------ user calls
def model_section(
    ds: xr.Dataset,
    *,
    dp: float = 10.0,
    name: str = "model",
    station_dim: str | None = None,
) -> xr.Dataset:
    """The canonical section of a model-output line, leading dimensions kept.

    Parameters
    ----------
    ds : xr.Dataset
        Model output: temperature and salinity (found by standard_name) on
        (..., station, level), ``latitude``/``longitude`` per station, a
        depth (m) or pressure (dbar) vertical coordinate, optionally
        ``sea_floor_depth_below_sea_surface`` per station. May be
        dask-backed; the result then stays lazy.
    dp : float
        Grid step of the canonical section, dbar.
    name : str
        Section name.
    station_dim : str, optional
        Name of the station dimension (default: the dimension of the
        latitude variable).

    Returns
    -------
    xr.Dataset
        Canonical section: ``SA`` (g/kg), ``CT`` (degC) on
        (..., station, pressure); ``lon``, ``lat``, ``bottom_pressure``
        (dbar), ``bottom_depth`` (m) per station.
    """
    if not dp > 0:
        raise SectionDataError(f"grid step dp = {dp!r} dbar must be positive")
    lat_name, _ = _by_standard_name(ds, ("latitude",), "latitude")
    lon_name, _ = _by_standard_name(ds, ("longitude",), "longitude")
    lat = np.asarray(ds[lat_name].values, dtype=float)
    lon = np.asarray(ds[lon_name].values, dtype=float)
    if lat.ndim != 1:
        raise SectionDataError(f"latitude {lat_name!r} has dimensions {ds[lat_name].dims}; a "
                               "model-output line needs one fixed position per station")
    station_dim = station_dim or str(ds[lat_name].dims[0])
    t_name, t_kind = _by_standard_name(ds, TEMPERATURE_NAMES, "temperature")
    s_name, s_kind = _by_standard_name(ds, SALINITY_NAMES, "salinity")
    temp = _celsius(ds[t_name])
    salt = ds[s_name]
    vdim, vert, vkind = _vertical(ds, salt, station_dim)
    if np.any(np.diff(vert) <= 0):
        raise SectionDataError(f"the vertical coordinate {vdim!r} must increase downward")
    p_src = (gsw.p_from_z(-vert[None, :], lat[:, None]) if vkind == "depth"
             else np.broadcast_to(vert, (lat.size, vert.size)).copy())
    lead_dims = [d for d in salt.dims if d not in (station_dim, vdim)]
    core = [station_dim, vdim]
    salt = salt.transpose(*lead_dims, *core)
    temp = temp.transpose(*lead_dims, *core)

    first = np.asarray(salt.isel({d: 0 for d in lead_dims}).values, dtype=float)
    finite = np.isfinite(first)
    last = np.where(finite.any(axis=1), finite.shape[1] - 1 - np.argmax(finite[:, ::-1], axis=1),
                    -1)
    for s in range(lat.size):
        if last[s] < 0:
            raise SectionDataError(f"station {s} of the model line is land (no wet level); "
                                   "drop it from the line")
        if not finite[s, : last[s] + 1].all():
            raise SectionDataError(f"station {s}: the model profile has missing values above "
                                   f"its deepest wet level {last[s]}; profiles must be wet "
                                   "from the top down")
    p_last = p_src[np.arange(lat.size), last]
    if "sea_floor_depth_below_sea_surface" in [ds[v].attrs.get("standard_name")
                                               for v in ds.variables]:
        b_name, _ = _by_standard_name(ds, ("sea_floor_depth_below_sea_surface",), "bottom depth")
        bottom_depth = np.asarray(ds[b_name].values, dtype=float)
        bottom = gsw.p_from_z(-bottom_depth, lat)
        z_last = -gsw.z_from_p(p_last, lat)
        bad = np.flatnonzero(bottom_depth < z_last - BOTTOM_DEPTH_MISMATCH)
        if bad.size:
            s = int(bad[0])
            raise SectionDataError(
                f"station {s}: sea floor at {bottom_depth[s]:.1f} m is shallower than the "
                f"deepest wet model level ({z_last[s]:.1f} m) by more than "
                f"{BOTTOM_DEPTH_MISMATCH:g} m; check the bathymetry variable {b_name!r}")
        bottom = np.maximum(bottom, p_last)
    else:
        bottom = p_last
        bottom_depth = -gsw.z_from_p(bottom, lat)
    grid = np.arange(0.0, float(np.max(bottom)) + 0.5 * dp, dp)
    grid = grid[grid <= np.max(bottom) + 1e-9]
    lo, w, wet = interpolation_weights(p_src, last, bottom, grid)

    p_da = xr.DataArray(p_src, dims=core)
    lon_da = xr.DataArray(lon, dims=[station_dim])
    lat_da = xr.DataArray(lat, dims=[station_dim])
    par = {"dask": "parallelized", "output_dtypes": [float]}
    # the same TEOS-10 conversions (thermo's kernels) and standard-name kinds as the readers
    if STANDARD_NAMES["salinity"][s_kind] == "absolute":
        sa_src = salt
    else:
        sa_src = xr.apply_ufunc(absolute_salinity, salt, p_da, lon_da, lat_da,
                                input_core_dims=[core, core, [station_dim], [station_dim]],
                                output_core_dims=[core], **par)
    ct_src = xr.apply_ufunc(conservative_temperature, temp, sa_src, p_da,
                            kwargs={"kind": STANDARD_NAMES["temperature"][t_kind]}, **par)

    def to_grid(da: xr.DataArray) -> xr.DataArray:
        if da.chunks is not None:
            da = da.chunk({station_dim: -1, vdim: -1})
        out = xr.apply_ufunc(
            interpolate_profiles, da,
            input_core_dims=[core], output_core_dims=[[station_dim, "pressure"]],
            exclude_dims={vdim},
            kwargs={"lo": lo, "w": w, "wet": wet},
            dask="parallelized", output_dtypes=[float],
            dask_gufunc_kwargs={"output_sizes": {"pressure": grid.size}},
        )
        return out.rename({station_dim: "station"}) if station_dim != "station" else out

    sa = to_grid(sa_src).assign_attrs(units="g/kg", long_name="Absolute Salinity")
    ct = to_grid(ct_src).assign_attrs(units="degC", long_name="Conservative Temperature")
    section = xr.Dataset(
        {
            "SA": sa.drop_vars([c for c in sa.coords if c not in lead_dims]),
            "CT": ct.drop_vars([c for c in ct.coords if c not in lead_dims]),
            "lat": ("station", lat, {"units": "degrees_north"}),
            "lon": ("station", lon, {"units": "degrees_east"}),
            "bottom_pressure": ("station", bottom, {"units": "dbar"}),
            "bottom_depth": ("station", bottom_depth, {"units": "m"}),
        },
        coords={
            "pressure": ("pressure", grid, {"units": "dbar",
                                            "standard_name": "sea_water_pressure"}),
            "station": [str(i + 1) for i in range(lat.size)],
        },
        attrs={
            "section": name,
            "source": str(ds.attrs.get("source", "model output")),
            "dp": float(dp),
            "gridding": "linear in pressure from model levels; shallowest value above the first "
            "level; deepest wet value continued to the sea floor; land mask of the first record",
        },
    )
    for d in lead_dims:
        if d in ds.coords:
            section = section.assign_coords({d: ds[d]})
    return section


def section_time_series(
    model_output: xr.Dataset,
    config: Config,
    name: str | None = None,
    *,
    dp: float | None = None,
    stress: Any = None,
) -> xr.Dataset:
    """Every budget of a model-output line as a time series.

    Parameters
    ----------
    model_output : xr.Dataset
        Model output along a fixed line (see :func:`model_section`), possibly
        dask-backed and chunked along time.
    config : Config
        Classes, reference, bottom triangle, Ekman settings.
    name : str, optional
        Section name in the configuration (default: its first section).
    dp : float, optional
        Grid step, dbar (default: the configuration's ``[grid] dp``).
    stress : xr.DataArray or (east, north), optional
        Wind stress, N m^-2; a DataArray with dims (time, component) gives a
        varying Ekman transport. Default: the configured stress.

    Returns
    -------
    xr.Dataset
        As :func:`sectionkit.xr.section_budget`, with the model's leading
        dimensions (lazy on dask input).
    """
    from sectionkit.xr import budget_from_config

    name = name or (config.section_names()[0] if config.sections else "model")
    section = model_section(model_output, dp=dp or config.dp, name=name)
    return budget_from_config(section, config, name, stress=stress)
