"""The section operator: everything a budget needs, computed once per section.

Building the operator runs the expensive chain (dynamic height, relative
velocity, bottom triangles, class weights). Afterwards every transport is
linear in the per-pair reference velocity: for each quantity ``q`` (volume,
mass, salt, heat), pair ``j`` and class ``i``

    T[q, i] = sum_j relative[q, j, i] + area[q, j, i] * (offset_j + b_j)
              + ekman_j * (1 + e) * ekman_share[q, j, i]

where ``offset`` comes from the reference choice, ``b`` is the inverse's
adjustment and ``ekman_j`` the Ekman volume transport of the pair.
Changing a reference only changes ``offset``: a small product, never a
recomputation of dynamic height.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, field

import gsw
import numpy as np
import xarray as xr

from sectionkit.arrays import core_last
from sectionkit.compiled import kernel
from sectionkit.eos import density_anomaly
from sectionkit.errors import Cautions, ComputationError, EquatorError, SectionDataError
from sectionkit.geometry import EQUATOR_HARD_BAND, pair_geometry
from sectionkit.geostrophy import (
    extend_into_bottom_triangle,
    last_valid_level,
    pair_level_limits,
    pair_mean,
    relative_velocity,
    resolve_references,
)
from sectionkit.labels import pair_labels
from sectionkit.layers import (
    ClassLevels,
    Interface,
    bottom_width_fraction,
    cell_thickness,
    check_interfaces,
    class_levels,
    deciding_densities,
    potential_density_anomaly,
)
from sectionkit.thermo import preformed_salinity_ratio, specific_volume_pass

RHO0 = 1025.0  # kg m^-3, Boussinesq reference density of DESIGN.md §4 (common practice)
CP0 = 3991.86795711963  # J kg^-1 K^-1, TEOS-10 c_p0 (IOC, SCOR and IAPSO 2010; gsw.cp0 in C)
QUANTITIES = ("volume", "mass", "salt", "heat")
QUANTITY_UNITS = {
    "volume": "m3 s-1",
    "mass": "m3 s-1",  # mass flux divided by RHO0
    "salt": "g kg-1 m3 s-1",  # rho SA v / RHO0
    "heat": "W",  # rho c_p0 CT v (potential enthalpy)
}


class PairDensities(dict):
    """Pair-mean potential density anomaly by reference pressure, computed when first asked.

    A dict of float -> ndarray (..., pair, level), kg m^-3 (``pair_mean`` of
    :func:`sectionkit.layers.potential_density_anomaly` of the stations' SA
    and CT); a missing reference pressure is computed on first access and kept.
    Where a bathymetry track lies below both stations of a pair, the water of
    the deepest level with data continues down to the track (as in the
    operator's other pair fields).

    Parameters
    ----------
    sa, ct : ndarray (..., station, level)
        Absolute Salinity (g/kg) and Conservative Temperature (degC).
    continued : dict of int -> (int, int), optional
        Pair index -> (last level with data, last level down to the track).
    """

    def __init__(self, sa: np.ndarray, ct: np.ndarray,
                 continued: dict[int, tuple[int, int]] | None = None) -> None:
        super().__init__()
        self.station_sa = sa
        self.station_ct = ct
        self.continued = dict(continued or {})

    def __missing__(self, p_ref: float) -> np.ndarray:
        value = pair_mean(potential_density_anomaly(self.station_sa, self.station_ct,
                                                    float(p_ref)))
        for j, (k0, k1) in self.continued.items():
            value[..., j, k0 + 1 : k1 + 1] = value[..., j, k0 : k0 + 1]
        self[p_ref] = value
        return value


@dataclass
class SectionOperator:
    """Linear transport operator of one section.

    Arrays may carry extra leading dimensions (time, member) before the
    named trailing ones.

    Attributes
    ----------
    name : str
        Section name.
    pressure : ndarray (level,)
        Grid, dbar.
    pairs : xr.Dataset
        Pair geometry (see :func:`sectionkit.geometry.pair_geometry`).
    layer_names : list of str
        One per class, light to dense.
    interfaces : list of Interface
        Class boundaries, light to dense.
    v_eff : ndarray (..., pair, level)
        Velocity relative to the surface, extended into bottom triangles, m s^-1.
    response : ndarray (..., pair, level)
        1 where a reference velocity reaches, 0 where not, NaN below bottom
        (dimensionless).
    common : ndarray (..., pair) of int
        Index of the deepest common level.
    weights : ndarray (..., pair, class, level)
        Depth-integration weights of each class, m (a property: formed from
        ``class_levels`` when first asked for, then kept).
    relative : ndarray (..., quantity, pair, class)
        Transport for zero reference offset (velocity relative to the
        surface); units per ``QUANTITY_UNITS``.
    area : ndarray (..., quantity, pair, class)
        Transport per m s^-1 of reference velocity (area for volume, m^2).
    ekman_share : ndarray (..., quantity, pair, class)
        Quantity carried per m^3 s^-1 of Ekman volume transport in each
        class of the top ``ekman_depth`` metres (``QUANTITY_UNITS`` per
        m^3 s^-1; see :func:`ekman_class_share`).
    level_relative : ndarray (..., level)
        Volume transport per grid level summed over pairs, m^3 s^-1, for zero
        offset (depth overturning).
    level_area : ndarray (..., pair, level)
        Volume transport per level per m s^-1 of pair reference velocity, m^2.
    level_ekman : ndarray (pair, level)
        Fraction of each pair's Ekman volume transport carried at each level (1).
    sigma_pair : dict of float -> ndarray (..., pair, level)
        Pair-mean potential density anomaly by reference pressure, kg m^-3
        (a :class:`PairDensities`: each reference pressure is computed when
        first asked for).
    class_salinity, class_temperature : ndarray (..., class)
        Area-weighted mean salinity of the salt budgets (Preformed Salinity S*
        or SA, see ``salinity``; g/kg) and CT (degC) of each class;
        ``mean_salinity`` is the section's area mean of the same salinity.
    class_levels : sectionkit.layers.ClassLevels
        The class weights in compact form (a class per level, split cells).
    salinity : {"preformed", "absolute"}
        Which salinity the salt budgets use.
    class_moments : ndarray (..., 5, class)
        Area integrals of [1, S, S^2, CT, CT^2] over each class: m^2, g/kg m^2,
        (g/kg)^2 m^2, degC m^2 and degC^2 m^2 (S: ``budget_salinity``).
    level_section_area : ndarray (..., level)
        Area of the whole section in each grid level's integration cell, m^2.
    budget_salinity : ndarray (..., pair, level)
        Pair-mean salinity of the salt budgets (S* or SA), g/kg.
    pair_sa, pair_ct : ndarray (..., pair, level)
        Pair-mean Absolute Salinity (g/kg) and Conservative Temperature (degC).
    pair_density : ndarray (..., pair, level)
        Pair-mean in-situ density, kg m^-3.
    station_sa, station_ct : ndarray (..., station, level)
        The section's SA (g/kg) and CT (degC), for densities asked for later.
    relative_velocity : ndarray (..., pair, level)
        Velocity relative to the surface before bottom triangles, m s^-1 (what a
        rebuild with other classes reuses).
    source_section : xr.Dataset or None
        The canonical section the operator was built from.
    track_below_stations : dict of int -> (float, float)
        Pairs whose bathymetry track lies below both stations: pair -> (track,
        deeper station) sea-floor pressure, dbar.
    """

    name: str
    pressure: np.ndarray
    pairs: xr.Dataset
    layer_names: list[str]
    interfaces: list[Interface]
    v_eff: np.ndarray
    response: np.ndarray
    common: np.ndarray
    deepest: np.ndarray
    relative: np.ndarray
    area: np.ndarray
    ekman_share: np.ndarray
    level_relative: np.ndarray
    level_area: np.ndarray
    level_ekman: np.ndarray
    sigma_pair: PairDensities
    class_salinity: np.ndarray
    class_temperature: np.ndarray
    mean_salinity: np.ndarray
    ekman_depth: float
    bottom_triangle: str
    salinity: str = "preformed"
    class_moments: np.ndarray | None = None
    level_section_area: np.ndarray | None = None
    budget_salinity: np.ndarray | None = None
    pair_sa: np.ndarray | None = None
    pair_ct: np.ndarray | None = None
    pair_density: np.ndarray | None = None
    station_sa: np.ndarray | None = None
    station_ct: np.ndarray | None = None
    relative_velocity: np.ndarray | None = None
    source_section: xr.Dataset | None = None
    track_below_stations: dict[int, tuple[float, float]] = field(default_factory=dict)
    class_levels: ClassLevels | None = None
    _dense_weights: np.ndarray | None = field(default=None, repr=False)

    @property
    def weights(self) -> np.ndarray:
        """Depth-integration weights (..., pair, class, level) of each class, m."""
        if self._dense_weights is None:
            self._dense_weights = self.class_levels.dense()[..., : len(self.layer_names), :]
        return self._dense_weights

    @property
    def n_pair(self) -> int:
        """Number of station pairs."""
        return int(self.pairs.sizes["pair"])

    @property
    def pair_labels(self) -> list[str]:
        """Pair names as used in configuration overrides, ``"<section>:<k>"``."""
        return pair_labels(self.name, self.n_pair)

    def ekman_volume(self, stress_east: float, stress_north: float) -> np.ndarray:
        """Ekman volume transport across each pair for a uniform wind stress.

        Parameters
        ----------
        stress_east, stress_north : float or ndarray (...)
            Wind stress components, N m^-2 (extra dimensions, e.g. time, allowed).

        Returns
        -------
        ndarray (..., pair)
            -(tau . t) L / (RHO0 f), m^3 s^-1, positive to the left of
            increasing station order.
        """
        g = self.pairs.variables
        along = (np.asarray(stress_east, dtype=float)[..., None] * g["along_east"].values
                 + np.asarray(stress_north, dtype=float)[..., None] * g["along_north"].values)
        return -along * g["distance"].values / (RHO0 * g["f"].values)

    def transports(
        self,
        offset: np.ndarray,
        adjustment: np.ndarray | float = 0.0,
        ekman: np.ndarray | float = 0.0,
        ekman_factor: float | np.ndarray = 1.0,
    ) -> np.ndarray:
        """Class transports of every quantity and pair.

        Parameters
        ----------
        offset : ndarray (..., pair)
            Reference offset from the reference choice, m s^-1.
        adjustment : ndarray (..., pair) or float
            Reference-velocity adjustment b (the inverse's unknown), m s^-1.
        ekman : ndarray (..., pair) or float
            Ekman volume transport per pair, m^3 s^-1.
        ekman_factor : float
            Multiplier (1 + e) of the Ekman transport, dimensionless.

        Returns
        -------
        ndarray (..., quantity, pair, class)
            Transports in ``QUANTITY_UNITS``.
        """
        ref = np.asarray(offset) + np.asarray(adjustment)
        ek = np.asarray(ekman, dtype=float)
        if ek.ndim == 0:
            ek = np.full(self.n_pair, float(ek))
        factor = np.asarray(ekman_factor, dtype=float)[..., None, None, None]
        return (
            self.relative
            + self.area * ref[..., None, :, None]
            + factor * ek[..., None, :, None] * self.ekman_share
        )

    def sigma_for(self, choices) -> dict[float, np.ndarray]:
        """Pair-mean potential density at every reference pressure the choices need.

        ``sigma_pair`` (a :class:`PairDensities`) computes each reference
        pressure from the stations' SA and CT when first asked for and keeps it.

        Parameters
        ----------
        choices : iterable of ReferenceChoice
            The references about to be resolved.

        Returns
        -------
        dict of float -> ndarray (..., pair, level)
            ``sigma_pair``, completed; kg m^-3.
        """
        for pr in {c.sigma_p_ref for c in choices if c.kind == "isopycnal"}:
            self.sigma_pair[pr]  # computed on first access, then kept
        return self.sigma_pair

    def absolute_velocity(self, offset: np.ndarray, adjustment: np.ndarray | float = 0.0):
        """Absolute velocity of each pair on the grid.

        Parameters
        ----------
        offset : ndarray (..., pair)
            Reference offset, m s^-1.
        adjustment : ndarray (..., pair) or float
            Reference-velocity adjustment, m s^-1.

        Returns
        -------
        ndarray (..., pair, level)
            m s^-1; NaN below the deeper station's bottom.
        """
        ref = np.asarray(offset) + np.asarray(adjustment)
        return self.v_eff + self.response * ref[..., None]

    def resolve_references(
        self, choices: list, cautions: Cautions | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """Reference pressure used (dbar) and velocity offset (m s^-1) of every pair.

        :func:`sectionkit.geostrophy.resolve_references` on this operator's
        velocities, grid, deepest levels and bottom-triangle rule: the one way
        a section's references are resolved (batch, workbench, xarray layer).

        Parameters
        ----------
        choices : list of ReferenceChoice
            One per pair.
        cautions : Cautions, optional
            Receives references below the floor and missing isopycnals, by pair name.
        """
        return resolve_references(choices, self.v_eff, self.pressure, self.common,
                                  self.sigma_for(choices), cautions, self.pair_labels,
                                  deepest=self.deepest, bottom_triangle=self.bottom_triangle)

    @property
    def class_area(self) -> np.ndarray:
        """Cross-sectional area of each class, bottom triangles included, (..., class), m^2."""
        return self.class_moments[..., 0, :]


def _masked(a: np.ndarray) -> np.ndarray:
    """The array with NaN (below the bottom) set to zero."""
    return np.where(np.isnan(a), 0.0, a)


def _level_parts(distance: np.ndarray, column: np.ndarray, v_eff: np.ndarray,
                 response: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The per-level operator of a section: transports and areas summed over its pairs.

    Parameters
    ----------
    distance : ndarray (pair,)
        Pair width, m.
    column : ndarray (..., pair, level)
        Depth-integration weight of each level (all classes), m.
    v_eff, response : ndarray (..., pair, level)
        Velocity relative to the surface (m s^-1) and the reach of a
        reference velocity (1); NaN below the bottom (counted as zero).

    Returns
    -------
    level_relative : ndarray (..., level)
        Relative volume transport of each level, m^3 s^-1.
    level_area : ndarray (..., pair, level)
        Area a reference velocity moves at each level of each pair, m^2.
    level_section_area : ndarray (..., level)
        Cross-sectional area of each level, m^2.
    """
    shape = column.shape
    rows = (-1,) + shape[-2:]
    level_relative = np.empty(shape[:-2] + shape[-1:])
    level_area = np.empty(shape)
    level_section_area = np.empty(shape[:-2] + shape[-1:])
    _level_parts_kernel(
        np.ascontiguousarray(distance, dtype=float),
        *(np.ascontiguousarray(np.broadcast_to(a, shape), dtype=float).reshape(rows)
          for a in (column, v_eff, response)),
        level_relative.reshape(-1, shape[-1]), level_area.reshape(rows),
        level_section_area.reshape(-1, shape[-1]))
    return level_relative, level_area, level_section_area


@kernel
def _level_parts_kernel(distance, column, v_eff, response, level_relative, level_area,
                        level_section_area):
    """Sums over pairs (in pair order) of distance x column x v and distance x column."""
    n_lead, n_pair, n_lev = column.shape
    for r in range(n_lead):
        for k in range(n_lev):
            level_relative[r, k] = 0.0
            level_section_area[r, k] = 0.0
        for j in range(n_pair):
            d = distance[j]
            for k in range(n_lev):
                c = column[r, j, k]
                v = v_eff[r, j, k]
                a = response[r, j, k]
                level_relative[r, k] += d * (c * (0.0 if np.isnan(v) else v))
                level_area[r, j, k] = (d * c) * (0.0 if np.isnan(a) else a)
                level_section_area[r, k] += d * c


def build_operator(
    section: xr.Dataset,
    interfaces: list[Interface],
    layer_names: list[str] | None = None,
    *,
    bottom_triangle: str = "constant",
    ekman_depth: float = 50.0,
    bathymetry: list | None = None,
    max_dp: float = 1.0,
    relative_velocity_of_pairs: np.ndarray | None = None,
    salinity: str = "preformed",
) -> SectionOperator:
    """Build the linear transport operator of a section.

    Parameters
    ----------
    section : xr.Dataset
        Canonical gridded section (``SA``, ``CT`` on (..., station, pressure),
        ``lon``, ``lat``, ``bottom_pressure`` per station).
    interfaces : list of Interface
        Class interfaces, light to dense.
    layer_names : list of str, optional
        One name per class.
    bottom_triangle : {"constant", "zero", "shear"}
        Velocity rule below each pair's deepest common level.
    ekman_depth : float
        Depth of the Ekman layer, m.
    bathymetry : list, optional
        Per pair, sampled sea-floor pressures along the pair (dbar), or None.
    max_dp : float
        Integration step of gsw's dynamic height, dbar.
    relative_velocity_of_pairs : ndarray (..., pair, level), optional
        The velocity relative to the surface of this same section from an
        earlier build (``relative_velocity``), m s^-1: a change of classes,
        bottom-triangle rule or Ekman depth then needs no new dynamic height.
    salinity : {"preformed", "absolute"}
        Salinity of the salt transports, class salinities and the freshwater
        reference: Preformed Salinity S* (gsw.Sstar_from_SA; conserved, which
        Absolute Salinity is not: IOC, SCOR and IAPSO 2010, TEOS-10 manual;
        McDougall et al. 2012) or Absolute Salinity SA, g/kg.

    Returns
    -------
    SectionOperator
    """
    names = check_interfaces(interfaces, layer_names)
    name = str(section.attrs.get("section", "section"))
    var = section.variables  # plain variables: no DataArray built per lookup
    p = var["pressure"].values.astype(float)
    sa = core_last(var["SA"], "station", "pressure")
    ct = core_last(var["CT"], "station", "pressure")
    bottom = var["bottom_pressure"].values.astype(float)
    geometry, thickness, width = _fixed_parts(section, p, bottom, bathymetry)
    distance = geometry.variables["distance"].values
    f = geometry.variables["f"].values
    lat_pair = geometry.variables["lat"].values
    on_equator = np.flatnonzero(np.abs(lat_pair) < EQUATOR_HARD_BAND)
    if on_equator.size:  # a backstop for sections that were not validated (1/f below)
        raise EquatorError(
            f"section {name}: pair(s) {', '.join(f'{name}:{k}' for k in on_equator)} lie "
            f"within {EQUATOR_HARD_BAND:g} degrees of the equator, where geostrophy and Ekman "
            "transport divide by f ~ 0; drop one station of each such pair"
        )
    if np.any(distance <= 0):
        j = int(np.argmin(distance))
        raise SectionDataError(
            f"section {name}: stations {j} and {j + 1} are at the same position; "
            "merge or drop one of them"
        )

    last = last_valid_level(sa, ct)
    common, deepest = pair_level_limits(last)
    # water where a bathymetry track lies below both stations: the deeper station's
    # properties continue down to it and the triangle rule gives its velocity
    below = _track_below_stations(p, bottom, bathymetry)
    data_deepest = deepest
    if below:
        deepest = np.array(deepest, copy=True)
        for j, p_track in below.items():
            deepest[..., j] = np.maximum(deepest[..., j],
                                         np.searchsorted(p, p_track, side="right") - 1)
    if relative_velocity_of_pairs is None:
        # one pass of the equation of state: dynamic height integrated from the specific
        # volume anomaly, in-situ density as the reciprocal of the same specific volume
        eos = specific_volume_pass(sa, ct, p, max_dp=max_dp)
        v_rel = relative_velocity(eos.dynamic_height, distance, f)
        np.copyto(v_rel, np.nan, where=np.arange(p.size) > common[..., None])
        rho_station = eos.in_situ_density(out=eos.specific_volume)
        del eos
    else:
        v_rel = relative_velocity_of_pairs
        rho_station = density_anomaly(sa, ct, p, offset=0.0)  # in-situ density (gsw.rho)
    v_eff, response = extend_into_bottom_triangle(v_rel, p, common, deepest, bottom_triangle)

    sa_pair = pair_mean(sa)
    ct_pair = pair_mean(ct)
    salt_pair = pair_mean(budget_salinity(sa, p, var["lon"].values, var["lat"].values,
                                          salinity))
    rho_pair = pair_mean(rho_station)
    del rho_station
    # potential density only where it can decide a class (class weights identical to the
    # full evaluation); the full pair-mean fields are computed when first asked for
    by_p_ref: dict[float, list[float]] = {}
    for face in interfaces:
        by_p_ref.setdefault(face.p_ref, []).append(face.sigma)
    deciding = deciding_densities(sa, ct, by_p_ref or {0.0: []})
    # the deeper station's water continues down to the track: pair j's level k0 fills
    # its levels k0 + 1 ... k1
    continued = {j: (int(np.max(data_deepest[..., j])), int(np.max(deepest[..., j])))
                 for j in below}
    continued = {j: (k0, k1) for j, (k0, k1) in continued.items() if k1 > k0}
    for j, (k0, k1) in continued.items():
        deeper = slice(k0 + 1, k1 + 1)
        for pair_field in (sa_pair, ct_pair, salt_pair, *deciding.values()):
            pair_field[..., j, deeper] = pair_field[..., j, k0 : k0 + 1]
        rho_pair[..., j, deeper] = density_anomaly(sa_pair[..., j, k0 : k0 + 1],
                                                   ct_pair[..., j, k0 : k0 + 1], p[deeper],
                                                   offset=0.0)
    # one array per interface (no stacked copy of the large fields)
    sigma_if = [deciding[face.p_ref] for face in interfaces] or [deciding[0.0]]
    sigma_pair = PairDensities(sa, ct, continued)
    # without interfaces one class holds everything: compare with an unreachable density
    values = np.array([face.sigma for face in interfaces]) if interfaces else np.array([1e9])

    tail = _tail_thickness(p, deepest, bottom, lat_pair)
    if below:
        tail = np.array(tail, copy=True)
        for j, p_track in below.items():
            p_last = p[int(np.max(deepest[..., j]))]
            samples = np.asarray(bathymetry[j], dtype=float)
            frac = float(np.mean(samples > 0.5 * (p_last + p_track)))
            dz = float(gsw.z_from_p(p_last, lat_pair[j]) - gsw.z_from_p(p_track, lat_pair[j]))
            tail[..., j] = dz * frac
    levels = class_levels(sigma_if, values, thickness, width, tail)
    n_class = len(interfaces) + 1  # without interfaces, the one unreachable value adds none

    # every class integral at once: each quantity times v (relative transport) and
    # times the response (area), then the area moments [1, S, S^2, CT, CT^2], with S the
    # salinity of the salt budgets (S* or SA)
    length = distance[:, None]
    n_q = len(QUANTITIES)
    integrals = _class_integrals(levels, v_eff, response, rho_pair, salt_pair, ct_pair)
    integrals = integrals[..., :n_class, :] * length[..., None]  # (..., pair, class, field)
    relative = np.moveaxis(integrals[..., :n_q], -1, -3)  # (..., quantity, pair, class)
    area = np.moveaxis(integrals[..., n_q : 2 * n_q], -1, -3)
    # area moments of SA and CT per class: [area, SA, SA^2, CT, CT^2] integrals (m^2 units)
    class_moments = np.moveaxis(integrals[..., 2 * n_q :].sum(axis=-3), -1, -2)  # (..., 5, class)

    level_relative, level_area, level_section_area = _level_parts(distance, levels.column,
                                                                  v_eff, response)

    ekman_share, level_ekman = ekman_class_share(
        sigma_if, values, p, lat_pair, ekman_depth,
        _quantities(rho_pair, salt_pair, ct_pair, slice(0, _ekman_levels(p, lat_pair,
                                                                       ekman_depth))),
    )

    vol_area = class_moments[..., 0, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        class_salinity = class_moments[..., 1, :] / vol_area
        class_temperature = class_moments[..., 3, :] / vol_area
    mean_salinity = class_moments[..., 1, :].sum(axis=-1) / vol_area.sum(axis=-1)

    return SectionOperator(
        name=name, pressure=p, pairs=geometry,
        layer_names=names if interfaces else names[:1], interfaces=list(interfaces),
        # the linear operator
        v_eff=v_eff, response=response, common=common, deepest=deepest,
        relative=relative, area=area, ekman_share=ekman_share,
        level_relative=level_relative, level_area=level_area, level_ekman=level_ekman,
        sigma_pair=sigma_pair, class_salinity=class_salinity,
        class_temperature=class_temperature, mean_salinity=mean_salinity,
        ekman_depth=float(ekman_depth), bottom_triangle=bottom_triangle, class_levels=levels,
        # by-products kept for budgets, rebuilds and cautions
        salinity=salinity, class_moments=class_moments, level_section_area=level_section_area,
        budget_salinity=salt_pair, pair_sa=sa_pair, pair_ct=ct_pair, pair_density=rho_pair,
        station_sa=sa, station_ct=ct, relative_velocity=v_rel, source_section=section,
        track_below_stations={j: (p_track, float(max(bottom[j], bottom[j + 1])))
                              for j, p_track in below.items()},
    )


SALINITY_NAMES = {"preformed": "Preformed Salinity S*", "absolute": "Absolute Salinity SA"}


def budget_salinity(
    sa: np.ndarray, p: np.ndarray, lon: np.ndarray, lat: np.ndarray, salinity: str
) -> np.ndarray:
    """The salinity salt budgets are made of, on the station grid.

    Parameters
    ----------
    sa : ndarray (..., station, level)
        Absolute Salinity, g/kg.
    p : ndarray (level,)
        Pressure, dbar.
    lon, lat : ndarray (station,)
        Station positions, degrees_east and degrees_north.
    salinity : {"preformed", "absolute"}
        Preformed Salinity S* (gsw.Sstar_from_SA, TEOS-10) or SA itself.

    Returns
    -------
    ndarray (..., station, level)
        g/kg; NaN where SA is NaN.
    """
    if salinity == "absolute":
        return sa
    if salinity != "preformed":
        raise SectionDataError(f"salinity = {salinity!r} is not one of "
                               f"{', '.join(SALINITY_NAMES)}")
    return sa * _sstar_factor(np.asarray(p, float), np.asarray(lon, float),
                              np.asarray(lat, float))


_SSTAR: dict[bytes, np.ndarray] = {}


def _sstar_factor(p: np.ndarray, lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """S*/SA at every station and level (it depends on position and pressure only).

    gsw.Sstar_from_SA is SA (1 - r_1 SAAR) / (1 + SAAR) with SAAR from the
    TEOS-10 atlas at (p, lon, lat): linear in SA, so the ratio is evaluated once
    per set of positions and grid (:func:`sectionkit.thermo.preformed_salinity_ratio`,
    SAAR at the atlas levels only) and kept (the last few), read-only.
    """
    key = p.tobytes() + b"|" + lon.tobytes() + b"|" + lat.tobytes()
    with _FIXED_LOCK:
        factor = _SSTAR.get(key)
    if factor is None:
        factor = preformed_salinity_ratio(p, lon, lat)
        factor.setflags(write=False)
        with _FIXED_LOCK:
            _SSTAR[key] = factor
            while len(_SSTAR) > _FIXED_SIZE:
                _SSTAR.pop(next(iter(_SSTAR)))
    return factor


def _track_below_stations(
    p: np.ndarray, bottom: np.ndarray, bathymetry: list | None
) -> dict[int, float]:
    """Pairs whose bathymetry track lies deeper than both stations, with its deepest pressure.

    Parameters
    ----------
    p : ndarray (level,)
        Grid, dbar.
    bottom : ndarray (station,)
        Sea-floor pressure of each station, dbar.
    bathymetry : list or None
        Per pair, sampled sea-floor pressures along the pair (dbar), or None.

    Returns
    -------
    dict of int -> float
        Pair index -> deepest track pressure, dbar.
    """
    out: dict[int, float] = {}
    if bathymetry is None:
        return out
    for j, samples in enumerate(bathymetry):
        if samples is None:
            continue
        deepest_track = float(np.max(samples))
        if deepest_track > max(bottom[j], bottom[j + 1]) + 1e-6:
            out[j] = deepest_track
    return out


def _tail_thickness(
    p: np.ndarray, deepest: np.ndarray, bottom: np.ndarray, lat: np.ndarray
) -> np.ndarray:
    """Thickness (m) between each pair's deepest level and the deeper sea floor.

    The sliver is less than one grid step; it is integrated with the last
    level's value and the width fraction at its mid-pressure (zero for a
    straight sloping bottom, one for a flat one).
    """
    deep_bottom = np.maximum(bottom[:-1], bottom[1:])
    shallow_bottom = np.minimum(bottom[:-1], bottom[1:])
    p_last = p[np.clip(deepest, 0, None)]
    p_end = np.maximum(deep_bottom, p_last)
    mid = 0.5 * (p_last + p_end)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(
            deep_bottom > shallow_bottom,
            np.clip((deep_bottom - mid) / (deep_bottom - shallow_bottom), 0.0, 1.0),
            1.0,
        )
    dz = gsw.z_from_p(p_last, lat) - gsw.z_from_p(p_end, lat)
    return np.broadcast_to(dz * frac, deepest.shape)


def _ekman_levels(p: np.ndarray, lat: np.ndarray, depth: float) -> int:
    """Number of grid levels that cover the Ekman layer of every pair (and one more)."""
    n_lev = int(np.searchsorted(p, gsw.p_from_z(-depth, float(np.max(np.abs(lat))))) + 2)
    return min(max(n_lev, 2), p.size)


def _quantities(rho: np.ndarray, sa: np.ndarray, ct: np.ndarray, levels: slice
                ) -> dict[str, np.ndarray]:
    """Each transported quantity per m^3 s^-1 of volume transport on some levels (NaN as 0)."""
    rho0 = _masked(rho[..., levels])
    sa0 = _masked(sa[..., levels])
    ct0 = _masked(ct[..., levels])
    return {"volume": np.ones_like(rho0), "mass": rho0 / RHO0, "salt": rho0 * sa0 / RHO0,
            "heat": rho0 * CP0 * ct0}


_FIXED: dict[tuple, tuple[xr.Dataset, np.ndarray, np.ndarray]] = {}
_FIXED_LOCK = threading.Lock()
_FIXED_SIZE = 4


def clear_kept_parts() -> None:
    """Forget the position-only parts kept between builds (geometry, cell heights, S*/SA).

    Builds then compute them again, as the first build of a section does.
    """
    with _FIXED_LOCK:
        _FIXED.clear()
        _SSTAR.clear()


def _fixed_parts(section: xr.Dataset, p: np.ndarray, bottom: np.ndarray, bathymetry: list | None
                 ) -> tuple[xr.Dataset, np.ndarray, np.ndarray]:
    """Pair geometry, cell thickness and bottom width fraction of a section.

    They depend on positions, bottoms and the grid only, which ensemble members
    and repeated builds share: the last few are kept, keyed by the values
    themselves (never by identity). The same geometry Dataset then serves every
    operator of those positions: its arrays and the cell arrays are read-only.
    """
    var = section.variables
    key = (var["lon"].values.tobytes(), var["lat"].values.tobytes(),
           var["station"].values.tobytes(), bottom.tobytes(), p.tobytes(),
           None if bathymetry is None else tuple(
               None if t is None else np.asarray(t, float).tobytes() for t in bathymetry))
    with _FIXED_LOCK:
        hit = _FIXED.pop(key, None)
        if hit is not None:
            _FIXED[key] = hit  # most recently used last
    if hit is None:
        geometry = pair_geometry(section)
        thickness = cell_thickness(p, geometry.variables["lat"].values)
        width = bottom_width_fraction(p, bottom[:-1], bottom[1:], bathymetry)
        thickness.setflags(write=False)
        width.setflags(write=False)
        for variable in geometry.variables.values():
            if not isinstance(variable, xr.IndexVariable):
                variable.values.setflags(write=False)  # shared by the builds that read it
        hit = (geometry, thickness, width)
        with _FIXED_LOCK:
            _FIXED[key] = hit
            while len(_FIXED) > _FIXED_SIZE:
                _FIXED.pop(next(iter(_FIXED)))
    geometry, thickness, width = hit
    return geometry, thickness, width


def _class_integrals(levels: ClassLevels, v: np.ndarray, response: np.ndarray, rho: np.ndarray,
                     sa: np.ndarray, ct: np.ndarray) -> np.ndarray:
    """Depth integrals over every class of the 13 fields of the operator, per pair.

    Fields: v, v rho/RHO0, v rho S/RHO0, v rho c_p0 CT (relative transports), the
    same with the response instead of v (areas), then 1, S, S^2, CT, CT^2. One
    compiled pass over the levels (:func:`_class_integral_pass`):
    each level adds its weight times the fields to its class, a level where v,
    the response or rho is NaN to none; the split cells are added from
    ``levels``' split weights. Equal to numpy's sums over the dense weights to
    round-off (the sums run level by level).

    Parameters
    ----------
    levels : ClassLevels
        Class weights of the (..., pair, level) grid.
    v : ndarray (..., pair, level)
        Velocity relative to the surface, extended into bottom triangles, m s^-1.
    response : ndarray (..., pair, level)
        Velocity per m s^-1 of reference velocity (1 or 0), dimensionless.
    rho : ndarray (..., pair, level)
        Pair-mean in-situ density, kg m^-3.
    sa : ndarray (..., pair, level)
        Pair-mean salinity of the salt budgets (S* or SA), g/kg.
    ct : ndarray (..., pair, level)
        Pair-mean Conservative Temperature, degC.

    Returns
    -------
    ndarray (..., pair, class, 13)
        Integrals per metre of pair width (field unit times m).
    """
    shape = v.shape
    n_lev = shape[-1]

    def rows(a: np.ndarray, name: str, dtype: type = float) -> np.ndarray:
        a = np.asarray(a, dtype=dtype)
        if a.shape != shape:  # the kernel reads every row of every field
            raise ComputationError(f"_class_integrals: {name} has shape {a.shape}; expected "
                                   f"{shape} (as v)")
        return np.ascontiguousarray(a.reshape(-1, n_lev))

    idx = levels.split_index
    split_row = (np.ravel_multi_index(idx[:-2], shape[:-1]) if len(idx) > 2
                 else np.zeros(idx[-1].size, dtype=np.intp))
    out = _class_integral_pass(
        rows(levels.level_class, "level_class", np.int8),
        rows(levels.level_weight, "level_weight"), rows(v, "v"), rows(response, "response"),
        rows(rho, "rho"), rows(sa, "sa"), rows(ct, "ct"),
        split_row, idx[-2], idx[-1], levels.split_weight, levels.n_class, RHO0, CP0)
    return out.reshape(shape[:-1] + (levels.n_class, 13))


#: Fields of :func:`_class_integral_pass`, in order.
INTEGRAL_FIELDS = ("v", "v m", "v m S", "v h", "r", "r m", "r m S", "r h",
                   "1", "S", "S^2", "CT", "CT^2")


@kernel
def _class_integral_pass(level_class, level_weight, v, response, rho, salinity, ct,
                         split_row, split_class, split_level, split_weight, n_class, rho0, cp0):
    """Depth integrals over every class of the 13 fields of the operator, per row.

    Fields (``INTEGRAL_FIELDS``): with ``m = rho / rho0`` and
    ``h = rho cp0 CT``, ``v``, ``v m``, ``v m S``, ``v h``, the same four with
    the response ``r`` instead of ``v``, then ``1``, ``S``, ``S^2``, ``CT``,
    ``CT^2``. Each level adds ``level_weight`` times the fields to its class
    (a level where ``v``, ``r`` or ``rho`` is NaN, or of class ``n_class``,
    to none); a run of levels of one class is summed level by level, then
    added to its class; the split cells are added last, in their order.

    Parameters
    ----------
    level_class : ndarray (row, level) of int8
        Class of each level (``n_class``: none).
    level_weight : ndarray (row, level)
        Weight of each level in its class, m.
    v, response, rho, salinity, ct : ndarray (row, level)
        Velocity (m s^-1), response (1), in-situ density (kg m^-3), salinity
        (g/kg) and CT (degC).
    split_row, split_class, split_level : ndarray (split,) of int
        Row, class and level of each split-cell weight.
    split_weight : ndarray (split,)
        The weights, m.
    n_class : int
        Number of classes.
    rho0 : float
        Reference density, kg m^-3.
    cp0 : float
        Heat capacity, J kg^-1 K^-1.

    Returns
    -------
    ndarray (row, class, 13)
        Integrals, field unit times m.
    """
    n_row, n_lev = v.shape
    out = np.zeros((n_row, n_class, 13))
    acc = np.empty(13)
    for r in range(n_row):
        run = -1  # class of the run being summed (-1: none yet)
        first = True
        for k in range(n_lev + 1):
            c = n_class
            if k < n_lev:
                vv = v[r, k]
                rr = response[r, k]
                rh = rho[r, k]
                if not (math.isnan(vv) or math.isnan(rr) or math.isnan(rh)):
                    c = level_class[r, k]
            if c != run or k == n_lev:
                if 0 <= run < n_class:
                    for f in range(13):
                        out[r, run, f] += acc[f]
                run = c
                first = True
            if c >= n_class:
                continue
            tw = level_weight[r, k]
            ss = salinity[r, k]
            cc = ct[r, k]
            mass = rh / rho0
            salt = mass * ss
            heat = rh * cp0
            heat = heat * cc
            y0 = tw * vv
            y4 = tw * rr
            y9 = tw * ss
            y11 = tw * cc
            if first:
                acc[0] = y0
                acc[1] = y0 * mass
                acc[2] = y0 * salt
                acc[3] = y0 * heat
                acc[4] = y4
                acc[5] = y4 * mass
                acc[6] = y4 * salt
                acc[7] = y4 * heat
                acc[8] = tw
                acc[9] = y9
                acc[10] = y9 * ss
                acc[11] = y11
                acc[12] = y11 * cc
                first = False
            else:
                acc[0] += y0
                acc[1] += y0 * mass
                acc[2] += y0 * salt
                acc[3] += y0 * heat
                acc[4] += y4
                acc[5] += y4 * mass
                acc[6] += y4 * salt
                acc[7] += y4 * heat
                acc[8] += tw
                acc[9] += y9
                acc[10] += y9 * ss
                acc[11] += y11
                acc[12] += y11 * cc
    for i in range(split_weight.size):
        r = split_row[i]
        k = split_level[i]
        c = split_class[i]
        w = split_weight[i]
        rh = rho[r, k]
        sa = salinity[r, k]
        cc = ct[r, k]
        mm = rh / rho0
        ss = mm * sa
        hh = rh * cp0 * cc
        vv = v[r, k] * w
        rr = response[r, k] * w
        sa_w = sa * w
        ct_w = cc * w
        out[r, c, 0] += vv
        out[r, c, 1] += vv * mm
        out[r, c, 2] += vv * ss
        out[r, c, 3] += vv * hh
        out[r, c, 4] += rr
        out[r, c, 5] += rr * mm
        out[r, c, 6] += rr * ss
        out[r, c, 7] += rr * hh
        out[r, c, 8] += w
        out[r, c, 9] += sa_w
        out[r, c, 10] += sa_w * sa
        out[r, c, 11] += ct_w
        out[r, c, 12] += ct_w * cc
    return out


def ekman_class_share(
    sigma_if: list[np.ndarray],
    values: np.ndarray,
    p: np.ndarray,
    lat: np.ndarray,
    depth: float,
    props: dict[str, np.ndarray],
) -> tuple[np.ndarray, np.ndarray]:
    """Per unit Ekman volume transport, the amount of each property carried in each class.

    The Ekman transport is spread uniformly over the top ``depth`` metres of
    each pair (common practice) and split among the density classes found
    there with the same fractional-cell weights as the geostrophic part
    (:func:`sectionkit.layers.class_levels`). The salt, heat and tracer
    parts of a section's Ekman transport all come from here.

    Parameters
    ----------
    sigma_if : list of ndarray (..., pair, level)
        Pair-mean potential density anomaly at each interface's reference
        pressure, kg m^-3 (one array per interface; one array and
        ``values = [1e9]`` when there are no interfaces).
    values : ndarray (interface,)
        Interface values, kg m^-3.
    p : ndarray (level,)
        Pressure grid, dbar.
    lat : ndarray (pair,)
        Pair mid-point latitude, degrees_north.
    depth : float
        Ekman layer depth, m.
    props : dict of str -> ndarray (..., pair, level)
        Pair-mean property per unit volume transport (1 for volume, rho/rho0
        for mass, kg m^-3 times a concentration for a tracer), any unit.

    Returns
    -------
    share : ndarray (..., property, pair, class)
        Property carried in each class per m^3 s^-1 of Ekman transport of the
        pair, in the unit of ``props``; 0 where the pair has no water in the
        Ekman layer.
    level : ndarray (..., pair, level)
        Fraction of the pair's Ekman transport at each grid level, 1.
    """
    n_lev = _ekman_levels(p, lat, depth)
    z = -gsw.z_from_p(p[None, :n_lev], lat[:, None])  # depth, m (pair, level)
    seg_top = z[:, :-1]
    seg_bot = z[:, 1:]
    inside = np.clip((depth - seg_top) / (seg_bot - seg_top), 0.0, 1.0)
    thickness = seg_bot - seg_top
    w = class_levels([face[..., :n_lev] for face in sigma_if], values, thickness,
                     inside).dense()
    if values.size == 1 and values[0] >= 1e9:  # no interfaces: a single class
        w = w[..., :1, :]
    total = w.sum(axis=(-2, -1))  # (..., pair)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = [
            np.einsum("...jik,...jk->...ji", w, q[..., :n_lev]) / total[..., None]
            for q in props.values()
        ]
    column = w.sum(axis=-2)
    level = np.zeros(column.shape[:-1] + (p.size,))
    with np.errstate(invalid="ignore", divide="ignore"):
        level[..., :n_lev] = np.nan_to_num(column / total[..., None])
    return np.nan_to_num(np.stack(share, axis=-3)), level
