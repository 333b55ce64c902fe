"""One word for one thing: configuration names, CSV layout keys, CLI options, CF coordinates."""

from __future__ import annotations

import argparse
import copy

import gsw
import netCDF4
import numpy as np
import pandas as pd
import pytest
from _sections import invented_section, write_csv, write_netcdf

from sectionkit.cli import build_parser, main
from sectionkit.config import parse_config
from sectionkit.errors import ConfigError

BASE = {
    "sections": [{"name": "south", "file": "south.nc"}, {"name": "north", "file": "north.nc"}],
    "reference": {"pressure": 1000.0, "overrides": {"south:1": "deepest_common"}},
    "classes": {"interfaces": [{"sigma": 27.0, "p_ref": 0.0}], "names": ["light", "dense"]},
    "inverse": {"noise_class": [1.0, 0.5],
                "known": [{"name": "gap", "transport": 0.3, "noise": 0.1, "class": "light"}]},
}


def _old_names(data: dict) -> dict:
    old = copy.deepcopy(data)
    old["layers"] = old.pop("classes")
    old["reference"]["overrides"] = {"south:1": "bottom"}
    old["inverse"]["noise_layer"] = old["inverse"].pop("noise_class")
    old["inverse"]["known"][0]["layer"] = old["inverse"]["known"][0].pop("class")
    return old


def test_old_and_new_key_names_parse_to_the_same_configuration():
    new, old = parse_config(BASE), parse_config(_old_names(BASE))
    assert new.to_dict() == old.to_dict()
    assert new.layer_names == ["light", "dense"]
    assert new.inverse.noise_layer == [1.0, 0.5]
    assert new.inverse.known[0].layer == "light"
    assert new.overrides["south:1"].kind == old.overrides["south:1"].kind


def test_saved_configuration_uses_the_current_names():
    text = parse_config(_old_names(BASE)).to_toml()
    assert "[classes]" in text and "[layers]" not in text
    assert "noise_class" in text and "noise_layer" not in text
    assert 'class = "light"' in text and "layer =" not in text
    assert '"deepest_common"' in text and '"bottom"' not in text


def test_a_key_given_under_both_names_is_refused():
    both = copy.deepcopy(BASE)
    both["layers"] = both["classes"]
    with pytest.raises(ConfigError, match="both 'classes' and its old name 'layers'"):
        parse_config(both)


def test_unknown_csv_layout_values_are_named_with_the_closest_valid_one():
    bad = copy.deepcopy(BASE)
    bad["sections"][0]["temperature_kind"] = "conservativ"
    with pytest.raises(ConfigError, match="temperature_kind = 'conservativ'.*'conservative'"):
        parse_config(bad)
    bad["sections"][0]["temperature_kind"] = "conservative"
    bad["sections"][0]["pressure_units"] = "furlongs"
    with pytest.raises(ConfigError, match="pressure units 'furlongs' are not understood"):
        parse_config(bad)


# ------------------------------------------------------------------ CSV of Conservative Temperature
CSV_STUDY = """
[grid]
dp = 10.0
[[sections]]
name = "line"
file = "{file}"
{extra}
[reference]
pressure = 800.0
[classes]
interfaces = [ {{ sigma = 27.0, p_ref = 0.0 }} ]
"""


def test_csv_of_conservative_temperature_is_read_as_such_by_budget(tmp_path):
    # the same ocean written twice: in-situ temperature, and Conservative Temperature from
    # gsw.CT_from_t (TEOS-10, with SA from gsw.SA_from_SP at each station's position)
    sec = invented_section(5, dp=10.0, lat0=30.0, bottoms=[900, 1500, 1800, 1500, 900])
    write_csv(tmp_path / "insitu.csv", sec)
    ct_sec = dict(sec)
    p = np.asarray(sec["pressure"], dtype=float)
    lon = np.asarray(sec["lon"], dtype=float)[:, None]
    lat = np.asarray(sec["lat"], dtype=float)[:, None]
    sa = gsw.SA_from_SP(np.asarray(sec["salinity"], dtype=float), p, lon, lat)
    ct_sec["temperature"] = gsw.CT_from_t(sa, np.asarray(sec["temperature"], dtype=float), p)
    write_csv(tmp_path / "ct.csv", ct_sec)
    results = {}
    for tag, file, extra in (("insitu", "insitu.csv", ""),
                             ("ct", "ct.csv", 'temperature_kind = "conservative"'),
                             ("misread", "ct.csv", "")):
        config = tmp_path / f"{tag}.toml"
        config.write_text(CSV_STUDY.format(file=file, extra=extra))
        out = tmp_path / tag
        assert main(["budget", str(config), "--out", str(out), "--no-figures", "--quiet"]) == 0
        results[tag] = pd.read_csv(out / "class_transports.csv")["initial_sv"].to_numpy()
    np.testing.assert_allclose(results["ct"], results["insitu"], rtol=1e-6, atol=1e-6)
    # read as in-situ, the CT file gives other numbers: the key matters
    assert np.max(np.abs(results["misread"] - results["insitu"])) > 1e-4


