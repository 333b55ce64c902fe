"""The TEOS-10 75-term specific volume kernel (sectionkit.eos) against gsw itself."""

from __future__ import annotations

import itertools
import os
import platform

import gsw
import numpy as np
import pytest

from sectionkit.eos import N_TERMS, density_anomaly, specific_volume

EPS = np.finfo(float).eps
# the oceanographic range of the brief: SA 0..42 g/kg, CT -2..40 degC, p 0..11000 dbar
SA_RANGE, CT_RANGE, P_RANGE = (0.0, 42.0), (-2.0, 40.0), (0.0, 11000.0)
# gsw's x86-64 builds evaluate the polynomial without fused multiply-add (the baseline
# instruction set has none), as the kernel does: there the two agree bit for bit. Elsewhere
# (a C compiler may fuse a*b + c on ARM) they agree to a few ulp.
BIT_FOR_BIT = platform.machine().lower() in ("x86_64", "amd64")


def _points(n: int = 200_000, seed: int = 0):
    """Random points over the whole range, and every corner and edge mid-point of it."""
    rng = np.random.default_rng(seed)
    sa = rng.uniform(*SA_RANGE, n)
    ct = rng.uniform(*CT_RANGE, n)
    p = rng.uniform(*P_RANGE, n)
    edges = [(lo, 0.5 * (lo + hi), hi) for lo, hi in (SA_RANGE, CT_RANGE, P_RANGE)]
    corners = np.array(list(itertools.product(*edges))).T
    return (np.concatenate([sa, corners[0]]), np.concatenate([ct, corners[1]]),
            np.concatenate([p, corners[2]]))


def _ulp_error(ours, theirs):
    """Largest difference in units of the last place of gsw's value."""
    return float(np.max(np.abs(ours - theirs) / np.spacing(np.abs(theirs))))


def test_the_polynomial_has_75_terms():
    # Roquet et al. (2015): the 75-term expression for specific volume
    assert N_TERMS == 75


def test_specific_volume_equals_gsw_specvol_over_the_oceanographic_range():
    # gsw.specvol (TEOS-10, Roquet et al. 2015) at random points and the corners
    sa, ct, p = _points()
    ours = specific_volume(sa, ct, p)
    theirs = gsw.specvol(sa, ct, p)
    assert np.all(np.isfinite(theirs))
    assert _ulp_error(ours, theirs) <= 4.0
    if BIT_FOR_BIT:
        np.testing.assert_array_equal(ours, theirs)


def test_density_equals_gsw_rho_in_situ_and_potential():
    # gsw.rho at the point's own pressure and at the reference pressures of the classes
    sa, ct, p = _points(seed=1)
    pairs = [(p, density_anomaly(sa, ct, p, 0.0))]
    for p_ref in (0.0, 1000.0, 2000.0, 4000.0, 11000.0):
        pairs.append((p_ref, density_anomaly(sa, ct, p_ref, 1000.0) + 1000.0))
    for pr, ours in pairs:
        theirs = gsw.rho(sa, ct, pr)
        assert _ulp_error(ours, theirs) <= 4.0
        if BIT_FOR_BIT and np.ndim(pr) == 1:  # in situ: 1 / v itself
            np.testing.assert_array_equal(ours, theirs)
    for p_ref in (0.0, 1000.0, 2000.0, 4000.0, 11000.0):
        ours = density_anomaly(sa, ct, p_ref)  # the subtraction rounds as gsw.rho - 1000
        theirs = gsw.rho(sa, ct, p_ref) - 1000.0
        if BIT_FOR_BIT:
            np.testing.assert_array_equal(ours, theirs)
        else:
            assert np.max(np.abs(ours - theirs)) <= 4.0 * EPS * 1100.0


def test_teos10_check_values_shipped_with_gsw():
    # the check cast of the TEOS-10 toolbox (gsw/tests/gsw_cv_v3_0.npz) and its tolerances
    path = os.path.join(os.path.dirname(gsw.__file__), "tests", "gsw_cv_v3_0.npz")
    if not os.path.exists(path):
        pytest.skip("gsw was installed without its check values")
    cv = np.load(path)
    sa, ct, p = cv["SA_chck_cast"], cv["CT_chck_cast"], cv["p_chck_cast"]
    ok = np.isfinite(cv["specvol"])
    assert ok.sum() > 90
    v = specific_volume(sa, ct, p)
    assert np.max(np.abs(v[ok] - cv["specvol"][ok])) <= cv["specvol_ca"]
    rho = density_anomaly(sa, ct, p, 0.0)
    assert np.max(np.abs(rho[ok] - cv["rho"][ok])) <= cv["rho_ca"]
    sigma2 = density_anomaly(sa, ct, 2000.0)
    assert np.max(np.abs(sigma2[ok] - cv["sigma2"][ok])) <= cv["sigma2_ca"]


def test_nan_input_gives_nan_like_gsw():
    # any NaN among SA, CT, p; and SA so negative that the square root has no value
    sa = np.array([np.nan, 35.0, 35.0, 35.0, -30.0])
    ct = np.array([5.0, np.nan, 5.0, 5.0, 5.0])
    p = np.array([100.0, 100.0, np.nan, 100.0, 100.0])
    with np.errstate(invalid="ignore"):
        theirs = gsw.specvol(sa, ct, p)
    ours = specific_volume(sa, ct, p)
    np.testing.assert_array_equal(np.isnan(ours), np.isnan(theirs))
    assert np.isnan(ours[[0, 1, 2, 4]]).all() and np.isfinite(ours[3])
    assert np.array_equal(np.isnan(density_anomaly(sa, ct, p)), np.isnan(ours))


def test_broadcasting_follows_numpy():
    # profiles (station, level) with one pressure per level, per point, or one for all
    rng = np.random.default_rng(2)
    sa = rng.uniform(30.0, 37.0, (3, 4, 6))
    ct = rng.uniform(0.0, 25.0, (3, 4, 6))
    levels = np.arange(6) * 500.0
    for pr in (levels, np.broadcast_to(levels, (4, 6)), 3000.0):
        expected = gsw.specvol(sa, ct, pr)
        assert _ulp_error(specific_volume(sa, ct, pr), expected) <= 4.0
    assert specific_volume(35.0, 10.0, 1000.0).shape == ()
    assert specific_volume(np.ones((2, 0)), 1.0, np.ones(0)).shape == (2, 0)
