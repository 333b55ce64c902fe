"""Bad section files raise sectionkit's own errors, with messages that name the problem."""

from __future__ import annotations

import copy
import tempfile
from pathlib import Path

import gsw
import netCDF4
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sectionkit.errors import (
    ConfigError,
    EquatorError,
    InputFileError,
    SectionDataError,
    SectionkitError,
)
from sectionkit.io import load_section

try:
    from tests._sections import invented_section, write_csv, write_netcdf
except ImportError:  # tests/ itself on sys.path
    from _sections import invented_section, write_csv, write_netcdf


@pytest.fixture()
def sec():
    return copy.deepcopy(invented_section())


def load(tmp_path, sec, name="line.nc", **kwargs):
    write = {k: kwargs.pop(k) for k in list(kwargs) if k not in ("allow_equator", "variables")}
    return load_section(write_netcdf(tmp_path / name, sec, **write), **kwargs)


# ---------------------------------------------------------------------------
# Files that cannot be read
# ---------------------------------------------------------------------------


def test_text_file_named_nc_is_not_netcdf(tmp_path):
    path = tmp_path / "cruise.nc"
    path.write_text("this is a cruise report\n")
    with pytest.raises(InputFileError, match=r"cruise\.nc.*not a NetCDF file"):
        load_section(path)


def test_truncated_netcdf_is_unreadable(sec, tmp_path):
    good = write_netcdf(tmp_path / "good.nc", sec)
    bad = tmp_path / "cut.nc"
    bad.write_bytes(good.read_bytes()[:300])
    with pytest.raises(InputFileError, match=r"cut\.nc.*cannot be read as NetCDF"):
        load_section(bad)


def test_missing_file_is_named(tmp_path):
    with pytest.raises(InputFileError, match=r"nowhere\.nc.*does not exist"):
        load_section(tmp_path / "nowhere.nc")


def test_empty_folder_is_refused(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputFileError, match="holds no section files"):
        load_section(tmp_path / "empty")


@pytest.mark.parametrize(
    ("quantity", "expected"),
    [
        ("salinity", "sea_water_practical_salinity"),
        ("temperature", "sea_water_temperature"),
        ("latitude", "latitude"),
        ("pressure", "sea_water_pressure"),
    ],
)
def test_missing_variable_is_named_with_the_standard_names_sought(
    sec, tmp_path, quantity, expected
):
    with pytest.raises(InputFileError, match=rf"line\.nc: no {quantity} variable.*{expected}"):
        load(tmp_path, sec, drop=[quantity])


def test_variable_without_standard_name_is_not_guessed_from_its_name(sec, tmp_path):
    with pytest.raises(InputFileError, match=r"no salinity variable.*psal \(no standard_name\)"):
        load(tmp_path, sec, standard_names={"salinity": None})


def test_two_variables_with_one_standard_name_must_be_chosen(sec, tmp_path):
    path = write_netcdf(tmp_path / "dual.nc", sec)
    with netCDF4.Dataset(path, "a") as nc:
        t2 = nc.createVariable("temp_secondary", "f8", ("profile", "z"))
        t2.standard_name = "sea_water_temperature"
        t2.units = "degC"
        t2.set_auto_mask(False)
        t2[...] = np.asarray(sec["temperature"]) + 5.0
    with pytest.raises(InputFileError, match=r"temp, temp_secondary.*variables="):
        load_section(path)
    a, _ = load_section(path, variables={"temperature": "temp"})
    b, _ = load_section(path, variables={"temperature": "temp_secondary"})
    assert float((b["CT"] - a["CT"]).mean()) > 4.0


# ---------------------------------------------------------------------------
# Stations and positions
# ---------------------------------------------------------------------------


def test_one_station_is_not_a_section(sec, tmp_path):
    one = {k: v[:1] for k, v in sec.items()}
    with pytest.raises(SectionDataError, match="1 station.*at least two"):
        load(tmp_path, one)


