"""Long-form CSV sections: one row per sample.

Columns (header names configurable): station, lat, lon, pressure,
temperature, salinity and optionally bottom_depth. Stations appear in the
order of their first row; samples keep their row order within a station.
"""

from __future__ import annotations

import difflib
import os
from collections.abc import Mapping

import numpy as np
import pandas as pd

from sectionkit.errors import Cautions, ConfigError, InputFileError, SectionDataError, where
from sectionkit.io.raw import Profile
from sectionkit.io.units import length_to_m, pressure_to_dbar, temperature_to_celsius
from sectionkit.thermo import SALINITY_KINDS, TEMPERATURE_KINDS

CSV_COLUMNS = ("station", "lat", "lon", "pressure", "temperature", "salinity", "bottom_depth")
REQUIRED_COLUMNS = CSV_COLUMNS[:-1]
#: Largest spread of a station's per-row positions accepted as one cast, degrees.
POSITION_SPREAD = 0.05
#: Spread of a station's per-row bottom depths worth a caution, m.
DEPTH_SPREAD = 10.0


def _closest(key: str, valid: tuple[str, ...]) -> str:
    match = difflib.get_close_matches(key, valid, n=1)
    return f" (did you mean {match[0]!r}?)" if match else ""


def check_csv_options(
    columns: Mapping[str, str] | None, temperature_kind: str, salinity_kind: str
) -> dict[str, str]:
    """Validate the CSV layout options; return the full column mapping.

    Parameters
    ----------
    columns : mapping, optional
        Canonical column (station, lat, lon, pressure, temperature, salinity,
        bottom_depth) to the header used in the file.
    temperature_kind : {"in-situ", "potential", "conservative"}
        What the temperature column holds.
    salinity_kind : {"practical", "absolute"}
        What the salinity column holds.

    Returns
    -------
    dict
        Canonical column to header, defaults filled in.
    """
    headers = {c: c for c in CSV_COLUMNS}
    for key, header in (columns or {}).items():
        if key not in CSV_COLUMNS:
            raise ConfigError(
                f"CSV column key {key!r} is not known{_closest(key, CSV_COLUMNS)}; "
                f"valid keys: {', '.join(CSV_COLUMNS)}"
            )
        headers[key] = str(header)
    if temperature_kind not in TEMPERATURE_KINDS:
        raise ConfigError(
            f"temperature kind {temperature_kind!r} is not known"
            f"{_closest(temperature_kind, TEMPERATURE_KINDS)}; use one of "
            f"{', '.join(TEMPERATURE_KINDS)}"
        )
    if salinity_kind not in SALINITY_KINDS:
        raise ConfigError(
            f"salinity kind {salinity_kind!r} is not known"
            f"{_closest(salinity_kind, SALINITY_KINDS)}; use one of {', '.join(SALINITY_KINDS)}"
        )
    return headers


def _delimiter(file: str) -> str:
    try:
        with open(file, encoding="utf-8", errors="replace") as fh:
            for line in fh:
                if line.strip() and not line.lstrip().startswith("#"):
                    break
            else:
                line = ""
    except OSError as exc:
        raise InputFileError(f"file {file}: cannot be opened ({exc})") from exc
    counts = {d: line.count(d) for d in (",", ";", "\t")}
    best = max(counts, key=lambda d: counts[d])
    return best if counts[best] else ","


def _data_lines(file: str, n_rows: int) -> np.ndarray:
    """The file's own line number (from 1) of each data row of the table.

    Blank lines and ``#`` comment lines are skipped by the reader, so a row's
    line is counted here the same way; when the count does not match (quoted
    fields spanning lines), rows are numbered as if the header were line 1.
    """
    lines = []
    try:
        with open(file, encoding="utf-8", errors="replace", newline="") as fh:
            for number, line in enumerate(fh, start=1):
                text = line.strip()
                if text and not text.startswith("#"):
                    lines.append(number)
    except OSError:
        lines = []
    if len(lines) - 1 == n_rows:
        return np.asarray(lines[1:], dtype=int)
    return np.arange(n_rows) + 2


def _numeric(table: pd.DataFrame, header: str, file: str,
             lines: np.ndarray | None = None) -> np.ndarray:
    text = table[header]
    values = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
    bad = np.isnan(values) & text.notna().to_numpy() & (text.str.strip() != "").to_numpy()
    bad &= ~text.str.strip().str.lower().isin(["nan", "na", "n/a", "null", "none"]).to_numpy()
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        line = int(lines[row]) if lines is not None else row + 2
        raise InputFileError(
            f"{where(file, None, header)}: {text.iloc[row]!r} on line {line} is not a number; "
            "leave missing values empty (or NaN)"
        )
    return values


