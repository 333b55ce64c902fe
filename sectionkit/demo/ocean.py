"""The demo's invented ocean: topography, station spacing, water masses, observed casts."""

from __future__ import annotations

from dataclasses import dataclass

import gsw
import numpy as np
import xarray as xr
from scipy.interpolate import PchipInterpolator

from sectionkit.demo.scenario import DemoScenario, LineSpec, _line_tag, _pick, _rng
from sectionkit.errors import ComputationError
from sectionkit.thermo import last_level

#: Reference water-mass profile: (zeta dbar, Conservative Temperature degC,
#: practical-salinity-like value turned into Absolute Salinity with the
#: TEOS-10 reference composition, gsw.SR_from_SP). Invented, shaped after the
#: textbook layering of a mid-latitude ocean (values from memory).
REFERENCE_PROFILE = (
    (0.0, 25.0, 36.50),
    (50.0, 24.7, 36.55),
    (100.0, 22.6, 36.68),
    (200.0, 19.6, 36.62),
    (300.0, 18.0, 36.50),
    (400.0, 17.0, 36.36),
    (500.0, 15.3, 36.10),
    (600.0, 13.3, 35.80),
    (700.0, 11.4, 35.52),
    (800.0, 9.6, 35.30),
    (900.0, 8.0, 35.13),
    (1000.0, 6.7, 35.02),
    (1100.0, 5.8, 34.96),
    (1200.0, 5.1, 34.95),
    (1400.0, 4.3, 34.97),
    (1800.0, 3.7, 34.98),
    (2500.0, 3.0, 34.965),
    (3000.0, 2.6, 34.95),
    (3500.0, 2.3, 34.93),
    (4000.0, 2.0, 34.91),
    (4500.0, 1.6, 34.89),
    (5000.0, 1.15, 34.875),
    (5500.0, 0.85, 34.865),
    (6500.0, 0.6, 34.86),
)


#: Vertical structure of the thermocline displacement mode: it rises as a sine
#: from 0 at the surface to 1 at the first value (dbar) and decays below as a
#: Gaussian of the second (dbar).
THERMOCLINE_MODE = (650.0, 550.0)