def test_missing_latitude_names_station_and_variable(sec, tmp_path):
    sec["lat"][2] = np.nan
    with pytest.raises(
        SectionDataError, match=r"station S03 \(file .*line\.nc\).*latitude is nan, not a position"
    ):
        load(tmp_path, sec)


def test_latitude_out_of_range_names_value(sec, tmp_path):
    sec["lat"][1] = 124.0
    with pytest.raises(SectionDataError, match=r"station S02.*latitude 124 is outside"):
        load(tmp_path, sec)


def test_two_stations_at_the_same_position(sec, tmp_path):
    sec["lat"][3], sec["lon"][3] = sec["lat"][1], sec["lon"][1]
    with pytest.raises(SectionDataError, match=r"stations S02 .* and S04 .* same position"):
        load(tmp_path, sec)


def test_repeated_station_id_is_refused(sec, tmp_path):
    sec["station"][4] = "S01"
    with pytest.raises(SectionDataError, match="station S01 appears 2 times"):
        load(tmp_path, sec)


def test_pairs_near_the_equator_are_refused_by_name(tmp_path):
    sec = invented_section(lat0=-3.0, dlon=0.5)
    sec["lat"] = np.array([-3.0, -1.5, 0.0, 1.5, 3.0])
    with pytest.raises(EquatorError) as info:
        load(tmp_path, sec)
    text = str(info.value)
    assert "line:1 (stations S02-S03" in text and "line:2 (stations S03-S04" in text
    assert "line:0" not in text and "allow_equator" in text


def test_allow_equator_turns_the_refusal_into_a_caution(tmp_path):
    sec = invented_section()
    sec["lat"] = np.array([-3.0, -1.5, 0.0, 1.5, 3.0])
    ds, cautions = load(tmp_path, sec, allow_equator=True)
    assert ds.sizes["station"] == 5
    assert "line:1" in cautions.of_kind("equator")[0].message


# ---------------------------------------------------------------------------
# Profiles
# ---------------------------------------------------------------------------


def test_pressure_not_increasing_names_station_and_sample(sec, tmp_path):
    sec["pressure"][1, 40] = sec["pressure"][1, 38]
    with pytest.raises(
        SectionDataError,
        match=r"station S02.*pressure does not increase from 78 to 76 dbar at sample 40",
    ):
        load(tmp_path, sec, layout="2d")


def test_missing_pressures_are_dropped_before_the_increase_check(sec, tmp_path):
    sec["pressure"][1, 40] = np.nan
    ds, cautions = load(tmp_path, sec, layout="2d")
    assert np.isfinite(ds["SA"].isel(station=1).sel(pressure=80.0))
    assert cautions.of_kind("incomplete-samples")


def test_pascal_labelled_dbar_is_refused(sec, tmp_path):
    sec["pressure"] = sec["pressure"] * 1e4
    with pytest.raises(
        SectionDataError, match=r"station S01.*pressure reaches 1\.202e\+07 dbar.*in Pa"
    ):
        load(tmp_path, sec)


def test_dbar_labelled_pascal_is_refused(sec, tmp_path):
    with pytest.raises(SectionDataError, match=r"labelled 'Pa'.*look like dbar"):
        load(tmp_path, sec, units={"pressure": "Pa"})


def test_kelvin_labelled_celsius_is_refused(sec, tmp_path):
    sec["temperature"] = sec["temperature"] + 273.15
    with pytest.raises(SectionDataError, match=r"station S01.*variable temp.*look like kelvin"):
        load(tmp_path, sec)


def test_temperature_marker_value_is_refused_with_its_pressure(sec, tmp_path):
    sec["temperature"][3, 10] = -99.0
    with pytest.raises(SectionDataError, match=r"station S04.*-99 degC at sample 10 \(20 dbar\)"):
        load(tmp_path, sec)


def test_conductivity_in_ms_per_cm_is_not_salinity(sec, tmp_path):
    sec["salinity"] = 30.0 + sec["temperature"] * 1.2  # like conductivity, mS/cm
    with pytest.raises(
        SectionDataError, match=r"station S01.*variable psal.*cannot be salinity.*mS/cm"
    ):
        load(tmp_path, sec)


