"""Direct (LADCP / shipboard ADCP) velocity references: rotation, range means, inverse priors."""

from __future__ import annotations

import netCDF4
import numpy as np
import pandas as pd
import pytest
from _synthetic import canonical_section

from sectionkit.config import parse_config
from sectionkit.direct import normal_velocity, range_mean
from sectionkit.errors import InputFileError, SectionDataError
from sectionkit.geometry import along_line_direction
from sectionkit.geostrophy import ReferenceChoice
from sectionkit.io.adcp import read_velocity_profiles
from sectionkit.study import Study


@pytest.mark.parametrize("theta", np.arange(0.0, 360.0, 30.0))
@pytest.mark.parametrize("alpha", [0.0, 45.0, 100.0, 260.0])
def test_rotation_into_the_section_normal_for_every_line_orientation(theta, alpha):
    # a short line heading theta degrees counter-clockwise from east at 40 N; a current of
    # 0.3 m/s heading alpha: its component to the left of the line is 0.3 sin(alpha - theta)
    # (plane geometry, hand calculation; 0.05 degree steps make the sphere flat to 1e-4)
    lat0, d = 40.0, 0.05
    t = np.radians(theta)
    lon = np.array([10.0, 10.0 + d * np.cos(t) / np.cos(np.radians(lat0))])
    lat = np.array([lat0, lat0 + d * np.sin(t)])
    te, tn = along_line_direction(lon, lat)
    a = np.radians(alpha)
    u, v = 0.3 * np.cos(a), 0.3 * np.sin(a)
    got = normal_velocity(np.array([u]), np.array([v]), te[0], tn[0])[0]
    assert got == pytest.approx(0.3 * np.sin(a - t), abs=1e-4)


def test_range_mean_and_its_standard_error():
    p = np.array([100.0, 200.0, 300.0, 400.0, 500.0])
    x = np.array([9.0, 1.0, 2.0, 3.0, 9.0])
    mean, sem, n = range_mean(p, x, (150.0, 450.0))
    # hand calculation: mean of 1, 2, 3 is 2, sample std 1, sem 1/sqrt(3)
    assert (mean, n) == (2.0, 3)
    assert sem == pytest.approx(1.0 / np.sqrt(3.0))


def _still_section(theta=0.0):
    """Three identical stations (no shear) along a line heading ``theta`` from east, 30 N."""
    p = np.arange(0.0, 2000.0 + 5.0, 10.0)
    ct = 2.0 + 18.0 * np.exp(-p / 700.0)
    t = np.radians(theta)
    k = np.arange(3)
    lon = -40.0 + 0.5 * k * np.cos(t) / np.cos(np.radians(30.0))
    lat = 30.0 + 0.5 * k * np.sin(t)
    return canonical_section(np.full((3, p.size), 35.0), np.tile(ct, (3, 1)), p, lon, lat,
                             name="line")


def _ladcp_csv(path, u, v, stations=("1", "2", "3")):
    rows = []
    for sid in stations:
        for pres in np.arange(0.0, 2000.0, 20.0):
            rows.append({"station": sid, "pressure": pres, "u": u, "v": v})
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def _config(tmp_path, use, inverse=True, error=0.01):
    data = {
        "title": "direct",
        "sections": [{"name": "line", "file": "unused.nc", "adcp": "ladcp.csv"}],
        "reference": {"pressure": 1000.0},
        "adcp": {"pressure_range": [500.0, 1500.0], "use": use, "error": error},
    }
    if inverse:
        data["inverse"] = {"conserve": ["mass"], "noise_total": 1e3, "noise_layer": [1e3],
                           "prior_velocity": 0.05}
    return parse_config(data, base_dir=tmp_path)


def test_known_direct_velocity_becomes_each_pairs_reference(tmp_path):
    # line heading north-east (45 degrees); current 0.1 m/s to the north-west is entirely
    # to the left of the line: normal velocity +0.1 m/s (hand calculation)
    _ladcp_csv(tmp_path / "ladcp.csv", -0.1 / np.sqrt(2), 0.1 / np.sqrt(2))
    study = Study.from_config(_config(tmp_path, "known", inverse=False),
                              sections={"line": _still_section(45.0)})
    results = study.solve()
    ref = results.references["line"]
    assert ref.kinds == ["velocity", "velocity"]
    np.testing.assert_allclose(ref.offset, 0.1, atol=2e-4)
    np.testing.assert_allclose(ref.pressure, 1000.0)
    # no shear: the transport is the reference velocity times the section area
    op = study.operators["line"]
    area = op.area[0].sum()
    assert results.value("line", "net") * 1e6 == pytest.approx(0.1 * area, rel=3e-3)


