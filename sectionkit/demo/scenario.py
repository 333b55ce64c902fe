"""The demo scenario: the invented basin, its two lines, the cruise and the inverse settings."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from sectionkit.config import Config, parse_config
from sectionkit.errors import ComputationError
from sectionkit.layers import Interface


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



def _pick(scenario: DemoScenario | None, small: bool) -> DemoScenario:
    if scenario is not None:
        return scenario
    return DemoScenario.small() if small else DemoScenario()


#: Comment block at the top of ``demo.toml`` (the rest is :meth:`Config.to_toml`).
TOML_HEADER = """\
# Synthetic demo written by sectionkit.demo; regenerate with
#   python -m sectionkit.demo --write demo_sections
# The truth (truth_*.csv) is relative to the reference below: a level of no
# motion that is plausible, but not the truth. Units: dp and pressures in dbar,
# Ekman stress in N m^-2 (east, north), prior_velocity in m s^-1, transports,
# noise and prior_diapycnal in Sv (salt noise in Sv g/kg), prior_ekman a fraction.
# The basin south of the southern line is closed: no net flow across it
# (section_net). The northern line is read from its exchange files (CTD casts,
# bottle tracers, LADCP profiles); south_line.nc and north_line.nc hold the
# same casts as CF-NetCDF.

"""


def demo_config(scenario: DemoScenario, files: dict[str, str]) -> Config:
    """The configuration of ``demo.toml`` for a scenario (``files``: each line's file name).

    Written with :meth:`Config.to_toml` after :data:`TOML_HEADER`; the demo truth
    is conditioned on the constraints this configuration's inverse assembles.
    """
    south, north = scenario.lines
    strait = "_".join(scenario.strait.lower().split())
    return parse_config({
        "title": f"{scenario.basin} demo box ({scenario.ship} cruise {scenario.cruise}, "
                 "invented)",
        "grid": {"dp": float(scenario.dp)},
        "sections": [{"name": line.name, "file": files[line.name], "into_box": line.into_box}
                     for line in scenario.lines],
        "boxes": [{"name": "interior", "enters": [south.name], "leaves": [north.name]}],
        "reference": {"pressure": float(scenario.reference_pressure),
                      "bottom_triangle": scenario.bottom_triangle},
        "ekman": {"depth": float(scenario.ekman_depth),
                  "stress": {line.name: [float(line.wind_stress[0]), float(line.wind_stress[1])]
                             for line in scenario.lines}},
        "classes": {"interfaces": [{"sigma": float(f.sigma), "p_ref": float(f.p_ref)}
                                   for f in scenario.interfaces],
                    "names": list(scenario.layer_names)},
        "inverse": {
            "solver": "gauss-markov",
            "conserve": ["mass", "salt"],
            "prior_velocity": float(scenario.inverse_prior_velocity),
            "prior_diapycnal": float(scenario.inverse_prior_diapycnal),
            "prior_ekman": float(scenario.inverse_prior_ekman),
            "noise_total": float(scenario.noise_total),
            "noise_class": [float(v) for v in scenario.noise_layer],
            "noise_salt": [float(v) for v in scenario.noise_salt],
            "known": [{"name": strait, "transport": float(scenario.strait_transport),
                       "noise": float(scenario.strait_noise), "class": scenario.strait_layer,
                       "box": "interior"}],
            "section_net": [{"section": south.name, "transport": 0.0, "noise": 1.0}],
        },
    })
