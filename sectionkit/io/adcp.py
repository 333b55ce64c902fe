"""Direct velocity profiles (lowered or shipboard ADCP): u and v against pressure.

Two layouts, per station or per station pair:

- **CSV** long form, one row per sample: ``station`` (a station id of the
  section) or ``pair`` (0-based pair index), ``pressure`` (dbar), ``u``
  (eastward) and ``v`` (northward) in m s^-1, and optionally ``section``
  (which section a pair index belongs to); ``#`` lines are comments.
- **CF-NetCDF** profiles: velocities found by standard_name
  (``eastward_sea_water_velocity``, ``northward_sea_water_velocity``; units
  m s-1 or cm s-1), pressure by ``sea_water_pressure`` (or ``axis = "Z"``
  with pressure units), profile ids by ``cf_role = profile_id``: a station
  id, or ``<section>:<k>`` (``pair:<k>``) for pair ``k``.

Missing values are NaN (or _FillValue in NetCDF).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sectionkit.errors import InputFileError, SectionDataError
from sectionkit.io.formats import file_format
from sectionkit.io.netcdf import find_variable, open_netcdf
from sectionkit.io.units import pressure_to_dbar

#: No ocean current reaches this speed, m s^-1; larger values are a units mistake.
MAX_SPEED = 5.0
_SPEED_UNITS = {"m s-1": 1.0, "m/s": 1.0, "m s^-1": 1.0, "meter second-1": 1.0,
                "cm s-1": 0.01, "cm/s": 0.01, "cm s^-1": 0.01}
_PAIR_ID = re.compile(r"^(?:.*:)?(\d+)$")


@dataclass
class VelocityProfile:
    """One direct velocity profile.

    Attributes
    ----------
    kind : {"station", "pair"}
        Measured at a station (LADCP cast) or for a pair (e.g. shipboard ADCP
        averaged between two stations).
    key : str
        Station id, or the pair index as text.
    file : str
        Where it was read from.
    pressure : ndarray (sample,)
        dbar.
    u, v : ndarray (sample,)
        Eastward and northward velocity, m s^-1.
    section : str or None
        The section a pair profile belongs to (``<section>:<k>`` ids, or a
        ``section`` column); None when the file does not say.
    """

    kind: str
    key: str
    file: str
    pressure: np.ndarray
    u: np.ndarray
    v: np.ndarray
    section: str | None = None


def _check_speed(profile: VelocityProfile) -> None:
    speed = np.hypot(profile.u, profile.v)
    if np.any(speed > MAX_SPEED):
        k = int(np.flatnonzero(speed > MAX_SPEED)[0])
        raise SectionDataError(
            f"{profile.kind} {profile.key} (file {profile.file}): speed {speed[k]:g} m/s at "
            f"{profile.pressure[k]:g} dbar exceeds any ocean current ({MAX_SPEED:g} m/s); "
            "velocities must be in m s^-1 (cm/s? divide by 100)"
        )


def _read_csv(file: str) -> list[VelocityProfile]:
    try:
        table = pd.read_csv(file, comment="#", skipinitialspace=True, dtype={"station": str})
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputFileError(f"file {file}: cannot be read as CSV ({exc})") from exc
    table.columns = [str(c).strip() for c in table.columns]
    keys = [c for c in ("station", "pair") if c in table.columns]
    missing = [c for c in ("pressure", "u", "v") if c not in table.columns]
    if len(keys) != 1 or missing:
        raise InputFileError(
            f"file {file}: direct velocity CSV needs a station or a pair column and pressure, "
            f"u, v (m s^-1); columns present: {', '.join(table.columns)}"
        )
    kind = keys[0]
    blank = np.flatnonzero(table[kind].isna().to_numpy())
    if blank.size:  # groupby would drop these rows without a word
        raise InputFileError(f"file {file}: data row {int(blank[0]) + 1} has no {kind}; give "
                             f"the {kind} of every row")
    by = [kind] + (["section"] if "section" in table.columns else [])
    out = []
    for group, rows in table.groupby(by, sort=False):
        key = group[0] if isinstance(group, tuple) else group
        section = str(group[1]).strip() if isinstance(group, tuple) and len(group) > 1 else None
        try:
            p, u, v = (rows[c].to_numpy(dtype=float) for c in ("pressure", "u", "v"))
        except ValueError as exc:
            raise InputFileError(f"file {file}: {kind} {key}: a value is not a number "
                                 f"({exc})") from None
        label = str(key).strip()
        if kind == "pair":
            try:
                value = float(label)
            except ValueError:
                value = np.nan
            if not np.isfinite(value) or value != int(value) or value < 0:
                raise InputFileError(f"file {file}: pair {label!r} is not a 0-based pair index")
            label = str(int(value))
        out.append(VelocityProfile(kind, label, file, p, u, v, section))
    return out


def _speed_units(units: str | None, file: str, name: str) -> float:
    key = " ".join(str(units or "").strip().lower().split())
    if key not in _SPEED_UNITS:
        raise SectionDataError(f"file {file}, variable {name}: units {units!r} are not "
                               "understood; label velocities m s-1 or cm s-1")
    return _SPEED_UNITS[key]


def _read_netcdf(file: str) -> list[VelocityProfile]:
    ds = open_netcdf(file)
    found = {}
    for q, sn in (("u", "eastward_sea_water_velocity"), ("v", "northward_sea_water_velocity")):
        names = [n for n, var in ds.variables.items() if var.attrs.get("standard_name") == sn]
        if len(names) != 1:
            raise InputFileError(f"file {file}: expected one variable with standard_name {sn}, "
                                 f"found {len(names)}")
        found[q] = names[0]
    p_found = find_variable(ds, "pressure", file)
    if p_found is None:
        raise InputFileError(f"file {file}: no pressure variable (standard_name "
                             "sea_water_pressure, or axis Z with pressure units)")
    u_var = ds[found["u"]]
    if u_var.ndim == 1:
        u_var = u_var.expand_dims("profile")
    profile_dim = u_var.dims[0]
    ids_var = [n for n, var in ds.variables.items() if var.attrs.get("cf_role") == "profile_id"]
    if not ids_var:
        raise InputFileError(f"file {file}: no profile_id variable (cf_role = profile_id) naming "
                             "the station or pair of each profile")
    ids = [x.decode() if isinstance(x, bytes) else str(x)
           for x in np.atleast_1d(ds[ids_var[0]].values).tolist()]
    p_name = p_found[0]
    p = pressure_to_dbar(ds[p_name].values, ds[p_name].attrs.get("units", "dbar"),
                         f"file {file}, variable {p_name}")
    u = ds[found["u"]].values * _speed_units(ds[found["u"]].attrs.get("units"), file, found["u"])
    v = ds[found["v"]].values * _speed_units(ds[found["v"]].attrs.get("units"), file, found["v"])
    u, v = np.atleast_2d(u), np.atleast_2d(v)
    p = np.broadcast_to(p, u.shape) if p.ndim == 1 else p
    if u.shape[0] != len(ids) or profile_dim not in ds[ids_var[0]].dims + ("profile",):
        raise InputFileError(f"file {file}: {len(ids)} profile ids for {u.shape[0]} profiles")
    out = []
    for i, pid in enumerate(ids):
        match = _PAIR_ID.match(pid.strip())
        if match and ":" in pid:
            prefix = pid.strip().rpartition(":")[0].strip()
            kind, key, section = "pair", match.group(1), (None if prefix == "pair" else prefix)
        else:
            kind, key, section = "station", pid.strip(), None
        out.append(VelocityProfile(kind, key, file, p[i].astype(float), u[i], v[i], section))
    return out


def read_velocity_profiles(path: str | os.PathLike) -> list[VelocityProfile]:
    """Read direct velocity profiles from a CSV or CF-NetCDF file.

    Parameters
    ----------
    path : str or path-like
        The file (see the module description for both layouts).

    Returns
    -------
    list of VelocityProfile
        Per station or per pair; pressure in dbar, u and v in m s^-1, samples
        with a missing value removed, by increasing pressure.
    """
    file = os.fspath(path)
    profiles = _read_netcdf(file) if file_format(file) == "netcdf" else _read_csv(file)
    out = []
    for prof in profiles:
        ok = np.isfinite(prof.pressure) & np.isfinite(prof.u) & np.isfinite(prof.v)
        order = np.argsort(prof.pressure[ok], kind="stable")
        clean = VelocityProfile(prof.kind, prof.key, prof.file, prof.pressure[ok][order],
                                prof.u[ok][order], prof.v[ok][order], prof.section)
        _check_speed(clean)
        out.append(clean)
    if not out:
        raise InputFileError(f"file {file}: holds no velocity profiles")
    return out