def test_direct_velocity_as_prior_mean_is_kept_when_the_constraints_are_weak(tmp_path):
    _ladcp_csv(tmp_path / "ladcp.csv", 0.0, 0.04)  # east-west line: northward is normal
    study = Study.from_config(_config(tmp_path, "prior"), sections={"line": _still_section()})
    results = study.solve()
    system = results.inverse.system
    # reference at 1000 dbar of a still ocean: offset 0, so the prior mean is the measured 0.04
    np.testing.assert_allclose(system.prior_mean[:2], 0.04, atol=1e-12)
    np.testing.assert_allclose(system.prior[:2], 0.01, rtol=1e-12)  # stated error, sem = 0
    # with mass noise of 1000 Sv the data cannot move the estimate off the prior mean
    np.testing.assert_allclose(results.estimate[:2], 0.04, atol=1e-6)


def test_pair_profiles_from_cf_netcdf_are_used_for_their_pair(tmp_path):
    path = tmp_path / "sadcp.nc"
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("profile", 2)
        nc.createDimension("z", 3)
        nc.createDimension("strlen", 8)
        p = nc.createVariable("pres", "f8", ("z",))
        p.standard_name, p.units = "sea_water_pressure", "dbar"
        p[:] = [600.0, 800.0, 1000.0]
        for name, sn, value in (("u", "eastward_sea_water_velocity", 0.0),
                                ("v", "northward_sea_water_velocity", 3.0)):
            var = nc.createVariable(name, "f8", ("profile", "z"))
            var.standard_name, var.units = sn, "cm s-1"
            var[:] = value
        ids = nc.createVariable("pair_id", "S1", ("profile", "strlen"))
        ids.cf_role = "profile_id"
        ids._Encoding = "ascii"
        ids[:] = np.array(["line:0", "line:1"], dtype="S8")
    profiles = read_velocity_profiles(path)
    assert [(p.kind, p.key, p.section) for p in profiles] == [("pair", "0", "line"),
                                                              ("pair", "1", "line")]
    np.testing.assert_allclose(profiles[0].v, 0.03)  # cm s-1 converted


def test_velocity_in_cm_per_second_labelled_as_metres_is_refused(tmp_path):
    _ladcp_csv(tmp_path / "ladcp.csv", 0.0, 12.0)
    with pytest.raises(SectionDataError, match="exceeds any ocean current"):
        read_velocity_profiles(tmp_path / "ladcp.csv")


@pytest.mark.parametrize("pair", ["east", "1.5", "-1"])
def test_pair_column_that_is_not_a_pair_index_is_refused_naming_file_and_value(tmp_path, pair):
    path = tmp_path / "ladcp.csv"
    path.write_text(f"pair,pressure,u,v\n{pair},100,0.0,0.1\n", encoding="utf-8")
    with pytest.raises(InputFileError, match=rf"ladcp\.csv: pair '{pair}' is not a 0-based"):
        read_velocity_profiles(path)


def test_row_without_a_station_is_refused_not_dropped(tmp_path):
    path = tmp_path / "ladcp.csv"
    path.write_text("station,pressure,u,v\n7,100,0.0,0.1\n,200,0.0,0.1\n", encoding="utf-8")
    with pytest.raises(InputFileError, match=r"ladcp\.csv: data row 2 has no station"):
        read_velocity_profiles(path)


def test_workbench_slider_with_direct_velocity_priors_equals_a_batch_run(tmp_path):
    # the prior mean of each adjustment is (direct velocity - offset): it moves with the
    # reference, and the workbench's linear update must follow it exactly
    from sectionkit.workbench.model import WorkbenchState

    try:
        from tests._sections import invented_section, write_netcdf
    except ImportError:
        from _sections import invented_section, write_netcdf
    sec = invented_section(6)
    write_netcdf(tmp_path / "line.nc", sec)
    _ladcp_csv(tmp_path / "ladcp.csv", 0.01, 0.03, stations=sec["station"])
    data = {
        "title": "direct",
        "sections": [{"name": "line", "file": "line.nc", "adcp": "ladcp.csv"}],
        "reference": {"pressure": 1000.0},
        "classes": {"interfaces": [{"sigma": 26.5, "p_ref": 0.0}]},
        "adcp": {"pressure_range": [200.0, 800.0], "use": "prior", "error": 0.01},
        "inverse": {"conserve": ["mass"], "noise_class": [0.5, 0.5], "noise_total": 0.2},
    }
    parse_config(data, base_dir=tmp_path).save(tmp_path / "box.toml")
    state = WorkbenchState.open(tmp_path / "box.toml", autosave=tmp_path / "auto.toml")
    for p in (400.0, 900.0):
        assert state.set_reference_pressure(p).linear
        quick = state.class_table().to_frame()
        data["reference"] = {"pressure": p}
        study = Study.from_config(parse_config(data, base_dir=tmp_path))
        results = study.solve()
        assert results.inverse.system.prior_mean is not None
        for c, layer in enumerate(study.operators["line"].layer_names):
            np.testing.assert_allclose(quick["adjusted_sv"].iloc[c],
                                       results.value("line", f"volume:{layer}"),
                                       rtol=1e-9, atol=1e-9)