def test_conductivity_in_siemens_per_metre_is_not_salinity(sec, tmp_path):
    sec["salinity"] = 3.0 + sec["temperature"] * 0.1  # like conductivity, S/m
    with pytest.raises(SectionDataError, match=r"cannot be salinity.*below 500 dbar.*S/m"):
        load(tmp_path, sec)


def test_conductivity_units_are_refused(sec, tmp_path):
    with pytest.raises(SectionDataError, match=r"'mS/cm' are conductivity units"):
        load(tmp_path, sec, units={"salinity": "mS/cm"})


def test_all_nan_profile_names_the_station(sec, tmp_path):
    sec["salinity"][2, :] = np.nan
    with pytest.raises(
        SectionDataError, match=r"station S03.*salinity is missing \(NaN\) at every"
    ):
        load(tmp_path, sec)


def test_infinite_value_is_refused(sec, tmp_path):
    sec["temperature"][0, 5] = np.inf
    with pytest.raises(SectionDataError, match=r"station S01.*inf at sample 5 is infinite"):
        load(tmp_path, sec, layout="2d")


def test_bottom_shallower_than_deepest_sample_is_refused(sec, tmp_path):
    sec["bottom_depth"][2] = sec["bottom_depth"][2] - 40.0
    with pytest.raises(SectionDataError, match=r"station S03.*bottom depth .* m is .* m shallower"):
        load(tmp_path, sec)


def test_bottom_slightly_above_deepest_sample_is_moved_with_a_caution(sec, tmp_path):
    deepest = np.nanmax(sec["pressure"][2])
    sec["bottom_depth"][2] = -gsw.z_from_p(deepest, sec["lat"][2]) - 4.0
    ds, cautions = load(tmp_path, sec)
    assert ds["bottom_pressure"].values[2] == pytest.approx(deepest)
    assert cautions.of_kind("bottom-moved")[0].station == "S03"


def test_surface_gap_deeper_than_30_dbar_is_refused(sec, tmp_path):
    sec["salinity"][1, :20] = np.nan  # shallowest complete sample at 40 dbar
    with pytest.raises(SectionDataError, match=r"station S02.*shallowest sample is at 40 dbar"):
        load(tmp_path, sec)


def test_interior_gap_wider_than_50_dbar_is_refused(sec, tmp_path):
    sec["temperature"][4, 100:140] = np.nan
    with pytest.raises(SectionDataError, match=r"station S05.*between 198 and 280 dbar"):
        load(tmp_path, sec)


# ---------------------------------------------------------------------------
# Cautions
# ---------------------------------------------------------------------------


def test_density_inversion_is_a_caution_naming_station_and_pressure(sec, tmp_path):
    p = sec["pressure"][3]
    sec["salinity"][3, (p >= 400) & (p < 430)] += 0.4
    ds, cautions = load(tmp_path, sec)
    found = cautions.of_kind("density-inversion")
    assert len(found) == 1 and found[0].station == "S04"
    assert "between 4" in found[0].message and "dbar" in found[0].message


def test_wide_station_gap_is_a_caution_naming_the_pair(tmp_path):
    sec = invented_section(n=6)
    sec["lon"][4:] += 3.0
    _, cautions = load(tmp_path, sec)
    gaps = cautions.of_kind("station-gap")
    assert len(gaps) == 1 and "line:3 (stations S04-S05)" in gaps[0].message


def test_short_cast_is_a_caution(sec, tmp_path):
    sec["bottom_depth"][1] += 600.0
    ds, cautions = load(tmp_path, sec)
    short = cautions.of_kind("short-cast")
    assert len(short) == 1 and short[0].station == "S02"
    assert ds["bottom_depth"].values[1] == sec["bottom_depth"][1]


