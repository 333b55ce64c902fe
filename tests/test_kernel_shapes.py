"""Kernels broadcast leading dimensions and state the shapes they found when they refuse."""

from __future__ import annotations

import gsw
import numpy as np
import pytest

from sectionkit.errors import ComputationError, SectionkitError
from sectionkit.geometry import great_circle_distance, pair_midpoints
from sectionkit.geostrophy import (
    dynamic_height,
    extend_into_bottom_triangle,
    isopycnal_pressure,
    relative_velocity,
    value_at_pressure,
)
from sectionkit.layers import bottom_width_fraction, class_levels
from sectionkit.thermo import density_jumps, specific_volume_pass

P = np.arange(0.0, 1001.0, 10.0)  # dbar


def _stations(n_st: int, warm: float) -> tuple[np.ndarray, np.ndarray]:
    """Invented stratified profiles (SA g/kg, CT degC), (station, level)."""
    sa = 35.0 - 0.001 * P + 0.05 * np.arange(n_st)[:, None]
    ct = warm * np.exp(-P / 500.0) + 2.0 - 0.3 * np.arange(n_st)[:, None]
    return sa, ct


def test_relative_velocity_stacked_equals_each_alone():
    sa0, ct0 = _stations(4, 18.0)
    sa1, ct1 = _stations(4, 12.0)
    psi = dynamic_height(np.stack([sa0, sa1]), np.stack([ct0, ct1]), P)
    dist = np.array([[30e3, 40e3, 50e3], [20e3, 25e3, 35e3]])
    f = gsw.f(np.array([[30.0, 30.5, 31.0], [40.0, 40.5, 41.0]]))
    stacked = relative_velocity(psi, dist, f)
    for i in range(2):
        alone = relative_velocity(dynamic_height([sa0, sa1][i], [ct0, ct1][i], P), dist[i], f[i])
        np.testing.assert_allclose(stacked[i], alone, rtol=1e-12, atol=1e-15)


def test_relative_velocity_wrong_pair_count_names_the_shapes():
    psi = dynamic_height(*_stations(4, 18.0), P)
    with pytest.raises(ComputationError, match=r"relative_velocity: distance \* f has shape "
                       r"\(4,\); expected \(\.\.\., pair\) = \(\.\.\., 3\)"):
        relative_velocity(psi, np.full(4, 30e3), np.full(4, 1e-4))


def test_dynamic_height_grid_of_other_length_names_the_shapes():
    sa, ct = _stations(3, 18.0)
    with pytest.raises(SectionkitError, match=r"dynamic_height: p has shape \(50,\); "
                       r"expected \(\.\.\., level \(as sa\)\) = \(\.\.\., 101\)"):
        dynamic_height(sa, ct, P[:50])


def test_dynamic_height_ct_of_other_shape_is_refused():
    sa, ct = _stations(3, 18.0)
    with pytest.raises(ComputationError, match=r"ct has shape \(2, 101\)"):
        dynamic_height(sa, ct[:2], P)


def test_specific_volume_pass_stacked_equals_each_alone():
    a = _stations(3, 18.0)
    b = _stations(3, 10.0)
    both = specific_volume_pass(np.stack([a[0], b[0]]), np.stack([a[1], b[1]]), P)
    for i, (sa, ct) in enumerate((a, b)):
        alone = specific_volume_pass(sa, ct, P)
        np.testing.assert_allclose(both.dynamic_height[i], alone.dynamic_height, rtol=1e-12)


def test_specific_volume_pass_refuses_short_grid():
    sa, ct = _stations(3, 18.0)
    with pytest.raises(ComputationError, match=r"specific_volume_pass: p has shape \(100,\)"):
        specific_volume_pass(sa, ct, P[:-1])


def test_density_jumps_refuses_mismatched_grid():
    sa, ct = _stations(2, 18.0)
    with pytest.raises(ComputationError, match=r"density_jumps: p has shape \(10,\)"):
        density_jumps(sa, ct, P[:10], 1)


def test_bottom_triangle_stacked_equals_each_alone():
    v = np.linspace(0.1, -0.1, P.size) * np.ones((2, 3, 1))
    v[0, :, 60:] = np.nan
    v[1, :, 80:] = np.nan
    common = np.array([[59, 59, 59], [79, 79, 79]])
    deepest = np.array([[70, 90, 59], [85, 79, 100]])
    both, resp = extend_into_bottom_triangle(v, P, common, deepest, "shear")
    for i in range(2):
        alone, r = extend_into_bottom_triangle(v[i], P, common[i], deepest[i], "shear")
        np.testing.assert_array_equal(both[i], alone)
        np.testing.assert_array_equal(resp[i], r)


