"""S*/SA from SAAR at the atlas levels (sectionkit.thermo.preformed_salinity_ratio) against gsw.

gsw.Sstar_from_SA(1, p, lon, lat) evaluated at every level is the outside
reference throughout (TEOS-10, McDougall et al. 2012, as gsw implements it).
"""

from __future__ import annotations

import gsw
import numpy as np
import pytest

from sectionkit.thermo import preformed_salinity_ratio

#: The ratio is about 1; the interpolation repeats gsw's own operations, so it agrees to a
#: few units in the last place of 1 (bit for bit where checked): 4 ulp of 1.
TOL = 4 * np.finfo(float).eps

P_1DBAR = np.arange(0.0, 8001.0)


def _positions() -> tuple[np.ndarray, np.ndarray]:
    """A few hundred positions: random over the globe (ocean and land), across shelves and
    coasts, the Panama isthmus (gsw's barrier between the oceans), high latitudes, the Baltic
    and both sides of the dateline."""
    rng = np.random.default_rng(2026)
    lon = [rng.uniform(-180.0, 360.0, 150)]
    lat = [rng.uniform(-86.0, 90.0, 150)]
    # shelves and slopes: Biscay to Iberia, the Gulf Stream off Cape Hatteras, the Bering
    # shelf, the North Sea, the Agulhas bank, Tasmania
    for lo0, lo1, la0, la1 in [(-12, -1, 43.5, 43.5), (-77, -70, 35.2, 35.2),
                               (-175, -160, 60.0, 64.0), (-2, 8, 52.0, 58.0),
                               (19, 24, -34.0, -37.0), (144, 149, -40.0, -44.0)]:
        lon.append(np.linspace(lo0, lo1, 12))
        lat.append(np.linspace(la0, la1, 12))
    # the Panama isthmus, both oceans and the land between
    glon, glat = np.meshgrid(np.linspace(-85.0, -76.0, 7), np.linspace(6.0, 15.0, 5))
    lon.append(glon.ravel())
    lat.append(glat.ravel())
    # high latitudes (gsw's atlas ends at 86 S; two positions beyond), the Baltic, the
    # dateline and the 0/360 seam
    lon.append(np.array([0.0, 170.0, -40.0, 60.0, 10.0, -150.0, 100.0, 20.0, 15.0, 25.0,
                         18.0, 179.99, 180.0, -180.0, -179.99, 180.0, 359.99, 360.0, -360.0,
                         -0.01, 30.0, -100.0]))
    lat.append(np.array([-86.0, -78.0, -75.0, 85.0, 89.99, 90.0, 81.0, 58.0, 55.0, 60.0,
                         57.5, -10.0, -10.0, 52.0, 52.0, 0.5, 45.0, 45.0, 45.0, -60.0,
                         -86.5, -90.0]))
    return np.concatenate(lon), np.concatenate(lat)


def _gsw_ratio(p, lon, lat):
    return gsw.Sstar_from_SA(1.0, p, np.asarray(lon)[..., None], np.asarray(lat)[..., None])


def _assert_close(ours, theirs):
    assert ours.shape == theirs.shape
    assert np.array_equal(np.isnan(ours), np.isnan(theirs))
    ok = np.isfinite(theirs)
    assert np.max(np.abs(ours[ok] - theirs[ok]), initial=0.0) <= TOL


def test_ratio_equals_gsw_at_every_dbar_to_8000_dbar():
    # gsw.Sstar_from_SA at every 1 dbar level 0-8000 dbar, a few hundred positions
    lon, lat = _positions()
    expected = _gsw_ratio(P_1DBAR, lon, lat)
    _assert_close(preformed_salinity_ratio(P_1DBAR, lon, lat), expected)
    # the set really exercises what the shortcut relies on (measured with gsw alone):
    # open ocean with SAAR varying below 5000 dbar, atlas profiles that end on a shelf
    # or slope (SAAR constant below a shallow level), land and Baltic (SAAR zero) and
    # positions outside the atlas (NaN)
    saar = gsw.SAAR(P_1DBAR, lon[:, None], lat[:, None])
    ok = np.all(np.isfinite(saar), axis=1)
    varies_deep = ok & np.any(np.diff(saar[:, 5000:], axis=1) != 0, axis=1)
    ends_shallow = ok & np.all(saar[:, 600:] == saar[:, 600:601], axis=1) & \
        np.any(np.diff(saar[:, :600], axis=1) != 0, axis=1)
    zero = ok & np.all(saar == 0.0, axis=1)
    assert np.count_nonzero(varies_deep) >= 50
    assert np.count_nonzero(ends_shallow) >= 10
    assert np.count_nonzero(zero) >= 10
    assert np.count_nonzero(~ok) >= 1


