"""The demo's own invented ocean: two hydrographic lines closing a box, with a known truth.

The scenario is made up from start to finish. The *Orinel Basin* is an
invented mid-latitude basin of the northern hemisphere, closed to the west and
east by continental margins and split by the *Ambrel Ridge*. The invented
research vessel *Quillmark* occupied two lines across it on cruise QM-07:

- ``south``, near 28 degrees N, under trade-wind easterlies;
- ``north``, near 41 degrees N, under westerlies.

Between the lines the only other opening is the *Sennet Strait* on the eastern
margin, through which a small known transport of upper water enters the box.

How the ocean is built
----------------------
1. **Topography**: shelves and continental slopes at both ends, abyssal plains
   near 5000-5500 m and the mid-basin ridge rising to about 2700 m, with small
   seeded abyssal hills. Stations crowd over the slopes (10-20 km) and spread
   out in the interior.
2. **Water masses** in TEOS-10 variables: a reference profile of Conservative
   Temperature and Absolute Salinity versus a *reference pressure* zeta (a warm
   salty thermocline, a fresher intermediate water near 1000 dbar, deep water
   of 2-4 degC, the densest bottom water below about 4300 dbar).
3. **Isopycnal tilts**: every station's profile is that reference profile
   read at a displaced coordinate ``zeta(p) = p + sum_m D_m(x) g_m(p)`` with
   smooth vertical modes ``g_m`` and along-line amplitudes ``D_m``: the
   thermocline rises sharply inshore of a narrow poleward western boundary jet
   and shoals gently eastward across the interior (broad equatorward return
   flow by thermal wind), deep isopycnals dome against the western slope (a
   southward-intensifying deep boundary current), and the northern line is
   lifted as a whole (colder, shallower thermocline). Because ``zeta`` is
   monotonic in ``p`` the columns stay stably stratified. The geostrophic
   shear the engine computes therefore *follows* from the density field.
4. **Observations**: in-situ temperature (ITS-90) and practical salinity from
   gsw, with small seeded measurement noise (a bounded Gaussian), rounded to
   float32 as written to the files. The canonical Dataset is rebuilt from those
   stored values exactly as a reader would (gsw.SA_from_SP at each station's
   position, gsw.CT_from_t), so the truth below refers to the data users load.
5. **Truth**: with the reference of ``demo.toml`` (a level of no motion that
   is plausible but wrong), per-pair true reference velocities ``b_true`` are a
   draw from a Gaussian prior (a southward deep western boundary current in
   the mean, smooth eddy-like departures), conditioned so that exactly

   - every class mass budget of the box closes given the diapycnal transfers
     ``W``, the Ekman transports of the configured wind stresses and the
     strait, and
   - the net transport across the inflow line has the chosen value (zero).

   The conditioning is the minimum-norm correction in the prior's metric,
   ``b = b_draw + P A^T (A P A^T)^-1 (y - A b_draw)``. Salt is not forced:
   the truth's salt imbalances are reported with it (forcing the box's salt
   budget as well would take reference velocities of tens of cm/s, because
   salt rows are nearly parallel to mass rows).

Everything is deterministic: a fixed seed, generators derived from it per
purpose, no timestamps in the files; two generations are byte-identical.

Regenerate the bundled files with ``python -m sectionkit.demo --write demo_sections``.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import shutil
import sys
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import gsw
import netCDF4
import numpy as np
import tomllib
import xarray as xr
from scipy.interpolate import PchipInterpolator

from sectionkit.budget import SV
from sectionkit.config import BoxSpec, SectionNet, parse_config
from sectionkit.demo_exchange import add_exchange_line
from sectionkit.errors import ComputationError
from sectionkit.geometry import pair_along_line_distance
from sectionkit.inverse import interface_transfers, transfer_anomaly
from sectionkit.layers import Interface
from sectionkit.operator import QUANTITIES, SectionOperator, build_operator
from sectionkit.state import BudgetState
from sectionkit.study import Study
from sectionkit.thermo import last_level

_Q = {q: n for n, q in enumerate(QUANTITIES)}

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


@dataclass(frozen=True)
class LineSpec:
    """One invented hydrographic line, stations ordered west to east.

    Parameters
    ----------
    name : str
        Section name used in ``demo.toml`` (a simple lowercase word).
    west, east : tuple of float
        (longitude degrees_east, latitude degrees_north) of the line's ends,
        at the coast.
    n_stations : int
        Number of stations, dimensionless.
    wind_stress : tuple of float
        Uniform wind stress (east, north) over the line, N m^-2.
    into_box : bool
        Whether positive (northward) transport enters the box.
    shelf_depth : float
        Water depth at the coast end of the shelves, m.
    west_plain, east_plain : float
        Depth of the abyssal plains west and east of the ridge, m.
    ridge_crest : float
        Depth of the ridge crest, m.
    ridge_position : float
        Position of the ridge crest as a fraction of the line length, 1.
    ridge_halfwidth : float
        e-folding half-width of the ridge, km.
    slope_spacing, interior_spacing : float
        Relative station spacing over the slopes and in the interior, km;
        rescaled together so that exactly ``n_stations`` fit.
    jet_offset : float
        Distance of the western boundary jet's axis from the west end, km.
    jet_width : float
        Half-width of the jet's thermocline front (tanh scale), km.
    lift : float
        Uniform upward displacement of the upper-ocean isopycnals of the
        whole line relative to the reference profile, m.
    inshore_lift : float
        Thermocline displacement inshore of the jet, m (positive = shallower).
    offshore_depression : float
        Depression of the thermocline just offshore of the jet, m.
    eastern_lift : float
        Thermocline displacement at the eastern margin, m.
    deep_lift : float
        Doming of the deep isopycnals against the western slope, m.
    deep_lift_scale : float
        Offshore e-folding scale of that doming, km.
    abyssal_lift : float
        Uplift of the bottom-water isopycnals against the western flank of
        the ridge (zero at the western margin), m.
    surface_warming : float
        Warm surface cap added to the thermocline water, degC.
    front_warming : float
        Extra surface warming offshore of the jet, degC.
    surface_freshening : float
        Absolute Salinity removed at the surface, g kg^-1.
    dwbc_speed : float
        Core speed of the southward deep western boundary current at the
        reference level in the truth's prior mean, m s^-1.
    dwbc_offset, dwbc_width : float
        Distance of that core from the west end and its e-folding width, km.
    """

    name: str
    west: tuple[float, float]
    east: tuple[float, float]
    n_stations: int
    wind_stress: tuple[float, float]
    into_box: bool
    shelf_depth: float = 150.0
    west_plain: float = 5400.0
    east_plain: float = 5100.0
    ridge_crest: float = 2700.0
    ridge_position: float = 0.55
    ridge_halfwidth: float = 260.0
    slope_spacing: float = 12.0
    interior_spacing: float = 78.0
    jet_offset: float = 75.0
    jet_width: float = 34.0
    lift: float = 0.0
    inshore_lift: float = 320.0
    offshore_depression: float = 330.0
    eastern_lift: float = 120.0
    deep_lift: float = 150.0
    deep_lift_scale: float = 110.0
    abyssal_lift: float = 500.0
    surface_warming: float = 0.5
    front_warming: float = 0.8
    surface_freshening: float = 0.0
    dwbc_speed: float = 0.04
    dwbc_offset: float = 110.0
    dwbc_width: float = 55.0

    @property
    def length_km(self) -> float:
        """Great-circle length of the line from coast to coast, km."""
        lon = np.radians([self.west[0], self.east[0]])
        lat = np.radians([self.west[1], self.east[1]])
        a = np.sin(np.diff(lat) / 2) ** 2 + np.cos(lat[0]) * np.cos(lat[1]) * np.sin(
            np.diff(lon) / 2
        ) ** 2
        return float(6371.0 * 2 * np.arctan2(np.sqrt(a), np.sqrt(1 - a))[0])


def _default_lines() -> tuple[LineSpec, LineSpec]:
    south = LineSpec(
        name="south",
        west=(148.0, 27.0),
        east=(178.0, 29.0),
        n_stations=47,
        wind_stress=(-0.06, 0.0),
        into_box=True,
    )
    north = LineSpec(
        name="north",
        west=(150.5, 40.0),
        east=(179.0, 42.0),
        n_stations=41,
        wind_stress=(0.08, 0.0),
        into_box=False,
        west_plain=5300.0,
        east_plain=5000.0,
        ridge_crest=2900.0,
        ridge_position=0.5,
        ridge_halfwidth=230.0,
        slope_spacing=12.0,
        interior_spacing=75.0,
        jet_offset=65.0,
        jet_width=28.0,
        lift=230.0,
        inshore_lift=330.0,
        offshore_depression=220.0,
        eastern_lift=0.0,
        deep_lift=170.0,
        deep_lift_scale=100.0,
        surface_warming=2.5,
        front_warming=1.2,
        surface_freshening=0.25,
        dwbc_speed=0.04,
        dwbc_offset=100.0,
        dwbc_width=50.0,
    )
    return south, north


@dataclass(frozen=True)
class DemoScenario:
    """Every parameter of the invented demo ocean and of its truth.

    Parameters
    ----------
    basin, ridge, strait, ship, cruise : str
        Invented names (no real places, ships or cruises).
    seed : int
        Seed of every random draw, dimensionless.
    dp : float
        Pressure step of the files and of ``demo.toml``'s grid, dbar.
    lines : tuple of LineSpec
        The inflow line first (positive transport enters the box), then the
        outflow line.
    noise_temperature : float
        Standard deviation of the in-situ temperature noise, degC.
    noise_salinity : float
        Standard deviation of the practical salinity noise, 1 (PSS-78).
    noise_clip : float
        The noise is clipped at this many standard deviations, dimensionless.
    reference_pressure : float
        The plausible-but-wrong level of no motion of ``demo.toml``, dbar.
    bottom_triangle : str
        Bottom-triangle rule of ``demo.toml``.
    ekman_depth : float
        Ekman layer depth, m.
    interfaces : tuple of Interface
        Density-class interfaces, light to dense (sigma kg m^-3, p_ref dbar).
    layer_names : tuple of str
        One name per class.
    diapycnal : tuple of float
        True transfer across each interface, Sv, positive from the lighter to
        the denser class.
    inflow_net : float or None
        True net mass transport (divided by 1025 kg m^-3) across the inflow
        line, Ekman included, Sv, positive northward; None leaves it to the
        prior draw.
    strait_transport : float
        Known transport entering the box through the strait, Sv.
    strait_noise : float
        Its stated uncertainty, Sv.
    strait_layer : str
        The class it enters.
    prior_speed_interior, prior_speed_boundary : float
        Standard deviation of the truth's reference-velocity prior in the
        interior and at the western boundary, m s^-1.
    prior_boundary_scale : float
        Offshore e-folding scale of the boundary's larger variance, km.
    prior_length : float
        Correlation length of the prior along a line, km.
    inverse_prior_velocity, inverse_prior_diapycnal, inverse_prior_ekman : float
        Priors written to ``demo.toml``'s ``[inverse]`` (m s^-1, Sv, fraction).
    noise_total : float
        Noise of the total mass constraint in ``demo.toml``, Sv.
    noise_layer : tuple of float
        Noise of each class mass constraint in ``demo.toml``, Sv.
    noise_salt : tuple of float
        Noise of each class salt-anomaly constraint in ``demo.toml``, Sv g kg^-1.
        It includes the model error of carrying salt across interfaces at the
        mean of the adjacent class means (the truth's diapycnal transfers do
        not obey that rule; see :meth:`DemoTruth.salt_anomaly_residual`).
    """

    basin: str = "Orinel Basin"
    ridge: str = "Ambrel Ridge"
    strait: str = "Sennet Strait"
    ship: str = "RV Quillmark"
    cruise: str = "QM-07"
    seed: int = 7207
    dp: float = 2.0
    lines: tuple[LineSpec, ...] = field(default_factory=_default_lines)
    noise_temperature: float = 0.002
    noise_salinity: float = 0.002
    noise_clip: float = 2.5
    reference_pressure: float = 3000.0
    bottom_triangle: str = "constant"
    ekman_depth: float = 50.0
    interfaces: tuple[Interface, ...] = (
        Interface(27.0, 0.0),
        Interface(32.15, 1000.0),
        Interface(36.98, 2000.0),
        Interface(45.92, 4000.0),
    )
    layer_names: tuple[str, ...] = ("upper", "intermediate", "upper_deep", "lower_deep", "bottom")
    diapycnal: tuple[float, ...] = (4.5, 2.0, 0.5, -1.0)
    inflow_net: float | None = 0.0
    strait_transport: float = 0.8
    strait_noise: float = 0.2
    strait_layer: str = "upper"
    prior_speed_interior: float = 0.006
    prior_speed_boundary: float = 0.015
    prior_boundary_scale: float = 200.0
    prior_length: float = 250.0
    inverse_prior_velocity: float = 0.02
    inverse_prior_diapycnal: float = 3.0
    inverse_prior_ekman: float = 0.3
    noise_total: float = 0.5
    noise_layer: tuple[float, ...] = (1.0, 0.7, 0.7, 0.7, 0.3)
    noise_salt: tuple[float, ...] = (4.0, 2.5, 0.3, 0.1, 0.05)

    @classmethod
    def small(cls, n_stations: int = 10, dp: float = 10.0) -> DemoScenario:
        """A fast version for tests: few stations on a coarse grid.

        Parameters
        ----------
        n_stations : int
            Stations per line, dimensionless.
        dp : float
            Pressure step, dbar.
        """
        base = cls()
        lines = tuple(dataclasses.replace(line, n_stations=n_stations) for line in base.lines)
        return dataclasses.replace(base, dp=dp, lines=lines)

    def line(self, name: str) -> LineSpec:
        """The line called ``name``."""
        for spec in self.lines:
            if spec.name == name:
                return spec
        known = ", ".join(spec.name for spec in self.lines)
        raise ComputationError(f"the demo has no line {name!r}; its lines are {known}")

    @property
    def known_by_class(self) -> np.ndarray:
        """Known (strait) transport entering each class, Sv."""
        out = np.zeros(len(self.layer_names))
        out[self.layer_names.index(self.strait_layer)] = self.strait_transport
        return out

    def check(self) -> None:
        """Raise ComputationError when the parameters do not fit together."""
        n_class = len(self.interfaces) + 1
        sizes = {
            "layer_names": len(self.layer_names),
            "noise_layer": len(self.noise_layer),
            "noise_salt": len(self.noise_salt),
        }
        for key, size in sizes.items():
            if size != n_class:
                raise ComputationError(
                    f"DemoScenario.{key} has {size} entries but {len(self.interfaces)} "
                    f"interfaces make {n_class} classes"
                )
        if len(self.diapycnal) != len(self.interfaces):
            raise ComputationError(
                f"DemoScenario.diapycnal has {len(self.diapycnal)} entries; give one per "
                f"interface ({len(self.interfaces)})"
            )
        if self.strait_layer not in self.layer_names:
            raise ComputationError(
                f"strait_layer {self.strait_layer!r} is not one of {list(self.layer_names)}"
            )
        if len(self.lines) != 2 or not self.lines[0].into_box or self.lines[1].into_box:
            raise ComputationError(
                "the demo box needs two lines: the first entering (into_box=True), "
                "the second leaving (into_box=False)"
            )
        if self.dp <= 0:
            raise ComputationError(f"dp = {self.dp} dbar must be positive")


# ---------------------------------------------------------------------------
# random helpers


def _rng(scenario: DemoScenario, *tags: int) -> np.random.Generator:
    """A generator for one purpose, independent of the order of other draws."""
    return np.random.default_rng([scenario.seed, *tags])


def _line_tag(scenario: DemoScenario, name: str) -> int:
    return [line.name for line in scenario.lines].index(name)


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


def _pick(scenario: DemoScenario | None, small: bool) -> DemoScenario:
    if scenario is not None:
        return scenario
    return DemoScenario.small() if small else DemoScenario()


# ---------------------------------------------------------------------------
# truth


@dataclass
class DemoTruth:
    """The demo's known answer.

    Attributes
    ----------
    scenario : DemoScenario
        Parameters used.
    sections : dict of str -> xr.Dataset
        Canonical sections by line name.
    operators : dict of str -> SectionOperator
        Transport operators built with ``demo.toml``'s settings.
    ref_pressure : dict of str -> ndarray (pair,)
        Reference pressure actually used per pair, dbar.
    offset : dict of str -> ndarray (pair,)
        Reference offset of ``demo.toml``'s level of no motion, m s^-1.
    b_draw : dict of str -> ndarray (pair,)
        The prior draw before conditioning, m s^-1.
    b_true : dict of str -> ndarray (pair,)
        True reference velocity: the absolute velocity at the reference level,
        i.e. the adjustment to add to ``demo.toml``'s reference, m s^-1.
    ekman : dict of str -> ndarray (pair,)
        Ekman volume transport per pair, m^3 s^-1.
    diapycnal : ndarray (interface,)
        True transfer across each interface, Sv (lighter to denser).
    known : ndarray (class,)
        Known (strait) inflow per class, Sv.
    strait_salinity : float
        Absolute Salinity carried by the strait in the truth, g kg^-1.
    box : BoxSpec, optional
        The box of ``demo.toml`` (which line enters, which leaves).
    """

    scenario: DemoScenario
    sections: dict[str, xr.Dataset]
    operators: dict[str, SectionOperator]
    ref_pressure: dict[str, np.ndarray]
    offset: dict[str, np.ndarray]
    b_draw: dict[str, np.ndarray]
    b_true: dict[str, np.ndarray]
    ekman: dict[str, np.ndarray]
    diapycnal: np.ndarray
    known: np.ndarray
    strait_salinity: float
    box: BoxSpec | None = None

    def sign(self, name: str) -> float:
        """+1 for a line whose positive transport enters the box, -1 for one leaving it."""
        if self.box is not None:
            return self.box.sign(name)
        return 1.0 if self.scenario.line(name).into_box else -1.0

    def class_transports(self, name: str, quantity: str = "mass", *, true: bool = True):
        """Class transports of one line, summed over pairs.

        Parameters
        ----------
        name : str
            Line name.
        quantity : {"volume", "mass", "salt", "heat"}
            Transported quantity.
        true : bool
            With ``b_true`` (True) or with the reference of ``demo.toml`` alone.

        Returns
        -------
        ndarray (class,)
            In the operator's units (m^3 s^-1 for volume and mass/RHO0,
            g kg^-1 m^3 s^-1 for salt, W for heat), positive northward.
        """
        op = self.operators[name]
        b = self.b_true[name] if true else 0.0
        return op.transports(self.offset[name], b, ekman=self.ekman[name])[_Q[quantity]].sum(
            axis=0
        )

    def ekman_by_class(self, name: str, quantity: str = "mass") -> np.ndarray:
        """Ekman part of a line's class transports, in the operator's units."""
        op = self.operators[name]
        return (self.ekman[name][:, None] * op.ekman_share[_Q[quantity]]).sum(axis=0)

    def box_inflow(self, quantity: str = "mass") -> np.ndarray:
        """Net inflow of each class through the lines (Ekman included), operator units."""
        total = 0.0
        for line in self.scenario.lines:
            total = total + self.sign(line.name) * self.class_transports(line.name, quantity)
        return np.asarray(total)

    def mass_residual(self) -> np.ndarray:
        """Class mass budgets of the box with the truth, Sv (zero to round-off).

        sections (in) + strait + W[i-1] - W[i].
        """
        w = np.concatenate([[0.0], self.diapycnal, [0.0]])
        return self.box_inflow("mass") / SV + self.known + w[:-1] - w[1:]

    def salt_residual(self) -> float:
        """Salt budget of the whole box with the truth, g kg^-1 Sv.

        The strait carries ``strait_salinity``. Not forced to zero: the
        truth conserves mass, and its salt imbalance stands for the
        freshwater exchange and diapycnal salt fluxes a mass-only truth leaves
        out.
        """
        return float(self.box_inflow("salt").sum() / SV + self.known.sum() * self.strait_salinity)

    def class_mean_salinity(self) -> np.ndarray:
        """Area-weighted mean salinity of each class over both lines, g kg^-1.

        The salinity of the salt budgets (Preformed Salinity S* by default,
        ``extra["salt_pair"]`` of the operators).
        """
        num = 0.0
        den = 0.0
        for line in self.scenario.lines:
            op = self.operators[line.name]
            w = op.weights * op.pairs["distance"].values[:, None, None]  # (pair, class, level) m^2
            sa = np.nan_to_num(op.extra["salt_pair"])[:, None, :]
            num = num + (w * sa).sum(axis=(0, 2))
            den = den + w.sum(axis=(0, 2))
        return np.asarray(num / den)

    def salt_anomaly_parts(self) -> tuple[np.ndarray, np.ndarray]:
        """Class salt-anomaly budget of the box with the truth, Sv g kg^-1.

        The usual layered model: each class's salt transport minus its box
        mean salinity times its mass transport; a diapycnal transfer carries
        the mean of the two adjacent class means; the strait carries its
        class mean (no anomaly).

        Returns
        -------
        sections : ndarray (class,)
            Net salt-anomaly inflow through the lines (Ekman included).
        transfers : ndarray (class,)
            Salt anomaly brought by the diapycnal transfers.
        """
        s_mean = self.class_mean_salinity()
        sections = (self.box_inflow("salt") - s_mean * self.box_inflow("mass")) / SV
        transfers = transfer_anomaly(interface_transfers(s_mean.size), s_mean) @ self.diapycnal
        return sections, transfers

    def salt_anomaly_residual(self) -> np.ndarray:
        """Imbalance of each class salt-anomaly budget under the layered model, Sv g kg^-1."""
        sections, transfers = self.salt_anomaly_parts()
        return sections + transfers


def build_demo_operators(
    scenario: DemoScenario, sections: dict[str, xr.Dataset] | None = None
) -> dict[str, SectionOperator]:
    """Transport operators of the demo lines with ``demo.toml``'s settings.

    Parameters
    ----------
    scenario : DemoScenario
        Parameters (interfaces, bottom triangle, Ekman depth).
    sections : dict of str -> xr.Dataset, optional
        Canonical sections (generated when not given).

    Returns
    -------
    dict of str -> SectionOperator
    """
    if sections is None:
        sections = {line.name: generate_section(line.name, scenario) for line in scenario.lines}
    return {
        name: build_operator(
            ds,
            list(scenario.interfaces),
            list(scenario.layer_names),
            bottom_triangle=scenario.bottom_triangle,
            ekman_depth=scenario.ekman_depth,
        )
        for name, ds in sections.items()
    }


def _prior(scenario: DemoScenario, line: LineSpec, op: SectionOperator):
    """Prior mean (m s^-1) and covariance (m^2 s^-2) of a line's reference velocities."""
    x = pair_along_line_distance(op.pairs["distance"].values) / 1e3 + station_distances(line)[0]
    mean = -line.dwbc_speed * np.exp(-(((x - line.dwbc_offset) / line.dwbc_width) ** 2))
    std = scenario.prior_speed_interior + (
        scenario.prior_speed_boundary - scenario.prior_speed_interior
    ) * np.exp(-x / scenario.prior_boundary_scale)
    corr = np.exp(-0.5 * ((x[:, None] - x[None, :]) / scenario.prior_length) ** 2)
    return mean, std[:, None] * std[None, :] * corr


