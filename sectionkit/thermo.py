"""TEOS-10 fields and the common pressure grid.

Two jobs, both on plain numpy arrays with the vertical axis last:

- conversions at the edge of gsw: kelvin to degrees Celsius, pascal to
  decibar, practical to Absolute Salinity (each station at its own position),
  in-situ or potential temperature to Conservative Temperature;
- gridding of measured profiles onto the section's common pressure grid
  0, dp, 2 dp, ... by linear interpolation in pressure, with the stated rules
  of :class:`GriddingRules` for gaps, the sea surface and the sea floor.

Thin xarray wrappers (``xr.apply_ufunc`` with ``dask="parallelized"``) let the
conversions take extra leading dimensions and dask-backed arrays unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import gsw
import numpy as np
import xarray as xr

from sectionkit.errors import SectionDataError

#: Offset between the kelvin and Celsius scales, K.
KELVIN_OFFSET = 273.15
#: Pascal per decibar.
PA_PER_DBAR = 1.0e4

TEMPERATURE_KINDS = ("in-situ", "potential", "conservative")
SALINITY_KINDS = ("practical", "absolute")


# ---------------------------------------------------------------------------
# Unit conversions
# ---------------------------------------------------------------------------


def kelvin_to_celsius(t: np.ndarray) -> np.ndarray:
    """Temperature in kelvin to degrees Celsius.

    Parameters
    ----------
    t : ndarray
        Temperature, K.

    Returns
    -------
    ndarray
        Temperature, degC.
    """
    return np.asarray(t, dtype=float) - KELVIN_OFFSET


def pascal_to_dbar(p: np.ndarray) -> np.ndarray:
    """Pressure in pascal to decibar.

    Parameters
    ----------
    p : ndarray
        Sea pressure, Pa.

    Returns
    -------
    ndarray
        Sea pressure, dbar.
    """
    return np.asarray(p, dtype=float) / PA_PER_DBAR


def pressure_from_depth(depth: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Sea pressure at a depth below the sea surface (gsw.p_from_z).

    Parameters
    ----------
    depth : ndarray (...)
        Depth, m, positive down.
    lat : ndarray (...)
        Latitude, degrees_north.

    Returns
    -------
    ndarray (...)
        Sea pressure, dbar.
    """
    return gsw.p_from_z(-np.asarray(depth, dtype=float), np.asarray(lat, dtype=float))