def test_bottom_triangle_refuses_common_of_other_pair_count():
    v = np.zeros((3, P.size))
    with pytest.raises(ComputationError, match=r"common has shape \(4,\); expected "
                       r"\(\.\.\., pair\) = \(\.\.\., 3\)"):
        extend_into_bottom_triangle(v, P, np.zeros(4, int), np.zeros(4, int))


def test_value_at_pressure_stacked_and_refused():
    profile = np.stack([np.outer([1.0, 2.0], P), np.outer([3.0, -1.0], P)])  # (2, pair, level)
    p_at = np.array([[105.0, 333.0], [5.0, 990.0]])
    # linear in pressure: the interpolated value is the coefficient times p_at (exact)
    np.testing.assert_allclose(value_at_pressure(profile, P, p_at),
                               np.array([[1.0, 2.0], [3.0, -1.0]]) * p_at, rtol=1e-12)
    with pytest.raises(ComputationError, match=r"value_at_pressure: p has shape \(101,\); "
                       r"expected \(\.\.\., level\) = \(\.\.\., 50\)"):
        value_at_pressure(profile[..., :50], P, p_at)


def test_isopycnal_pressure_stacked_equals_each_alone():
    sigma = np.stack([np.outer([1.0, 1.1], P / 100.0) + 25.0,
                      np.outer([0.5, 0.7], P / 100.0) + 26.0])
    common = np.array([90, 100])
    both, status = isopycnal_pressure(sigma, P, common, 27.0)
    for i in range(2):
        alone, s = isopycnal_pressure(sigma[i], P, common, 27.0)
        np.testing.assert_array_equal(both[i], alone)
        np.testing.assert_array_equal(status[i], s)
    with pytest.raises(ComputationError, match=r"isopycnal_pressure: common has shape \(3,\)"):
        isopycnal_pressure(sigma, P, np.array([1, 2, 3]), 27.0)


def test_positions_of_other_length_are_refused():
    with pytest.raises(ComputationError, match=r"great_circle_distance: lat has shape \(3,\); "
                       r"expected \(\.\.\., station \(as lon\)\) = \(\.\.\., 4\)"):
        great_circle_distance(np.zeros(4), np.zeros(3))
    with pytest.raises(ComputationError, match=r"pair_midpoints: lat has shape"):
        pair_midpoints(np.zeros(4), np.zeros(3))


def test_class_levels_refuses_thickness_of_other_grid():
    # sigma (pair, interface, level)
    sigma = np.broadcast_to(np.linspace(25.0, 28.0, P.size), (3, 1, P.size)).copy()
    thickness = np.full((3, P.size - 1), 10.0)
    width = np.ones((3, P.size - 1))
    class_levels(sigma, np.array([26.5]), thickness, width)  # accepted
    with pytest.raises(ComputationError, match=r"class_levels: thickness has shape \(3, 99\); "
                       r"expected \(\.\.\., pair, level - 1\) = \(\.\.\., 3, 100\)"):
        class_levels(sigma, np.array([26.5]), thickness[:, 1:], width)


def test_bottom_width_fraction_refuses_unequal_bottoms():
    with pytest.raises(ComputationError, match=r"bottom_b has shape \(2,\)"):
        bottom_width_fraction(P, np.array([500.0, 600.0, 700.0]), np.array([500.0, 600.0]))


def test_value_at_pressure_is_numpy_interp_of_each_profile():
    # numpy.interp per profile (the definition inside the grid; ends held), NaN pressure -> NaN
    rng = np.random.default_rng(7)
    p = np.arange(0.0, 500.0, 10.0)
    profile = rng.normal(size=(3, 4, p.size))
    p_at = rng.uniform(-20.0, 520.0, size=(3, 4))
    p_at[0, 0] = 250.0  # exactly a grid level
    p_at[1, 2] = np.nan
    got = value_at_pressure(profile, p, p_at)
    for i in range(3):
        for j in range(4):
            if np.isnan(p_at[i, j]):
                assert np.isnan(got[i, j])
            else:
                assert got[i, j] == pytest.approx(np.interp(p_at[i, j], p, profile[i, j]),
                                                  abs=1e-12)
    # one pressure per pair broadcast over a leading dimension
    np.testing.assert_allclose(value_at_pressure(profile, p, p_at[0]),
                               [[np.interp(p_at[0, j], p, profile[i, j]) for j in range(4)]
                                for i in range(3)], atol=1e-12)