def demo_truth(
    scenario: DemoScenario | None = None,
    *,
    small: bool = False,
    sections: dict[str, xr.Dataset] | None = None,
) -> DemoTruth:
    """The true reference velocities and budgets of the demo box.

    Parameters
    ----------
    scenario : DemoScenario, optional
        Parameters (default: ``DemoScenario()``, or ``DemoScenario.small()``).
    small : bool
        Use the small fast scenario when ``scenario`` is not given.
    sections : dict of str -> xr.Dataset, optional
        Canonical sections already generated for this scenario.

    Returns
    -------
    DemoTruth
        ``b_true`` per pair relative to ``demo.toml``'s reference, with which
        every class mass budget of the box closes with the diapycnal transfers,
        the Ekman transports and the strait, and the inflow line carries
        ``inflow_net``.
    """
    scenario = _pick(scenario, small)
    scenario.check()
    if sections is None:
        sections = {line.name: generate_section(line.name, scenario) for line in scenario.lines}
    # the truth is conditioned on the same constraint rows the inverse of demo.toml
    # assembles (one budget state), with the transfers at their true values and exact
    # class mass budgets: demo.toml's configuration, mass only, every transfer an unknown
    config = parse_config(tomllib.loads(_toml_config(
        scenario, {line.name: f"{line.name}_line.nc" for line in scenario.lines})))
    config.inverse.conserve = ["mass"]
    config.inverse.prior_diapycnal = 1.0
    inflow = scenario.lines[0]
    config.inverse.section_net = ([] if scenario.inflow_net is None
                                  else [SectionNet(inflow.name, scenario.inflow_net, 1.0)])
    study = Study.from_config(config, sections=sections)
    state = BudgetState.prepare(study)
    ops = study.operators
    system, layout = state.system, state.layout
    rows = np.array([c != "mass:total" for _, c in system.rows])
    pairs = np.concatenate([np.arange(layout.pair_slices[line.name].start,
                                      layout.pair_slices[line.name].stop)
                            for line in scenario.lines])
    box = config.effective_boxes()[0]
    transfers = [layout.diapycnal[(box.name, n)] for n in range(len(scenario.diapycnal))]
    a = system.matrix[np.ix_(rows, pairs)]  # Sv per m s^-1
    y = -(system.initial[rows]
          + system.matrix[np.ix_(rows, transfers)] @ np.asarray(scenario.diapycnal, float))

    means, covs = [], []
    for line in scenario.lines:
        mean, cov = _prior(scenario, line, ops[line.name])
        means.append(mean)
        covs.append(cov)
    sizes = [ops[line.name].n_pair for line in scenario.lines]
    n = sum(sizes)
    mean = np.concatenate(means)
    cov = np.zeros((n, n))
    start = 0
    for size, c in zip(sizes, covs, strict=True):
        cov[start : start + size, start : start + size] = c
        start += size
    chol = np.linalg.cholesky(cov + 1e-12 * np.eye(n) * np.trace(cov) / n)
    b_draw = mean + chol @ _rng(scenario, 4).standard_normal(n)
    gain = cov @ a.T
    b_all = b_draw + gain @ np.linalg.solve(a @ gain, y - a @ b_draw)

    upper = scenario.layer_names.index(scenario.strait_layer)
    strait_sa = float(
        np.mean([ops[line.name].class_salinity[upper] for line in scenario.lines])
    )
    split = np.cumsum(sizes)[:-1]
    b_true = dict(zip([line.name for line in scenario.lines], np.split(b_all, split), strict=True))
    draws = dict(zip([line.name for line in scenario.lines], np.split(b_draw, split), strict=True))
    truth = DemoTruth(
        scenario=scenario,
        sections=sections,
        operators=dict(ops),
        ref_pressure={name: ref.pressure for name, ref in state.references.items()},
        offset=state.offsets,
        b_draw=draws,
        b_true=b_true,
        ekman=dict(state.ekman),
        diapycnal=np.asarray(scenario.diapycnal, dtype=float),
        known=scenario.known_by_class,
        strait_salinity=strait_sa,
        box=box,
    )
    scale = np.abs(a).sum(axis=1) * np.abs(b_all).max() + np.abs(y)
    if np.any(np.abs(a @ b_all - y) > 1e-9 * np.maximum(scale, 1.0)):
        raise ComputationError("the demo truth's constraints could not be met to round-off")
    return truth


