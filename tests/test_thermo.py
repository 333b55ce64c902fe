"""TEOS-10 conversions and the gridding rules of sectionkit.thermo."""

from __future__ import annotations

import os

import gsw
import numpy as np
import pytest
import xarray as xr

from sectionkit.errors import SectionDataError
from sectionkit.io import load_section
from sectionkit.thermo import (
    GriddingRules,
    absolute_salinity,
    absolute_salinity_da,
    conservative_temperature,
    conservative_temperature_da,
    find_inversions,
    grid_profile,
    grid_section,
    kelvin_to_celsius,
    last_level,
    pascal_to_dbar,
    pressure_grid,
)

try:
    from tests._sections import write_netcdf
except ImportError:  # tests/ itself on sys.path
    from _sections import write_netcdf


@pytest.fixture(scope="module")
def cv():
    """TEOS-10 check values (IOC, SCOR and IAPSO 2010), shipped in gsw/tests."""
    path = os.path.join(os.path.dirname(gsw.__file__), "tests", "gsw_cv_v3_0.npz")
    if not os.path.exists(path):
        pytest.skip("gsw check-value file not installed")
    with np.load(path) as data:
        return {k: data[k] for k in data.files}


# ---------------------------------------------------------------------------
# TEOS-10 check values
# ---------------------------------------------------------------------------


def test_absolute_salinity_matches_teos10_check_values(cv):
    # TEOS-10 check values (IOC, SCOR and IAPSO 2010), shipped in gsw/tests
    SP = cv["SP_chck_cast"].T  # (station, level)
    p = cv["p_chck_cast"].T
    SA = absolute_salinity(SP, p, cv["long_chck_cast"], cv["lat_chck_cast"])
    expected = cv["SA_from_SP"].T
    ok = np.isfinite(expected)
    assert np.array_equal(np.isfinite(SA), ok)
    assert np.max(np.abs(SA[ok] - expected[ok])) < cv["SA_from_SP_ca"]


def test_conservative_temperature_from_in_situ_matches_check_values(cv):
    # TEOS-10 check values (IOC, SCOR and IAPSO 2010), shipped in gsw/tests
    CT = conservative_temperature(
        cv["t_chck_cast"], cv["SA_chck_cast"], cv["p_chck_cast"], "in-situ"
    )
    ok = np.isfinite(cv["CT_from_t"])
    assert np.max(np.abs(CT[ok] - cv["CT_from_t"][ok])) < cv["CT_from_t_ca"]


def test_conservative_temperature_from_potential_matches_check_values(cv):
    # TEOS-10 check values (IOC, SCOR and IAPSO 2010), shipped in gsw/tests;
    # the check file computes CT_from_pt from pt0_from_t of the check cast.
    CT = conservative_temperature(
        cv["pt0_from_t"], cv["SA_chck_cast"], cv["p_chck_cast"], "potential"
    )
    ok = np.isfinite(cv["CT_from_pt"])
    assert np.max(np.abs(CT[ok] - cv["CT_from_pt"][ok])) < cv["CT_from_pt_ca"]


def test_check_cast_read_from_a_file_reproduces_check_values(cv, tmp_path):
    # TEOS-10 check values (IOC, SCOR and IAPSO 2010), shipped in gsw/tests.
    # The three check casts are written as a CF file of practical salinity and
    # in-situ temperature; with dp = 1 dbar every check pressure is a grid
    # level, so the loaded SA and CT there must be the check values.
    P = cv["p_chck_cast"].T
    sec = {
        "station": ["c1", "c2", "c3"],
        "lat": cv["lat_chck_cast"].astype(float),
        "lon": cv["long_chck_cast"].astype(float),
        "pressure": P,
        "salinity": cv["SP_chck_cast"].T,
        "temperature": cv["t_chck_cast"].T,
    }
    path = write_netcdf(tmp_path / "check.nc", sec, layout="2d", with_bottom=False)
    ds, _ = load_section(path, dp=1.0, rules=GriddingRules(max_interior_gap=300.0))
    for i in range(3):
        ok = np.isfinite(P[i])
        got_sa = ds["SA"].isel(station=i).sel(pressure=P[i, ok]).values
        got_ct = ds["CT"].isel(station=i).sel(pressure=P[i, ok]).values
        assert np.max(np.abs(got_sa - cv["SA_from_SP"][ok, i])) < cv["SA_from_SP_ca"]
        assert np.max(np.abs(got_ct - cv["CT_from_t"][ok, i])) < cv["CT_from_t_ca"]


