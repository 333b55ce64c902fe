"""Thin xarray wrappers: section budgets for Datasets with extra leading dimensions.

The engine's kernels take ``SA`` and ``CT`` as ``(..., station, pressure)``
arrays and broadcast any leading dimensions. This module adds the two upper
tiers of the style guide on top of them:

1. :func:`budget_kernel` — a numpy kernel running the whole chain
   (operator, references, Ekman, and the outputs of
   :func:`sectionkit.budget.section_values`) on plain arrays.
2. :func:`section_budget` — the xarray wrapper: ``xr.apply_ufunc`` with
   ``dask="parallelized"``, core dimensions ``station`` and ``pressure``, new
   output dimensions ``pair``, ``class`` and ``interface``. A section whose
   ``SA``/``CT`` carry leading dimensions (``time``, ``member``) gives every
   output with those dimensions; on dask arrays the result is lazy, one task
   per chunk, and runs on a ``dask.distributed`` cluster unchanged.
3. :func:`budget_from_config` — the user-facing call: a section Dataset and
   a :class:`~sectionkit.config.Config` (optionally the solved inverse's
   adjustments).

Station positions, bottom pressures and the pressure grid are those of the
section and do not vary along the leading dimensions (a fixed station grid,
as for repeated occupations or model output along a fixed line).

The numbers are those of :func:`sectionkit.budget.section_values` (the
definitions behind :func:`sectionkit.budget.section_outputs`) at the given
state, so without leading dimensions they equal
:meth:`sectionkit.study.Results.value`. Reference fall-backs (a reference
deeper than a pair) are applied as in the engine but not reported as
cautions here: the kernel runs inside dask tasks.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from sectionkit.budget import section_values
from sectionkit.config import Config
from sectionkit.errors import ConfigError, SectionDataError
from sectionkit.geometry import pair_geometry
from sectionkit.geostrophy import ReferenceChoice
from sectionkit.labels import split_pair_label
from sectionkit.layers import Interface, check_interfaces
from sectionkit.operator import build_operator
from sectionkit.outputs import KERNEL_OUTPUTS, OutputSpec

__all__ = [
    "OUTPUTS",
    "OutputSpec",
    "budget_from_config",
    "budget_kernel",
    "section_budget",
]

CORE_DIMS = ("station", "pressure")


#: Every output of :func:`budget_kernel`, in the order the wrapper returns them
#: (the registry :data:`sectionkit.outputs.KERNEL_OUTPUTS`).
OUTPUTS: tuple[OutputSpec, ...] = KERNEL_OUTPUTS


ReferenceLike = ReferenceChoice | float | str


# --------------------------------------------------------------------- kernels
def _pair_choices(
    reference: ReferenceLike | Sequence[ReferenceLike],
    overrides: Mapping[int, ReferenceLike] | None,
    n_pair: int,
) -> list[ReferenceChoice]:
    """One ReferenceChoice per pair from a global choice (or a list) plus overrides."""

    def as_choice(value: ReferenceLike) -> ReferenceChoice:
        if isinstance(value, ReferenceChoice):
            return value
        if isinstance(value, str):
            if value in ("deepest_common", "bottom"):  # "bottom": the old name
                return ReferenceChoice("bottom")
            raise ConfigError(f'reference {value!r}: use a pressure in dbar, "deepest_common" '
                              "or a ReferenceChoice")
        return ReferenceChoice("pressure", pressure=float(value))

    if isinstance(reference, ReferenceChoice | str | float | int):
        choices = [as_choice(reference)] * n_pair
    else:
        choices = [as_choice(r) for r in reference]
        if len(choices) != n_pair:
            raise ConfigError(f"{len(choices)} references given for {n_pair} station pairs")
    for k, value in (overrides or {}).items():
        if not 0 <= int(k) < n_pair:
            raise ConfigError(f"reference override for pair {k}: the section has pairs "
                              f"0..{n_pair - 1}")
        choices[int(k)] = as_choice(value)
    return choices


def _as_section(
    sa: np.ndarray,
    ct: np.ndarray,
    pressure: np.ndarray,
    lon: np.ndarray,
    lat: np.ndarray,
    bottom_pressure: np.ndarray,
    station: Sequence[str] | None,
    name: str,
) -> xr.Dataset:
    """A canonical section Dataset around plain arrays (leading dims named lead0, ...)."""
    lead = tuple(f"lead{i}" for i in range(sa.ndim - 2))
    n_station = sa.shape[-2]
    ids = [str(i + 1) for i in range(n_station)] if station is None else list(station)
    return xr.Dataset(
        {
            "SA": (lead + CORE_DIMS, sa),
            "CT": (lead + CORE_DIMS, ct),
            "lon": ("station", np.asarray(lon, dtype=float)),
            "lat": ("station", np.asarray(lat, dtype=float)),
            "bottom_pressure": ("station", np.asarray(bottom_pressure, dtype=float)),
        },
        coords={"pressure": np.asarray(pressure, dtype=float), "station": ids},
        attrs={"section": name},
    )


def budget_kernel(
    sa: np.ndarray,
    ct: np.ndarray,
    adjustment: np.ndarray | float = 0.0,
    stress: np.ndarray | Sequence[float] = (0.0, 0.0),
    *,
    pressure: np.ndarray,
    lon: np.ndarray,
    lat: np.ndarray,
    bottom_pressure: np.ndarray,
    interfaces: Sequence[Interface],
    layer_names: Sequence[str] | None = None,
    reference: ReferenceLike | Sequence[ReferenceLike] = 3000.0,
    overrides: Mapping[int, ReferenceLike] | None = None,
    bottom_triangle: str = "constant",
    ekman_depth: float = 50.0,
    reference_salinity: float | None = None,
    bathymetry: list | None = None,
    max_dp: float = 1.0,
    station: Sequence[str] | None = None,
    salinity: str = "preformed",
    name: str = "section",
) -> dict[str, np.ndarray]:
    """The whole chain on plain arrays: operator, references, Ekman, outputs.

    Parameters
    ----------
    sa : ndarray (..., station, pressure)
        Absolute Salinity, g/kg; NaN below each station's bottom.
    ct : ndarray (..., station, pressure)
        Conservative Temperature, degC; NaN below each station's bottom.
    adjustment : ndarray (..., pair) or float
        Reference-velocity adjustment added to every pair's reference, m s^-1.
    stress : array_like (..., 2)
        Wind stress (east, north), N m^-2.
    pressure : ndarray (pressure,)
        Pressure grid, dbar.
    lon, lat : ndarray (station,)
        Station positions, degrees_east and degrees_north.
    bottom_pressure : ndarray (station,)
        Sea-floor pressure of each station, dbar.
    interfaces : sequence of Interface
        Class interfaces, light to dense.
    layer_names : sequence of str, optional
        One name per class.
    reference : ReferenceChoice, float, "deepest_common", or a sequence of them per pair
        Reference of every pair (a float is a level of no motion in dbar).
    overrides : mapping of int -> reference, optional
        Per-pair exceptions (0-based pair index).
    bottom_triangle : {"constant", "zero", "shear"}
        Velocity rule below each pair's deepest common level.
    ekman_depth : float
        Depth of the Ekman layer, m.
    reference_salinity : float, optional
        Freshwater reference salinity, g/kg (area mean when None).
    bathymetry : list, optional
        Per-pair sea-floor pressures along the pair, dbar (see
        :func:`sectionkit.operator.build_operator`).
    max_dp : float
        Integration step of gsw's dynamic height, dbar.
    station : sequence of str, optional
        Station ids.
    name : str
        Section name (for messages).
    salinity : {"preformed", "absolute"}
        Salinity of the salt and freshwater transports (see
        :func:`sectionkit.operator.build_operator`).

    Returns
    -------
    dict of str -> ndarray
        Every output of :data:`OUTPUTS`, leading dimensions first (the
        broadcast of those of ``sa``, ``ct``, ``adjustment`` and ``stress``).
    """
    sa, ct = np.broadcast_arrays(np.asarray(sa, dtype=float), np.asarray(ct, dtype=float))
    adjustment = np.asarray(adjustment, dtype=float)
    stress = np.asarray(stress, dtype=float)
    section = _as_section(sa, ct, pressure, lon, lat, bottom_pressure, station, name)
    op = build_operator(section, list(interfaces), list(layer_names) if layer_names else None,
                        bottom_triangle=bottom_triangle, ekman_depth=ekman_depth,
                        bathymetry=bathymetry, max_dp=max_dp, salinity=salinity)
    choices = _pair_choices(reference, overrides, op.n_pair)
    p_used, offset = op.resolve_references(choices)
    ek = op.ekman_volume(stress[..., 0], stress[..., 1])
    out = section_values(op, offset, adjustment, ek, reference_salinity)
    out["reference_pressure"] = p_used
    lead = np.broadcast_shapes(sa.shape[:-2], adjustment.shape[:-1], stress.shape[:-1])
    for spec in OUTPUTS:
        value = out[spec.name]
        core = value.shape[value.ndim - len(spec.dims):] if spec.dims else ()
        out[spec.name] = np.broadcast_to(value, lead + core)
    return out


def _kernel_tuple(*args: np.ndarray, **kwargs: Any) -> tuple[np.ndarray, ...]:
    out = budget_kernel(*args, **kwargs)
    return tuple(np.array(out[spec.name], dtype=float) for spec in OUTPUTS)


# --------------------------------------------------------------------- wrapper
def _is_dask(da: xr.DataArray) -> bool:
    return da.chunks is not None


def _static(section: xr.Dataset, name: str) -> np.ndarray:
    """A per-station variable that must not vary along leading dimensions."""
    da = section[name]
    if da.dims != ("station",):
        raise SectionDataError(
            f"section variable {name!r} has dimensions {da.dims}; it must be per station "
            "(dimension 'station' only) — leading dimensions are allowed on SA and CT, "
            "stations stay fixed"
        )
    return np.asarray(da.values, dtype=float)


def _stress_array(stress: Any) -> xr.DataArray:
    if isinstance(stress, xr.DataArray):
        if "component" not in stress.dims or stress.sizes["component"] != 2:
            raise ConfigError("a wind-stress DataArray needs a dimension 'component' of size 2 "
                              f"(east, north) in N m^-2; got dimensions {stress.dims}")
        return stress.astype(float)
    values = np.asarray(stress, dtype=float)
    if values.shape != (2,):
        raise ConfigError(f"wind stress must be (east, north) in N m^-2; got {stress!r}")
    return xr.DataArray(values, dims=("component",))


def _adjustment_array(adjustment: Any, n_pair: int) -> xr.DataArray:
    if adjustment is None:
        return xr.DataArray(np.zeros(n_pair), dims=("pair",))
    if isinstance(adjustment, xr.DataArray):
        if "pair" not in adjustment.dims or adjustment.sizes["pair"] != n_pair:
            raise ConfigError(f"the adjustment needs a dimension 'pair' of size {n_pair}; "
                              f"got dimensions {dict(adjustment.sizes)}")
        return adjustment.astype(float)
    values = np.asarray(adjustment, dtype=float)
    if values.ndim == 0:
        values = np.full(n_pair, float(values))
    if values.shape != (n_pair,):
        raise ConfigError(f"the adjustment must have one value per pair ({n_pair}); got shape "
                          f"{values.shape}")
    return xr.DataArray(values, dims=("pair",))


def section_budget(
    section: xr.Dataset,
    interfaces: Sequence[Interface],
    layer_names: Sequence[str] | None = None,
    *,
    reference: ReferenceLike | Sequence[ReferenceLike] = 3000.0,
    overrides: Mapping[int, ReferenceLike] | None = None,
    bottom_triangle: str = "constant",
    ekman_depth: float = 50.0,
    stress: xr.DataArray | Sequence[float] = (0.0, 0.0),
    adjustment: xr.DataArray | np.ndarray | float | None = None,
    reference_salinity: float | None = None,
    bathymetry: list | None = None,
    max_dp: float = 1.0,
    salinity: str = "preformed",
) -> xr.Dataset:
    """Class transports, net, heat, freshwater and overturning of a section.

    ``SA`` and ``CT`` may carry any leading dimensions (``time``,
    ``member``, ...); every output then carries them too. On dask-backed
    data the result is lazy (``dask="parallelized"``: one kernel call per
    chunk of the leading dimensions; ``station`` and ``pressure`` are put in
    one chunk each).

    Parameters
    ----------
    section : xr.Dataset
        Canonical section (docs/CONTRACTS-INTERNAL.md) with ``SA`` (g/kg) and
        ``CT`` (degC) on (..., station, pressure); ``lon``, ``lat``
        (degrees) and ``bottom_pressure`` (dbar) per station.
    interfaces : sequence of Interface
        Class interfaces, light to dense.
    layer_names : sequence of str, optional
        One name per class (``class_0`` ... when not given).
    reference : ReferenceChoice, float, "deepest_common", or a sequence per pair
        Reference of every pair; a float is a level of no motion in dbar.
    overrides : mapping of int -> reference, optional
        Per-pair exceptions by 0-based pair index.
    bottom_triangle : {"constant", "zero", "shear"}
        Velocity rule below each pair's deepest common level.
    ekman_depth : float
        Depth of the Ekman layer, m.
    stress : xr.DataArray or (east, north)
        Uniform wind stress along the section, N m^-2; a DataArray with a
        ``component`` dimension (east, north) may add leading dimensions
        (e.g. a stress time series). Multiply it by ``1 + e`` to apply an
        inverse's fractional Ekman adjustment ``e``.
    adjustment : xr.DataArray, ndarray or float, optional
        Reference-velocity adjustment of each pair (dimension ``pair``,
        possibly with leading dimensions), m s^-1.
    reference_salinity : float, optional
        Freshwater reference salinity, g/kg (the section's area mean when None).
    bathymetry : list, optional
        Per-pair sampled sea-floor pressures (dbar) for the bottom triangles.
    max_dp : float
        Integration step of gsw's dynamic height, dbar.
    salinity : {"preformed", "absolute"}
        Salinity of the salt and freshwater transports: Preformed Salinity S*
        (TEOS-10, conserved) or Absolute Salinity.

    Returns
    -------
    xr.Dataset
        The variables of :data:`OUTPUTS` with ``units`` and ``long_name``;
        coordinates ``layer`` (class names), ``pair`` (0-based) with the
        mid-point ``pair_lon``/``pair_lat``, ``interface`` (labels) and
        ``pressure``. Transports are positive to the left of increasing
        station order.
    """
    for var in ("SA", "CT"):
        if var not in section:
            raise SectionDataError(f"the section has no variable {var!r}; expected the "
                                   "canonical section of docs/CONTRACTS-INTERNAL.md")
        missing = [d for d in CORE_DIMS if d not in section[var].dims]
        if missing:
            raise SectionDataError(f"section variable {var!r} has dimensions "
                                   f"{section[var].dims}; it needs 'station' and 'pressure'")
    names = check_interfaces(list(interfaces), list(layer_names) if layer_names else None)
    n_station = section.sizes["station"]
    if n_station < 2:
        raise SectionDataError(f"the section has {n_station} station(s); at least 2 are needed")
    n_pair = n_station - 1
    sa, ct = section["SA"], section["CT"]
    if _is_dask(sa) or _is_dask(ct):
        sa = sa.chunk({"station": -1, "pressure": -1})
        ct = ct.chunk({"station": -1, "pressure": -1})
    static = {
        "pressure": np.asarray(section["pressure"].values, dtype=float),
        "lon": _static(section, "lon"),
        "lat": _static(section, "lat"),
        "bottom_pressure": _static(section, "bottom_pressure"),
        "interfaces": list(interfaces),
        "layer_names": names,
        "reference": reference,
        "overrides": dict(overrides or {}),
        "bottom_triangle": bottom_triangle,
        "ekman_depth": float(ekman_depth),
        "reference_salinity": reference_salinity,
        "bathymetry": bathymetry,
        "max_dp": float(max_dp),
        "salinity": salinity,
        "station": [str(s) for s in section["station"].values],
        "name": str(section.attrs.get("section", "section")),
    }
    n_class = len(names) if interfaces else 1
    results = xr.apply_ufunc(
        _kernel_tuple,
        sa,
        ct,
        _adjustment_array(adjustment, n_pair),
        _stress_array(stress),
        input_core_dims=[list(CORE_DIMS), list(CORE_DIMS), ["pair"], ["component"]],
        output_core_dims=[list(spec.dims) for spec in OUTPUTS],
        kwargs=static,
        dask="parallelized",
        output_dtypes=[float] * len(OUTPUTS),
        dask_gufunc_kwargs={
            "output_sizes": {"pair": n_pair, "class": n_class,
                             "interface": len(interfaces)}
        },
        keep_attrs=False,
    )
    geometry = pair_geometry(section[["lon", "lat"]])
    data = {}
    for spec, value in zip(OUTPUTS, results, strict=True):
        # CF / UDUNITS units that unit libraries read ("Sv" is the sievert to them)
        data[spec.name] = value.assign_attrs(units=spec.units, display_units=spec.display,
                                             long_name=spec.long_name)
    ds = xr.Dataset(data)
    coords: dict[str, Any] = {
        "class": ("class", names[:n_class], {"long_name": "density class, light to dense"}),
        "pair": ("pair", np.arange(n_pair), {"long_name": "station pair (k between stations "
                                                          "k and k+1)"}),
        "pair_lon": ("pair", geometry["lon"].values, {"units": "degrees_east"}),
        "pair_lat": ("pair", geometry["lat"].values, {"units": "degrees_north"}),
        "interface": ("interface", [face.label() for face in interfaces],
                      {"long_name": "class interface, potential density anomaly kg m-3"}),
        "pressure": section["pressure"],
    }
    ds = ds.assign_coords(coords)
    for lead in set(section["SA"].dims) - set(CORE_DIMS):
        if lead in section.coords:
            ds = ds.assign_coords({lead: section[lead]})
    ds.attrs.update(
        section=static["name"],
        sign_convention="positive to the left of increasing station order",
        bottom_triangle=bottom_triangle,
        salinity=salinity,
    )
    return ds


# --------------------------------------------------------------------- user call
def budget_from_config(
    section: xr.Dataset,
    config: Config,
    name: str | None = None,
    *,
    results: Any | None = None,
    adjustment: xr.DataArray | np.ndarray | float | None = None,
    stress: xr.DataArray | Sequence[float] | None = None,
    bathymetry: list | None = None,
) -> xr.Dataset:
    """Budgets of one configured section, with any leading dimensions.

    Parameters
    ----------
    section : xr.Dataset
        Canonical section, ``SA``/``CT`` possibly with leading dimensions
        (e.g. a model-output section with ``time``).
    config : Config
        The study configuration: classes, reference and overrides, bottom
        triangle, Ekman depth and stress, freshwater reference salinity.
    name : str, optional
        The section's name in the configuration (default: the ``section``
        attribute, else the first configured section).
    results : sectionkit.study.Results, optional
        A solved study; its pair adjustments and fractional Ekman adjustment
        of this section are applied (the adjusted state).
    adjustment : xr.DataArray, ndarray or float, optional
        Pair adjustments, m s^-1 (instead of ``results``).
    stress : xr.DataArray or (east, north), optional
        Wind stress, N m^-2, replacing the configured one.
    bathymetry : list, optional
        Per-pair sampled sea-floor pressures, dbar.

    Returns
    -------
    xr.Dataset
        As :func:`section_budget`.
    """
    known = config.section_names()
    if name is None:
        name = str(section.attrs.get("section", "")) or (known[0] if known else "section")
        if known and name not in known:
            name = known[0]
    elif known and name not in known:
        raise ConfigError(f"section {name!r} is not in the configuration "
                          f"(sections: {', '.join(known)})")
    n_pair = section.sizes["station"] - 1
    overrides = {}
    for label, choice in config.overrides.items():
        sec, k = split_pair_label(label)
        if sec == name and k is not None:
            overrides[k] = choice
    tau: Any = config.ekman_stress.get(name, (0.0, 0.0)) if stress is None else stress
    if results is not None:
        layout = results.layout
        sl = layout.pair_slices[name]
        if sl.stop - sl.start != n_pair:
            raise ConfigError(f"the results hold {sl.stop - sl.start} pairs for section "
                              f"{name!r} but the section has {n_pair}")
        adjustment, factor = layout.section_adjustment(name, results.estimate)
        if factor != 1.0:
            tau = (_stress_array(tau) * factor) if isinstance(tau, xr.DataArray) else (
                tau[0] * factor, tau[1] * factor)
    return section_budget(
        section.assign_attrs(section=name),
        config.interfaces,
        config.layer_names,
        reference=config.reference,
        overrides=overrides,
        bottom_triangle=config.bottom_triangle,
        ekman_depth=config.ekman_depth,
        stress=tau,
        adjustment=adjustment,
        reference_salinity=config.reference_salinity,
        bathymetry=bathymetry,
        salinity=config.salt_salinity,
    )
