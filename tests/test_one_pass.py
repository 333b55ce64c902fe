"""One pass of the equation of state (sectionkit.thermo.specific_volume_pass) against gsw."""

from __future__ import annotations

import os

import gsw
import numpy as np
import pytest

from sectionkit.thermo import specific_volume_pass


def _profiles(n_lead: int, n_lev: int, dp: float, seed: int = 0):
    """Invented casts: a thermocline with noise (some density inversions) and every bottom
    depth from no data at all to the full grid."""
    rng = np.random.default_rng(seed)
    p = np.arange(n_lev) * dp
    shape = (n_lead, 7, n_lev)
    ct = (2.0 + 18.0 * np.exp(-p / 700.0) + 0.3 * rng.normal(size=shape))
    sa = 34.7 + 0.8 * np.exp(-p / 500.0) + 0.01 * np.cumsum(rng.normal(size=shape), axis=-1)
    for i, count in enumerate([0, 1, 2, 3, 4, n_lev - 1, n_lev]):
        sa[:, i, count:] = np.nan
        ct[:, i, count:] = np.nan
    return sa, ct, p


def _gsw_dynamic_height(sa, ct, p, max_dp=1.0):
    flat = gsw.geo_strf_dyn_height(sa.reshape(-1, p.size), ct.reshape(-1, p.size), p,
                                   p_ref=0.0, axis=1, max_dp=max_dp)
    return np.asarray(flat).reshape(sa.shape)


def _assert_same(ours, theirs, rtol):
    assert np.array_equal(np.isnan(ours), np.isnan(theirs))
    ok = np.isfinite(theirs)
    scale = np.max(np.abs(theirs[ok]))
    assert np.max(np.abs(ours[ok] - theirs[ok])) <= rtol * scale


#: Dynamic height against gsw, relative to the profile set's largest value: on the grid the
#: sum repeats gsw's operations in gsw's order (equal bit for bit where checked; the margin
#: is for another compiler's rounding inside gsw); with interpolated points gsw's cubic
#: rounds differently (up to 12 eps seen).
GRID_RTOL = 1e-14
REFINED_RTOL = 3e-14
EPS = np.finfo(float).eps


def test_dynamic_height_on_a_1_dbar_grid_equals_gsw():
    # gsw.geo_strf_dyn_height (p_ref = 0, max_dp = 1): trapezoid rule on the data grid
    sa, ct, p = _profiles(3, 400, 1.0)
    eos = specific_volume_pass(sa, ct, p)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa, ct, p), GRID_RTOL)


@pytest.mark.parametrize(("dp", "max_dp"), [(2.0, 1.0), (3.0, 1.0), (5.0, 1.0), (10.0, 2.5)])
def test_dynamic_height_on_a_coarser_grid_equals_gsw_with_its_interpolation(dp, max_dp):
    # gsw interpolates SA and CT with its shape-preserving cubic to max_dp first (one
    # mid-point per step, or several)
    sa, ct, p = _profiles(2, 300, dp, seed=1)
    eos = specific_volume_pass(sa, ct, p, max_dp=max_dp)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa, ct, p, max_dp=max_dp),
                 REFINED_RTOL)


def test_interpolated_integration_in_blocks_equals_gsw(monkeypatch):
    # many profiles are interpolated a block at a time (memory bound): the same result
    import sectionkit.thermo as thermo

    monkeypatch.setattr(thermo, "_BLOCK_POINTS", 700)
    sa, ct, p = _profiles(3, 200, 5.0, seed=8)
    eos = specific_volume_pass(sa, ct, p)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa, ct, p), REFINED_RTOL)


def test_dynamic_height_with_max_dp_equal_to_the_grid_step_skips_interpolation():
    # gsw.geo_strf_dyn_height with max_dp = dp integrates on the 4 dbar grid itself
    sa, ct, p = _profiles(1, 200, 4.0, seed=2)
    eos = specific_volume_pass(sa, ct, p, max_dp=4.0)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa, ct, p, max_dp=4.0), GRID_RTOL)


def test_dynamic_height_on_a_grid_step_that_is_no_power_of_two_equals_gsw():
    # a 3 dbar step integrated on the grid itself (max_dp = 3): gsw's product term by term
    sa, ct, p = _profiles(1, 200, 3.0, seed=9)
    eos = specific_volume_pass(sa, ct, p, max_dp=3.0)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa, ct, p, max_dp=3.0), GRID_RTOL)


def test_irregular_grid_and_interior_gaps_fall_back_to_gsw():
    # a grid that is not 0, dp, 2 dp ... and a cast with a gap: gsw's own integration
    sa, ct, p = _profiles(1, 120, 2.0, seed=3)
    p_odd = p + np.linspace(0.0, 0.5, p.size) ** 2
    eos = specific_volume_pass(sa, ct, p_odd)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa, ct, p_odd), 1e-13)
    sa[0, 6, 50:53] = np.nan
    eos = specific_volume_pass(sa, ct, p)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa, ct, p), 1e-13)


