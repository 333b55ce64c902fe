"""Physics checks against outside sources: hemispheres, line directions, Ekman layer,
references under every bottom-triangle rule, the equator, and a closed-form box."""

from __future__ import annotations

from pathlib import Path

import gsw
import numpy as np
import pandas as pd
import pytest
from _box import TWO_LINES
from _sections import write_netcdf
from _synthetic import canonical_section, thermocline_section

from sectionkit.cli import main
from sectionkit.config import parse_config
from sectionkit.errors import ComputationError, EquatorError
from sectionkit.geostrophy import value_at_pressure
from sectionkit.layers import Interface
from sectionkit.operator import RHO0, build_operator
from sectionkit.study import Study

FACES = [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 36.9, "p_ref": 2000.0}]


def _line(lon, lat, dp=20.0, name="line"):
    """Thermocline deepening with station index, flat bottom at 2000 dbar."""
    lon, lat = np.asarray(lon, float), np.asarray(lat, float)
    p = np.arange(0.0, 2000.0 + dp / 2, dp)
    x = np.linspace(0.0, 1.0, lon.size)[:, None]
    ct = 2.0 + 18.0 * np.exp(-p / (700.0 + 300.0 * x))
    sa = 34.9 + 1.2 * np.exp(-p / 900.0) + 0 * x
    return canonical_section(sa, ct, p, lon, lat, np.full(lon.size, 2000.0), name=name)


# ------------------------------------------------------------------ hemispheres, directions