def test_surface_fill_and_interpolated_gap_are_stated(sec, tmp_path):
    sec["salinity"][1, :8] = np.nan  # shallowest complete sample at 16 dbar
    sec["temperature"][4, 100:110] = np.nan  # 22 dbar without samples below 198 dbar
    ds, cautions = load(tmp_path, sec)
    assert cautions.of_kind("surface-fill")[0].station == "S02"
    assert "22 dbar without samples below 198 dbar" in cautions.of_kind("interior-gap")[0].message
    assert "S02 (from 16 dbar)" in ds.attrs["gridding"]
    assert "S05 (22 dbar below 198 dbar)" in ds.attrs["gridding"]
    surface = ds["SA"].isel(station=1).sel(pressure=slice(0, 16)).values
    np.testing.assert_array_equal(surface, surface[-1])


def test_missing_pressure_units_are_assumed_dbar_with_a_caution(sec, tmp_path):
    plain, _ = load(tmp_path, sec, name="a.nc")
    ds, cautions = load(tmp_path, sec, name="b.nc", units={"pressure": None})
    np.testing.assert_array_equal(ds["SA"].values, plain["SA"].values)
    assert "assumed dbar" in cautions.of_kind("units-assumed")[0].message


def test_clean_section_has_no_cautions(sec, tmp_path):
    _, cautions = load(tmp_path, sec)
    assert not cautions, cautions.report()


# ---------------------------------------------------------------------------
# CSV
# ---------------------------------------------------------------------------


def test_csv_missing_column_says_how_to_map_it(sec, tmp_path):
    path = write_csv(tmp_path / "a.csv", sec, headers={"salinity": "PSAL"})
    with pytest.raises(InputFileError, match=r"a\.csv: no column 'salinity'.*PSAL.*columns="):
        load_section(path)


def test_csv_non_number_names_line_and_value(sec, tmp_path):
    path = write_csv(tmp_path / "a.csv", sec)
    lines = path.read_text().splitlines()
    fields = lines[5].split(",")
    fields[4] = "warm"
    lines[5] = ",".join(fields)
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputFileError, match=r"variable temperature: 'warm' on line 6"):
        load_section(path)


def test_csv_unknown_column_key_is_a_config_error(sec, tmp_path):
    path = write_csv(tmp_path / "a.csv", sec)
    with pytest.raises(ConfigError, match=r"'presure'.*did you mean 'pressure'"):
        load_section(path, columns={"presure": "p"})


def test_csv_station_rows_far_apart_are_refused(sec, tmp_path):
    sec["station"][3] = "S01"
    path = write_csv(tmp_path / "a.csv", sec)
    with pytest.raises(SectionDataError, match="station S01.*share a station id"):
        load_section(path)


# ---------------------------------------------------------------------------
# Property tests: malformed arrays never escape as anything but SectionkitError
# ---------------------------------------------------------------------------

# small and fast; no example database written into the working tree
PROPERTY_SETTINGS = {
    "max_examples": 50,
    "deadline": None,
    "database": None,
    "suppress_health_check": [HealthCheck.too_slow],
}
BAD_VALUES = st.sampled_from(
    [np.nan, np.inf, -np.inf, 1e30, -1e30, -999.0, 0.0, 300.0, 1e-300, 45.0, -5.5, 12001.0]
)


def _small_section():
    return invented_section(n=3, bottoms=[120.0, 150.0, 130.0], dp=5.0)


