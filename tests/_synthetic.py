"""Small synthetic sections for engine tests (canonical Dataset, no files)."""

from __future__ import annotations

import gsw
import numpy as np
import xarray as xr

from sectionkit.thermo import last_level


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


# ------------------------------------------------------------------ invented model lines
# (the invented ocean of tests and benchmarks; model_section() turns these into sections)
def _profiles(
    x: np.ndarray, p: np.ndarray, phase: float = 0.0, eddy: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Invented temperature (degC) and salinity (g/kg) on (station, level).

    A thermocline deepening across the line (geostrophic shear), a
    fresher intermediate layer and a deep cold, salty layer; ``phase``
    moves the thermocline depth (seasonal heave), ``eddy`` adds a
    per-station displacement, m.
    """
    x = x[:, None]
    depth = 600.0 + 60.0 * x + 25.0 * np.sin(phase) * (1.0 - x)
    if eddy is not None:
        depth = depth + eddy[:, None]
    zeta = p[None, :] / depth
    temp = 1.2 + 17.5 * np.exp(-zeta) + 0.25 * np.exp(-((p[None, :] - 2200.0) / 900.0) ** 2) * x
    salt = (34.95 + 1.1 * np.exp(-zeta) - 0.35 * np.exp(-((p[None, :] - 900.0) / 350.0) ** 2)
            + 0.01 * x * np.exp(-p[None, :] / 3000.0))
    return temp, salt


def synthetic_section(
    n_station: int = 20,
    dp: float = 2.0,
    p_max: float = 5000.0,
    lat: float = 30.0,
    lon: tuple[float, float] = (-40.0, -30.0),
    seed: int = 0,
    name: str = "line",
    noise: float = 0.0,
) -> xr.Dataset:
    """An invented canonical section (docs/CONTRACTS-INTERNAL.md), for tests and benchmarks.

    Parameters
    ----------
    n_station : int
        Number of stations.
    dp : float
        Grid step, dbar.
    p_max : float
        Deepest bottom pressure, dbar.
    lat : float
        Latitude of the (zonal) line, degrees_north.
    lon : (float, float)
        First and last longitude, degrees_east.
    seed : int
        Seed of the station-to-station noise.
    name : str
        Section name.
    noise : float
        Standard deviation of an eddy displacement of the thermocline, m.

    Returns
    -------
    xr.Dataset
        SA, CT (station, pressure), lat, lon, bottom_pressure, bottom_depth.
    """
    rng = np.random.default_rng(seed)
    p = np.arange(0.0, p_max + 0.5 * dp, dp)
    x = np.linspace(0.0, 1.0, n_station)
    # a basin-shaped floor: shallower at both ends
    bottom = p_max * (0.55 + 0.45 * np.sin(np.pi * np.clip(0.05 + 0.9 * x, 0, 1)) ** 0.5)
    bottom = np.minimum(bottom + rng.uniform(-0.02, 0.0, n_station) * p_max, p_max)
    bottom[np.argmax(bottom)] = p_max
    eddy = noise * rng.standard_normal(n_station) if noise else None
    ct, sa = _profiles(x, p, 0.0, eddy)
    last = last_level(bottom, dp) * dp
    wet = p[None, :] <= last[:, None]
    lats = np.full(n_station, float(lat))
    return xr.Dataset(
        {
            "SA": (("station", "pressure"), np.where(wet, sa, np.nan), {"units": "g/kg"}),
            "CT": (("station", "pressure"), np.where(wet, ct, np.nan), {"units": "degC"}),
            "lat": ("station", lats, {"units": "degrees_north"}),
            "lon": ("station", np.linspace(lon[0], lon[1], n_station), {"units": "degrees_east"}),
            "bottom_pressure": ("station", bottom, {"units": "dbar"}),
            "bottom_depth": ("station", -gsw.z_from_p(bottom, lats), {"units": "m"}),
        },
        coords={"pressure": ("pressure", p, {"units": "dbar"}),
                "station": [str(i + 1) for i in range(n_station)]},
        attrs={"section": name, "dp": float(dp), "source": "synthetic (invented ocean)"},
    )


def _model_fields(
    steps: np.ndarray, x: np.ndarray, p_levels: np.ndarray, wet: np.ndarray, seed: int
) -> np.ndarray:
    """Potential temperature and practical salinity of the invented model.

    Returns an array (2, time, station, level): degC, then practical salinity.

    Each time step's eddy field comes from its own generator (seed, step), so
    the values do not depend on how time is chunked.
    """
    out = np.empty((2, steps.size, x.size, p_levels.shape[-1]))
    for n, step in enumerate(np.asarray(steps).ravel()):
        rng = np.random.default_rng([seed, int(step)])
        eddy = 15.0 * rng.standard_normal(x.size)
        temp, salt = _profiles(x, p_levels, 2.0 * np.pi * float(step) / 12.0, eddy)
        out[0, n] = np.where(wet, temp, np.nan)
        out[1, n] = np.where(wet, salt / 1.0047, np.nan)  # ~ practical salinity
    return out


def synthetic_model_output(
    n_time: int = 50,
    n_station: int = 12,
    depths: np.ndarray | None = None,
    lat: float = 30.0,
    lon: tuple[float, float] = (-40.0, -30.0),
    seed: int = 0,
    chunks: int | None = None,
) -> xr.Dataset:
    """Invented model output along a fixed line: monthly records on depth levels.

    Parameters
    ----------
    n_time : int
        Number of records (months).
    n_station : int
        Number of stations.
    depths : ndarray (level,), optional
        Model level depths, m (default: 40 levels stretched from 5 m to
        about 5300 m).
    lat : float
        Latitude of the line, degrees_north.
    lon : (float, float)
        First and last longitude, degrees_east.
    seed : int
        Seed of the eddy noise.
    chunks : int, optional
        Records per dask chunk; numpy arrays when None. Values do not depend
        on the chunking.

    Returns
    -------
    xr.Dataset
        ``thetao`` (sea_water_potential_temperature, degC) and ``so``
        (sea_water_practical_salinity) on (time, station, depth); ``lat``,
        ``lon`` and ``deptho`` (sea_floor_depth_below_sea_surface, m) per
        station.
    """
    if depths is None:
        s = np.linspace(0.0, 1.0, 40)
        depths = 5.0 + 5300.0 * (0.15 * s + 0.85 * s**2.2)
    depths = np.asarray(depths, dtype=float)
    x = np.linspace(0.0, 1.0, n_station)
    floor = 5200.0 * (0.6 + 0.4 * np.sin(np.pi * (0.08 + 0.84 * x)) ** 0.5)
    lats = np.full(n_station, float(lat))
    p_levels = gsw.p_from_z(-depths[None, :], lats[:, None])
    wet = depths[None, :] <= floor[:, None]
    steps = np.arange(n_time)
    dims = ("time", "station", "depth")
    if chunks is None:
        fields = _model_fields(steps, x, p_levels, wet, seed)
        theta, so = fields[0], fields[1]
    else:
        import dask.array as dsa

        t = dsa.from_array(steps, chunks=chunks)
        both = t.map_blocks(
            _model_fields, x, p_levels, wet, seed, new_axis=[0, 2, 3],
            chunks=((2,), t.chunks[0], (n_station,), (depths.size,)), dtype=float,
            meta=np.empty((0, 0, 0, 0)),
        )
        theta, so = both[0], both[1]
    return xr.Dataset(
        {
            "thetao": (dims, theta, {"standard_name": "sea_water_potential_temperature",
                                     "units": "degC"}),
            "so": (dims, so, {"standard_name": "sea_water_practical_salinity", "units": "1"}),
            "lat": ("station", lats, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("station", np.linspace(lon[0], lon[1], n_station),
                    {"standard_name": "longitude", "units": "degrees_east"}),
            "deptho": ("station", floor, {"standard_name": "sea_floor_depth_below_sea_surface",
                                          "units": "m"}),
        },
        coords={
            "time": ("time", steps, {"units": "months since 2000-01-01"}),
            "depth": ("depth", depths, {"standard_name": "depth", "units": "m",
                                        "positive": "down", "axis": "Z"}),
        },
        attrs={"source": "synthetic model output (invented ocean)"},
    )