def test_pair_profiles_of_another_section_are_not_used(tmp_path):
    rows = [{"section": sec, "pair": k, "pressure": p, "u": 0.0, "v": v}
            for sec, v in (("line", 0.05), ("other", -0.5)) for k in (0, 1)
            for p in np.arange(500.0, 1500.0, 50.0)]
    pd.DataFrame(rows).to_csv(tmp_path / "ladcp.csv", index=False)
    study = Study.from_config(_config(tmp_path, "known", inverse=False),
                              sections={"line": _still_section()})
    # an east-west line: northward is normal; only this section's 0.05 m/s is used
    np.testing.assert_allclose(study.direct["line"].measured, 0.05, atol=1e-12)


def test_an_unperturbed_ensemble_member_keeps_the_direct_velocity_prior_means(tmp_path):
    # a member that perturbs nothing is the study itself: same prior means, same estimate
    from sectionkit.ensemble import Perturbation, run_member

    _ladcp_csv(tmp_path / "ladcp.csv", 0.0, 0.04)
    study = Study.from_config(_config(tmp_path, "prior"), sections={"line": _still_section()})
    member = run_member(study, np.random.SeedSequence(1),
                        Perturbation(temperature=0.0, salinity=0.0, pressure=0.0))
    np.testing.assert_allclose(member["estimate"], study.solve().estimate, atol=1e-12)


def test_explicit_pair_override_wins_over_a_known_direct_velocity(tmp_path):
    # east-west line: the northward 0.1 m/s is the normal velocity (hand calculation)
    _ladcp_csv(tmp_path / "ladcp.csv", 0.0, 0.1)
    cfg = _config(tmp_path, "known", inverse=False)
    cfg.overrides["line:1"] = ReferenceChoice("velocity", pressure=800.0, velocity=-0.02)
    study = Study.from_config(cfg, sections={"line": _still_section()})
    results = study.solve()
    ref = results.references["line"]
    # pair 0 has no override: its direct velocity is its reference; pair 1 keeps what the
    # user wrote for it (-0.02 m/s at 800 dbar; no shear, so the offset is that velocity)
    assert ref.kinds == ["velocity", "velocity"]
    assert ref.offset[0] == pytest.approx(0.1, abs=2e-4)
    assert ref.offset[1] == pytest.approx(-0.02, abs=1e-12)
    assert ref.pressure[1] == pytest.approx(800.0)
    kept = results.cautions.of_kind("direct-velocity-overridden")
    assert len(kept) == 1 and "line:1" in kept[0].message and "line:0" not in kept[0].message


def test_no_caution_when_no_override_meets_a_direct_velocity(tmp_path):
    _ladcp_csv(tmp_path / "ladcp.csv", 0.0, 0.1)
    study = Study.from_config(_config(tmp_path, "known", inverse=False),
                              sections={"line": _still_section()})
    assert not study.solve().cautions.of_kind("direct-velocity-overridden")


def test_a_kept_override_uses_its_own_error_as_the_prior_not_the_direct_velocitys(tmp_path):
    _ladcp_csv(tmp_path / "ladcp.csv", 0.0, 0.1)
    cfg = _config(tmp_path, "known")
    cfg.overrides["line:1"] = ReferenceChoice("velocity", pressure=800.0, velocity=-0.02,
                                              velocity_error=0.003)
    study = Study.from_config(cfg, sections={"line": _still_section()})
    prior = study.velocity_prior()["line"]
    assert prior[0] == pytest.approx(study.direct["line"].error[0])
    assert prior[1] == pytest.approx(0.003)


def test_a_rebuild_reads_the_direct_velocity_file_once_and_gives_the_same_references(
        tmp_path, monkeypatch):
    # a change of classes rebuilds the operators; the velocity file is read at load only
    import sectionkit.study as study_module

    _ladcp_csv(tmp_path / "ladcp.csv", 0.0, 0.04)  # east-west line: northward is normal
    reads = []
    real = study_module.read_velocity_profiles
    monkeypatch.setattr(study_module, "read_velocity_profiles",
                        lambda path: reads.append(path) or real(path))
    study = Study.from_config(_config(tmp_path, "known", inverse=False),
                              sections={"line": _still_section()})
    before = study.direct["line"].velocity.copy()
    study.rebuild_operators()
    assert len(reads) == 1
    np.testing.assert_array_equal(study.direct["line"].velocity, before)
