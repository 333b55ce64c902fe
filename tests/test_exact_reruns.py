"""Exact reruns: provenance.json hashes every input and a rerun reproduces every output."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from _sections import invented_section, write_casts, write_netcdf

from sectionkit.cli import main
from sectionkit.errors import InputFileError
from sectionkit.report import load_provenance

ARGS = ["--no-figures", "--quiet"]


def _study(tmp: Path) -> Path:
    """Two lines: south a per-cast folder with a bathymetry track, north one file;
    [ekman] stress lists south before north (not sorted), with Ekman unknowns."""
    south = invented_section(5, dp=10.0, lat0=24.0, bottoms=[900, 1500, 2000, 1600, 900])
    north = invented_section(4, dp=10.0, lat0=36.0, bottoms=[800, 1400, 1500, 800])
    write_casts(tmp / "south_casts", south)
    write_netcdf(tmp / "north.nc", north)
    pd.DataFrame({"distance_km": [0.0, 100.0, 300.0],
                  "depth_m": [900.0, 2100.0, 900.0]}).to_csv(tmp / "track.csv", index=False)
    (tmp / "study.toml").write_text("""
[grid]
dp = 10.0
[[sections]]
name = "south"
file = "south_casts"
bathymetry = "track.csv"
[[sections]]
name = "north"
file = "north.nc"
into_box = false
[reference]
pressure = 800.0
[ekman]
stress = { south = [-0.05, 0.0], north = [0.04, 0.01] }
[layers]
interfaces = [ { sigma = 27.0, p_ref = 0.0 } ]
[inverse]
prior_ekman = 0.5
""")
    return tmp / "study.toml"


@pytest.fixture()
def first_run(tmp_path):
    config = _study(tmp_path)
    out = tmp_path / "run1"
    assert main(["budget", str(config), "--out", str(out), *ARGS]) == 0
    return tmp_path, out


def _outputs(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file() and p.name != "provenance.json"}


def test_provenance_hashes_every_file_of_a_folder_and_the_bathymetry_track(first_run):
    tmp, out = first_run
    record = json.loads((out / "provenance.json").read_text())
    hashed = {Path(p).name for p in record["input_sha256"]}
    assert {"cast1.nc", "cast5.nc", "north.nc", "track.csv"} <= hashed
    folder = str(tmp / "south_casts")
    assert record["input_folders"][folder] == [f"cast{i}.nc" for i in range(1, 6)]


def test_rerun_from_provenance_reproduces_every_output_byte_for_byte(first_run):
    tmp, out = first_run
    again = tmp / "run2"
    assert main(["budget", str(out / "provenance.json"), "--out", str(again), *ARGS]) == 0
    assert _outputs(again) == _outputs(out)


def test_rerun_keeps_the_order_of_ekman_stress(first_run):
    _, out = first_run
    config = load_provenance(out / "provenance.json")
    assert list(config.ekman_stress) == ["south", "north"]


def test_rerun_refuses_a_changed_bathymetry_track(first_run):
    tmp, out = first_run
    (tmp / "track.csv").write_text("distance_km,depth_m\n0,900\n300,950\n")
    with pytest.raises(InputFileError, match="track.csv has changed"):
        load_provenance(out / "provenance.json")


def test_rerun_refuses_a_cast_added_to_the_folder(first_run):
    tmp, out = first_run
    extra = invented_section(6, dp=10.0, lat0=24.0)
    write_casts(tmp / "extra", extra)
    (tmp / "extra" / "cast6.nc").rename(tmp / "south_casts" / "cast6.nc")
    with pytest.raises(InputFileError, match="added since: cast6.nc"):
        load_provenance(out / "provenance.json")


def test_rerun_refuses_a_cast_missing_from_the_folder(first_run):
    tmp, out = first_run
    (tmp / "south_casts" / "cast3.nc").unlink()
    with pytest.raises(InputFileError, match="missing now: cast3.nc"):
        load_provenance(out / "provenance.json")


def test_rerun_refuses_a_changed_section_file(first_run):
    tmp, out = first_run
    write_netcdf(tmp / "north.nc", invented_section(4, dp=10.0, lat0=36.5))
    with pytest.raises(InputFileError, match="north.nc has changed"):
        load_provenance(out / "provenance.json")


def test_csv_column_mapping_is_recorded_and_a_changed_csv_is_refused(tmp_path):
    from _sections import write_csv

    sec = invented_section(4, dp=10.0, lat0=24.0)
    write_csv(tmp_path / "line.csv", sec, headers={"temperature": "TEMP_C", "pressure": "PRES"})
    (tmp_path / "csv.toml").write_text("""
[grid]
dp = 10.0
[[sections]]
name = "line"
file = "line.csv"
columns = { temperature = "TEMP_C", pressure = "PRES" }
[reference]
pressure = 500.0
""")
    out = tmp_path / "out"
    assert main(["budget", str(tmp_path / "csv.toml"), "--out", str(out), *ARGS]) == 0
    record = json.loads((out / "provenance.json").read_text())
    assert record["configuration"]["sections"][0]["columns"] == {"temperature": "TEMP_C",
                                                                  "pressure": "PRES"}
    assert str(tmp_path / "line.csv") in record["input_sha256"]
    again = tmp_path / "again"
    assert main(["budget", str(out / "provenance.json"), "--out", str(again), *ARGS]) == 0
    assert _outputs(again) == _outputs(out)
    (tmp_path / "line.csv").write_text((tmp_path / "line.csv").read_text().replace(
        "TEMP_C", "TEMP_C ", 1))
    with pytest.raises(InputFileError, match="line.csv has changed"):
        load_provenance(out / "provenance.json")


def test_rerun_reproduces_the_figures_byte_for_byte(tmp_path):
    config = _study(tmp_path)
    first, again = tmp_path / "first", tmp_path / "again"
    assert main(["budget", str(config), "--out", str(first), "--quiet"]) == 0
    assert main(["budget", str(first / "provenance.json"), "--out", str(again), "--quiet"]) == 0
    figures = sorted(p.name for p in (first / "figures").iterdir())
    assert any(n.endswith(".png") for n in figures) and any(n.endswith(".pdf") for n in figures)
    assert _outputs(again) == _outputs(first)