# ---------------------------------------------------------------------------
# files


_NC_FILL = np.float32(-999.0)


def _write_netcdf(path: Path, obs: _Observed, scenario: DemoScenario) -> None:
    line = scenario.line(obs.name)
    with netCDF4.Dataset(path, "w", format="NETCDF4") as nc:
        nc.set_fill_off()
        nc.createDimension("station", len(obs.station))
        nc.createDimension("z", obs.pressure.size)
        nc.setncatts(
            {
                "Conventions": "CF-1.8",
                "featureType": "profile",
                "title": (
                    f"{scenario.basin}, {obs.name} line: invented CTD section of the "
                    f"{scenario.ship} cruise {scenario.cruise}"
                ),
                "summary": (
                    f"Synthetic hydrographic section across the invented {scenario.basin}; "
                    "no real ocean, ship, cruise or institution is represented."
                ),
                "source": "sectionkit.demo (synthetic)",
                "history": (
                    "synthetic: generated by sectionkit.demo "
                    f"(python -m sectionkit.demo --write DIR), seed {scenario.seed}"
                ),
                "comment": (
                    "Water properties are built in TEOS-10 (Absolute Salinity, Conservative "
                    "Temperature) and stored as in-situ temperature and practical salinity "
                    "converted with gsw, with seeded noise of "
                    f"{scenario.noise_temperature:g} degC and {scenario.noise_salinity:g} "
                    "(clipped Gaussian). Values below the sea floor are _FillValue."
                ),
                "platform": scenario.ship,
                "cruise_id": scenario.cruise,
                "section_name": obs.name,
                "wind_stress_east_N_m-2": float(line.wind_stress[0]),
                "wind_stress_north_N_m-2": float(line.wind_stress[1]),
            }
        )
        cast = nc.createVariable("cast", str, ("station",))
        cast.setncatts({"cf_role": "profile_id", "long_name": "station id"})
        cast[:] = np.array(obs.station, dtype=object)
        for var, values, attrs in (
            (
                "stn_lat",
                obs.lat,
                {"standard_name": "latitude", "units": "degrees_north", "long_name": "latitude"},
            ),
            (
                "stn_lon",
                obs.lon,
                {"standard_name": "longitude", "units": "degrees_east", "long_name": "longitude"},
            ),
            (
                "water_depth",
                obs.bottom_depth,
                {
                    "standard_name": "sea_floor_depth_below_sea_surface",
                    "units": "m",
                    "positive": "down",
                    "long_name": "sea-floor depth at the station",
                },
            ),
        ):
            v = nc.createVariable(var, "f8", ("station",))
            v.setncatts(attrs)
            v[:] = values
        pres = nc.createVariable("pres", "f4", ("z",))
        pres.setncatts(
            {
                "standard_name": "sea_water_pressure",
                "units": "dbar",
                "axis": "Z",
                "positive": "down",
                "long_name": "sea pressure",
            }
        )
        pres[:] = obs.pressure.astype(np.float32)
        for var, values, attrs in (
            (
                "temp",
                obs.temperature,
                {
                    "standard_name": "sea_water_temperature",
                    "units": "degC",
                    "long_name": "in-situ temperature (ITS-90)",
                },
            ),
            (
                "psal",
                obs.salinity,
                {
                    "standard_name": "sea_water_practical_salinity",
                    "units": "1",
                    "long_name": "practical salinity (PSS-78)",
                },
            ),
        ):
            v = nc.createVariable(
                var, "f4", ("station", "z"), zlib=True, complevel=6, shuffle=True,
                fill_value=_NC_FILL,
            )
            v.setncatts({**attrs, "coordinates": "stn_lat stn_lon pres"})
            v[:] = np.ma.masked_invalid(values)