def _smooth_random(rng: np.random.Generator, length: float, n_modes: int = 32):
    """A smooth stationary random function of distance (unit variance).

    Random Fourier modes with wavenumbers drawn from a Gaussian spectrum give
    a process whose covariance approaches exp(-d^2 / (2 length^2)).

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the draw.
    length : float
        Correlation length, km.
    n_modes : int
        Number of Fourier modes, dimensionless.

    Returns
    -------
    callable
        ``f(x_km) -> ndarray`` with unit variance, dimensionless.
    """
    k = rng.normal(0.0, 1.0 / length, n_modes)
    phase = rng.uniform(0.0, 2 * np.pi, n_modes)

    def evaluate(x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        return np.sqrt(2.0 / n_modes) * np.cos(x[..., None] * k + phase).sum(axis=-1)

    return evaluate


def _step(x: np.ndarray) -> np.ndarray:
    return 0.5 * (1.0 + np.tanh(x))


# ---------------------------------------------------------------------------
# geometry: topography and station positions


def bottom_depth_profile(line: LineSpec, x: np.ndarray, scenario: DemoScenario) -> np.ndarray:
    """Sea-floor depth along a line.

    Parameters
    ----------
    line : LineSpec
        The line.
    x : ndarray
        Distance from the line's west end, km.
    scenario : DemoScenario
        Supplies the seed of the abyssal hills.

    Returns
    -------
    ndarray
        Depth of the sea floor, m, positive down.
    """
    x = np.asarray(x, dtype=float)
    length = line.length_km
    xe = length - x
    # continental margins: a steep slope to ~3600 m, then a gentler rise to the plain
    west = 0.62 * _step((x - 45.0) / 18.0) + 0.38 * _step((x - 170.0) / 70.0)
    east = 0.62 * _step((xe - 35.0) / 15.0) + 0.38 * _step((xe - 140.0) / 60.0)
    margin = west * east
    frac = np.clip(x / length, 0.0, 1.0)
    plain = line.west_plain + (line.east_plain - line.west_plain) * _step(
        (frac - line.ridge_position) * 12.0
    )
    ridge_x = line.ridge_position * length
    ridge = (plain - line.ridge_crest) * np.exp(-(((x - ridge_x) / line.ridge_halfwidth) ** 2))
    hills = _smooth_random(_rng(scenario, 1, _line_tag(scenario, line.name)), 35.0)
    rough = 90.0 * hills(x) * margin * (1.0 - 0.5 * ridge / np.maximum(plain, 1.0))
    return line.shelf_depth + (plain - ridge + rough - line.shelf_depth) * margin


def station_distances(line: LineSpec, n_stations: int | None = None) -> np.ndarray:
    """Along-line positions of the stations, crowded over the slopes.

    The station density (stations per km) is ``1/interior_spacing`` plus bumps
    of ``1/slope_spacing`` over both margins and a smaller one over the ridge;
    exactly ``n_stations`` are placed at equal steps of its integral.

    Parameters
    ----------
    line : LineSpec
        The line.
    n_stations : int, optional
        Overrides ``line.n_stations``, dimensionless.

    Returns
    -------
    ndarray (station,)
        Distance from the west end, km, increasing.
    """
    n = int(n_stations or line.n_stations)
    if n < 2:
        raise ComputationError(f"line {line.name}: n_stations = {n}; a section needs at least 2")
    length = line.length_km
    x = np.linspace(0.0, length, 20001)
    bump = 1.0 / line.slope_spacing - 1.0 / line.interior_spacing
    density = (
        1.0 / line.interior_spacing
        + bump * np.exp(-((x / 110.0) ** 2))
        + bump * np.exp(-(((length - x) / 60.0) ** 2))
        + 0.1 * bump * np.exp(-(((x - line.ridge_position * length) / line.ridge_halfwidth) ** 2))
    )
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]) * np.diff(x))])
    first, last = 6.0, length - 6.0
    c = np.interp([first, last], x, cum)
    return np.interp(np.linspace(c[0], c[1], n), cum, x)


