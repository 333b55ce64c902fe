"""Section readers: CF-NetCDF, per-cast files, long-form CSV, and the check report."""

from __future__ import annotations

import io

import gsw
import numpy as np
import pytest

from sectionkit.errors import Cautions
from sectionkit.io import check_main, describe_section, load_section, read_section

try:
    from tests._sections import invented_section, write_casts, write_csv, write_netcdf
except ImportError:  # tests/ itself on sys.path
    from _sections import invented_section, write_casts, write_csv, write_netcdf


@pytest.fixture(scope="module")
def sec():
    return invented_section()


def expected_fields(sec, i):
    """SA and CT of station i at its samples, straight from gsw."""
    P = sec["pressure"][i]
    ok = np.isfinite(P)
    p = P[ok]
    SA = gsw.SA_from_SP(sec["salinity"][i][ok], p, sec["lon"][i], sec["lat"][i])
    CT = gsw.CT_from_t(SA, sec["temperature"][i][ok], p)
    return p, SA, CT


def assert_same_dataset(a, b):
    for name in ("SA", "CT", "lat", "lon", "bottom_pressure", "bottom_depth"):
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(a["pressure"].values, b["pressure"].values)
    np.testing.assert_array_equal(a["station"].values, b["station"].values)


# ---------------------------------------------------------------------------
# CF-NetCDF
# ---------------------------------------------------------------------------


def test_netcdf_round_trip_gives_teos10_fields_of_each_station(sec, tmp_path):
    ds, cautions = load_section(write_netcdf(tmp_path / "line.nc", sec))
    assert isinstance(cautions, Cautions)
    assert ds["SA"].dims == ("station", "pressure")
    assert list(ds["station"].values) == sec["station"]
    assert ds.attrs["section"] == "line" and ds.attrs["dp"] == 2.0
    assert ds.attrs["source"].endswith("line.nc")
    assert "interpolated linearly" in ds.attrs["gridding"]
    assert ds["pressure"].attrs["units"] == "dbar"
    assert ds["SA"].attrs["units"] == "g/kg" and ds["CT"].attrs["units"] == "degC"
    for i in range(len(sec["station"])):
        p, SA, CT = expected_fields(sec, i)
        got = ds.isel(station=i).sel(pressure=p)
        np.testing.assert_allclose(got["SA"].values, SA, rtol=0, atol=1e-12)
        np.testing.assert_allclose(got["CT"].values, CT, rtol=0, atol=1e-12)


def test_every_station_is_finite_to_its_last_level_and_nan_below(sec, tmp_path):
    ds, _ = load_section(write_netcdf(tmp_path / "line.nc", sec))
    dp = ds.attrs["dp"]
    for i in range(ds.sizes["station"]):
        last = int(np.floor(ds["bottom_pressure"].values[i] / dp + 1e-9))
        assert np.all(np.isfinite(ds["SA"].values[i, : last + 1]))
        assert np.all(np.isfinite(ds["CT"].values[i, : last + 1]))
        assert np.all(np.isnan(ds["SA"].values[i, last + 1 :]))
    assert ds["pressure"].values[-1] == pytest.approx(
        np.floor(ds["bottom_pressure"].values.max() / dp) * dp
    )