# ------------------------------------------------------------------ check and CF
def test_pressure_coordinate_variable_without_axis_or_standard_name_is_accepted(tmp_path):
    # CF conventions §4.3: a coordinate variable with units of pressure is the vertical
    # coordinate; neither axis nor standard_name nor positive is needed
    sec = invented_section(4, dp=10.0, lat0=30.0, bottoms=[800, 1200, 1200, 800])
    path = write_netcdf(tmp_path / "plain_z.nc", sec, names={"pressure": "z"},
                        standard_names={"pressure": None})
    with netCDF4.Dataset(path, "a") as nc:
        z = nc.variables["z"]
        assert z.dimensions == ("z",)
        for attr in ("positive", "axis", "standard_name"):
            if attr in z.ncattrs():
                z.delncattr(attr)
    assert main(["check", str(path)]) == 0


def test_check_csv_flags_say_they_are_for_csv(capsys):
    with pytest.raises(SystemExit):
        main(["check", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    for flag in ("--temperature-kind", "--salinity-kind", "--pressure-units",
                 "--temperature-units", "--column"):
        assert flag in text
    assert text.count("CSV only") >= 5


# ------------------------------------------------------------------ ensemble options
def _ensemble_parser() -> argparse.ArgumentParser:
    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices["ensemble"]


def test_ensemble_exposes_every_perturbation_with_help():
    from sectionkit.ensemble import Perturbation

    parser = _ensemble_parser()
    options = {a.dest: a for a in parser._actions}
    for field in Perturbation.__dataclass_fields__:
        assert field in options, field
        assert options[field].help and len(options[field].help) > 15, field


def test_ensemble_options_reach_the_perturbation():
    from sectionkit.ensemble import _perturbation_from_args

    args = build_parser().parse_args([
        "ensemble", "study.toml", "--out", "x", "--temperature", "0.003", "--salinity", "0.004",
        "--pressure", "2", "--mode", "level", "--reference-range", "2000", "3500",
        "--prior-factor", "0.5", "2", "--constraints", "twin"])
    p = _perturbation_from_args(args)
    assert (p.temperature, p.salinity, p.pressure, p.mode) == (0.003, 0.004, 2.0, "level")
    assert p.reference_range == (2000.0, 3500.0) and p.prior_factor == (0.5, 2.0)
    assert p.constraints == "twin"


def test_csv_only_flags_on_a_netcdf_file_are_an_error(tmp_path, capsys):
    sec = invented_section(4, dp=10.0, lat0=30.0, bottoms=[800, 1200, 1200, 800])
    path = write_netcdf(tmp_path / "line.nc", sec)
    assert main(["check", str(path)]) == 0
    capsys.readouterr()
    assert main(["check", "--temperature-kind", "conservative", str(path)]) == 1
    message = capsys.readouterr().err
    assert "--temperature-kind applies to CSV files only" in message and "standard_name" in message


# ---------------------------------------------------- batch and workbench say it alike
def _small_study():
    from _synthetic import invented_line


    cfg = parse_config({
        "sections": [{"name": "south", "file": "s.nc"}, {"name": "north", "file": "n.nc",
                                                          "into_box": False}],
        "classes": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0},
                                   {"sigma": 36.9, "p_ref": 2000.0}]},
        "inverse": {},
    })
    return cfg, {"south": invented_line(5, 25.0), "north": invented_line(6, 40.0)}


def test_workbench_and_batch_figures_label_interfaces_alike():
    from sectionkit.layers import sigma_label
    from sectionkit.workbench.model import WorkbenchState

    cfg, sections = _small_study()
    state = WorkbenchState(cfg, sections, autosave=False)
    labels = [face[0] for face in state.velocity_section("south").interfaces]
    assert labels == ["σ₀ 26.8", "σ₂ 36.9"]
    assert labels == [sigma_label(f.sigma, f.p_ref) for f in cfg.interfaces]


def test_workbench_section_numbers_say_net_volume_and_net_mass():
    from sectionkit.study import Study
    from sectionkit.tables import tables
    from sectionkit.workbench import render

    cfg, sections = _small_study()
    study = Study.from_config(cfg, sections=sections)
    summary = tables(study, study.solve())["section_summary.csv"]
    text = render.section_numbers_html(summary)
    assert "net volume (Sv)" in text and "net mass / ρ₀ (Sv)" in text
    assert "<td style" in text and ">net (Sv)<" not in text
