"""Station-pair geometry: distance, mid-point, Coriolis parameter, line direction.

Pair ``k`` lies between stations ``k`` and ``k + 1``. Distances follow
gsw.distance (haversine on a sphere of radius 6371 km, at the sea surface), so
velocities computed here equal gsw.geostrophic_velocity. Longitude differences
are wrapped into [-180, 180) so a pair straddling the dateline is as short as
it really is.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from sectionkit.errors import check_trailing_shape

EARTH_RADIUS = 6371e3  # m, the sphere used by gsw.distance
OMEGA = 7.292115e-5  # s^-1, Earth's rotation rate as in gsw.f (TEOS-10)


def wrap_longitude_difference(dlon: np.ndarray) -> np.ndarray:
    """Wrap longitude differences into [-180, 180) degrees.

    Parameters
    ----------
    dlon : ndarray
        Longitude difference, degrees.

    Returns
    -------
    ndarray
        The same difference taken the short way round, degrees.
    """
    return (np.asarray(dlon, dtype=float) + 180.0) % 360.0 - 180.0


def haversine(
    lon1: np.ndarray, lat1: np.ndarray, lon2: np.ndarray, lat2: np.ndarray
) -> np.ndarray:
    """Great-circle distance between two sets of points (broadcast).

    Parameters
    ----------
    lon1, lat1 : ndarray (...)
        First points, degrees_east and degrees_north.
    lon2, lat2 : ndarray (...)
        Second points, degrees_east and degrees_north.

    Returns
    -------
    ndarray (...)
        Distance on a sphere of radius ``EARTH_RADIUS``, m (as gsw.distance at p = 0).
    """
    l1, p1, l2, p2 = (np.radians(np.asarray(a, dtype=float)) for a in (lon1, lat1, lon2, lat2))
    a = np.sin((p2 - p1) / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin((l2 - l1) / 2) ** 2
    a = np.clip(a, 0.0, 1.0)
    return EARTH_RADIUS * 2 * np.arctan2(np.sqrt(a), np.sqrt(1 - a))


def great_circle_distance(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Distance between neighbouring stations along the line.

    Parameters
    ----------
    lon, lat : ndarray (..., station)
        Station positions, degrees_east and degrees_north.

    Returns
    -------
    ndarray (..., pair)
        Great-circle distance, m (haversine, as gsw.distance at p = 0).
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    check_trailing_shape("great_circle_distance", "lat", lat, lon.shape, "station (as lon)")
    return haversine(lon[..., :-1], lat[..., :-1], lon[..., 1:], lat[..., 1:])


def pair_midpoints(lon: np.ndarray, lat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mid-points of neighbouring stations ``lon, lat`` (..., station), degrees.

    Returns
    -------
    mid_lon : ndarray (..., pair)
        Longitude of the mid-point, degrees_east, in the range of the first
        station of the pair (dateline-safe).
    mid_lat : ndarray (..., pair)
        Arithmetic mean latitude, degrees_north (as gsw.geostrophic_velocity,
        which evaluates f there).
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    check_trailing_shape("pair_midpoints", "lat", lat, lon.shape, "station (as lon)")
    dlon = wrap_longitude_difference(np.diff(lon, axis=-1))
    mid_lon = lon[..., :-1] + 0.5 * dlon
    mid_lon = np.where(mid_lon > 360.0, mid_lon - 360.0, mid_lon)
    mid_lon = np.where(mid_lon < -180.0, mid_lon + 360.0, mid_lon)
    return mid_lon, 0.5 * (lat[..., :-1] + lat[..., 1:])


EQUATOR_BAND = 2.0  # degrees: geostrophy is refused within this band (DESIGN.md §4)
#: degrees: refused even with allow_equator = true; f = 2 Omega sin(lat) is then so small
#: that geostrophic and Ekman velocities (1/f) are meaningless (common practice)
EQUATOR_HARD_BAND = 0.5


def equatorial_pairs(
    lon: np.ndarray, lat: np.ndarray, band: float = EQUATOR_BAND
) -> tuple[np.ndarray, np.ndarray]:
    """Pairs whose mid-point lies within ``band`` of the equator.

    Parameters
    ----------
    lon, lat : ndarray (station,)
        Station positions, degrees_east and degrees_north.
    band : float
        Half-width of the band, degrees (``EQUATOR_BAND`` by default).

    Returns
    -------
    pairs : ndarray of int
        Indices of those pairs.
    mid_lat : ndarray (pair,)
        Mid-point latitude of every pair, degrees_north.
    """
    _, mid_lat = pair_midpoints(lon, lat)
    return np.flatnonzero(np.abs(mid_lat) < band), mid_lat


def coriolis_parameter(lat: np.ndarray) -> np.ndarray:
    """Coriolis parameter f = 2 Omega sin(lat).

    Parameters
    ----------
    lat : ndarray
        Latitude, degrees_north.

    Returns
    -------
    ndarray
        f, s^-1.
    """
    return 2.0 * OMEGA * np.sin(np.radians(np.asarray(lat, dtype=float)))


def along_line_direction(lon: np.ndarray, lat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unit vector along the line, from station k to k + 1, in local east/north.

    Positive transport is to the left of this direction, i.e. along
    (-t_north, t_east). ``lon, lat`` as for :func:`great_circle_distance`.

    Returns
    -------
    t_east, t_north : ndarray (..., pair)
        Components of the unit along-line vector, dimensionless.
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    _, mid_lat = pair_midpoints(lon, lat)
    dx = np.radians(wrap_longitude_difference(np.diff(lon, axis=-1))) * np.cos(
        np.radians(mid_lat)
    )
    dy = np.radians(np.diff(lat, axis=-1))
    norm = np.hypot(dx, dy)
    with np.errstate(invalid="ignore", divide="ignore"):
        return dx / norm, dy / norm


def pair_geometry(section: xr.Dataset) -> xr.Dataset:
    """Geometry of every station pair of a section.

    Parameters
    ----------
    section : xr.Dataset
        Canonical section with ``lon`` and ``lat`` (station), degrees.

    Returns
    -------
    xr.Dataset
        Dimension ``pair``; variables ``distance`` (m), ``lon``, ``lat``
        (mid-point, degrees), ``f`` (s^-1), ``along_east``, ``along_north``
        (unit vector, 1), and ``station_a``/``station_b`` (ids of the two
        stations).
    """
    lon = section["lon"].values
    lat = section["lat"].values
    distance = great_circle_distance(lon, lat)
    mid_lon, mid_lat = pair_midpoints(lon, lat)
    t_east, t_north = along_line_direction(lon, lat)
    stations = section["station"].values
    pair = np.arange(len(distance))
    return xr.Dataset(
        {
            "distance": ("pair", distance, {"units": "m", "long_name": "station spacing"}),
            "lon": ("pair", mid_lon, {"units": "degrees_east", "long_name": "pair mid-point"}),
            "lat": ("pair", mid_lat, {"units": "degrees_north", "long_name": "pair mid-point"}),
            "f": ("pair", coriolis_parameter(mid_lat), {"units": "s-1"}),
            "along_east": ("pair", t_east, {"units": "1"}),
            "along_north": ("pair", t_north, {"units": "1"}),
            "station_a": ("pair", stations[:-1]),
            "station_b": ("pair", stations[1:]),
        },
        coords={"pair": pair},
    )


def along_line_distance(pair_distance: np.ndarray) -> np.ndarray:
    """Distance of every station from the first one, along the line.

    Parameters
    ----------
    pair_distance : ndarray (..., pair)
        Distance between neighbouring stations (:func:`great_circle_distance`), m.

    Returns
    -------
    ndarray (..., station)
        Accumulated distance, m; 0 at the first station.
    """
    d = np.asarray(pair_distance, dtype=float)
    zero = np.zeros(d.shape[:-1] + (1,))
    return np.concatenate([zero, np.cumsum(d, axis=-1)], axis=-1)


def pair_along_line_distance(pair_distance: np.ndarray) -> np.ndarray:
    """Distance of every pair's mid-point from the first station, along the line.

    Parameters
    ----------
    pair_distance : ndarray (..., pair)
        Distance between neighbouring stations, m.

    Returns
    -------
    ndarray (..., pair)
        Half-way between the pair's two stations, m.
    """
    station = along_line_distance(pair_distance)
    return 0.5 * (station[..., :-1] + station[..., 1:])


COMPASS = ("northward", "north-eastward", "eastward", "south-eastward", "southward",
           "south-westward", "westward", "north-westward")


def compass_name(east: float, north: float) -> str:
    """Eight-point compass name of a direction given by its components.

    Parameters
    ----------
    east, north : float
        Components of the direction, any common unit.

    Returns
    -------
    str
        ``"northward"``, ``"north-eastward"``, ... ``"north-westward"``.
    """
    bearing = float(np.degrees(np.arctan2(east, north))) % 360.0  # clockwise from north
    return COMPASS[int(((bearing + 22.5) % 360.0) // 45.0)]


def positive_direction(lon: np.ndarray, lat: np.ndarray) -> str:
    """Compass word of the positive transport direction of a line, e.g. ``"northward"``.

    Positive transport is to the left of increasing station order (DESIGN.md
    §4). The line's direction is the distance-weighted mean of its pairs'
    along-line unit vectors; "left" is that vector turned 90° counter-clockwise.

    Parameters
    ----------
    lon, lat : ndarray (station,)
        Station positions, degrees_east and degrees_north.

    Returns
    -------
    str
        One of eight compass directions (``"north-eastward"``, ...).
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    t_east, t_north = along_line_direction(lon, lat)
    w = great_circle_distance(lon, lat)
    east = float(np.nansum(w * t_east))
    north = float(np.nansum(w * t_north))
    return compass_name(-north, east)


def sign_convention(lon: np.ndarray, lat: np.ndarray, first: str, last: str) -> str:
    """The sign convention of a line in words: ``"positive = northward across S01→S47"``.

    Parameters
    ----------
    lon, lat : ndarray (station,)
        Station positions, degrees_east and degrees_north.
    first, last : str
        Ids of the first and last station.

    Returns
    -------
    str
    """
    return f"positive = {positive_direction(lon, lat)} across {first}→{last}"