def test_absolute_salinity_uses_each_stations_own_position():
    # The same practical salinity at two positions gives two Absolute
    # Salinities, each gsw.SA_from_SP at its own station.
    SP = np.full((2, 3), 34.7)
    p = np.tile([0.0, 1000.0, 3000.0], (2, 1))
    lon, lat = np.array([-30.0, 150.0]), np.array([-50.0, 30.0])
    SA = absolute_salinity(SP, p, lon, lat)
    for i in range(2):
        np.testing.assert_array_equal(SA[i], gsw.SA_from_SP(SP[i], p[i], lon[i], lat[i]))
    assert abs(SA[0, 2] - SA[1, 2]) > 1e-3


# ---------------------------------------------------------------------------
# Units and wrappers
# ---------------------------------------------------------------------------


def test_kelvin_and_pascal_conversions():
    assert kelvin_to_celsius(np.array([273.15, 300.0])) == pytest.approx([0.0, 26.85])
    assert pascal_to_dbar(np.array([1.0e4, 4.0e7])) == pytest.approx([1.0, 4000.0])


def test_unknown_temperature_kind_is_refused():
    with pytest.raises(SectionDataError, match="sea-surface"):
        conservative_temperature(np.ones(2), np.ones(2) * 35, np.zeros(2), "sea-surface")


def test_xarray_wrappers_stay_lazy_and_match_kernels():
    pytest.importorskip("dask")
    p = np.arange(0.0, 100.0, 10.0)
    SP = xr.DataArray(
        np.full((2, p.size), 35.0),
        dims=("station", "pressure"),
        coords={"pressure": p},
    ).chunk({"station": 1})
    lon = xr.DataArray([10.0, 20.0], dims="station")
    lat = xr.DataArray([-20.0, 40.0], dims="station")
    SA = absolute_salinity_da(SP, lon, lat)
    assert SA.chunks is not None
    expected = absolute_salinity(SP.values, np.tile(p, (2, 1)), lon.values, lat.values)
    np.testing.assert_allclose(SA.values, expected, rtol=0, atol=1e-12)
    assert SA.attrs["units"] == "g/kg"
    t = xr.full_like(SP, 10.0)
    CT = conservative_temperature_da(t, SA, "in-situ")
    np.testing.assert_allclose(
        CT.values, gsw.CT_from_t(expected, 10.0, np.tile(p, (2, 1))), rtol=0, atol=1e-12
    )


# ---------------------------------------------------------------------------
# Grid
# ---------------------------------------------------------------------------


def test_grid_levels_are_exact_multiples_of_dp():
    grid = pressure_grid(10.0, 0.1)
    assert grid.size == 101 and grid[-1] == pytest.approx(10.0)
    assert last_level(0.3, 0.1) == 3
    assert last_level(5.9, 2.0) == 2


def test_gridding_interpolates_linearly_between_samples():
    # Samples off the grid: a linear property must come back exactly at
    # every level (interpolation, not subsampling).
    p = np.array([1.0, 3.5, 9.0, 17.0, 24.5])
    values = np.stack([2.0 + 0.5 * p, 10.0 - 0.1 * p])
    g = grid_profile(p, values, bottom_pressure=24.5, n_levels=13, rules=GriddingRules(dp=2.0))
    levels = np.arange(13) * 2.0
    inside = (levels >= 1.0) & (levels <= 24.5)
    np.testing.assert_allclose(g.values[0, inside], 2.0 + 0.5 * levels[inside], atol=1e-12)
    np.testing.assert_allclose(g.values[1, inside], 10.0 - 0.1 * levels[inside], atol=1e-12)
    assert g.last_level == 12


def test_surface_gap_is_filled_with_the_shallowest_sample():
    p = np.array([12.0, 14.0, 16.0])
    g = grid_profile(p, np.array([[1.0, 2.0, 3.0]]), 16.0, 9, GriddingRules(dp=2.0))
    np.testing.assert_array_equal(g.values[0, :7], 1.0)
    assert g.surface_fill == 12.0