def _fmt(value: float, digits: int = 6) -> str:
    if not np.isfinite(value):
        return ""
    text = f"{value:.{digits}f}"
    return "0." + "0" * digits if text == "-0." + "0" * digits else text


def _tf(value: float) -> str:
    """A TOML float that always reads back as a float (``27.0``, ``-0.06``)."""
    return repr(float(value))


def _write_csv(path: Path, header: Sequence[str], rows: Sequence[Sequence[str]]) -> None:
    lines = [",".join(header)] + [",".join(row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def _toml_config(scenario: DemoScenario, files: dict[str, str]) -> str:
    south, north = scenario.lines
    faces = ",\n  ".join(
        f"{{ sigma = {_tf(f.sigma)}, p_ref = {_tf(f.p_ref)} }}" for f in scenario.interfaces
    )
    names = ", ".join(f'"{n}"' for n in scenario.layer_names)
    stress = ", ".join(
        f"{line.name} = [{_tf(line.wind_stress[0])}, {_tf(line.wind_stress[1])}]"
        for line in scenario.lines
    )
    noise_layer = ", ".join(_tf(v) for v in scenario.noise_layer)
    noise_salt = ", ".join(_tf(v) for v in scenario.noise_salt)
    strait = "_".join(scenario.strait.lower().split())
    out = [
        f'title = "{scenario.basin} demo box ({scenario.ship} cruise {scenario.cruise}, invented)"',
        "",
        "# Synthetic demo written by sectionkit.demo; regenerate with",
        "#   python -m sectionkit.demo --write demo_sections",
        "# The truth (truth_*.csv) is relative to the reference below.",
        "",
        "[grid]",
        f"dp = {_tf(scenario.dp)}                         # dbar",
        "",
    ]
    for line in scenario.lines:
        out += [
            "[[sections]]",
            f'name = "{line.name}"',
            f'file = "{files[line.name]}"',
            f"into_box = {'true' if line.into_box else 'false'}",
            "",
        ]
    out += [
        "[[boxes]]",
        'name = "interior"',
        f'enters = ["{south.name}"]',
        f'leaves = ["{north.name}"]',
        "",
        "[reference]",
        f"pressure = {_tf(scenario.reference_pressure)}          # plausible, but not the truth",
        f'bottom_triangle = "{scenario.bottom_triangle}"',
        "",
        "[ekman]",
        f"depth = {_tf(scenario.ekman_depth)}",
        f"stress = {{ {stress} }}   # N m^-2, (east, north)",
        "",
        "[classes]",
        f"interfaces = [\n  {faces},\n]",
        f"names = [{names}]",
        "",
        "[inverse]",
        'solver = "gauss-markov"',
        'conserve = ["mass", "salt"]',
        f"prior_velocity = {_tf(scenario.inverse_prior_velocity)}         # m s^-1",
        f"prior_diapycnal = {_tf(scenario.inverse_prior_diapycnal)}         # Sv per interface",
        f"prior_ekman = {_tf(scenario.inverse_prior_ekman)}             # fractional",
        f"noise_total = {_tf(scenario.noise_total)}             # Sv",
        f"noise_class = [{noise_layer}]   # Sv, one per class",
        f"noise_salt = [{noise_salt}]   # Sv g/kg, one per class (includes model error)",
        (
            f'known = [ {{ name = "{strait}", transport = {_tf(scenario.strait_transport)}, '
            f"noise = {_tf(scenario.strait_noise)}, "
            f'class = "{scenario.strait_layer}", box = "interior" }} ]'
        ),
        "# the basin south of the southern line is closed: no net flow across it",
        'section_net = [ { section = "south", transport = 0.0, noise = 1.0 } ]',
        "",
    ]
    return "\n".join(out)


def _truth_tables(truth: DemoTruth) -> dict[str, tuple[list[str], list[list[str]]]]:
    sc = truth.scenario
    pairs = []
    for line in sc.lines:
        op = truth.operators[line.name]
        g = op.pairs
        v_abs = op.absolute_velocity(truth.offset[line.name], truth.b_true[line.name])
        for j in range(op.n_pair):
            pairs.append(
                [
                    line.name,
                    str(j),
                    _fmt(float(g["lon"][j]), 4),
                    _fmt(float(g["lat"][j]), 4),
                    _fmt(float(g["distance"][j]) / 1e3, 3),
                    _fmt(float(truth.ref_pressure[line.name][j]), 1),
                    _fmt(float(truth.b_draw[line.name][j]), 10),
                    _fmt(float(truth.b_true[line.name][j]), 10),
                    _fmt(float(v_abs[j, 0]), 6),
                    _fmt(float(truth.ekman[line.name][j]) / SV, 6),
                ]
            )
    layers = []
    for line in sc.lines:
        op = truth.operators[line.name]
        area = op.area[_Q["volume"]].sum(axis=0)
        ek = truth.ekman_by_class(line.name, "mass") / SV
        init_v = truth.class_transports(line.name, "volume", true=False) / SV
        init_m = truth.class_transports(line.name, "mass", true=False) / SV
        true_v = truth.class_transports(line.name, "volume") / SV
        true_m = truth.class_transports(line.name, "mass") / SV
        true_s = truth.class_transports(line.name, "salt") / SV
        for i, layer in enumerate(sc.layer_names):
            layers.append(
                [
                    line.name,
                    layer,
                    _fmt(area[i] / 1e6, 3),
                    _fmt(float(op.class_salinity[i]), 4),
                    _fmt(float(op.class_temperature[i]), 4),
                    _fmt(ek[i], 4),
                    _fmt(init_v[i], 4),
                    _fmt(init_m[i], 4),
                    _fmt(true_v[i], 4),
                    _fmt(true_m[i], 4),
                    _fmt(true_s[i], 4),
                ]
            )
    w = np.concatenate([[0.0], truth.diapycnal, [0.0]])
    inflow = truth.box_inflow("mass") / SV
    ekman_in = sum(
        truth.sign(line.name) * truth.ekman_by_class(line.name, "mass") / SV
        for line in sc.lines
    )
    residual = truth.mass_residual()
    box = []
    for i, layer in enumerate(sc.layer_names):
        box.append(
            [
                f"mass:{layer}", "Sv", _fmt(inflow[i], 6), _fmt(ekman_in[i], 6),
                _fmt(truth.known[i], 6), _fmt(w[i] - w[i + 1], 6), _fmt(residual[i], 9), "",
            ]
        )
    box.append(
        [
            "mass:total", "Sv", _fmt(inflow.sum(), 6), _fmt(float(np.sum(ekman_in)), 6),
            _fmt(truth.known.sum(), 6), _fmt(0.0, 6), _fmt(float(residual.sum()), 9), "",
        ]
    )
    sections, transfers = truth.salt_anomaly_parts()
    salt_res = sections + transfers
    for i, layer in enumerate(sc.layer_names):
        box.append(
            [
                f"salt:{layer}", "Sv g/kg", _fmt(sections[i], 6), "", _fmt(0.0, 6),
                _fmt(transfers[i], 6), _fmt(salt_res[i], 6),
                _fmt(salt_res[i] / sc.noise_salt[i], 3),
            ]
        )
    faces = []
    for k, face in enumerate(sc.interfaces):
        faces.append(
            [
                str(k),
                sc.layer_names[k],
                sc.layer_names[k + 1],
                _fmt(face.sigma, 3),
                _fmt(face.p_ref, 1),
                _fmt(float(truth.diapycnal[k]), 4),
            ]
        )
    return {
        "truth_pairs.csv": (
            [
                "section", "pair", "lon", "lat", "distance_km", "ref_pressure",
                "b_draw_m_s", "b_true_m_s", "surface_velocity_m_s", "ekman_sv",
            ],
            pairs,
        ),
        "truth_layers.csv": (
            [
                "section", "layer", "area_km2", "mean_sa", "mean_ct", "ekman_mass_sv",
                "initial_volume_sv", "initial_mass_sv", "true_volume_sv", "true_mass_sv",
                "true_salt_sv",
            ],
            layers,
        ),
        "truth_box.csv": (
            [
                "constraint", "unit", "sections_in", "ekman_in", "known_in", "diapycnal_in",
                "residual", "residual_over_noise",
            ],
            box,
        ),
        "truth_diapycnal.csv": (
            ["interface", "upper_layer", "lower_layer", "sigma", "p_ref", "w_true_sv"],
            faces,
        ),
    }


BUNDLED_DIR = Path(__file__).resolve().parent.parent / "demo_sections"


def bundled_demo_config() -> Path:
    """The demo configuration shipped in ``demo_sections/``.

    When the package was installed without the repository's ``demo_sections/``
    folder, the demo is generated once into ``~/.cache/sectionkit`` (the
    generator is deterministic, so the files are the same).
    """
    path = BUNDLED_DIR / "demo.toml"
    if path.is_file():
        return path
    cache = Path.home() / ".cache" / "sectionkit" / "demo_sections"
    if not (cache / "demo.toml").is_file():
        write_demo(cache)
    return cache / "demo.toml"


def write_demo(
    folder: str | os.PathLike, *, small: bool = False, scenario: DemoScenario | None = None
) -> dict[str, Path]:
    """Write the demo's section files, configuration and truth tables.

    Parameters
    ----------
    folder : path
        Output folder (created if missing; existing demo files are replaced).
    small : bool
        Write the small fast scenario (10 stations per line, 10 dbar).
    scenario : DemoScenario, optional
        Parameters; overrides ``small``.

    Returns
    -------
    dict of str -> Path
        ``"<line>"`` for each section file, ``"<line>_ctd"``, ``"<line>_bottle"``
        and ``"<line>_adcp"`` for the exchange files of the outflow line (CTD zip,
        bottle file, LADCP profiles), ``"config"`` for ``demo.toml``,
        and one key per truth table (``"truth_pairs"``, ``"truth_layers"``,
        ``"truth_box"``, ``"truth_diapycnal"``).
    """
    scenario = _pick(scenario, small)
    scenario.check()
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    # everything is written into a temporary folder and moved into place at the end,
    # so a failure leaves no half-written demo behind
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    try:
        names: dict[str, str] = {}
        files = {line.name: f"{line.name}_line.nc" for line in scenario.lines}
        sections = {}
        observed = {}
        for line in scenario.lines:
            obs = observed[line.name] = _observe(scenario, line.name)
            _write_netcdf(tmp / files[line.name], obs, scenario)
            sections[line.name] = _canonical(obs, scenario.dp, str(out / files[line.name]))
            names[line.name] = files[line.name]
        truth = demo_truth(scenario, sections=sections)
        # the outflow line is also written as a cruise delivers it (exchange CTD zip,
        # bottle tracers, LADCP), and demo.toml reads it from those files
        exchange = scenario.lines[-1].name
        config, written = add_exchange_line(tmp, exchange, observed[exchange], truth,
                                            _toml_config(scenario, files), files[exchange],
                                            scenario.seed)
        names.update({f"{exchange}_{key}": fname for key, fname in written.items()})
        (tmp / "demo.toml").write_text(config, encoding="utf-8")
        names["config"] = "demo.toml"
        for fname, (header, rows) in _truth_tables(truth).items():
            _write_csv(tmp / fname, header, rows)
            names[fname.removesuffix(".csv")] = fname
        for fname in names.values():
            os.replace(tmp / fname, out / fname)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return {key: out / fname for key, fname in names.items()}


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m sectionkit.demo --write DIR [--small]``."""
    parser = argparse.ArgumentParser(
        prog="python -m sectionkit.demo",
        description=(
            "Write the invented demo ocean: two CF-NetCDF CTD sections, demo.toml and the "
            "truth tables (true reference velocities, class transports, diapycnal transfers)."
        ),
    )
    parser.add_argument("--write", metavar="DIR", required=True, help="output folder")
    parser.add_argument(
        "--small", action="store_true", help="10 stations per line on a 10 dbar grid (fast)"
    )
    args = parser.parse_args(argv)
    paths = write_demo(args.write, small=args.small)
    for key, path in paths.items():
        size = path.stat().st_size
        print(f"{key:16s} {path}  ({size / 1024:.0f} KiB)")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

__all__ = [
    "DemoScenario",
    "DemoTruth",
    "LineSpec",
    "REFERENCE_PROFILE",
    "bottom_depth_profile",
    "build_demo_operators",
    "demo_truth",
    "generate_section",
    "main",
    "reference_water",
    "station_distances",
    "true_water",
    "write_demo",
]

