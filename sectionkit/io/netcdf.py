"""CF-NetCDF profile files: variables found by CF standard_name, never by name.

The layout is CF "orthogonal (or incomplete) multidimensional" profiles
(featureType = profile): a station dimension on latitude and longitude, a
vertical dimension, and pressure either shared (1-D) or per station (2-D).
A file holding one profile may give latitude and longitude as scalars.
"""

from __future__ import annotations

import os
from collections.abc import Mapping

import numpy as np
import xarray as xr

from sectionkit.errors import Cautions, InputFileError, SectionDataError, where
from sectionkit.io.classic import check_classic_length
from sectionkit.io.raw import Profile
from sectionkit.io.units import (
    check_salinity_units,
    is_pressure_units,
    length_to_m,
    pressure_to_dbar,
    temperature_to_celsius,
)

#: Accepted standard names per quantity, in order of preference, with the
#: kind each one means.
STANDARD_NAMES: dict[str, dict[str, str]] = {
    "pressure": {
        "sea_water_pressure": "sea pressure",
        "sea_water_pressure_due_to_sea_water": "sea pressure",
    },
    "salinity": {
        "sea_water_practical_salinity": "practical",
        "sea_water_absolute_salinity": "absolute",
        "sea_water_salinity": "practical",
    },
    "temperature": {
        "sea_water_temperature": "in-situ",
        "sea_water_conservative_temperature": "conservative",
        "sea_water_potential_temperature": "potential",
    },
    "latitude": {"latitude": "latitude"},
    "longitude": {"longitude": "longitude"},
    "bottom_depth": {
        "sea_floor_depth_below_sea_surface": "depth",
        "sea_floor_depth_below_geoid": "depth",
        "sea_floor_depth_below_mean_sea_level": "depth",
    },
}
_POSITION_UNITS = {
    "latitude": {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"},
    "longitude": {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"},
}
QUANTITIES = tuple(STANDARD_NAMES)


def open_netcdf(path: str) -> xr.Dataset:
    """Read a whole NetCDF file into memory, or say why it cannot be read.

    Parameters
    ----------
    path : str
        File path.

    Returns
    -------
    xarray.Dataset
        Decoded (missing values as NaN, scale factors applied), loaded, closed.
    """
    check_classic_length(path)
    try:
        with xr.open_dataset(path, decode_times=False, decode_timedelta=False) as ds:
            return ds.load()
    except Exception as exc:  # the netCDF/HDF5 libraries raise many kinds
        raise InputFileError(
            f"file {path}: cannot be read as NetCDF ({type(exc).__name__}: {exc}); "
            "check that the file is a complete, uncorrupted NetCDF-3 or NetCDF-4 file"
        ) from exc


def _standard_name(var: xr.Variable) -> str | None:
    value = var.attrs.get("standard_name")
    if not isinstance(value, str):
        return None
    tokens = value.split()
    # "sea_water_temperature standard_error" describes something else
    return tokens[0] if len(tokens) == 1 else None


def _inventory(ds: xr.Dataset) -> str:
    items = []
    for name, var in ds.variables.items():
        sn = var.attrs.get("standard_name")
        items.append(f"{name} ({sn})" if sn else f"{name} (no standard_name)")
    return ", ".join(items) if items else "none"


def find_variable(
    ds: xr.Dataset, quantity: str, file: str, variables: Mapping[str, str] | None = None
) -> tuple[str, str] | None:
    """The variable holding a quantity, found by standard_name (or an explicit choice).

    Parameters
    ----------
    ds : xarray.Dataset
        The open file.
    quantity : str
        One of ``pressure, salinity, temperature, latitude, longitude, bottom_depth``.
    file : str
        File path, for messages.
    variables : mapping, optional
        Quantity to variable name, to choose between several candidates.

    Returns
    -------
    (name, kind) or None
        The variable name and what it holds (e.g. ``"in-situ"``), or None when absent.
    """
    accepted = STANDARD_NAMES[quantity]
    if variables and quantity in variables:
        name = variables[quantity]
        if name not in ds.variables:
            raise InputFileError(
                f"file {file}: variable {name!r} chosen for {quantity} is not in the file; "
                f"variables present: {_inventory(ds)}"
            )
        sn = _standard_name(ds.variables[name])
        return name, accepted.get(sn or "", next(iter(accepted.values())))
    for sn, kind in accepted.items():
        matches = [n for n, v in ds.variables.items() if _standard_name(v) == sn]
        if len(matches) > 1:
            raise InputFileError(
                f"file {file}: variables {', '.join(matches)} all have standard_name {sn}; "
                f"choose one with variables={{{quantity!r}: {matches[0]!r}}} "
                f"(command line: --variable {quantity}={matches[0]}; configuration: "
                f'variables = {{ {quantity} = "{matches[0]}" }} under [[sections]])'
            )
        if matches:
            return matches[0], kind
    if quantity == "pressure":
        matches = [
            n
            for n, v in ds.variables.items()
            if str(v.attrs.get("axis", "")).upper() == "Z"
            and is_pressure_units(v.attrs.get("units"))
        ]
        if matches:
            return matches[0], "sea pressure"
        # CF conventions §4.3: a coordinate variable (1-D, named as its dimension) whose
        # units are a pressure is the vertical coordinate, without axis or standard_name
        matches = [
            n
            for n, v in ds.variables.items()
            if v.dims == (n,) and is_pressure_units(v.attrs.get("units"))
        ]
        if len(matches) == 1:
            return matches[0], "sea pressure"
    if quantity in _POSITION_UNITS:
        matches = [
            n
            for n, v in ds.variables.items()
            if str(v.attrs.get("units", "")).strip().lower() in _POSITION_UNITS[quantity]
        ]
        if len(matches) == 1:
            return matches[0], quantity
    return None


def _require(
    ds: xr.Dataset, quantity: str, file: str, variables: Mapping[str, str] | None
) -> tuple[str, str]:
    found = find_variable(ds, quantity, file, variables)
    if found is None:
        names = " or ".join(STANDARD_NAMES[quantity])
        extra = (
            ' (or a vertical coordinate with pressure units: axis = "Z", or a coordinate '
            "variable named as its dimension, CF §4.3)"
            if (quantity == "pressure")
            else ""
        )
        raise InputFileError(
            f"file {file}: no {quantity} variable found; sectionkit looks for standard_name "
            f"{names}{extra}; variables present: {_inventory(ds)} — add the standard_name "
            f"attribute to the {quantity} variable"
        )
    return found


def _numbers(var: xr.Variable, file: str, name: str, quantity: str) -> np.ndarray:
    try:
        values = np.asarray(var.values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputFileError(
            f"{where(file, None, name)}: {quantity} values are not numbers "
            f"(type {var.dtype}); store {quantity} as floating point"
        ) from exc
    return values


def _squeeze(var: xr.Variable, keep: tuple[str | None, ...]) -> xr.Variable:
    drop = {
        d: 0 for d, size in zip(var.dims, var.shape, strict=True) if d not in keep and size == 1
    }
    return var.isel(drop) if drop else var


def _station_values(
    var: xr.Variable, station_dim: str | None, n: int, file: str, name: str, quantity: str
) -> np.ndarray:
    """One value per station from a scalar (single station) or a station-dimension variable."""
    var = _squeeze(var, (station_dim,))
    if var.ndim == 0 and n == 1:
        return _numbers(var, file, name, quantity).reshape(1)
    if var.dims == (station_dim,):
        return _numbers(var, file, name, quantity)
    raise InputFileError(
        f"{where(file, None, name)}: {quantity} must hold one value per station "
        f"(dimension {station_dim or 'none: a single-profile file'}), found dimensions "
        f"{var.dims or '()'}; write it along the station dimension"
    )


def _profile_values(
    var: xr.Variable,
    station_dim: str | None,
    vertical_dim: str,
    n: int,
    file: str,
    name: str,
    quantity: str,
) -> np.ndarray:
    """A (station, level) array from a variable on the station and vertical dimensions."""
    var = _squeeze(var, (station_dim, vertical_dim))
    if station_dim is None and var.dims == (vertical_dim,):
        return _numbers(var, file, name, quantity).reshape(1, -1)
    if station_dim is not None and set(var.dims) == {station_dim, vertical_dim}:
        return _numbers(var.transpose(station_dim, vertical_dim), file, name, quantity)
    if quantity == "pressure" and var.dims == (vertical_dim,):
        return np.broadcast_to(_numbers(var, file, name, quantity), (n, var.shape[0])).copy()
    expected = f"({station_dim}, {vertical_dim})" if station_dim else f"({vertical_dim},)"
    raise InputFileError(
        f"{where(file, None, name)}: {quantity} has dimensions {var.dims or '()'}; expected "
        f"{expected}, the dimensions of latitude and pressure"
    )


def _station_ids(ds: xr.Dataset, station_dim: str | None, n: int, file: str) -> list[str | None]:
    names = [k for k, v in ds.variables.items() if v.attrs.get("cf_role") == "profile_id"]
    if not names:
        return [None] * n
    var = _squeeze(ds.variables[names[0]], (station_dim,))
    if not ((var.ndim == 0 and n == 1) or var.dims == (station_dim,)):
        raise InputFileError(
            f"{where(file, None, names[0])}: the profile_id variable has dimensions {var.dims}; "
            f"it must hold one id per station along {station_dim}"
        )
    ids = []
    for value in np.atleast_1d(var.values).tolist():
        if isinstance(value, bytes):
            value = value.decode("utf-8", "replace")
        if isinstance(value, float):
            value = (
                None
                if not np.isfinite(value)
                else (str(int(value)) if value == int(value) else str(value))
            )
        text = None if value is None else str(value).strip()
        ids.append(text or None)
    return ids


def _units(ds: xr.Dataset, name: str) -> str | None:
    value = ds.variables[name].attrs.get("units")
    return None if value is None else str(value)


def _units_or_assumed(
    ds: xr.Dataset, name: str, quantity: str, default: str, file: str, cautions: Cautions
) -> str:
    """The units attribute of a variable, or ``default`` with a caution when it has none."""
    units = _units(ds, name)
    if units is None:
        cautions.add(
            "units-assumed",
            f"{where(file, None, name)}: {quantity} has no units attribute; assumed {default}",
            file=file,
            variable=name,
        )
        units = default
    return units


def _layout(
    ds: xr.Dataset, found: Mapping[str, tuple[str, str]], file: str
) -> tuple[str | None, str, int]:
    """Station dimension (None for a single-profile file), vertical dimension, station count."""
    lat_name = found["latitude"][0]
    lat_var = _squeeze(ds.variables[lat_name], ())
    if lat_var.ndim == 0:
        station_dim, n = None, 1
    elif lat_var.ndim == 1:
        station_dim, n = lat_var.dims[0], lat_var.shape[0]
    else:
        raise InputFileError(
            f"{where(file, None, lat_name)}: latitude has dimensions {lat_var.dims}; "
            "give one latitude per station (a station dimension, or a scalar in a "
            "single-profile file)"
        )
    if n == 0:
        raise SectionDataError(f"file {file}: the station dimension {station_dim} is empty")
    p_name = found["pressure"][0]
    p_var = _squeeze(ds.variables[p_name], (station_dim,))
    vertical = [d for d in p_var.dims if d != station_dim]
    if len(vertical) != 1 or p_var.ndim > 2:
        raise InputFileError(
            f"{where(file, None, p_name)}: pressure has dimensions {p_var.dims}; expected a "
            f"vertical dimension, alone or with the station dimension {station_dim}"
        )
    return station_dim, vertical[0], n


def read_netcdf(
    path: str | os.PathLike,
    *,
    variables: Mapping[str, str] | None = None,
    cautions: Cautions | None = None,
) -> list[Profile]:
    """Read the profiles of one CF-NetCDF file.

    Parameters
    ----------
    path : str or path-like
        The file.
    variables : mapping, optional
        Quantity to variable name, only needed when several variables carry
        the same standard_name.
    cautions : Cautions, optional
        Collects findings such as units assumed when missing.

    Returns
    -------
    list of Profile
        Pressure in dbar, temperature in degC, bottom depth in m, in file order.
    """
    file = os.fspath(path)
    cautions = Cautions() if cautions is None else cautions
    ds = open_netcdf(file)
    found = {
        q: _require(ds, q, file, variables)
        for q in ("pressure", "salinity", "temperature", "latitude", "longitude")
    }
    bottom = find_variable(ds, "bottom_depth", file, variables)

    station_dim, vertical_dim, n = _layout(ds, found, file)
    lat_name, lon_name = found["latitude"][0], found["longitude"][0]
    lat = _station_values(ds.variables[lat_name], station_dim, n, file, lat_name, "latitude")
    lon = _station_values(ds.variables[lon_name], station_dim, n, file, lon_name, "longitude")
    data = {}
    for quantity in ("pressure", "salinity", "temperature"):
        name = found[quantity][0]
        data[quantity] = _profile_values(
            ds.variables[name], station_dim, vertical_dim, n, file, name, quantity
        )

    p_name, t_name, (s_name, s_kind) = (
        found["pressure"][0],
        found["temperature"][0],
        found["salinity"],
    )
    p_units = _units_or_assumed(ds, p_name, "pressure", "dbar", file, cautions)
    pressure = pressure_to_dbar(data["pressure"], p_units, where(file, None, p_name))
    t_units = _units_or_assumed(ds, t_name, "temperature", "degC", file, cautions)
    temperature = temperature_to_celsius(data["temperature"], t_units, where(file, None, t_name))
    s_units = _units(ds, s_name)
    check_salinity_units(s_units, where(file, None, s_name))
    if _standard_name(ds.variables[s_name]) == "sea_water_salinity":
        cautions.add(
            "salinity-kind-assumed",
            f"{where(file, None, s_name)}: standard_name sea_water_salinity does not say which "
            "salinity it is; read as Practical Salinity (PSS-78)",
            file=file,
            variable=s_name,
        )

    depth = np.full(n, np.nan)
    units = {"pressure": p_units, "salinity": s_units or "", "temperature": t_units}
    names = {q: found[q][0] for q in found}
    if bottom is not None:
        b_name = bottom[0]
        b_units = _units_or_assumed(ds, b_name, "bottom depth", "m", file, cautions)
        raw = _station_values(ds.variables[b_name], station_dim, n, file, b_name, "bottom depth")
        depth = length_to_m(raw, b_units, where(file, None, b_name))
        units["bottom_depth"], names["bottom_depth"] = b_units, b_name

    ids = _station_ids(ds, station_dim, n, file)
    return [
        Profile(
            station=ids[i],
            file=file,
            lat=float(lat[i]),
            lon=float(lon[i]),
            pressure=pressure[i],
            salinity=data["salinity"][i],
            temperature=temperature[i],
            bottom_depth=float(depth[i]),
            salinity_kind=s_kind,
            temperature_kind=found["temperature"][1],
            names=dict(names),
            units=dict(units),
        )
        for i in range(n)
    ]