@st.composite
def malformed_sections(draw):
    sec = copy.deepcopy(_small_section())
    for _ in range(draw(st.integers(0, 6))):
        key = draw(st.sampled_from(["pressure", "salinity", "temperature"]))
        i = draw(st.integers(0, 2))
        j = draw(st.integers(0, sec[key].shape[1] - 1))
        sec[key][i, j] = draw(BAD_VALUES)
    if draw(st.booleans()):
        i = draw(st.integers(0, 2))
        order = draw(st.permutations(range(sec["pressure"].shape[1])))
        sec["pressure"][i] = sec["pressure"][i, list(order)]
    for key in ("lat", "lon", "bottom_depth"):
        if draw(st.integers(0, 4)) == 0:
            sec[key][draw(st.integers(0, 2))] = draw(BAD_VALUES)
    options = {
        "layout": draw(st.sampled_from(["1d", "2d"])),
        "fill_value": draw(st.sampled_from([None, -999.0])),
        "units": draw(
            st.sampled_from([{}, {"pressure": "Pa"}, {"temperature": "K"}, {"salinity": "g/kg"}])
        ),
        "drop": draw(st.sampled_from([(), ("bottom_depth",), ("salinity",)])),
    }
    return sec, options


def _write_raw(path: Path, arrays: dict, dims: dict) -> Path:
    """A NetCDF file with arbitrary variables and shapes (for wrong-shape cases)."""
    with netCDF4.Dataset(path, "w") as nc:
        for name, size in dims.items():
            nc.createDimension(name, size)
        for name, (var_dims, values, attrs) in arrays.items():
            v = nc.createVariable(name, "f8", var_dims)
            v.set_auto_mask(False)
            for key, value in attrs.items():
                v.setncattr(key, value)
            v[...] = values
    return path


@st.composite
def wrong_shapes(draw):
    """Variables with the right standard names on mismatched or missing dimensions."""
    sizes = {"profile": draw(st.integers(0, 4)), "z": draw(st.integers(0, 6))}
    sizes["z2"] = draw(st.sampled_from([sizes["z"], sizes["z"] + 1, 0]))
    values = st.floats(allow_nan=True, allow_infinity=True, width=64)

    def variable(dims, standard_name, units):
        shape = [sizes[d] for d in dims]
        count = int(np.prod(shape))
        data = np.array(draw(st.lists(values, min_size=count, max_size=count))).reshape(shape)
        return dims, data, {"standard_name": standard_name, "units": units}

    some_dims = st.sampled_from([("z",), ("profile", "z"), ("z", "profile"), ("profile",), ()])
    arrays = {
        "a": variable(draw(some_dims), "sea_water_pressure", "dbar"),
        "b": variable(("profile", "z2"), "sea_water_practical_salinity", "1"),
        "c": variable(("profile", "z"), "sea_water_temperature", "degC"),
        "d": variable(("profile",), "latitude", "degrees_north"),
        "e": variable(
            draw(st.sampled_from([("profile",), ("z",), ()])), "longitude", "degrees_east"
        ),
    }
    return arrays, sizes


@settings(**PROPERTY_SETTINGS)
@given(malformed_sections())
def test_malformed_netcdf_raises_only_sectionkit_errors(case):
    sec, options = case
    with tempfile.TemporaryDirectory() as folder:
        path = write_netcdf(Path(folder) / "bad.nc", sec, **options)
        try:
            ds, _ = load_section(path)
        except SectionkitError:
            return
    # whatever loads must satisfy the canonical contract
    last = np.floor(ds["bottom_pressure"].values / ds.attrs["dp"] + 1e-9).astype(int)
    for i, k in enumerate(last):
        assert np.all(np.isfinite(ds["SA"].values[i, : k + 1]))
        assert np.all(np.isnan(ds["CT"].values[i, k + 1 :]))


@settings(**PROPERTY_SETTINGS)
@given(wrong_shapes())
def test_wrong_shapes_raise_only_sectionkit_errors(case):
    arrays, sizes = case
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "shapes.nc"
        _write_raw(path, arrays, sizes)
        try:
            load_section(path)
        except SectionkitError:
            pass


@settings(**PROPERTY_SETTINGS)
@given(malformed_sections(), st.sampled_from([",", ";"]))
def test_malformed_csv_raises_only_sectionkit_errors(case, delimiter):
    sec, _ = case
    with tempfile.TemporaryDirectory() as folder:
        path = write_csv(Path(folder) / "bad.csv", sec, delimiter=delimiter)
        try:
            load_section(path)
        except SectionkitError:
            pass