def test_baltic_ratio_is_one():
    # gsw.SAAR is zero in the Baltic (gsw.SAAR docstring): S* = SA there
    ratio = preformed_salinity_ratio(np.arange(0.0, 300.0), [20.0, 19.0], [58.0, 56.0])
    np.testing.assert_array_equal(ratio, 1.0)


def test_ratio_between_integer_pressures_equals_gsw():
    # grids that do not fall on the atlas levels: 0.3 dbar and 2.5 dbar steps, and an
    # irregular grid, against gsw.Sstar_from_SA at each of their levels
    lon, lat = _positions()
    for p in (np.arange(0.0, 1600.0, 0.3), np.arange(0.0, 7000.0, 2.5),
              np.cumsum(np.random.default_rng(1).uniform(0.1, 7.0, 1500))):
        _assert_close(preformed_salinity_ratio(p, lon, lat), _gsw_ratio(p, lon, lat))


def test_grid_ending_between_atlas_levels_and_below_the_last():
    # the last interval is interpolated towards the next atlas level, as gsw does
    lon, lat = np.array([-30.0, 150.0, 70.0]), np.array([-40.0, 20.0, -10.0])
    for p_end in (5.0, 77.5, 1000.0, 6000.0, 6131.0, 6500.0, 11000.0):
        p = np.linspace(0.0, p_end, 97)
        _assert_close(preformed_salinity_ratio(p, lon, lat), _gsw_ratio(p, lon, lat))


def test_positions_outside_the_atlas_and_missing_positions_give_nan():
    # gsw: no SAAR south of 86 S or north of 90 N, nor at a NaN position
    p = np.arange(0.0, 500.0, 5.0)
    lon = np.array([-30.0, 10.0, np.nan, -30.0, 400.0])
    lat = np.array([-88.0, 91.0, 40.0, np.nan, 30.0])
    ratio = preformed_salinity_ratio(p, lon, lat)
    assert np.all(np.isnan(ratio[:4]))
    # a longitude beyond gsw's documented range is gsw's own business: passed to it whole
    np.testing.assert_array_equal(ratio[4], _gsw_ratio(p, 400.0, 30.0))
    # an infinite position is missing too (gsw itself must not see it)
    assert np.all(np.isnan(preformed_salinity_ratio(p, [np.inf, 10.0], [20.0, -np.inf])))


def test_pressure_grids_gsw_evaluates_level_by_level():
    # a NaN level or a negative pressure: every level from gsw.Sstar_from_SA itself
    lon, lat = np.array([-30.0, 150.0]), np.array([-40.0, 20.0])
    for p in (np.array([0.0, 10.0, np.nan, 40.0, 300.0]), np.array([-5.0, 0.0, 3.0, 2000.0])):
        _assert_close(preformed_salinity_ratio(p, lon, lat), _gsw_ratio(p, lon, lat))


def test_leading_dimensions_broadcast():
    # (member, station) positions give (member, station, level)
    lon = np.array([[-30.0, -29.0, -28.0], [150.0, 151.0, 152.0]])
    lat = np.array([[-40.0, -40.5, -41.0], [20.0, 20.0, 20.0]])
    p = np.arange(0.0, 3000.0, 10.0)
    ratio = preformed_salinity_ratio(p, lon, lat)
    assert ratio.shape == (2, 3, p.size)
    _assert_close(ratio, _gsw_ratio(p, lon, lat))


def test_budget_salinity_is_gsw_sstar_with_nan_below_the_bottom():
    # gsw.Sstar_from_SA of the casts themselves, NaN where SA is NaN
    from sectionkit.operator import budget_salinity, clear_kept_parts

    p = np.arange(0.0, 4000.0, 2.0)
    lon, lat = np.linspace(-50.0, -20.0, 6), np.linspace(-30.0, -25.0, 6)
    sa = 34.9 + 0.4 * np.exp(-p / 800.0) * np.ones((6, 1))
    sa[2, 1200:] = np.nan
    sa[4, :] = np.nan
    clear_kept_parts()
    got = budget_salinity(sa, p, lon, lat, "preformed")
    expected = gsw.Sstar_from_SA(sa, p, lon[:, None], lat[:, None])
    assert np.array_equal(np.isnan(got), np.isnan(expected))
    np.testing.assert_allclose(got, expected, rtol=TOL, atol=0.0)


def test_pressure_must_be_one_profile():
    from sectionkit.errors import ComputationError

    with pytest.raises(ComputationError, match="one profile"):
        preformed_salinity_ratio(np.zeros((2, 3)), [0.0], [0.0])
