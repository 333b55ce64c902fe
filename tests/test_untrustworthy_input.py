"""Input that would give wrong numbers with exit status 0 is refused, by name."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from _sections import invented_section, write_netcdf
from _synthetic import thermocline_section

import sectionkit.io.section as io_section
from sectionkit.config import parse_config
from sectionkit.errors import ComputationError, InputFileError, SectionDataError
from sectionkit.io import load_section
from sectionkit.io.classic import classic_expected_length
from sectionkit.study import Study


def _copy(sec):
    return {k: (v.copy() if hasattr(v, "copy") else v) for k, v in sec.items()}


@pytest.fixture(scope="module")
def classic_file(tmp_path_factory):
    """An invented section written as NetCDF classic (format version 1) by netCDF4."""
    path = write_netcdf(tmp_path_factory.mktemp("classic") / "line.nc", invented_section(4))
    out = path.with_name("line_classic.nc")
    with xr.open_dataset(path) as ds:
        ds.load().drop_encoding().to_netcdf(out, format="NETCDF3_CLASSIC")
    return out


def test_complete_classic_file_length_equals_header_expectation(classic_file):
    # NetCDF classic format specification: the last variable's data ends the file
    data = classic_file.read_bytes()
    assert data[:4] == b"CDF\x01"
    assert classic_expected_length(classic_file, data) == len(data)


@pytest.mark.parametrize("tenth", range(1, 10))
def test_truncated_classic_file_is_refused_by_name(classic_file, tmp_path, tenth):
    data = classic_file.read_bytes()
    cut = tmp_path / "cut.nc"
    cut.write_bytes(data[: len(data) * tenth // 10])
    with pytest.raises(InputFileError, match="cut.nc"):
        load_section(cut)


def test_classic_file_missing_only_its_last_byte_is_refused(classic_file, tmp_path):
    cut = tmp_path / "short.nc"
    cut.write_bytes(classic_file.read_bytes()[:-1])
    with pytest.raises(InputFileError, match="cut short"):
        load_section(cut)


def test_classic_record_file_truncated_is_refused(classic_file, tmp_path):
    # a record (unlimited) station dimension: length from numrecs x record size
    rec = tmp_path / "records.nc"
    with xr.open_dataset(classic_file) as ds:
        ds.load().drop_encoding().to_netcdf(rec, format="NETCDF3_64BIT", unlimited_dims=["profile"])
    data = rec.read_bytes()
    # the last record may carry up to 3 bytes of padding to a 4-byte boundary (specification)
    assert len(data) - 4 < classic_expected_length(rec, data) <= len(data)
    rec.write_bytes(data[:-100])
    with pytest.raises(InputFileError, match="records.nc"):
        load_section(rec)


def test_profile_exactly_zero_in_temperature_and_salinity_is_refused(tmp_path):
    sec = _copy(invented_section(4))
    sec["temperature"][2, 100:] = np.where(np.isfinite(sec["temperature"][2, 100:]), 0.0, np.nan)
    sec["salinity"][2, 100:] = np.where(np.isfinite(sec["salinity"][2, 100:]), 0.0, np.nan)
    path = write_netcdf(tmp_path / "zeros.nc", sec)
    with pytest.raises(SectionDataError, match=r"station S03 .*exactly 0 in both"):
        load_section(path)


def test_station_with_only_a_surface_sample_is_refused_by_name(tmp_path):
    sec = _copy(invented_section(4))
    for q in ("pressure", "temperature", "salinity"):
        sec[q][1, 1:] = np.nan
    path = write_netcdf(tmp_path / "surface.nc", sec)
    with pytest.raises(SectionDataError, match=r"station S02 .*only at the surface"):
        load_section(path)


def test_grid_step_larger_than_the_profiles_is_refused(tmp_path):
    path = write_netcdf(tmp_path / "line.nc", invented_section(4))
    with pytest.raises(SectionDataError, match=r"dp = 5000 dbar is larger than the profiles"):
        load_section(path, dp=5000.0)


def test_pair_whose_deepest_common_level_is_the_surface_is_refused():
    # in-memory section: station 3 has data at the surface level only
    ds = thermocline_section(n=5, dp=100.0, name="south")
    ds["SA"][2, 1:] = np.nan
    ds["CT"][2, 1:] = np.nan
    cfg = parse_config({"sections": [{"name": "south", "file": "unused.nc"}]})
    with pytest.raises(SectionDataError, match=r"station 3 of section south"):
        Study.from_config(cfg, sections={"south": ds})


def test_grid_needing_more_memory_than_the_machine_has_is_refused(tmp_path, monkeypatch):
    path = write_netcdf(tmp_path / "line.nc", invented_section(4))
    monkeypatch.setattr(io_section, "available_memory", lambda: 2**30)  # 1 GiB free
    # 4 stations x ~1.2 million levels at dp = 0.001 dbar: several GiB
    with pytest.raises(ComputationError, match=r"dp = 0.001 dbar.*GiB"):
        load_section(path, dp=0.001)


def test_absurd_grid_step_is_refused_before_allocating(tmp_path):
    # 1e-7 dbar makes ~1.2e10 levels: terabytes on any machine
    path = write_netcdf(tmp_path / "line.nc", invented_section(4))
    with pytest.raises(ComputationError, match="more than"):
        load_section(path, dp=1e-7)


def test_stations_out_of_geographic_order_give_a_caution_naming_them(tmp_path):
    sec = invented_section(5)
    order = [0, 2, 1, 3, 4]  # S03 written before S02: the line zigzags
    zig = {k: ([v[i] for i in order] if isinstance(v, list) else v[order]) for k, v in sec.items()}
    path = write_netcdf(tmp_path / "zigzag.nc", zig)
    _, cautions = load_section(path)
    found = cautions.of_kind("station-order")
    assert found and "S01-S03-S02" in found[0].message


def test_stations_in_order_give_no_station_order_caution(tmp_path):
    _, cautions = load_section(write_netcdf(tmp_path / "line.nc", invented_section(5)))
    assert not cautions.of_kind("station-order")


def test_check_command_refuses_a_surface_only_station_by_name(tmp_path, capsys):
    from sectionkit.cli import main

    sec = _copy(invented_section(4))
    for q in ("pressure", "temperature", "salinity"):
        sec[q][3, 1:] = np.nan
    path = write_netcdf(tmp_path / "surface.nc", sec)
    assert main(["check", str(path)]) == 1
    assert "station S04" in capsys.readouterr().err
