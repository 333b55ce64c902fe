"""Geostrophic velocities against TEOS-10 check values, gsw, EOS-80 and sign conventions."""

from __future__ import annotations

import os
import warnings

import gsw
import numpy as np
import pytest
from _synthetic import thermocline_section

from sectionkit.geometry import (
    coriolis_parameter,
    great_circle_distance,
    pair_geometry,
    pair_midpoints,
)
from sectionkit.geostrophy import (
    ReferenceChoice,
    dynamic_height,
    extend_into_bottom_triangle,
    isopycnal_pressure,
    last_valid_level,
    relative_velocity,
    resolve_references,
)
from sectionkit.layers import Interface
from sectionkit.operator import build_operator

GSW_TESTS = os.path.join(os.path.dirname(gsw.__file__), "tests")


@pytest.fixture(scope="module")
def check_casts():
    # TEOS-10 check values (IOC, SCOR and IAPSO 2010), shipped in gsw/tests
    cv = np.load(os.path.join(GSW_TESTS, "gsw_cv_v3_0.npz"))
    return {k: np.asarray(cv[k]) for k in cv.files}


def test_dynamic_height_matches_gsw_check_values(check_casts):
    # gsw/tests/geo_strf_dyn_height.npy: gsw's own check values for the three-cast set
    expected = np.load(os.path.join(GSW_TESTS, "geo_strf_dyn_height.npy"))
    p = check_casts["p_chck_cast"][:, 0]
    psi = dynamic_height(check_casts["SA_chck_cast"].T, check_casts["CT_chck_cast"].T, p)
    np.testing.assert_allclose(psi.T, expected, rtol=0, atol=1e-9, equal_nan=True)


def test_velocity_of_check_casts_matches_gsw_check_values(check_casts):
    # TEOS-10 check casts; gsw/tests/geo_strf_velocity.npy (gsw's pchip check values)
    expected = np.load(os.path.join(GSW_TESTS, "geo_strf_velocity.npy"))
    p = check_casts["p_chck_cast"][:, 0]
    lon = check_casts["long_chck_cast"].astype(float)
    lat = check_casts["lat_chck_cast"].astype(float)
    psi = dynamic_height(check_casts["SA_chck_cast"].T, check_casts["CT_chck_cast"].T, p)
    v = relative_velocity(psi, great_circle_distance(lon, lat), coriolis_parameter(
        pair_midpoints(lon, lat)[1]))
    np.testing.assert_allclose(v.T, expected, rtol=0, atol=1e-10, equal_nan=True)


def test_pair_velocity_equals_gsw_geostrophic_velocity():
    # reference library: gsw.geostrophic_velocity on the same station pairs
    section = thermocline_section(n=7, dp=10.0)
    p = section["pressure"].values
    sa, ct = section["SA"].values, section["CT"].values
    psi = dynamic_height(sa, ct, p)
    g = pair_geometry(section)
    ours = relative_velocity(psi, g["distance"].values, g["f"].values)
    ref, _, mid_lat = gsw.geostrophic_velocity(psi.T, section["lon"].values,
                                               section["lat"].values, axis=0)
    np.testing.assert_allclose(ours, ref.T, rtol=0, atol=1e-10, equal_nan=True)
    np.testing.assert_allclose(g["lat"].values, mid_lat)


