"""Dual-sensor files: the variable `check` suggests can be chosen in the configuration."""

from __future__ import annotations

import netCDF4
import numpy as np
import pandas as pd
import pytest
from _sections import invented_section, write_netcdf

from sectionkit.cli import main
from sectionkit.config import load_config
from sectionkit.errors import InputFileError
from sectionkit.study import Study

SECOND_SENSOR_OFFSET = 0.5  # degC: the secondary sensor of this invented file reads warmer


@pytest.fixture()
def dual(tmp_path):
    """A section whose file has two temperature sensors (same standard_name)."""
    sec = invented_section(5, dp=10.0, lat0=24.0)
    path = write_netcdf(tmp_path / "dual.nc", sec)
    with netCDF4.Dataset(path, "a") as nc:
        primary = nc["temp"]
        second = nc.createVariable("temp2", "f8", primary.dimensions)
        second.set_auto_mask(False)
        second.standard_name = "sea_water_temperature"
        second.units = "degC"
        second[...] = primary[...] + SECOND_SENSOR_OFFSET
    return path


def _config(tmp_path, variables: str = "") -> str:
    path = tmp_path / "dual.toml"
    path.write_text(f"""
[grid]
dp = 10.0
[[sections]]
name = "line"
file = "dual.nc"
{variables}
[reference]
pressure = 500.0
""")
    return str(path)


def test_check_suggests_the_configuration_key_for_two_sensors(dual, capsys):
    assert main(["check", str(dual)]) == 1
    err = capsys.readouterr().err
    assert 'variables = { temperature = "temp" } under [[sections]]' in err


def test_budget_without_a_choice_of_sensor_is_refused(dual, tmp_path):
    with pytest.raises(InputFileError, match="all have standard_name sea_water_temperature"):
        Study.from_config(load_config(_config(tmp_path)))


def test_budget_uses_the_sensor_chosen_in_the_configuration(dual, tmp_path):
    one = Study.from_config(load_config(_config(tmp_path, 'variables = { temperature = "temp" }')))
    two = Study.from_config(load_config(_config(tmp_path,
                                                'variables = { temperature = "temp2" }')))
    # Conservative Temperature follows the in-situ offset to within the gsw conversion (~1e-3)
    diff = (two.sections["line"]["CT"] - one.sections["line"]["CT"]).values
    finite = np.isfinite(diff)
    np.testing.assert_allclose(diff[finite], SECOND_SENSOR_OFFSET, atol=0.01)


def test_budget_command_runs_with_the_chosen_sensor(dual, tmp_path):
    config = _config(tmp_path, 'variables = { temperature = "temp2", salinity = "psal" }')
    out = tmp_path / "out"
    assert main(["budget", config, "--out", str(out), "--no-figures", "--quiet"]) == 0
    assert np.isfinite(pd.read_csv(out / "section_summary.csv")["net_sv"]).all()


def test_chosen_variable_that_is_not_in_the_file_is_named(dual, tmp_path):
    config = _config(tmp_path, 'variables = { temperature = "temp3" }')
    with pytest.raises(InputFileError, match="'temp3' chosen for temperature is not in the file"):
        Study.from_config(load_config(config))