def test_surface_gap_deeper_than_limit_is_refused():
    p = np.array([40.0, 42.0])
    with pytest.raises(SectionDataError, match=r"station 9.*40 dbar.*30 dbar"):
        grid_profile(p, np.ones((1, 2)), 42.0, 22, GriddingRules(), label="station 9")


def test_interior_gap_wider_than_limit_is_refused():
    p = np.array([0.0, 20.0, 100.0, 110.0])
    with pytest.raises(SectionDataError, match=r"station 4.*20 and 100 dbar.*gap of 80 dbar"):
        grid_profile(p, np.ones((1, 4)), 110.0, 56, GriddingRules(), label="station 4")


def test_deepest_sample_is_extended_to_the_bottom_and_nan_below():
    p = np.array([0.0, 2.0, 4.0])
    g = grid_profile(p, np.array([[5.0, 6.0, 7.0]]), 11.0, 10, GriddingRules(dp=2.0))
    np.testing.assert_array_equal(g.values[0, :6], [5.0, 6.0, 7.0, 7.0, 7.0, 7.0])
    assert np.all(np.isnan(g.values[0, 6:]))
    assert g.bottom_extension == pytest.approx(7.0)


def test_pressure_not_increasing_is_refused_by_the_kernel():
    with pytest.raises(SectionDataError, match="does not increase from 4 to 4 dbar"):
        grid_profile(np.array([0.0, 4.0, 4.0]), np.ones((1, 3)), 4.0, 3, GriddingRules())


def test_section_grid_reaches_the_deepest_bottom():
    p = [np.array([0.0, 10.0]), np.array([0.0, 10.0, 20.0])]
    v = [np.ones((2, 2)), np.ones((2, 3))]
    sg = grid_section(p, v, np.array([15.0, 21.0]), GriddingRules(dp=2.0))
    assert sg.pressure[-1] == 20.0
    assert sg.values.shape == (2, 2, 11)
    assert np.isnan(sg.values[0, 0, 8]) and np.isfinite(sg.values[0, 0, 7])
    assert "extended to the bottom" in " ".join(sg.log(["a", "b"], GriddingRules()))


def test_invalid_rules_are_refused():
    with pytest.raises(SectionDataError, match="dp"):
        GriddingRules(dp=0.0)
    with pytest.raises(SectionDataError, match="max_interior_gap"):
        GriddingRules(max_interior_gap=float("nan"))


# ---------------------------------------------------------------------------
# Density inversions
# ---------------------------------------------------------------------------


def _stable_column(p):
    return 35.0 + 0.0 * p, 20.0 * np.exp(-p / 500.0)


def test_stable_column_has_no_inversion():
    p = np.arange(0.0, 1000.0, 2.0)
    SA, CT = _stable_column(p)
    assert find_inversions(SA[None], CT[None], p) == []


def test_inversion_beyond_noise_is_found_at_its_pressure():
    p = np.arange(0.0, 1000.0, 2.0)
    SA, CT = _stable_column(p)
    SA = SA.copy()
    SA[(p >= 300) & (p < 340)] += 0.3  # salty, dense layer over lighter water
    found = find_inversions(np.stack([SA, _stable_column(p)[0]]), np.stack([CT, CT]), p)
    assert len(found) == 1
    inv = found[0]
    assert inv.station_index == 0
    assert 280 <= inv.p_top <= 340 and 340 <= inv.p_bottom <= 380
    assert inv.excess > 0.02


def test_deep_sigma0_decrease_from_compressibility_is_not_an_inversion():
    # Warm salty water over cold fresh water at 4000 dbar: sigma0 decreases
    # downward by 0.03 kg/m3, but at the local pressure the column is stable
    # (thermobaricity), so no inversion may be reported.
    p = np.arange(3900.0, 4100.0, 2.0)
    w = np.clip((p - 3990.0) / 20.0, 0.0, 1.0)
    SA = 35.1 + (34.78 - 35.1) * w
    CT = 3.2 + (0.3 - 3.2) * w
    assert gsw.sigma0(SA[0], CT[0]) - gsw.sigma0(SA[-1], CT[-1]) > 0.02
    assert find_inversions(SA[None], CT[None], p) == []