def depth_from_pressure(p: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Depth below the sea surface of a sea pressure (gsw.z_from_p).

    Parameters
    ----------
    p : ndarray (...)
        Sea pressure, dbar.
    lat : ndarray (...)
        Latitude, degrees_north.

    Returns
    -------
    ndarray (...)
        Depth, m, positive down.
    """
    return -gsw.z_from_p(np.asarray(p, dtype=float), np.asarray(lat, dtype=float))


# ---------------------------------------------------------------------------
# TEOS-10 conversions (kernels)
# ---------------------------------------------------------------------------


def absolute_salinity(
    SP: np.ndarray, p: np.ndarray, lon: np.ndarray, lat: np.ndarray
) -> np.ndarray:
    """Absolute Salinity from Practical Salinity at each station's own position.

    Parameters
    ----------
    SP : ndarray (..., station, level)
        Practical Salinity, PSS-78 (unitless).
    p : ndarray (..., station, level)
        Sea pressure, dbar.
    lon : ndarray (..., station)
        Station longitude, degrees_east.
    lat : ndarray (..., station)
        Station latitude, degrees_north.

    Returns
    -------
    ndarray (..., station, level)
        Absolute Salinity, g/kg (gsw.SA_from_SP: the salinity anomaly ratio
        depends on position and pressure).
    """
    lon = np.asarray(lon, dtype=float)[..., None]
    lat = np.asarray(lat, dtype=float)[..., None]
    return gsw.SA_from_SP(SP, p, lon, lat)


def conservative_temperature(
    temperature: np.ndarray, SA: np.ndarray, p: np.ndarray, kind: str
) -> np.ndarray:
    """Conservative Temperature from in-situ, potential or Conservative Temperature.

    Parameters
    ----------
    temperature : ndarray (...)
        Temperature of the given kind, degC (ITS-90; potential temperature
        referenced to 0 dbar).
    SA : ndarray (...)
        Absolute Salinity, g/kg.
    p : ndarray (...)
        Sea pressure, dbar (used for in-situ temperature only).
    kind : {"in-situ", "potential", "conservative"}
        What ``temperature`` is.

    Returns
    -------
    ndarray (...)
        Conservative Temperature, degC.
    """
    if kind == "in-situ":
        return gsw.CT_from_t(SA, temperature, p)
    if kind == "potential":
        return gsw.CT_from_pt(SA, temperature)
    if kind == "conservative":
        return np.array(temperature, dtype=float)
    raise SectionDataError(
        f"temperature kind {kind!r} is not known; use one of {', '.join(TEMPERATURE_KINDS)}"
    )


def absolute_salinity_da(
    SP: xr.DataArray, lon: xr.DataArray, lat: xr.DataArray, pressure_dim: str = "pressure"
) -> xr.DataArray:
    """Absolute Salinity of a DataArray (thin wrapper of :func:`absolute_salinity`).

    Parameters
    ----------
    SP : DataArray (..., station, pressure)
        Practical Salinity, PSS-78, with a ``pressure`` coordinate in dbar.
    lon, lat : DataArray (..., station)
        Station position, degrees_east and degrees_north.
    pressure_dim : str
        Name of the vertical dimension (its coordinate is pressure, dbar).

    Returns
    -------
    DataArray (..., station, pressure)
        Absolute Salinity, g/kg; dask-backed input stays lazy.
    """
    p = SP[pressure_dim]
    result = xr.apply_ufunc(
        lambda sp, pp, lo, la: gsw.SA_from_SP(sp, pp, lo, la),
        SP,
        p,
        lon,
        lat,
        dask="parallelized",
        output_dtypes=[float],
    )
    return result.assign_attrs(units="g/kg", long_name="Absolute Salinity")


def conservative_temperature_da(
    temperature: xr.DataArray, SA: xr.DataArray, kind: str, pressure_dim: str = "pressure"
) -> xr.DataArray:
    """Conservative Temperature of a DataArray (wrapper of :func:`conservative_temperature`).

    Parameters
    ----------
    temperature : DataArray (..., pressure)
        Temperature of the given kind, degC, with a pressure coordinate in dbar.
    SA : DataArray (..., pressure)
        Absolute Salinity, g/kg.
    kind : {"in-situ", "potential", "conservative"}
        What ``temperature`` is.
    pressure_dim : str
        Name of the vertical dimension (its coordinate is pressure, dbar).

    Returns
    -------
    DataArray (..., pressure)
        Conservative Temperature, degC; dask-backed input stays lazy.
    """
    result = xr.apply_ufunc(
        lambda t, sa, pp: conservative_temperature(t, sa, pp, kind),
        temperature,
        SA,
        temperature[pressure_dim],
        dask="parallelized",
        output_dtypes=[float],
    )
    return result.assign_attrs(units="degC", long_name="Conservative Temperature")


# ---------------------------------------------------------------------------
# Density inversions
# ---------------------------------------------------------------------------


def density_jumps(SA: np.ndarray, CT: np.ndarray, p: np.ndarray, lag: int) -> np.ndarray:
    """Density excess of the upper over the lower of two levels ``lag`` apart.

    Both parcels are compared at their mid pressure (locally referenced
    potential density), so the result is free of the compressibility
    effect that makes sigma0 decrease downward in stable deep water; near the
    surface it equals the sigma0 difference.

    Parameters
    ----------
    SA : ndarray (..., level)
        Absolute Salinity, g/kg.
    CT : ndarray (..., level)
        Conservative Temperature, degC.
    p : ndarray (level,)
        Pressure of the levels, dbar, increasing.
    lag : int
        Number of levels between the compared parcels, >= 1.

    Returns
    -------
    ndarray (..., level - lag)
        rho(upper) - rho(lower) at the mid pressure, kg m^-3; positive means
        an inversion (denser water above lighter water), NaN where either
        level is missing.
    """
    p = np.asarray(p, dtype=float)
    p_mid = 0.5 * (p[:-lag] + p[lag:])
    upper = gsw.rho(SA[..., :-lag], CT[..., :-lag], p_mid)
    lower = gsw.rho(SA[..., lag:], CT[..., lag:], p_mid)
    return upper - lower


@dataclass(frozen=True)
class Inversion:
    """A run of levels where denser water lies above lighter water."""

    station_index: int
    p_top: float  # dbar
    p_bottom: float  # dbar
    excess: float  # kg m^-3, largest density excess of upper over lower parcel


def find_inversions(
    SA: np.ndarray,
    CT: np.ndarray,
    p: np.ndarray,
    *,
    span: float = 20.0,
    threshold: float = 0.02,
) -> list[Inversion]:
    """Density inversions beyond instrument noise on gridded profiles.

    Parameters
    ----------
    SA : ndarray (station, level)
        Absolute Salinity on the grid, g/kg.
    CT : ndarray (station, level)
        Conservative Temperature on the grid, degC.
    p : ndarray (level,)
        Grid pressure, dbar, evenly spaced.
    span : float
        Vertical distance between compared parcels, dbar.
    threshold : float
        Density excess counted as an inversion, kg m^-3.

    Returns
    -------
    list of Inversion
        One entry per contiguous run of flagged levels per station.
    """
    p = np.asarray(p, dtype=float)
    if p.size < 2:
        return []
    dp = p[1] - p[0]
    lag = max(1, int(round(span / dp)))
    if p.size <= lag:
        lag = p.size - 1
    with np.errstate(invalid="ignore"):
        jump = density_jumps(np.atleast_2d(SA), np.atleast_2d(CT), p, lag)
        flagged = np.nan_to_num(jump, nan=0.0) > threshold
    found = []
    for i, row in enumerate(flagged):
        idx = np.flatnonzero(row)
        if idx.size == 0:
            continue
        breaks = np.flatnonzero(np.diff(idx) > 1)
        starts = np.concatenate(([idx[0]], idx[breaks + 1]))
        ends = np.concatenate((idx[breaks], [idx[-1]]))
        for a, b in zip(starts, ends, strict=True):
            found.append(
                Inversion(i, float(p[a]), float(p[b + lag]), float(np.max(jump[i, a : b + 1])))
            )
    return found


# ---------------------------------------------------------------------------
# Gridding
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class GriddingRules:
    """The stated rules for putting profiles on the common pressure grid.

    Parameters
    ----------
    dp : float
        Grid step, dbar; the grid is 0, dp, 2 dp, ...
    max_interior_gap : float
        Largest pressure gap between neighbouring samples that is
        interpolated linearly, dbar; a larger gap is an error.
    max_surface_gap : float
        Deepest shallowest-sample pressure that is filled up to 0 dbar with
        the shallowest sample's values, dbar; deeper is an error.
    bottom_tolerance : float
        How far the stated bottom may lie above the deepest sample before it
        is an error, m (within it, the deepest sample is taken as the bottom).
    note_gap : float
        Surface fills and interior gaps larger than this are reported as
        cautions, dbar (all are stated in the ``gridding`` attribute).
    """

    dp: float = 2.0
    max_interior_gap: float = 50.0
    max_surface_gap: float = 30.0
    bottom_tolerance: float = 10.0
    note_gap: float = 10.0

    def __post_init__(self) -> None:
        for name in ("dp", "max_interior_gap", "max_surface_gap", "bottom_tolerance", "note_gap"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value >= 0):
                raise SectionDataError(
                    f"gridding rule {name} = {value!r} must be a finite number >= 0"
                )
        if self.dp <= 0:
            raise SectionDataError(f"grid step dp = {self.dp!r} dbar must be positive, e.g. 2.0")

    def describe(self) -> str:
        """The rules as one paragraph of text."""
        return (
            f"Profiles are interpolated linearly in pressure onto 0, {self.dp:g}, "
            f"{2 * self.dp:g}, ... dbar (dp = {self.dp:g} dbar), each from its samples where "
            f"pressure, salinity and temperature are all finite. Interior gaps up to "
            f"{self.max_interior_gap:g} dbar are interpolated; larger gaps are refused. "
            f"A shallowest sample no deeper than {self.max_surface_gap:g} dbar is extended "
            f"unchanged up to 0 dbar; deeper is refused. The deepest sample is extended "
            f"unchanged down to the station's bottom pressure (from the bottom depth with "
            f"gsw.p_from_z at the station latitude, or the deepest sample when no bottom depth "
            f"is given); a bottom more than {self.bottom_tolerance:g} m above the deepest sample "
            f"is refused, and one less than that above it is moved down to the deepest sample. "
            f"Values below each station's last level floor(bottom_pressure/dp)*dp are NaN."
        )


def pressure_grid(p_max: float, dp: float) -> np.ndarray:
    """The common grid 0, dp, 2 dp, ... up to the last multiple of dp not below ``p_max``'s floor.

    Parameters
    ----------
    p_max : float
        Deepest pressure to cover, dbar.
    dp : float
        Grid step, dbar.

    Returns
    -------
    ndarray (level,)
        Grid pressure, dbar: k * dp for k = 0 .. floor(p_max / dp).
    """
    return np.arange(last_level(p_max, dp) + 1) * float(dp)


def last_level(p: float, dp: float) -> int:
    """Index of the deepest grid level at or above pressure ``p``.

    Parameters
    ----------
    p : float
        Pressure, dbar, >= 0.
    dp : float
        Grid step, dbar.

    Returns
    -------
    int
        floor(p / dp), tolerant of round-off (p = 3 * 0.1 counts as 3 steps).
    """
    return max(0, int(np.floor(p / dp + 1e-9)))


@dataclass
class ProfileGrid:
    """One profile on the grid, and what was done to get it there."""

    values: np.ndarray  # (variable, level) on the grid, NaN below the last level
    last_level: int  # index of the deepest finite level
    surface_fill: float  # dbar filled above the shallowest sample (0 if none)
    largest_gap: float  # dbar, largest interior gap interpolated
    gap_top: float  # dbar, upper end of that gap
    bottom_extension: float  # dbar between the deepest sample and the bottom pressure


def grid_profile(
    p: np.ndarray,
    values: np.ndarray,
    bottom_pressure: float,
    n_levels: int,
    rules: GriddingRules,
    label: str = "profile",
) -> ProfileGrid:
    """Interpolate one measured profile onto the common pressure grid.

    Parameters
    ----------
    p : ndarray (sample,)
        Sample pressure, dbar, finite and strictly increasing.
    values : ndarray (variable, sample)
        Properties at the samples (any units), finite.
    bottom_pressure : float
        Sea-floor pressure of the station, dbar, not above the deepest sample.
    n_levels : int
        Number of levels of the section grid (0, dp, ... (n_levels-1) dp).
    rules : GriddingRules
        Grid step and the limits on gaps.
    label : str
        Where the profile comes from, for error messages
        (e.g. ``"station 7 (file north.nc)"``).

    Returns
    -------
    ProfileGrid
        The gridded values (variable, level) and the rules that were applied.

    Raises
    ------
    SectionDataError
        No samples, pressure not increasing, an interior gap wider than
        ``rules.max_interior_gap`` or a shallowest sample deeper than
        ``rules.max_surface_gap``.
    """
    p = np.asarray(p, dtype=float)
    values = np.atleast_2d(np.asarray(values, dtype=float))
    dp = rules.dp
    if p.size == 0:
        raise SectionDataError(
            f"{label}: no sample has pressure, salinity and temperature all present; "
            "drop the station or supply its data"
        )
    steps = np.diff(p)
    if np.any(steps <= 0):
        k = int(np.flatnonzero(steps <= 0)[0])
        raise SectionDataError(
            f"{label}: pressure does not increase from {p[k]:g} to {p[k + 1]:g} dbar at sample "
            f"{k + 1}; profiles must increase downward — sort or drop the bad scans"
        )
    if p[0] > rules.max_surface_gap:
        raise SectionDataError(
            f"{label}: the shallowest sample is at {p[0]:g} dbar, deeper than the "
            f"{rules.max_surface_gap:g} dbar that sectionkit fills with the shallowest values; "
            "supply near-surface data or drop the station"
        )
    largest_gap, gap_top = 0.0, float(p[0])
    if steps.size:
        k = int(np.argmax(steps))
        largest_gap, gap_top = float(steps[k]), float(p[k])
        if largest_gap > rules.max_interior_gap:
            raise SectionDataError(
                f"{label}: samples are missing between {p[k]:g} and {p[k + 1]:g} dbar, a gap of "
                f"{largest_gap:g} dbar, wider than the {rules.max_interior_gap:g} dbar that "
                "sectionkit interpolates; fill the gap from another source or drop the station"
            )
    bottom = max(float(bottom_pressure), float(p[-1]))
    last = min(last_level(bottom, dp), n_levels - 1)
    grid = np.arange(n_levels) * dp
    out = np.full((values.shape[0], n_levels), np.nan)
    for v in range(values.shape[0]):
        # np.interp holds the end values beyond the samples: that is the
        # surface fill above p[0] and the bottom extension below p[-1].
        out[v, : last + 1] = np.interp(grid[: last + 1], p, values[v])
    return ProfileGrid(
        values=out,
        last_level=last,
        surface_fill=max(0.0, float(p[0])),
        largest_gap=largest_gap,
        gap_top=gap_top,
        bottom_extension=max(0.0, bottom - float(p[-1])),
    )


@dataclass
class SectionGrid:
    """Gridded section: properties on the common grid and a log of the rules applied."""

    pressure: np.ndarray  # (level,) dbar
    values: np.ndarray  # (variable, station, level)
    profiles: list[ProfileGrid] = field(default_factory=list)

    def log(self, labels: list[str], rules: GriddingRules) -> list[str]:
        """Sentences stating where each rule was applied.

        Parameters
        ----------
        labels : list of str
            Station names, in station order.
        rules : GriddingRules
            The rules used.

        Returns
        -------
        list of str
            One sentence per rule that was applied somewhere.
        """
        surface = [
            f"{lab} (from {g.surface_fill:g} dbar)"
            for lab, g in zip(labels, self.profiles, strict=True)
            if g.surface_fill > 0
        ]
        gaps = [
            f"{lab} ({g.largest_gap:g} dbar below {g.gap_top:g} dbar)"
            for lab, g in zip(labels, self.profiles, strict=True)
            if g.largest_gap > rules.note_gap
        ]
        bottom = [
            f"{lab} (+{g.bottom_extension:.1f} dbar)"
            for lab, g in zip(labels, self.profiles, strict=True)
            if g.bottom_extension > 0
        ]
        lines = []
        if surface:
            lines.append(
                "Surface filled with the shallowest sample at stations " + ", ".join(surface) + "."
            )
        if gaps:
            lines.append(
                f"Interior gaps wider than {rules.note_gap:g} dbar interpolated at stations "
                + ", ".join(gaps)
                + "."
            )
        if bottom:
            lines.append(
                "Deepest sample extended to the bottom at stations " + ", ".join(bottom) + "."
            )
        return lines


def grid_section(
    p: list[np.ndarray],
    values: list[np.ndarray],
    bottom_pressure: np.ndarray,
    rules: GriddingRules,
    labels: list[str] | None = None,
) -> SectionGrid:
    """Put every station's profile on one grid from 0 dbar to the deepest bottom.

    Parameters
    ----------
    p : list of ndarray (sample,)
        Sample pressure of each station, dbar, finite and increasing.
    values : list of ndarray (variable, sample)
        Properties of each station at its samples, finite.
    bottom_pressure : ndarray (station,)
        Sea-floor pressure of each station, dbar.
    rules : GriddingRules
        Grid step and gap limits.
    labels : list of str, optional
        Station descriptions for error messages.

    Returns
    -------
    SectionGrid
        ``values`` is (variable, station, level) on ``pressure`` =
        0, dp, ... floor(max(bottom_pressure) / dp) * dp.
    """
    bottom_pressure = np.asarray(bottom_pressure, dtype=float)
    if labels is None:
        labels = [f"station {i + 1}" for i in range(len(p))]
    deepest = max(
        max(float(bp_i), float(pi[-1]) if pi.size else 0.0)
        for pi, bp_i in zip(p, bottom_pressure, strict=True)
    )
    grid = pressure_grid(deepest, rules.dp)
    profiles = [
        grid_profile(pi, vi, bp_i, grid.size, rules, label)
        for pi, vi, bp_i, label in zip(p, values, bottom_pressure, labels, strict=True)
    ]
    stacked = np.stack([g.values for g in profiles], axis=1)
    return SectionGrid(pressure=grid, values=stacked, profiles=profiles)