def test_eos80_seawater_velocity_agrees_within_known_difference():
    # EOS-80 (UNESCO 1983) in the `seawater` package as an independent computation.
    # The TEOS-10/EOS-80 difference in specific volume anomaly gives velocity
    # differences well below 1 mm/s for these profiles; measured here: max 3.7e-4 m/s
    # against a largest velocity of 0.195 m/s (0.2 %). Tolerance: 1 % of the largest velocity.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import seawater as sw
    section = thermocline_section(n=5, dp=10.0, bottoms=np.full(5, 4000.0))
    p = section["pressure"].values
    lat = section["lat"].values
    lon = section["lon"].values
    sa, ct = section["SA"].values, section["CT"].values
    sp = gsw.SP_from_SA(sa, p, lon[:, None], lat[:, None])
    t = gsw.t_from_CT(sa, ct, p)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gpan = sw.gpan(sp.T, t.T, p[:, None])  # seawater 3.x takes ITS-90 temperature
        v_eos80 = sw.gvel(gpan, lat, lon)  # relative to the surface
    psi = dynamic_height(sa, ct, p)
    g = pair_geometry(section)
    v_teos = relative_velocity(psi, g["distance"].values, g["f"].values)
    # seawater's gvel differences the geopotential anomaly along the line with
    # the same sign convention (velocity relative to the surface)
    diff = np.abs(v_eos80.T - v_teos)
    scale = np.nanmax(np.abs(v_teos))
    assert scale > 0.05
    assert np.nanmax(diff) < 0.01 * scale, np.nanmax(diff)


def test_west_to_east_line_with_northward_flow_is_positive():
    # convention DESIGN.md §4: positive to the left of increasing station order.
    # Warmer water in the east over a level of no motion at depth means
    # northward upper-ocean flow in the northern hemisphere (thermal wind,
    # common practice).
    section = thermocline_section(n=5, dp=10.0, bottoms=np.full(5, 4000.0))
    op = build_operator(section, [])
    _, offset = resolve_references([ReferenceChoice("pressure", 4000.0)] * op.n_pair,
                                   op.v_eff, op.pressure, op.common)
    v = op.absolute_velocity(offset)
    assert np.all(v[:, 0] > 0)
    assert op.transports(offset)[0].sum() > 0


def test_reversing_station_order_flips_every_sign():
    section = thermocline_section(n=6, dp=10.0)
    reverse = section.isel(station=slice(None, None, -1))
    faces = [Interface(26.8, 0.0), Interface(36.9, 2000.0)]
    fwd = build_operator(section, faces)
    rev = build_operator(reverse, faces)
    choice = [ReferenceChoice("pressure", 1500.0)] * fwd.n_pair
    _, off_f = resolve_references(choice, fwd.v_eff, fwd.pressure, fwd.common)
    _, off_r = resolve_references(choice, rev.v_eff, rev.pressure, rev.common)
    t_f = fwd.transports(off_f).sum(axis=-2)
    t_r = rev.transports(off_r).sum(axis=-2)
    np.testing.assert_allclose(t_r, -t_f, rtol=1e-10, atol=1e-6)
    v_f = fwd.absolute_velocity(off_f)
    v_r = rev.absolute_velocity(off_r)[::-1]
    np.testing.assert_allclose(v_r, -v_f, rtol=1e-10, atol=1e-12, equal_nan=True)


def test_pair_straddling_the_dateline_is_short():
    # a 1-degree pair across 180 degrees is as long as one across 0 degrees
    d_dateline = great_circle_distance(np.array([179.5, -179.5]), np.array([30.0, 30.0]))
    d_greenwich = great_circle_distance(np.array([-0.5, 0.5]), np.array([30.0, 30.0]))
    np.testing.assert_allclose(d_dateline, d_greenwich, rtol=1e-12)
    mid_lon, _ = pair_midpoints(np.array([179.5, -179.5]), np.array([30.0, 30.0]))
    assert abs(abs(mid_lon[0]) - 180.0) < 1e-9


def test_dateline_section_gives_same_transports_as_shifted_one():
    base = thermocline_section(n=5, dp=10.0, lon0=178.0, lon1=182.0)
    lon = base["lon"].values
    wrapped = base.assign(lon=(("station",), np.where(lon > 180, lon - 360, lon)))
    ops = [build_operator(s, [Interface(27.0, 0.0)]) for s in (base, wrapped)]
    np.testing.assert_allclose(ops[0].relative, ops[1].relative, rtol=1e-12)


