"""Public entry points: read a section's profiles, or load it gridded."""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from sectionkit.errors import Cautions, ComputationError, SectionDataError
from sectionkit.io.bottle import grid_tracers, read_bottle
from sectionkit.io.casts import Source, read_profiles, reorder, source_files
from sectionkit.io.csvfile import check_csv_options
from sectionkit.io.raw import RawSection
from sectionkit.io.validate import (
    check_gridded_levels,
    check_not_surface_only,
    inversion_cautions,
    resolve_bottom,
    validate_section,
)
from sectionkit.thermo import (
    GriddingRules,
    SectionGrid,
    absolute_salinity,
    conservative_temperature,
    find_inversions,
    grid_section,
)

#: Vertical distance between parcels compared for density inversions, dbar.
INVERSION_SPAN = 20.0
#: Density excess counted as an inversion, kg m^-3.
INVERSION_THRESHOLD = 0.02
#: Memory a grid cell (station x level) takes through the whole chain, bytes: measured
#: 232 bytes on the demo (peak RSS at dp = 2 and 0.5 dbar), doubled for more classes.
BYTES_PER_CELL = 500


def available_memory() -> int | None:
    """Memory the machine can still give, bytes (None when it cannot be told)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def check_grid_memory(name: str, n_station: int, deepest: float, dp: float) -> None:
    """Refuse a grid that would need more memory than the machine has, before allocating it.

    Parameters
    ----------
    name : str
        Section name, for messages.
    n_station : int
        Stations.
    deepest : float
        Deepest grid level, dbar.
    dp : float
        Grid step, dbar.
    """
    levels = int(deepest // dp) + 1
    need = n_station * levels * BYTES_PER_CELL
    have = available_memory()
    if have is not None and need > have:
        raise ComputationError(
            f"section {name}: the grid step dp = {dp:g} dbar makes {levels:,} levels x "
            f"{n_station} stations, about {need / 2**30:,.1f} GiB, more than the "
            f"{have / 2**30:,.1f} GiB this machine has free; CTD profiles are 1-2 dbar, so use "
            "dp = 1.0 or 2.0"
        )


def _default_name(source: Source, files: list[str]) -> str:
    if isinstance(source, (str, os.PathLike)):
        base = os.path.basename(os.path.normpath(os.fspath(source)))
    else:
        base = os.path.basename(os.path.dirname(os.path.abspath(files[0]))) if files else ""
    return os.path.splitext(base)[0] or "section"


def read_section(
    source: Source,
    *,
    name: str | None = None,
    columns: Mapping[str, str] | None = None,
    temperature_kind: str = "in-situ",
    salinity_kind: str = "practical",
    pressure_units: str = "dbar",
    temperature_units: str = "degC",
    variables: Mapping[str, str] | None = None,
    order: Sequence[str] | None = None,
) -> RawSection:
    """Read a section's per-station profiles as measured, before checks and gridding.

    Parameters
    ----------
    source : path, folder or sequence of paths
        A CF-NetCDF or long-form CSV section file; a folder of per-cast files
        (read in sorted file-name order, digit runs compared as numbers); or a
        list of files read in the order given.
    name : str, optional
        Section name (default: the file or folder name without extension).
    columns : mapping, optional
        CSV only: canonical column (station, lat, lon, pressure, temperature,
        salinity, bottom_depth) to the header used in the file.
    temperature_kind : {"in-situ", "potential", "conservative"}
        CSV only: what the temperature column holds (NetCDF files say it by
        standard_name).
    salinity_kind : {"practical", "absolute"}
        CSV only: what the salinity column holds.
    pressure_units : str
        CSV only: units of the pressure column, dbar or Pa.
    temperature_units : str
        CSV only: units of the temperature column, degC or K.
    variables : mapping, optional
        NetCDF only: quantity (pressure, salinity, temperature, latitude,
        longitude, bottom_depth) to variable name, when several variables
        carry the same standard_name.
    order : sequence of str, optional
        Station ids in the wanted order (stations not named are left out).

    Returns
    -------
    RawSection
        Profiles in station order: pressure in dbar, temperature in degC,
        bottom depth in m; stations without an id numbered from "1" by position.
        Only structural problems are raised here; values are checked by
        :func:`load_section`.
    """
    check_csv_options(columns, temperature_kind, salinity_kind)
    files = source_files(source)
    cautions = Cautions()
    csv_options = {
        "columns": columns,
        "temperature_kind": temperature_kind,
        "salinity_kind": salinity_kind,
        "pressure_units": pressure_units,
        "temperature_units": temperature_units,
    }
    profiles = read_profiles(files, cautions=cautions, variables=variables, csv_options=csv_options)
    raw = RawSection(
        name=name or _default_name(source, files),
        sources=files,
        profiles=profiles,
        cautions=cautions,
    )
    raw.number_stations()
    if order is not None:
        raw.profiles = reorder(raw.profiles, order)
    return raw


def teos10_samples(
    raw: RawSection, rules: GriddingRules, cautions: Cautions
) -> tuple[list[np.ndarray], list[np.ndarray], np.ndarray, np.ndarray]:
    """Absolute Salinity and Conservative Temperature at each station's samples.

    Parameters
    ----------
    raw : RawSection
        Profiles that passed :func:`sectionkit.io.validate.validate_section`.
    rules : GriddingRules
        Supplies the bottom tolerance, m.
    cautions : Cautions
        Collects short casts and moved bottoms.

    Returns
    -------
    pressure : list of ndarray (sample,)
        Pressure of the complete samples, dbar.
    values : list of ndarray (2, sample)
        SA (g/kg) and CT (degC) there.
    bottom_pressure : ndarray (station,)
        dbar.
    bottom_depth : ndarray (station,)
        m, positive down.
    """
    pressure, values, bottom_p, bottom_d = [], [], [], []
    for profile in raw.profiles:
        bp, bd, _ = resolve_bottom(profile, rules.bottom_tolerance, cautions)
        keep = profile.complete()
        p, s, t = profile.pressure[keep], profile.salinity[keep], profile.temperature[keep]
        if profile.salinity_kind == "practical":
            sa = absolute_salinity(s[None, :], p[None, :], [profile.lon], [profile.lat])[0]
        else:
            sa = s.copy()
        ct = conservative_temperature(t, sa, p, profile.temperature_kind)
        bad = ~(np.isfinite(sa) & np.isfinite(ct))
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            raise SectionDataError(
                f"{profile.where()}: TEOS-10 conversion gave no value at {p[k]:g} dbar "
                f"(salinity {s[k]:g}, temperature {t[k]:g}); check the values and the position"
            )
        pressure.append(p)
        values.append(np.stack([sa, ct]))
        bottom_p.append(bp)
        bottom_d.append(bd)
    return pressure, values, np.array(bottom_p), np.array(bottom_d)


def gridding_cautions(
    raw: RawSection, grid: SectionGrid, rules: GriddingRules, cautions: Cautions
) -> None:
    """Cautions for surface fills, wide interpolated gaps and density inversions."""
    for profile, g in zip(raw.profiles, grid.profiles, strict=True):
        if g.surface_fill > rules.note_gap:
            cautions.add(
                "surface-fill",
                f"{profile.where()}: shallowest sample at {g.surface_fill:g} dbar; values above "
                "it are the shallowest sample's",
                file=profile.file,
                station=profile.station,
            )
        if g.largest_gap > rules.note_gap:
            cautions.add(
                "interior-gap",
                f"{profile.where()}: {g.largest_gap:g} dbar without samples below "
                f"{g.gap_top:g} dbar, interpolated linearly",
                file=profile.file,
                station=profile.station,
            )
    SA, CT = grid.values
    inversions = find_inversions(
        SA, CT, grid.pressure, span=INVERSION_SPAN, threshold=INVERSION_THRESHOLD
    )
    inversion_cautions(raw, inversions, INVERSION_SPAN, INVERSION_THRESHOLD, cautions)


def section_dataset(
    raw: RawSection,
    grid: SectionGrid,
    bottom_pressure: np.ndarray,
    bottom_depth: np.ndarray,
    rules: GriddingRules,
) -> xr.Dataset:
    """Assemble the canonical gridded Dataset (docs/CONTRACTS-INTERNAL.md)."""
    SA, CT = grid.values
    kinds = sorted(
        {f"{p.salinity_kind} salinity, {p.temperature_kind} temperature" for p in raw.profiles}
    )
    gridding = " ".join(
        [rules.describe(), "Read as: " + "; ".join(kinds) + "."] + grid.log(raw.stations, rules)
    )
    return xr.Dataset(
        data_vars={
            "SA": (
                ("station", "pressure"),
                SA,
                {
                    "units": "g/kg",
                    "long_name": "Absolute Salinity",
                    "standard_name": "sea_water_absolute_salinity",
                },
            ),
            "CT": (
                ("station", "pressure"),
                CT,
                {
                    "units": "degC",
                    "long_name": "Conservative Temperature",
                    "standard_name": "sea_water_conservative_temperature",
                },
            ),
            "lat": ("station", raw.lat, {"units": "degrees_north", "long_name": "latitude"}),
            "lon": ("station", raw.lon, {"units": "degrees_east", "long_name": "longitude"}),
            "bottom_pressure": (
                "station",
                bottom_pressure,
                {"units": "dbar", "long_name": "sea-floor pressure"},
            ),
            "bottom_depth": (
                "station",
                bottom_depth,
                {"units": "m", "long_name": "sea-floor depth", "positive": "down"},
            ),
        },
        coords={
            "pressure": (
                "pressure",
                grid.pressure,
                {"units": "dbar", "standard_name": "sea_water_pressure", "positive": "down"},
            ),
            "station": ("station", np.array(raw.stations, dtype=str), {"long_name": "station id"}),
        },
        attrs={
            "section": raw.name,
            "source": ", ".join(raw.sources),
            "dp": float(rules.dp),
            "gridding": gridding,
        },
    )


def grid_raw_section(raw: RawSection, rules: GriddingRules, cautions: Cautions) -> xr.Dataset:
    """TEOS-10 fields of a checked section on its common pressure grid.

    Parameters
    ----------
    raw : RawSection
        Profiles that passed :func:`sectionkit.io.validate.validate_section`.
    rules : GriddingRules
        Grid step (dbar), gap limits (dbar) and bottom tolerance (m).
    cautions : Cautions
        Collects bottom, gridding and density-inversion findings.

    Returns
    -------
    xarray.Dataset
        The canonical gridded section (docs/CONTRACTS-INTERNAL.md).
    """
    check_not_surface_only(raw, rules.dp)
    pressure, values, bottom_p, bottom_d = teos10_samples(raw, rules, cautions)
    check_grid_memory(raw.name, len(raw.profiles), float(np.max(bottom_p)), rules.dp)
    labels = [profile.where() for profile in raw.profiles]
    grid = grid_section(pressure, values, bottom_p, rules, labels)
    gridding_cautions(raw, grid, rules, cautions)
    dataset = section_dataset(raw, grid, bottom_p, bottom_d, rules)
    check_gridded_levels(dataset, ", ".join(raw.sources))
    return dataset


def load_section(
    source: Source,
    *,
    dp: float = 2.0,
    allow_equator: bool = False,
    rules: GriddingRules | None = None,
    bottle: str | os.PathLike | None = None,
    **read_options: Any,
) -> tuple[xr.Dataset, Cautions]:
    """Read, check and grid a section: the canonical Dataset and its cautions.

    Parameters
    ----------
    source : path, folder or sequence of paths
        As for :func:`read_section`.
    dp : float
        Grid step, dbar.
    allow_equator : bool
        Keep pairs whose mid-point lies within 2 degrees of the equator
        (with a caution) instead of raising EquatorError.
    rules : GriddingRules, optional
        Gap limits (dbar) and bottom tolerance (m); its dp is replaced by ``dp``.
    bottle : path, optional
        A WHP-Exchange bottle file of the same stations: its tracers are
        gridded by the rule of :mod:`sectionkit.io.bottle`.
    **read_options
        How to read the files, passed to :func:`read_section` (one list of
        them): ``name`` (default: file or folder name without extension),
        the CSV layout ``columns``, ``temperature_kind``, ``salinity_kind``,
        ``pressure_units``, ``temperature_units``, the NetCDF ``variables``
        and the station ``order``.

    Returns
    -------
    dataset : xarray.Dataset
        dims (station, pressure); SA (g/kg) and CT (degC) finite from 0 dbar to
        each station's last level floor(bottom_pressure/dp)*dp, NaN below;
        lat, lon, bottom_pressure (dbar), bottom_depth (m); attrs section,
        source, dp, gridding; with ``bottle``, one umol/kg variable per
        tracer (attribute ``role = "tracer"``) and attribute ``bottle``.
    cautions : Cautions
        Non-fatal findings (inversions, gaps, short casts, rules applied).

    Raises
    ------
    InputFileError
        Unreadable or wrong kind of file, missing variables.
    SectionDataError
        Values that cannot be used (see :mod:`sectionkit.io.validate`).
    EquatorError
        Pairs near the equator without ``allow_equator``.
    """
    base = rules or GriddingRules()
    try:
        dp = float(dp)
    except (TypeError, ValueError) as exc:
        raise SectionDataError(f"grid step dp = {dp!r} must be a number of dbar, e.g. 2.0") from exc
    rules = dataclasses.replace(base, dp=dp)
    raw = read_section(source, **read_options)
    cautions = validate_section(raw, allow_equator=allow_equator)
    dataset = grid_raw_section(raw, rules, cautions)
    if bottle is not None:
        dataset = grid_tracers(dataset, read_bottle(bottle, cautions), cautions)
    return dataset, cautions