def _station_value(values: np.ndarray) -> tuple[float, float]:
    """Mean and spread (max - min) of a station's finite per-row values (NaN if none)."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return float("nan"), 0.0
    return float(finite.mean()), float(finite.max() - finite.min())


def read_csv(
    path: str | os.PathLike,
    *,
    columns: Mapping[str, str] | None = None,
    temperature_kind: str = "in-situ",
    salinity_kind: str = "practical",
    pressure_units: str = "dbar",
    temperature_units: str = "degC",
    cautions: Cautions | None = None,
) -> list[Profile]:
    """Read the profiles of a long-form CSV section.

    Parameters
    ----------
    path : str or path-like
        The long-form CSV file (one row per sample).
    columns : mapping, optional
        Canonical column to header name, e.g. ``{"pressure": "PRES", "lat": "Latitude"}``.
    temperature_kind : {"in-situ", "potential", "conservative"}
        What the temperature column holds.
    salinity_kind : {"practical", "absolute"}
        What the salinity column holds (PSS-78, or g/kg).
    pressure_units : str
        Units of the pressure column: dbar (default) or Pa (also hPa, kPa, bar).
    temperature_units : str
        Units of the temperature column: degC (default) or K.
    cautions : Cautions, optional
        Collects findings (e.g. bottom depths that vary within a station).

    Returns
    -------
    list of Profile
        One per station, in order of first appearance; pressure in dbar,
        temperature in degC, bottom depth in m.
    """
    file = os.fspath(path)
    cautions = Cautions() if cautions is None else cautions
    headers = check_csv_options(columns, temperature_kind, salinity_kind)
    try:
        table = pd.read_csv(
            file,
            sep=_delimiter(file),
            dtype=str,
            keep_default_na=False,
            comment="#",
            skipinitialspace=True,
        )
    except (OSError, ValueError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise InputFileError(
            f"file {file}: cannot be read as CSV ({type(exc).__name__}: {exc}); "
            "expected a text table with a header row"
        ) from exc
    table.columns = [str(c).strip() for c in table.columns]
    present = list(table.columns)
    for key in REQUIRED_COLUMNS:
        if headers[key] not in present:
            raise InputFileError(
                f"file {file}: no column {headers[key]!r} for {key}; columns present: "
                f"{', '.join(present) or 'none'} — name the column with "
                f"columns={{{key!r}: '<header>'}} (command line: --column {key}=<header>)"
            )
    if table.empty:
        raise SectionDataError(f"file {file}: the table has a header but no rows")
    lines = _data_lines(file, len(table))

    p_where = where(file, None, headers["pressure"])
    pressure = pressure_to_dbar(_numeric(table, headers["pressure"], file, lines),
                                pressure_units, p_where)
    t_where = where(file, None, headers["temperature"])
    temperature = temperature_to_celsius(
        _numeric(table, headers["temperature"], file, lines), temperature_units, t_where
    )
    salinity = _numeric(table, headers["salinity"], file, lines)
    lat = _numeric(table, headers["lat"], file, lines)
    lon = _numeric(table, headers["lon"], file, lines)
    has_depth = headers["bottom_depth"] in present
    depth = (
        length_to_m(_numeric(table, headers["bottom_depth"], file, lines), "m", file)
        if has_depth
        else np.full(len(table), np.nan)
    )
    station = table[headers["station"]].str.strip().to_numpy(dtype=object)
    empty = np.flatnonzero(station == "")
    if empty.size:
        raise SectionDataError(
            f"{where(file, None, headers['station'])}: line {int(lines[empty[0]])} has no station "
            "id; every row must name its station"
        )

    names = {k: headers[k] for k in REQUIRED_COLUMNS if k != "station"}
    names["latitude"], names["longitude"] = names.pop("lat"), names.pop("lon")
    units = {
        "pressure": pressure_units,
        "temperature": temperature_units,
        "salinity": "g/kg" if salinity_kind == "absolute" else "1",
    }
    if has_depth:
        names["bottom_depth"], units["bottom_depth"] = headers["bottom_depth"], "m"

    profiles = []
    for sid in pd.unique(station):
        rows = np.flatnonzero(station == sid)
        la, la_spread = _station_value(lat[rows])
        lo, lo_spread = _station_value(lon[rows])
        if max(la_spread, lo_spread) > POSITION_SPREAD:
            raise SectionDataError(
                f"{where(file, sid)}: rows of this station span {la_spread:.3f} degrees of "
                f"latitude and {lo_spread:.3f} of longitude (more than {POSITION_SPREAD} "
                "degrees); two casts probably share a station id — give each its own id"
            )
        bottom, d_spread = _station_value(depth[rows])
        if d_spread > DEPTH_SPREAD:
            cautions.add(
                "bottom-depth-varies",
                f"{where(file, sid, headers['bottom_depth'])}: bottom depth varies by "
                f"{d_spread:.0f} m within the station; used the mean {bottom:.0f} m",
                file=file,
                station=sid,
                variable=headers["bottom_depth"],
            )
        profiles.append(
            Profile(
                station=str(sid),
                file=file,
                lat=la,
                lon=lo,
                pressure=pressure[rows],
                salinity=salinity[rows],
                temperature=temperature[rows],
                bottom_depth=bottom,
                salinity_kind=salinity_kind,
                temperature_kind=temperature_kind,
                names=dict(names),
                units=dict(units),
                lines=lines[rows],
            )
        )
    return profiles