def test_linear_dynamic_height_difference_gives_linear_shear():
    # analytic: Psi_b - Psi_a = a p  =>  v(p) = a p / (f L)
    p = np.arange(0.0, 1001.0, 10.0)
    a = 2e-4
    psi = np.stack([np.zeros_like(p), a * p])
    v = relative_velocity(psi, np.array([50e3]), np.array([1e-4]))
    np.testing.assert_allclose(v[0], a * p / (1e-4 * 50e3), rtol=1e-14)


def test_constant_bottom_triangle_continues_deepest_common_velocity():
    p = np.arange(0.0, 101.0, 10.0)
    v = np.where(p <= 50.0, 0.01 * p, np.nan)[None, :]
    v_eff, resp = extend_into_bottom_triangle(v, p, np.array([5]), np.array([8]), "constant")
    np.testing.assert_allclose(v_eff[0, 6:9], 0.5)
    assert np.isnan(v_eff[0, 9])
    np.testing.assert_allclose(resp[0, :9], 1.0)
    v_zero, resp_zero = extend_into_bottom_triangle(v, p, np.array([5]), np.array([8]), "zero")
    np.testing.assert_allclose(v_zero[0, 6:9], 0.0)
    np.testing.assert_allclose(resp_zero[0, 6:9], 0.0)
    v_shear, _ = extend_into_bottom_triangle(v, p, np.array([5]), np.array([8]), "shear")
    np.testing.assert_allclose(v_shear[0, 6:9], 0.01 * p[6:9], rtol=1e-12)


def test_isopycnal_reference_is_found_by_interpolation_and_falls_back():
    p = np.arange(0.0, 101.0, 10.0)
    sigma = (25.0 + 0.02 * p)[None, :]  # 26.0 at 50 dbar
    p_iso, status = isopycnal_pressure(sigma, p, np.array([10]), 26.05)
    np.testing.assert_allclose(p_iso, [52.5])
    assert status[0] == 0
    p_iso, status = isopycnal_pressure(sigma, p, np.array([10]), 28.0)
    assert p_iso[0] == 100.0 and status[0] == 1
    p_iso, status = isopycnal_pressure(sigma, p, np.array([10]), 24.0)
    assert p_iso[0] == 0.0 and status[0] == 2


def test_reference_deeper_than_pair_uses_deepest_common_level():
    section = thermocline_section(n=3, dp=10.0, bottoms=np.array([2000.0, 3000.0, 3000.0]))
    op = build_operator(section, [])
    p_used, _ = resolve_references([ReferenceChoice("pressure", 2500.0)] * 2,
                                   op.v_eff, op.pressure, op.common)
    np.testing.assert_allclose(p_used, [2000.0, 2500.0])


def test_known_velocity_reference_sets_velocity_at_its_level():
    section = thermocline_section(n=4, dp=10.0)
    op = build_operator(section, [])
    choices = [ReferenceChoice("velocity", pressure=1000.0, velocity=0.03)] * op.n_pair
    _, offset = resolve_references(choices, op.v_eff, op.pressure, op.common)
    v = op.absolute_velocity(offset)
    k = int(np.searchsorted(op.pressure, 1000.0))
    np.testing.assert_allclose(v[:, k], 0.03, atol=1e-12)


def test_the_last_valid_level_needs_both_variables_finite():
    # hand-built profiles: a gap inside one variable, NaN below the bottom, an empty cast
    sa = np.array([[1.0, 1.0, 1.0, 1.0, 1.0],
                   [1.0, 1.0, np.nan, np.nan, np.nan],
                   [np.nan] * 5,
                   [1.0, 1.0, 1.0, 1.0, np.nan]])
    ct = np.array([[1.0, 1.0, 1.0, np.nan, 1.0],
                   [1.0, 1.0, 1.0, 1.0, np.nan],
                   [1.0] * 5,
                   [1.0, 1.0, 1.0, np.nan, np.nan]])
    np.testing.assert_array_equal(last_valid_level(sa, ct), [4, 1, -1, 2])
    np.testing.assert_array_equal(last_valid_level(sa), [4, 1, -1, 3])
    np.testing.assert_array_equal(last_valid_level(sa[None], ct[None]), [[4, 1, -1, 2]])