def test_bottom_depth_gives_bottom_pressure_and_constant_extension(sec, tmp_path):
    ds, _ = load_section(write_netcdf(tmp_path / "line.nc", sec))
    expected = gsw.p_from_z(-sec["bottom_depth"], sec["lat"])
    np.testing.assert_allclose(ds["bottom_pressure"].values, expected, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(ds["bottom_depth"].values, sec["bottom_depth"])
    p, SA, _ = expected_fields(sec, 0)
    below = ds["SA"].isel(station=0).sel(pressure=slice(p[-1], None)).dropna("pressure")
    assert below.size > 1
    np.testing.assert_allclose(below.values, SA[-1], rtol=0, atol=1e-12)


def test_without_bottom_depth_the_deepest_sample_is_the_bottom(sec, tmp_path):
    ds, _ = load_section(write_netcdf(tmp_path / "line.nc", sec, with_bottom=False))
    deepest = np.nanmax(sec["pressure"], axis=1)
    np.testing.assert_allclose(ds["bottom_pressure"].values, deepest)
    np.testing.assert_allclose(ds["bottom_depth"].values, -gsw.z_from_p(deepest, sec["lat"]))


def test_variables_are_found_by_standard_name_whatever_their_names(sec, tmp_path):
    plain, _ = load_section(write_netcdf(tmp_path / "a.nc", sec), name="x")
    odd = {
        "pressure": "zz_9",
        "salinity": "TEMP",  # deliberately misleading names
        "temperature": "PSAL",
        "latitude": "x1",
        "longitude": "x2",
        "bottom_depth": "q",
        "station": "label",
    }
    renamed, _ = load_section(write_netcdf(tmp_path / "b.nc", sec, names=odd), name="x")
    assert_same_dataset(plain, renamed)


def test_vertical_coordinate_found_by_axis_z_and_pressure_units(sec, tmp_path):
    plain, _ = load_section(write_netcdf(tmp_path / "a.nc", sec))
    axis, _ = load_section(write_netcdf(tmp_path / "b.nc", sec, pressure_axis_only=True))
    assert_same_dataset(plain, axis)


def test_two_dimensional_pressure_equals_shared_pressure(sec, tmp_path):
    one, _ = load_section(write_netcdf(tmp_path / "a.nc", sec, layout="1d"))
    two, _ = load_section(write_netcdf(tmp_path / "b.nc", sec, layout="2d"))
    assert_same_dataset(one, two)


def test_fill_values_are_read_as_missing(sec, tmp_path):
    one, _ = load_section(write_netcdf(tmp_path / "a.nc", sec, layout="2d"))
    filled, _ = load_section(write_netcdf(tmp_path / "b.nc", sec, layout="2d", fill_value=-99999.0))
    assert_same_dataset(one, filled)


def test_pascal_and_kelvin_are_converted(sec, tmp_path):
    plain, _ = load_section(write_netcdf(tmp_path / "a.nc", sec))
    si = dict(sec, pressure=sec["pressure"] * 1e4, temperature=sec["temperature"] + 273.15)
    path = write_netcdf(tmp_path / "b.nc", si, units={"pressure": "Pa", "temperature": "K"})
    converted, _ = load_section(path)
    assert_same_dataset(plain, converted)


def test_absolute_salinity_and_conservative_temperature_pass_through(sec, tmp_path):
    teos = dict(sec)
    teos["salinity"] = np.full_like(sec["salinity"], np.nan)
    teos["temperature"] = np.full_like(sec["temperature"], np.nan)
    for i in range(len(sec["station"])):
        ok = np.isfinite(sec["pressure"][i])
        p, SA, CT = expected_fields(sec, i)
        teos["salinity"][i, ok], teos["temperature"][i, ok] = SA, CT
    plain, _ = load_section(write_netcdf(tmp_path / "a.nc", sec))
    path = write_netcdf(
        tmp_path / "b.nc",
        teos,
        salinity_kind="absolute",
        temperature_kind="conservative",
        units={"salinity": "g/kg"},
    )
    passed, _ = load_section(path)
    assert_same_dataset(plain, passed)


def test_potential_temperature_is_converted_with_ct_from_pt(sec, tmp_path):
    pot = dict(sec, temperature=np.full_like(sec["temperature"], np.nan))
    for i in range(len(sec["station"])):
        ok = np.isfinite(sec["pressure"][i])
        p, SA, _ = expected_fields(sec, i)
        pot["temperature"][i, ok] = gsw.pt0_from_t(SA, sec["temperature"][i][ok], p)
    plain, _ = load_section(write_netcdf(tmp_path / "a.nc", sec))
    theta, _ = load_section(write_netcdf(tmp_path / "b.nc", pot, temperature_kind="potential"))
    np.testing.assert_allclose(theta["CT"].values, plain["CT"].values, rtol=0, atol=1e-9)


def test_stations_without_profile_id_are_numbered_by_position(sec, tmp_path):
    ds, _ = load_section(write_netcdf(tmp_path / "a.nc", sec, with_ids=False))
    assert list(ds["station"].values) == ["1", "2", "3", "4", "5"]


def test_explicit_station_order_selects_and_reorders(sec, tmp_path):
    ds, _ = load_section(write_netcdf(tmp_path / "a.nc", sec), order=["S03", "S01", "S02"])
    assert list(ds["station"].values) == ["S03", "S01", "S02"]
    np.testing.assert_allclose(ds["lat"].values, sec["lat"][[2, 0, 1]])


def test_read_section_returns_profiles_as_measured(sec, tmp_path):
    raw = read_section(write_netcdf(tmp_path / "a.nc", sec, layout="2d"))
    assert raw.stations == sec["station"]
    first = raw.profiles[0]
    np.testing.assert_array_equal(first.pressure, sec["pressure"][0])
    np.testing.assert_array_equal(first.salinity, sec["salinity"][0])
    assert first.salinity_kind == "practical" and first.temperature_kind == "in-situ"
    assert first.names["salinity"] == "psal"


# ---------------------------------------------------------------------------
# Per-cast files
# ---------------------------------------------------------------------------


def test_folder_of_casts_is_read_in_natural_file_name_order(sec, tmp_path):
    names = ["cast_10.nc", "cast_2.nc", "cast_1.nc", "cast_3.nc", "cast_20.nc"]
    write_casts(tmp_path / "casts", sec, file_names=names)
    ds, _ = load_section(tmp_path / "casts")
    # natural order: cast_1, cast_2, cast_3, cast_10, cast_20
    assert list(ds["station"].values) == ["S03", "S02", "S04", "S01", "S05"]
    assert ds.attrs["section"] == "casts"


def test_list_of_cast_files_keeps_the_given_order(sec, tmp_path):
    files = write_casts(tmp_path / "casts", sec)
    whole, _ = load_section(write_netcdf(tmp_path / "whole.nc", sec), name="w")
    listed, _ = load_section(files, name="w")
    assert_same_dataset(whole, listed)
    backwards, _ = load_section(files[::-1])
    assert list(backwards["station"].values) == sec["station"][::-1]
    assert backwards.attrs["source"].split(", ")[0].endswith("cast5.nc")


# ---------------------------------------------------------------------------
# CSV
# ---------------------------------------------------------------------------


def test_csv_round_trip_equals_netcdf(sec, tmp_path):
    nc, _ = load_section(write_netcdf(tmp_path / "a.nc", sec), name="x")
    csv, _ = load_section(write_csv(tmp_path / "a.csv", sec), name="x")
    assert_same_dataset(nc, csv)


def test_csv_headers_units_and_kinds_are_configurable(sec, tmp_path):
    headers = {
        "station": "Cast",
        "lat": "Latitude",
        "lon": "Longitude",
        "pressure": "PRES_Pa",
        "temperature": "T_K",
        "salinity": "SP",
        "bottom_depth": "Sounding",
    }
    si = dict(sec, pressure=sec["pressure"] * 1e4, temperature=sec["temperature"] + 273.15)
    path = write_csv(tmp_path / "b.csv", si, headers=headers, delimiter=";")
    plain, _ = load_section(write_netcdf(tmp_path / "a.nc", sec), name="x")
    custom, _ = load_section(
        path,
        name="x",
        columns=headers,
        pressure_units="Pa",
        temperature_units="K",
    )
    assert_same_dataset(plain, custom)


def test_csv_potential_temperature_kind(sec, tmp_path):
    pot = dict(sec, temperature=np.full_like(sec["temperature"], np.nan))
    for i in range(len(sec["station"])):
        ok = np.isfinite(sec["pressure"][i])
        p, SA, _ = expected_fields(sec, i)
        pot["temperature"][i, ok] = gsw.pt0_from_t(SA, sec["temperature"][i][ok], p)
    plain, _ = load_section(write_csv(tmp_path / "a.csv", sec))
    theta, _ = load_section(write_csv(tmp_path / "b.csv", pot), temperature_kind="potential")
    np.testing.assert_allclose(theta["CT"].values, plain["CT"].values, rtol=0, atol=1e-9)


# ---------------------------------------------------------------------------
# Check report
# ---------------------------------------------------------------------------


def test_describe_section_reports_what_was_found(sec, tmp_path):
    text = describe_section(write_netcdf(tmp_path / "line.nc", sec))
    assert "5 stations" in text
    assert "S01 .. S05" in text
    assert "24.000 .. 24.200 degrees_north" in text
    spacing = gsw.distance(sec["lon"], sec["lat"])[0] / 1e3
    assert f"median {np.median(spacing):.1f} km" in text
    assert "every 2 dbar" in text
    assert "cautions:  none" in text


def test_check_main_prints_report_and_returns_zero(sec, tmp_path):
    path = write_netcdf(tmp_path / "line.nc", sec)
    out, err = io.StringIO(), io.StringIO()
    assert check_main([str(path), "--dp", "5"], out=out, err=err) == 0
    assert "every 5 dbar" in out.getvalue() and err.getvalue() == ""


def test_check_main_prints_error_without_traceback_and_returns_one(sec, tmp_path):
    good = write_netcdf(tmp_path / "line.nc", sec)
    bad = tmp_path / "notes.nc"
    bad.write_text("station,lat\n")
    out, err = io.StringIO(), io.StringIO()
    assert check_main([str(good), str(bad)], out=out, err=err) == 1
    assert "Section line" in out.getvalue()
    assert "notes.nc" in err.getvalue() and "not a NetCDF file" in err.getvalue()
    assert "Traceback" not in err.getvalue()


def test_check_main_passes_csv_options(sec, tmp_path):
    path = write_csv(tmp_path / "a.csv", sec, headers={"pressure": "PRES"})
    out, err = io.StringIO(), io.StringIO()
    assert check_main([str(path), "--column", "pressure=PRES"], out=out, err=err) == 0
    assert "pressure PRES" in out.getvalue()