def _positions(line: LineSpec, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    frac = x / line.length_km
    lon = line.west[0] + frac * (line.east[0] - line.west[0])
    lat = line.west[1] + frac * (line.east[1] - line.west[1])
    return lon, lat


# ---------------------------------------------------------------------------
# water masses


def _reference_interpolants():
    table = np.asarray(REFERENCE_PROFILE, dtype=float)
    sa = gsw.SR_from_SP(table[:, 2])
    return PchipInterpolator(table[:, 0], table[:, 1]), PchipInterpolator(table[:, 0], sa)


def reference_water(zeta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Conservative Temperature and Absolute Salinity of the reference profile.

    Parameters
    ----------
    zeta : ndarray
        Reference pressure, dbar (clipped to the table's range).

    Returns
    -------
    ct : ndarray
        Conservative Temperature, degC.
    sa : ndarray
        Absolute Salinity, g kg^-1 (reference composition).
    """
    ct_of, sa_of = _reference_interpolants()
    z = np.clip(np.asarray(zeta, dtype=float), REFERENCE_PROFILE[0][0], REFERENCE_PROFILE[-1][0])
    return ct_of(z), sa_of(z)


def _modes(p: np.ndarray) -> dict[str, np.ndarray]:
    """Vertical structure of the isopycnal displacements (dimensionless)."""
    p = np.asarray(p, dtype=float)
    p1, p2 = THERMOCLINE_MODE
    thermocline = np.where(
        p <= p1, np.sin(0.5 * np.pi * np.clip(p / p1, 0.0, 1.0)), np.exp(-(((p - p1) / p2) ** 2))
    )
    lift = np.exp(-((p / 1200.0) ** 2))
    deep = np.exp(-(((p - 2800.0) / 900.0) ** 2))
    abyssal = np.exp(-(((p - 5000.0) / 800.0) ** 2))
    cap = np.exp(-((p / 60.0) ** 2))
    return {
        "thermocline": thermocline, "lift": lift, "deep": deep, "abyssal": abyssal, "cap": cap
    }


def _displacements(line: LineSpec, x: np.ndarray, scenario: DemoScenario) -> dict[str, np.ndarray]:
    """Along-line amplitudes of the displacement modes, m."""
    length = line.length_km
    s = _step((x - line.jet_offset) / line.jet_width)
    east = np.clip((x - line.jet_offset) / (length - line.jet_offset), 0.0, 1.0)
    interior = -line.offshore_depression + (line.offshore_depression + line.eastern_lift) * (
        east**0.8
    )
    eddies = _smooth_random(_rng(scenario, 2, _line_tag(scenario, line.name)), 70.0)
    thermocline = line.inshore_lift * (1.0 - s) + interior * s + 25.0 * s * eddies(x)
    deep = line.deep_lift * np.exp(-np.clip(x - 40.0, 0.0, None) / line.deep_lift_scale)
    ridge_x = line.ridge_position * length
    abyssal = line.abyssal_lift * np.clip(x / ridge_x, 0.0, 1.0) ** 1.5 * np.exp(
        -((np.clip(x - ridge_x, 0.0, None) / 150.0) ** 2)
    )
    warm = line.surface_warming + line.front_warming * s
    return {"thermocline": thermocline, "deep": deep, "abyssal": abyssal, "warm": warm}


def true_water(
    line: LineSpec, x: np.ndarray, p: np.ndarray, scenario: DemoScenario
) -> tuple[np.ndarray, np.ndarray]:
    """Noise-free Absolute Salinity and Conservative Temperature of a line.

    Parameters
    ----------
    line : LineSpec
        The line.
    x : ndarray (station,)
        Distance of the stations from the west end, km.
    p : ndarray (level,)
        Sea pressure, dbar.
    scenario : DemoScenario
        Scenario parameters.

    Returns
    -------
    sa : ndarray (station, level)
        Absolute Salinity, g kg^-1 (no NaN: every level, whatever the bottom).
    ct : ndarray (station, level)
        Conservative Temperature, degC.
    """
    g = _modes(p)
    d = _displacements(line, x, scenario)
    zeta = (
        p[None, :]
        + d["thermocline"][:, None] * g["thermocline"][None, :]
        + line.lift * g["lift"][None, :]
        + d["deep"][:, None] * g["deep"][None, :]
        + d["abyssal"][:, None] * g["abyssal"][None, :]
    )
    if np.any(np.diff(zeta, axis=-1) <= 0):
        raise ComputationError(
            f"line {line.name}: the isopycnal displacements fold the water column over "
            "(zeta does not increase with pressure); reduce the displacement amplitudes"
        )
    ct, sa = reference_water(zeta)
    ct = ct + d["warm"][:, None] * g["cap"][None, :]
    sa = sa - line.surface_freshening * g["cap"][None, :]
    return sa, ct


# ---------------------------------------------------------------------------
# sections: what is written, and the canonical Dataset


@dataclass
class _Observed:
    """A line as stored in its file (float32 profiles, NaN below the bottom)."""

    name: str
    station: list[str]
    lon: np.ndarray
    lat: np.ndarray
    distance_km: np.ndarray
    bottom_depth: np.ndarray
    pressure: np.ndarray
    temperature: np.ndarray  # in-situ, degC, float32
    salinity: np.ndarray  # practical, float32


def _observe(scenario: DemoScenario, name: str) -> _Observed:
    scenario.check()
    line = scenario.line(name)
    x = station_distances(line)
    lon, lat = _positions(line, x)
    depth = np.round(bottom_depth_profile(line, x, scenario), 0)
    bottom_p = gsw.p_from_z(-depth, lat)
    last = last_level(bottom_p, scenario.dp)
    p = scenario.dp * np.arange(int(last.max()) + 1, dtype=float)
    sa, ct = true_water(line, x, p, scenario)
    sp = gsw.SP_from_SA(sa, p[None, :], lon[:, None], lat[:, None])
    t = gsw.t_from_CT(sa, ct, p[None, :])
    rng = _rng(scenario, 3, _line_tag(scenario, name))
    clip = scenario.noise_clip
    t = t + scenario.noise_temperature * np.clip(rng.standard_normal(t.shape), -clip, clip)
    sp = sp + scenario.noise_salinity * np.clip(rng.standard_normal(sp.shape), -clip, clip)
    below = np.arange(p.size)[None, :] > last[:, None]
    t = np.where(below, np.nan, t).astype(np.float32)
    sp = np.where(below, np.nan, sp).astype(np.float32)
    prefix = name[0].upper()
    ids = [f"{prefix}{k + 1:02d}" for k in range(x.size)]
    return _Observed(name, ids, lon, lat, x, depth, p, t, sp)


def _canonical(obs: _Observed, dp: float, source: str) -> xr.Dataset:
    """The canonical gridded Dataset from stored values, as a reader builds it."""
    p = obs.pressure
    sp = obs.salinity.astype(float)
    t = obs.temperature.astype(float)
    sa = gsw.SA_from_SP(sp, p[None, :], obs.lon[:, None], obs.lat[:, None])
    ct = gsw.CT_from_t(sa, t, p[None, :])
    bottom_p = gsw.p_from_z(-obs.bottom_depth, obs.lat)
    return xr.Dataset(
        {
            "SA": (
                ("station", "pressure"),
                sa,
                {"units": "g/kg", "long_name": "Absolute Salinity"},
            ),
            "CT": (
                ("station", "pressure"),
                ct,
                {"units": "degC", "long_name": "Conservative Temperature"},
            ),
            "lat": ("station", obs.lat, {"units": "degrees_north"}),
            "lon": ("station", obs.lon, {"units": "degrees_east"}),
            "bottom_pressure": ("station", bottom_p, {"units": "dbar"}),
            "bottom_depth": ("station", obs.bottom_depth, {"units": "m", "positive": "down"}),
        },
        coords={
            "station": ("station", np.array(obs.station, dtype=str)),
            "pressure": (
                "pressure",
                p,
                {"units": "dbar", "standard_name": "sea_water_pressure"},
            ),
        },
        attrs={
            "section": obs.name,
            "source": source,
            "dp": float(dp),
            "gridding": (
                "synthetic section from sectionkit.demo, generated on the grid itself "
                f"(0 to each station's floor(bottom_pressure/dp)*dp, dp = {dp:g} dbar); "
                "SA from SP with gsw.SA_from_SP at each station's position, CT from "
                "in-situ temperature with gsw.CT_from_t"
            ),
        },
    )


def generate_section(
    name: str, scenario: DemoScenario | None = None, *, small: bool = False
) -> xr.Dataset:
    """One line of the demo as a canonical gridded section, in memory.

    The values are those stored in the line's file (noisy, float32 in-situ
    temperature and practical salinity) converted back to TEOS-10, so the
    Dataset equals what ``sectionkit.io.load_section`` returns for the file
    on the same grid step, up to round-off.

    Parameters
    ----------
    name : str
        Line name, ``"south"`` or ``"north"`` in the default scenario.
    scenario : DemoScenario, optional
        Parameters (default: ``DemoScenario()``, or ``DemoScenario.small()``).
    small : bool
        Use the small fast scenario when ``scenario`` is not given.

    Returns
    -------
    xr.Dataset
        Canonical section (docs/CONTRACTS-INTERNAL.md): ``SA`` (g/kg), ``CT``
        (degC) on (station, pressure dbar), ``lat``, ``lon``,
        ``bottom_pressure`` (dbar), ``bottom_depth`` (m).
    """
    scenario = _pick(scenario, small)
    return _canonical(_observe(scenario, name), scenario.dp, f"sectionkit.demo:{name}")