@pytest.mark.parametrize("lon, lat", [
    (np.linspace(-40.0, -35.0, 5), np.full(5, -30.0)),  # zonal line, southern hemisphere
    (np.full(5, -30.0), np.linspace(20.0, 25.0, 5)),  # meridional line, south to north
    (np.full(5, -30.0), np.linspace(-20.0, -25.0, 5)),  # meridional, southern, north to south
])
def test_relative_velocity_matches_gsw_geostrophic_velocity_in_any_hemisphere_and_direction(
        lon, lat):
    # reference library: gsw.geostrophic_velocity (TEOS-10), which returns the velocity
    # to the left of the direction of increasing station order, as DESIGN.md §4 asks
    section = _line(lon, lat)
    op = build_operator(section, [])
    sa, ct, p = section["SA"].values, section["CT"].values, section["pressure"].values
    psi = gsw.geo_strf_dyn_height(sa.T, ct.T, p, p_ref=0.0, axis=0, max_dp=1.0)
    v, _, _ = gsw.geostrophic_velocity(psi, lon, lat, p=0)
    v = v - v[:1, :]  # relative to the surface, (level, pair)
    np.testing.assert_allclose(op.v_eff, v.T, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("lon, lat, stress, sign", [
    # southern hemisphere: Ekman transport 90 degrees to the LEFT of the wind (common
    # practice); an eastward wind over a west-to-east line drives it north = to the left (+)
    (np.linspace(-40.0, -35.0, 5), np.full(5, -30.0), (0.1, 0.0), +1.0),
    # northern hemisphere, meridional line south to north (left = west): a northward wind
    # drives the transport to its right = east, i.e. negative
    (np.full(5, -30.0), np.linspace(20.0, 25.0, 5), (0.0, 0.1), -1.0),
    # southern hemisphere, the same line and wind: transport to the left of the wind = west
    (np.full(5, -30.0), np.linspace(-25.0, -20.0, 5), (0.0, 0.1), +1.0),
])
def test_ekman_transport_sign_and_size_follow_tau_over_rho_f(lon, lat, stress, sign):
    # magnitude |tau| L / (rho0 |f|) per pair (Ekman 1905; DESIGN.md §4), L = gsw.distance
    op = build_operator(_line(lon, lat), [])
    ek = op.ekman_volume(*stress)
    width = gsw.distance(lon, lat)[0]
    f = np.abs(gsw.f(0.5 * (lat[:-1] + lat[1:])))
    np.testing.assert_allclose(ek, sign * 0.1 * width / (RHO0 * f), rtol=1e-9)


def test_ekman_transport_is_split_at_an_interface_inside_the_ekman_layer():
    # hand calculation: an interface half-way between 20 and 30 dbar lies inside the top
    # 50 m, so the light class carries z_i / 50 of the Ekman transport and the dense one
    # the rest (uniform Ekman velocity over the layer: common practice)
    p = np.arange(0.0, 1000.0 + 5, 10.0)
    ct = np.where(p <= 20.0, 24.0, 12.0)[None, :].repeat(3, axis=0)
    sa = np.full_like(ct, 35.5)
    lat = np.full(3, 30.0)
    section = canonical_section(sa, ct, p, np.array([-40.0, -39.5, -39.0]), lat,
                                np.full(3, 1000.0))
    sigma = 0.5 * (gsw.sigma0(35.5, 24.0) + gsw.sigma0(35.5, 12.0))
    op = build_operator(section, [Interface(float(sigma), 0.0)], ekman_depth=50.0)
    z_i = -0.5 * (gsw.z_from_p(20.0, 30.0) + gsw.z_from_p(30.0, 30.0))
    share = op.ekman_share[0]  # volume, (pair, class)
    np.testing.assert_allclose(share[:, 0], z_i / 50.0, rtol=1e-6)
    np.testing.assert_allclose(share[:, 1], 1.0 - z_i / 50.0, rtol=1e-6)


# ------------------------------------------------------------------ references, all rules


def _reference_study(rule, overrides):
    config = parse_config({
        "sections": [{"name": "south", "file": "s.nc"}],
        "reference": {"pressure": 1000.0, "bottom_triangle": rule, "overrides": overrides},
        "layers": {"interfaces": FACES, "names": ["upper", "intermediate", "deep"]},
    })
    section = thermocline_section(n=6, dp=20.0, lat0=26.0, name="south")
    return Study.from_config(config, sections={"south": section})


@pytest.mark.parametrize("rule", ["constant", "zero", "shear"])
def test_known_velocity_reference_holds_at_its_pressure_under_every_triangle_rule(rule):
    # definition of a known-velocity reference (direct current measurement): the absolute
    # velocity at the measured pressure is the measured value, whatever the triangle rule
    study = _reference_study(rule, {"south:2": {"velocity": 0.05, "pressure": 1500.0}})
    results = study.solve()
    op = study.operators["south"]
    ref = results.references["south"]
    assert ref.kinds[2] == "velocity" and ref.pressure[2] == 1500.0
    v = op.absolute_velocity(ref.offset)
    assert value_at_pressure(v, op.pressure, ref.pressure)[2] == pytest.approx(0.05, abs=1e-12)


@pytest.mark.parametrize("rule", ["constant", "zero", "shear"])
def test_isopycnal_reference_has_no_motion_on_the_isopycnal_under_every_rule(rule):
    # definition of an isopycnal level of no motion: the absolute velocity vanishes where
    # the pair-mean sigma_0 equals the value (interpolated linearly in pressure)
    study = _reference_study(rule, {"south:1": {"sigma": 27.0, "p_ref": 0.0}})
    results = study.solve()
    op = study.operators["south"]
    ref = results.references["south"]
    p_iso = ref.pressure[1]
    sigma = op.sigma_pair[0.0][1]
    assert np.interp(p_iso, op.pressure, sigma) == pytest.approx(27.0, abs=1e-9)
    v = op.absolute_velocity(ref.offset)[1]
    assert np.interp(p_iso, op.pressure, v) == pytest.approx(0.0, abs=1e-12)


def test_known_velocity_below_the_pair_holds_in_the_bottom_triangle_under_constant():
    # pair 0 of the thermocline line: bottoms 3000 and 3360 dbar, deepest common level
    # 3000 dbar; a current meter at 3200 dbar is in the bottom triangle
    study = _reference_study("constant", {"south:0": {"velocity": -0.03, "pressure": 3200.0}})
    results = study.solve()
    op = study.operators["south"]
    ref = results.references["south"]
    assert op.pressure[op.common[0]] < 3200.0 <= op.pressure[op.deepest[0]]
    assert ref.pressure[0] == 3200.0
    v = op.absolute_velocity(ref.offset)
    assert value_at_pressure(v, op.pressure, ref.pressure)[0] == pytest.approx(-0.03, abs=1e-12)
    assert not any("south:0" in str(c) for c in results.cautions.of_kind("reference-below-pair"))


@pytest.mark.parametrize("rule", ["zero", "shear"])
def test_known_velocity_below_the_pair_is_refused_under_zero_and_shear(rule):
    study = _reference_study(rule, {"south:0": {"velocity": -0.03, "pressure": 3200.0}})
    with pytest.raises(ComputationError,
                       match=r"pair south:0: the known velocity at 3200 dbar lies below the "
                             r"pair's deepest common level \(3000 dbar\)"):
        study.solve()


def test_level_of_no_motion_below_the_pair_still_falls_back_with_a_caution():
    study = _reference_study("zero", {"south:0": 3200.0})
    results = study.solve()
    assert results.references["south"].pressure[0] == 3000.0
    assert any("south:0 (3000)" in str(c)
               for c in results.cautions.of_kind("reference-below-pair"))


# ------------------------------------------------------------------ equator


def _equator_config():
    return parse_config({"sections": [{"name": "eq", "file": "e.nc"}],
                         "reference": {"pressure": 1000.0, "allow_equator": True},
                         "ekman": {"stress": {"eq": [0.0, 0.05]}}})


def test_a_pair_within_half_a_degree_of_the_equator_is_refused_by_name_even_when_allowed():
    # f = 2 Omega sin(lat) -> 0: geostrophy and Ekman transport divide by it (common practice)
    section = _line(np.full(5, -20.0), [0.2, 0.4, 1.0, 1.6, 2.4], name="eq")
    with pytest.raises(EquatorError, match=r"eq:0 \(stations 1-2, mid-point 0.30 N\)"):
        Study.from_config(_equator_config(), sections={"eq": section})


def test_an_unvalidated_section_on_the_equator_is_refused_not_made_nan():
    # the engine's own backstop (the xarray path builds operators without the readers)
    section = _line(np.full(4, -20.0), [-0.6, -0.1, 0.1, 0.6], name="eq")
    with pytest.raises(EquatorError, match="eq:1"):
        build_operator(section, [])


def test_allowed_near_equator_pairs_keep_every_number_finite_with_a_caution():
    section = _line(np.full(5, -20.0), [0.6, 1.0, 1.4, 1.8, 2.6], name="eq")
    study = Study.from_config(_equator_config(), sections={"eq": section})
    results = study.solve()
    assert study.load_cautions.of_kind("equator")
    out = results.outputs["eq"]
    # (one class: there is no density-space overturning to report)
    values = [v for name, v in zip(out.names, out.initial, strict=True)
              if name != "overturning_density"]
    assert np.all(np.isfinite(values))
    assert np.all(np.isfinite(results.ekman["eq"]))


# ------------------------------------------------------------------ temperature transport


def test_heat_column_is_flagged_as_temperature_transport_when_net_mass_is_not_zero():
    # DESIGN.md §4 (common practice): rho c_p CT v is a heat transport only with zero net
    # mass transport
    config = parse_config({"sections": [{"name": "south", "file": "s.nc"}],
                           "reference": {"pressure": 2000.0}})
    study = Study.from_config(config, sections={"south": thermocline_section(n=5, dp=20.0,
                                                                             name="south")})
    results = study.solve()
    assert abs(results.value("south", "net_mass")) > 0.1
    assert results.cautions.of_kind("temperature-transport")
    # with the net forced to zero by an inverse, no flag
    config = parse_config({"sections": [{"name": "south", "file": "s.nc"}],
                           "reference": {"pressure": 2000.0},
                           "inverse": {"conserve": ["mass"], "noise_layer": [100.0],
                                       "noise_total": 100.0, "prior_velocity": 0.05,
                                       "section_net": [{"section": "south", "transport": 0.0,
                                                        "noise": 0.001}]}})
    study = Study.from_config(config, sections={"south": thermocline_section(n=5, dp=20.0,
                                                                             name="south")})
    results = study.solve()
    assert abs(results.value("south", "net_mass")) < 0.01
    assert not results.cautions.of_kind("temperature-transport")


# ------------------------------------------------------------------ closed-form box


def _uniform_pair(lon, lat, depth):
    """Two stations, uniform SA 35 g/kg and CT 4 degC, flat bottom at ``depth`` m."""
    lat = np.asarray(lat, float)
    p_bottom = gsw.p_from_z(-depth, lat[0])
    levels = np.arange(0.0, np.floor(p_bottom / 10.0) * 10.0 + 1, 10.0)
    P = np.tile(levels, (2, 1))
    return {"station": ["A1", "A2"], "lat": lat, "lon": np.asarray(lon, float),
            "pressure": P, "salinity": np.full(P.shape, 35.0),
            "temperature": np.full(P.shape, 4.0), "bottom_depth": np.full(2, float(depth))}


def _mass_area(sec):
    """Width x integral of rho / rho0 over the depth, m^2 (gsw.distance, gsw.rho, fine grid)."""
    lat = sec["lat"][0]
    p = np.linspace(0.0, gsw.p_from_z(-sec["bottom_depth"][0], lat), 200001)
    z = -gsw.z_from_p(p, lat)
    width = gsw.distance(sec["lon"], sec["lat"])[0]
    return width * np.trapezoid(gsw.rho(35.0, 4.0, p), z) / RHO0


def test_one_class_two_section_box_gives_the_closed_form_gauss_markov_solution(tmp_path: Path):
    # Wunsch 1996, ch. 3 with one effective constraint: rows mass:class_0 and mass:total are
    # the same row e = [a_s, -a_n] (Sv per m/s) with noises n1 and nt, i.e. one row with
    # 1/n^2 = 1/n1^2 + 1/nt^2; with prior R = r^2 I, Sherman-Morrison gives
    # x = r^2 e y / (n^2 + r^2 |e|^2) and P = r^2 I - r^4 e e^T / (n^2 + r^2 |e|^2).
    # Uniform water has no geostrophic shear, so y = -(known inflow).
    south = _uniform_pair([-40.0, -39.0], [30.0, 30.0], 2000.0)
    north = _uniform_pair([-40.0, -39.2], [32.0, 32.0], 1500.0)
    write_netcdf(tmp_path / "south.nc", south, salinity_kind="absolute",
                 temperature_kind="conservative")
    write_netcdf(tmp_path / "north.nc", north, salinity_kind="absolute",
                 temperature_kind="conservative")
    r, n1, nt, known = 0.01, 0.5, 0.3, 1.5
    (tmp_path / "box.toml").write_text(TWO_LINES + f"""[reference]
pressure = 500.0
[inverse]
conserve = ["mass"]
prior_velocity = {r}
noise_layer = [{n1}]
noise_total = {nt}
known = [ {{ name = "strait", transport = {known}, noise = 0.000001, layer = "class_0" }} ]
""")
    assert main(["budget", str(tmp_path / "box.toml"), "--out", str(tmp_path / "out")]) == 0
    pairs = pd.read_csv(tmp_path / "out" / "pair_adjustments.csv")
    e = np.array([_mass_area(south), -_mass_area(north)]) / 1e6
    n2 = 1.0 / (1.0 / n1**2 + 1.0 / (nt**2 + 1e-12))
    y = -known
    d = n2 + r**2 * e @ e
    x = r**2 * e * y / d
    sd = np.sqrt(r**2 - r**4 * e**2 / d)
    np.testing.assert_allclose(pairs["adjustment_m_s"], x, rtol=1e-6)
    np.testing.assert_allclose(pairs["adjustment_err_m_s"], sd, rtol=1e-6)
