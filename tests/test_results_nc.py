"""results.nc: every reported number as a CF-NetCDF Dataset that xarray and unit libraries read."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from _box import TWO_LINES, write_two_lines

from sectionkit.cli import main
from sectionkit.outputs import REGISTRY, SECTION_OUTPUTS, UDUNITS

cf_units = pytest.importorskip("cf_units")

STUDY = """
title = "results.nc test"
""" + TWO_LINES + """[reference]
pressure = 800.0
[classes]
interfaces = [ { sigma = 26.0, p_ref = 0.0 }, { sigma = 27.2, p_ref = 0.0 } ]
names = ["warm", "thermocline", "cold"]
"""
INVERSE = """
[inverse]
noise_class = [1.0, 1.0, 0.5]
"""


def _run(tmp_path: Path, inverse: bool) -> Path:
    write_two_lines(tmp_path)
    config = tmp_path / "study.toml"
    config.write_text(STUDY + (INVERSE if inverse else ""))
    out = tmp_path / "out"
    assert main(["budget", str(config), "--out", str(out), "--no-figures", "--quiet"]) == 0
    return out


@pytest.fixture(scope="module")
def with_inverse(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("inv"), inverse=True)


@pytest.fixture(scope="module")
def without_inverse(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("initial"), inverse=False)


def test_results_nc_opens_with_named_dimensions_and_coordinates(with_inverse):
    with xr.open_dataset(with_inverse / "results.nc") as ds:
        for dim in ("section", "class", "interface", "level", "pair", "unknown", "constraint"):
            assert dim in ds.dims, dim
        assert list(ds["section"].values) == ["south", "north"]
        assert list(ds["class"].values) == ["warm", "thermocline", "cold"]
        assert list(ds["interface"].values) == ["σ₀ 26", "σ₀ 27.2"]
        assert ds["level"].attrs["units"] == "dbar"
        assert ds.sizes["pair"] == 5 + 4
        assert ds.attrs["Conventions"].startswith("CF-1.")
        assert ds["class_volume_transport_adjusted"].dims == ("section", "class")


def test_every_units_attribute_parses_with_a_unit_library(with_inverse, without_inverse):
    for out in (with_inverse, without_inverse):
        with xr.open_dataset(out / "results.nc") as ds:
            units = {name: var.attrs["units"] for name, var in ds.variables.items()
                     if "units" in var.attrs}
            units.update({f"constraint row {k}": u for k, u in
                          enumerate(ds.coords.get("constraint_units", xr.DataArray([])).values)})
        assert len(units) > 20
        for name, unit in units.items():
            assert unit != "Sv", name
            cf_units.Unit(unit)  # raises ValueError when UDUNITS cannot read it


def test_transports_are_in_units_convertible_to_cubic_metres_per_second(with_inverse):
    # cf_units (UDUNITS-2): 1e6 m3 s-1 is 10^6 m^3 s^-1; 1 Sv = 10^6 m^3 s^-1 (common practice)
    with xr.open_dataset(with_inverse / "results.nc") as ds:
        unit = cf_units.Unit(ds["net_volume_transport_adjusted"].attrs["units"])
    assert unit.convert(1.0, cf_units.Unit("m3 s-1")) == pytest.approx(1e6)
    heat = cf_units.Unit(REGISTRY["heat_transport"].units)
    assert heat.convert(1.0, cf_units.Unit("W")) == pytest.approx(1e15)  # 1 PW = 1e15 W


def test_sv_is_refused_as_a_units_attribute():
    # to UDUNITS "Sv" is the sievert (J kg-1), a radiation dose: no transport unit may say it
    sievert = cf_units.Unit("Sv")
    assert not sievert.is_convertible(cf_units.Unit("m3 s-1"))
    assert sievert.is_convertible(cf_units.Unit("J kg-1"))
    assert "Sv" not in {spec.units for spec in SECTION_OUTPUTS}
    assert "Sv" not in UDUNITS.values()


def test_results_nc_holds_the_numbers_of_the_csv_tables(with_inverse):
    classes = pd.read_csv(with_inverse / "class_transports.csv")
    summary = pd.read_csv(with_inverse / "section_summary.csv")
    pairs = pd.read_csv(with_inverse / "pair_adjustments.csv")
    with xr.open_dataset(with_inverse / "results.nc") as ds:
        for row in classes.rename(columns={"class": "name"}).itertuples(index=False):
            at = {"section": row.section, "class": row.name}
            assert float(ds["class_volume_transport_adjusted"].sel(at)) == pytest.approx(
                row.adjusted_sv, rel=1e-6)
            assert float(ds["class_volume_transport_error"].sel(at)) == pytest.approx(
                row.adjusted_err_sv, rel=1e-6)
        net = ds["net_volume_transport_adjusted"].sel(section=list(summary.section)).values
        np.testing.assert_allclose(net, summary.net_sv, rtol=1e-6)
        np.testing.assert_allclose(ds["reference_velocity_adjustment"].values,
                                   pairs.adjustment_m_s, rtol=1e-6, atol=1e-12)
        np.testing.assert_allclose(ds["reference_pressure"].values, pairs.ref_pressure)


def test_class_transports_add_up_to_the_net_volume_transport(with_inverse):
    # classes partition the section (fact of the trade): their sum is the net transport
    with xr.open_dataset(with_inverse / "results.nc") as ds:
        total = ds["class_volume_transport_adjusted"].sum("class")
        np.testing.assert_allclose(total, ds["net_volume_transport_adjusted"], rtol=1e-9,
                                   atol=1e-9)


def test_without_an_inverse_adjusted_equals_initial_and_errors_are_missing(without_inverse):
    with xr.open_dataset(without_inverse / "results.nc") as ds:
        xr.testing.assert_allclose(ds["class_volume_transport_adjusted"],
                                   ds["class_volume_transport_initial"])
        assert bool(ds["net_volume_transport_error"].isnull().all())
        assert "constraint" not in ds.dims and "unknown" not in ds.dims


def test_tracer_transports_are_in_results_nc_in_kmol_per_second():
    from _synthetic import thermocline_section

    from sectionkit.config import parse_config
    from sectionkit.dataset import results_dataset
    from sectionkit.study import Study

    ds = thermocline_section(n=6, dp=10.0)
    ds["oxygen"] = (("station", "pressure"),
                    np.where(np.isfinite(ds["SA"].values), 200.0, np.nan),
                    {"units": "umol/kg", "role": "tracer"})
    cfg = parse_config({
        "sections": [{"name": "south", "file": "unused.nc", "bottle": "unused.csv"}],
        "classes": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0}]},
        "tracers": {"transport": ["oxygen"]},
        "inverse": {"conserve": ["mass"]},
    })
    study = Study.from_config(cfg, sections={"south": ds})
    out = results_dataset(study, study.solve())
    var = out["class_tracer_transport_adjusted"]
    assert var.dims == ("section", "tracer", "class") and list(out["tracer"].values) == ["oxygen"]
    assert cf_units.Unit(var.attrs["units"]).is_convertible(cf_units.Unit("mol s-1"))
    # a uniform 200 umol/kg tracer: 200 umol/kg x rho0 (1025 kg m-3) x 1e6 m3 s-1 per Sv
    # / 1e9 umol per kmol = 205 kmol s-1 per Sv of mass transport / rho0 (hand calculation)
    np.testing.assert_allclose(var.values[0, 0], 205.0 * out["class_mass_transport_adjusted"]
                               .values[0], rtol=1e-9)


def test_every_registered_unit_spelling_parses_and_scales_as_its_display_unit():
    # every CF spelling the registry hands out (results.nc, the xarray layer, ensemble.nc)
    # is read by UDUNITS, and its SI value is the display unit's (1 Sv = 1e6 m3 s-1, 1 PW =
    # 1e15 W, common practice; 1 km2 = 1e6 m2; 1 kmol = 1e3 mol)
    from sectionkit.outputs import SCALE

    si = {"1e6 m3 s-1": "m3 s-1", "1e6 m3 s-1 g kg-1": "m3 s-1 g kg-1", "1e15 W": "W",
          "m s-1": "m s-1", "dbar": "dbar", "km": "m", "km2": "m2", "kg m-3": "kg m-3",
          "kmol s-1": "mol s-1", "1": "1"}
    for display, cf in UDUNITS.items():
        unit = cf_units.Unit(cf)
        assert unit.convert(1.0, cf_units.Unit(si[cf])) == pytest.approx(SCALE[display]), display