def test_in_situ_density_is_gsw_rho():
    # the reciprocal of gsw.specvol is gsw.rho (TEOS-10 75-term expression): to a few ulp
    # at every point (equal bit for bit where checked)
    sa, ct, p = _profiles(2, 300, 2.0, seed=4)
    eos = specific_volume_pass(sa, ct, p)
    expected = gsw.rho(sa, ct, p)
    assert np.array_equal(np.isnan(eos.in_situ_density()), np.isnan(expected))
    np.testing.assert_allclose(eos.in_situ_density(), expected, rtol=4 * EPS, atol=0.0)


def test_anomaly_is_gsw_specvol_anom_standard():
    # gsw.specvol_anom_standard at every point, to a few ulp of the specific volume itself
    # (the anomaly is a difference of two specific volumes near 1e-3 m^3/kg)
    sa, ct, p = _profiles(2, 300, 1.0, seed=4)
    eos = specific_volume_pass(sa, ct, p)
    expected = gsw.specvol_anom_standard(sa, ct, p)
    assert np.array_equal(np.isnan(eos.anomaly), np.isnan(expected))
    ok = np.isfinite(expected)
    bound = 4 * EPS * gsw.specvol(sa, ct, p)[ok]
    assert np.all(np.abs(eos.anomaly[ok] - expected[ok]) <= bound)
    np.testing.assert_array_equal(eos.standard, gsw.specvol_SSO_0(p))


def test_anomaly_and_density_match_teos10_check_values():
    # TEOS-10 check values (IOC, SCOR and IAPSO 2010) shipped in gsw/tests: the check
    # casts, specvol_anom_standard and rho, each within its stated tolerance
    path = os.path.join(os.path.dirname(gsw.__file__), "tests", "gsw_cv_v3_0.npz")
    if not os.path.exists(path):
        pytest.skip("gsw check-value file not installed")
    with np.load(path) as cv:
        sa, ct = cv["SA_chck_cast"].T, cv["CT_chck_cast"].T
        p = cv["p_chck_cast"][:, 0]
        eos = specific_volume_pass(sa, ct, p)
        ok = np.isfinite(cv["rho"].T)
        assert np.max(np.abs(eos.anomaly - cv["specvol_anom_standard"].T)[ok]) \
            < cv["specvol_anom_standard_ca"]
        assert np.max(np.abs(eos.in_situ_density() - cv["rho"].T)[ok]) < cv["rho_ca"]


def test_preformed_salinity_equals_gsw_sstar_from_sa():
    # TEOS-10 Preformed Salinity (gsw.Sstar_from_SA) is SA times a ratio that depends on
    # position and pressure only; the ratio is kept between builds
    from sectionkit.operator import budget_salinity

    sa, ct, p = _profiles(1, 300, 10.0, seed=5)
    sa = sa[0]
    lon = np.linspace(-40.0, -10.0, sa.shape[0])
    lat = np.linspace(20.0, 35.0, sa.shape[0])
    expected = gsw.Sstar_from_SA(sa, p, lon[:, None], lat[:, None])
    for _ in range(2):  # computed, then kept
        _assert_same(budget_salinity(sa, p, lon, lat, "preformed"), expected, 1e-15)


def test_cell_heights_equal_gsw_z_from_p():
    # the cells' heights from gsw.z_from_p at every latitude, polar to equatorial
    from sectionkit.layers import cell_thickness

    p = np.arange(0.0, 6500.0, 2.0)
    lat = np.linspace(-78.0, 85.0, 40)
    expected = -np.diff(gsw.z_from_p(p[None, :], lat[:, None]), axis=-1)
    np.testing.assert_allclose(cell_thickness(p, lat), expected, rtol=1e-13, atol=0.0)


def test_pair_means_take_the_deeper_station_alone_below_the_shallower():
    # numpy's nanmean of the two stations: their mean, or the one with data
    import warnings

    from sectionkit.geostrophy import pair_mean

    sa, ct, p = _profiles(2, 120, 5.0, seed=6)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # both stations empty: NaN
        expected = np.nanmean(np.stack([sa[..., :-1, :], sa[..., 1:, :]]), axis=0)
    np.testing.assert_array_equal(pair_mean(sa), expected)


def test_casts_stored_level_first_give_the_same_pass():
    # a (station, level) view of (level, station) storage, as a transposed Dataset gives:
    # gsw.geo_strf_dyn_height of the same numbers
    sa, ct, p = _profiles(1, 200, 2.0, seed=10)
    sa_t, ct_t = (np.asfortranarray(x[0]) for x in (sa, ct))
    eos = specific_volume_pass(sa_t, ct_t, p)
    _assert_same(eos.dynamic_height, _gsw_dynamic_height(sa[0], ct[0], p), REFINED_RTOL)
    np.testing.assert_array_equal(eos.dynamic_height, specific_volume_pass(sa[0], ct[0], p)
                                  .dynamic_height)
