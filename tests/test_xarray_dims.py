"""Extra leading dimensions (time, member) through the xarray wrappers, eager and on dask.

The facts checked: every leading element of a stacked section gives the same
budget as that section alone; a dask-chunked section gives the eager numpy
result (to 1e-12, relative); without leading dimensions the wrappers give
the study's own numbers; a model-output line on a fixed station grid gives
time series; Ekman volume follows -(tau . t) L / (rho0 f).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from _synthetic import synthetic_model_output, synthetic_section

from sectionkit.config import Config, parse_config
from sectionkit.geometry import pair_geometry
from sectionkit.modelsection import model_section, section_time_series
from sectionkit.operator import RHO0
from sectionkit.outputs import udunits
from sectionkit.study import Study
from sectionkit.xr import OUTPUTS, budget_from_config

dask = pytest.importorskip("dask")

LAYERS = ["upper", "intermediate", "deep"]


def _config(**reference) -> Config:
    ref = {"pressure": 3000.0, "bottom_triangle": "shear",
           "overrides": {"south:2": "bottom", "south:4": {"sigma": 36.95, "p_ref": 2000.0}}}
    ref.update(reference)
    return parse_config({
        "grid": {"dp": 20.0},
        "sections": [{"name": "south", "file": "south.nc"},
                     {"name": "north", "file": "north.nc", "into_box": False}],
        "reference": ref,
        "ekman": {"stress": {"south": [0.06, 0.01]}},
        "classes": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0},
                                  {"sigma": 36.95, "p_ref": 2000.0}],
                   "names": LAYERS},
        "inverse": {"conserve": ["mass", "salt"], "noise_class": [1.0, 0.5, 0.5],
                    "prior_velocity": 0.01},
    })


def _sections() -> dict[str, xr.Dataset]:
    return {"south": synthetic_section(9, 20.0, 5000.0, lat=28.0, seed=1, name="south", noise=20),
            "north": synthetic_section(11, 20.0, 5000.0, lat=34.0, seed=2, name="north",
                                       noise=20)}


def _stacked(section: xr.Dataset, n_member: int = 3, n_time: int = 8) -> xr.Dataset:
    """The section repeated along (member, time) with small, different perturbations.

    SA varies along member and time, CT only along time, so the wrapper must
    broadcast inputs with different leading dimensions.
    """
    rng = np.random.default_rng(5)
    sa = section["SA"].values
    ct = section["CT"].values
    out = section.copy()
    out["SA"] = (("member", "time", "station", "pressure"),
                 sa + 0.003 * rng.standard_normal((n_member, n_time, sa.shape[0], 1)))
    out["CT"] = (("time", "station", "pressure"),
                 ct + 0.05 * rng.standard_normal((n_time, ct.shape[0], 1)))
    return out.assign_coords(member=np.arange(n_member), time=np.arange(n_time))


def _max_rel(a: np.ndarray, b: np.ndarray) -> float:
    a, b = np.asarray(a, float), np.asarray(b, float)
    assert np.array_equal(np.isnan(a), np.isnan(b))
    scale = max(float(np.nanmax(np.abs(a))), 1e-300)
    return float(np.nanmax(np.abs(a - b))) / scale if a.size else 0.0


def test_leading_dimensions_pass_through_with_units_and_layer_names():
    cfg = _config()
    ds = _stacked(_sections()["south"])
    out = budget_from_config(ds, cfg, "south")
    assert out["volume_transport"].dims == ("member", "time", "class")
    assert out["pair_volume_transport"].dims == ("member", "time", "pair", "class")
    assert out["net"].dims == ("member", "time")
    assert out["psi_depth"].dims == ("member", "time", "pressure")
    assert out["psi_density"].dims == ("member", "time", "interface")
    assert list(out["class"].values) == LAYERS
    assert out.sizes["pair"] == ds.sizes["station"] - 1
    for spec in OUTPUTS:
        assert out[spec.name].attrs["units"] == udunits(spec.display)  # CF spelling, never Sv
        assert out[spec.name].attrs["display_units"] == spec.display
    assert np.all(np.isfinite(out["volume_transport"].values))


def test_each_leading_element_equals_its_section_alone():
    cfg = _config()
    south = _sections()["south"]
    ds = _stacked(south)
    out = budget_from_config(ds, cfg, "south")
    for m, t in [(0, 0), (2, 5), (1, 7)]:
        one = south.copy()
        one["SA"] = (("station", "pressure"), ds["SA"].values[m, t])
        one["CT"] = (("station", "pressure"), ds["CT"].values[t])
        alone = budget_from_config(one, cfg, "south")
        for spec in OUTPUTS:
            got = out[spec.name].isel(member=m, time=t).values
            assert _max_rel(got, alone[spec.name].values) <= 1e-12, spec.name


def test_without_leading_dimensions_the_wrapper_gives_the_study_numbers():
    cfg = _config()
    sections = _sections()
    results = Study.from_config(cfg, sections=sections).solve()
    for name, section in sections.items():
        out = budget_from_config(section, cfg, name, results=results)
        for layer in LAYERS:
            for q in ("volume", "mass", "heat"):
                want = results.value(name, f"{q}:{layer}")
                got = float(out[f"{q}_transport"].sel({"class": layer}))
                assert got == pytest.approx(want, rel=1e-10, abs=1e-12)
        for key in ("net", "net_mass", "heat", "freshwater", "overturning",
                    "overturning_density"):
            assert float(out[key]) == pytest.approx(results.value(name, key), rel=1e-10,
                                                    abs=1e-12), key


def test_dask_chunked_section_equals_eager_numpy():
    cfg = _config()
    ds = _stacked(_sections()["south"], n_member=2, n_time=10)
    eager = budget_from_config(ds, cfg, "south")
    lazy = budget_from_config(ds.chunk({"time": 4, "member": 1}), cfg, "south")
    assert isinstance(lazy["net"].data, dask.array.Array)
    assert lazy["volume_transport"].chunks[1] == (4, 4, 2)
    computed = lazy.compute()
    for spec in OUTPUTS:
        assert _max_rel(computed[spec.name].values, eager[spec.name].values) <= 1e-12, spec.name


def test_model_output_section_gives_time_series_chunked_along_time():
    cfg = _config(pressure="bottom", overrides={})
    eager = section_time_series(synthetic_model_output(50, 8), cfg, "south")
    lazy = section_time_series(synthetic_model_output(50, 8, chunks=10), cfg, "south")
    assert isinstance(lazy["overturning"].data, dask.array.Array)
    assert lazy["overturning"].data.numblocks == (5,)
    computed = lazy.compute()
    assert computed["net"].dims == ("time",) and computed.sizes["time"] == 50
    for spec in OUTPUTS:
        assert _max_rel(computed[spec.name].values, eager[spec.name].values) <= 1e-12, spec.name
    # the invented model's thermocline heaves with a 12-record period: the series varies
    assert float(computed["net"].std()) > 0.1


def test_model_levels_are_interpolated_linearly_in_pressure_and_held_at_the_ends():
    depths = np.array([10.0, 200.0, 1000.0, 2500.0, 4000.0])
    lat = np.array([20.0, 20.0, 20.0])
    floor = np.array([2600.0, 4100.0, 1100.0])
    wet = depths[None, :] <= floor[:, None]
    import gsw

    p_lev = gsw.p_from_z(-depths[None, :], lat[:, None])
    ct = np.where(wet, 20.0 - 0.004 * p_lev, np.nan)[None]  # linear in pressure
    sa = np.where(wet, 35.0 + 0.0001 * p_lev, np.nan)[None]
    model = xr.Dataset(
        {"ct": (("time", "station", "depth"), ct,
                {"standard_name": "sea_water_conservative_temperature", "units": "degC"}),
         "sa": (("time", "station", "depth"), sa,
                {"standard_name": "sea_water_absolute_salinity", "units": "g/kg"}),
         "la": ("station", lat, {"standard_name": "latitude"}),
         "lo": ("station", np.array([0.0, 1.0, 2.0]), {"standard_name": "longitude"}),
         "h": ("station", floor, {"standard_name": "sea_floor_depth_below_sea_surface"})},
        coords={"depth": ("depth", depths, {"standard_name": "depth", "units": "m"})},
    )
    sec = model_section(model, dp=5.0)
    p = sec["pressure"].values
    got = sec["CT"].values[0]
    p_first = p_lev[:, 0]
    for s in range(3):
        p_last = p_lev[s, wet[s]][-1]
        inside = (p >= p_first[s]) & (p <= p_last)
        np.testing.assert_allclose(got[s, inside], 20.0 - 0.004 * p[inside], rtol=0, atol=1e-10)
        above = p < p_first[s]
        np.testing.assert_allclose(got[s, above], 20.0 - 0.004 * p_first[s], atol=1e-10)
        below = (p > p_last) & (p <= sec["bottom_pressure"].values[s])
        np.testing.assert_allclose(got[s, below], 20.0 - 0.004 * p_last, atol=1e-10)
        assert np.all(np.isnan(got[s, p > sec["bottom_pressure"].values[s]]))


def test_ekman_volume_follows_the_wind_stress_time_series():
    # Ekman transport -(tau . t) L / (rho0 f) (DESIGN.md §4; common practice)
    cfg = _config()
    south = _sections()["south"]
    tau = np.stack([0.1 * np.sin(np.arange(6)), 0.05 * np.cos(np.arange(6))], axis=-1)
    stress = xr.DataArray(tau, dims=("time", "component"))
    with_wind = budget_from_config(south, cfg, "south", stress=stress)
    calm = budget_from_config(south, cfg, "south", stress=(0.0, 0.0))
    g = pair_geometry(south)
    along = (tau[:, :1] * g["along_east"].values + tau[:, 1:] * g["along_north"].values)
    expected = (-along * g["distance"].values / (RHO0 * g["f"].values)).sum(axis=-1) / 1e6
    np.testing.assert_allclose(with_wind["net"].values - float(calm["net"]), expected,
                               rtol=1e-9, atol=1e-12)
    assert with_wind["net"].dims == ("time",)


def test_adjustment_with_a_member_dimension_equals_each_adjustment_alone():
    cfg = _config()
    south = _sections()["south"]
    n_pair = south.sizes["station"] - 1
    b = np.random.default_rng(3).normal(0.0, 0.005, (4, n_pair))  # m s^-1
    adjustment = xr.DataArray(b, dims=("member", "pair"))
    out = budget_from_config(south.chunk({"station": 3}), cfg, "south", adjustment=adjustment)
    assert out["net"].dims == ("member",)
    out = out.compute()
    for m in (0, 3):
        alone = budget_from_config(south, cfg, "south", adjustment=b[m])
        for spec in OUTPUTS:
            assert _max_rel(out[spec.name].isel(member=m).values,
                            alone[spec.name].values) <= 1e-12, spec.name


def test_model_practical_salinity_and_potential_temperature_convert_as_gsw():
    # TEOS-10 (gsw.SA_from_SP at each station's position, gsw.CT_from_pt): model
    # output in practical salinity and potential temperature
    import gsw

    depths = np.array([0.0, 500.0, 1000.0])
    lat = np.array([25.0, 26.0])
    lon = np.array([-30.0, -29.0])
    sp = np.array([[36.5, 35.2, 34.9], [36.3, 35.1, 34.95]])[None]
    pt = np.array([[24.0, 9.0, 4.5], [22.0, 8.5, 4.2]])[None]
    model = xr.Dataset(
        {"thetao": (("time", "station", "depth"), pt,
                    {"standard_name": "sea_water_potential_temperature", "units": "degC"}),
         "so": (("time", "station", "depth"), sp,
                {"standard_name": "sea_water_practical_salinity", "units": "1"}),
         "la": ("station", lat, {"standard_name": "latitude"}),
         "lo": ("station", lon, {"standard_name": "longitude"}),
         "h": ("station", np.array([1000.0, 1000.0]),
               {"standard_name": "sea_floor_depth_below_sea_surface"})},
        coords={"depth": ("depth", depths, {"standard_name": "depth", "units": "m"})},
    )
    sec = model_section(model, dp=1.0)
    # compared at the surface, a level of both the model and the pressure grid
    sa0 = gsw.SA_from_SP(sp[0, :, 0], 0.0, lon, lat)
    np.testing.assert_allclose(sec["SA"].values[0, :, 0], sa0, rtol=1e-12)
    np.testing.assert_allclose(sec["CT"].values[0, :, 0], gsw.CT_from_pt(sa0, pt[0, :, 0]),
                               rtol=1e-12)
