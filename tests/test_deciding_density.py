"""Potential density evaluated only where it can decide a class (sectionkit.layers)."""

from __future__ import annotations

import platform

import gsw
import numpy as np

from sectionkit.geostrophy import pair_mean
from sectionkit.layers import (
    DECIDING_RANGE,
    DRHO_DCT_BOUND,
    DRHO_DSA_BOUND,
    class_levels,
    deciding_densities,
)
from sectionkit.operator import PairDensities

# two interfaces at 0 dbar, one each at 2000 and 4000 dbar (light to dense)
FACES = [(26.6, 0.0), (27.2, 0.0), (36.9, 2000.0), (45.85, 4000.0)]


def _casts(n_lead: int = 2, n_station: int = 9, n_lev: int = 801, dp: float = 5.0, seed=0):
    """Invented casts: a thermocline with a wandering depth, level noise that makes density
    inversions, and bottoms from the full depth up to a few levels."""
    rng = np.random.default_rng(seed)
    p = np.arange(n_lev) * dp
    shape = (n_lead, n_station, n_lev)
    shift = rng.uniform(-300.0, 300.0, size=shape[:2])[..., None]
    ct = 1.5 + 19.0 * np.exp(-np.clip(p + shift, 0, None) / 800.0) + 0.05 * rng.normal(
        size=shape)
    sa = 34.75 + 0.9 * np.exp(-np.clip(p + shift, 0, None) / 600.0) + 0.004 * rng.normal(
        size=shape)
    # a strong inversion: a warm salty lens at mid depth in one cast
    sa[0, 3, 300:330] += 0.3
    ct[0, 3, 300:330] += 2.0
    bottoms = [n_lev, n_lev, 700, 640, 3, 0, 0, n_lev - 17, 500][:n_station]
    for s, k in enumerate(bottoms):
        sa[:, s, k:] = np.nan
        ct[:, s, k:] = np.nan
    return sa, ct, p


# sectionkit evaluates potential density with its own kernel of the TEOS-10 polynomial
# (sectionkit.eos), in gsw's order: on x86-64 (gsw built without fused multiply-add) the two
# agree bit for bit, so every value and weight below must equal the full gsw evaluation
# exactly; elsewhere gsw's compiler may fuse a*b + c and they agree to a few ulp.
BIT_FOR_BIT = platform.machine().lower() in ("x86_64", "amd64")


def _full(sa, ct, p_ref):
    # the full evaluation: TEOS-10 potential density on every level, then pair means
    return pair_mean(gsw.rho(sa, ct, p_ref) - 1000.0)


def _assert_same(ours, theirs, ulps=4.0):
    """Identical on x86-64; to a few ulp of the value (and the same NaN) elsewhere."""
    if BIT_FOR_BIT:
        np.testing.assert_array_equal(ours, theirs)
    else:
        np.testing.assert_allclose(ours, theirs, rtol=ulps * np.finfo(float).eps, atol=1e-12)


def _weights(faces_density, p, n_pair, values=None):
    if values is None:
        values = np.array([v for v, _ in FACES])
    thickness = np.broadcast_to(np.diff(p), (n_pair, p.size - 1)) * 1.01
    width = np.ones((n_pair, p.size - 1))
    return class_levels(faces_density, values, thickness, width,
                        np.full(n_pair, 3.0)).dense()


def test_class_weights_equal_the_full_evaluation_bit_for_bit():
    # no BLAS involved: the weights must be identical, including inversions and bottoms
    sa, ct, p = _casts()
    by_p_ref = {}
    for v, pr in FACES:
        by_p_ref.setdefault(pr, []).append(v)
    deciding = deciding_densities(sa, ct, by_p_ref)
    n_pair = sa.shape[-2] - 1
    ours = _weights([deciding[pr] for _, pr in FACES], p, n_pair)
    full = _weights([_full(sa, ct, pr) for _, pr in FACES], p, n_pair)
    _assert_same(ours, full, ulps=1e3)


def test_values_are_exact_at_every_crossing_and_nan_below_the_bottom():
    sa, ct, p = _casts(seed=1)
    deciding = deciding_densities(sa, ct, {0.0: [26.6, 27.2]})[0.0]
    full = _full(sa, ct, 0.0)
    assert np.array_equal(np.isnan(deciding), np.isnan(full))
    for value in (26.6, 27.2):
        crossed = ((full[..., :-1] > value) != (full[..., 1:] > value)) & np.isfinite(
            full[..., :-1] + full[..., 1:])
        assert crossed.any()
        k = np.nonzero(crossed)
        _assert_same(deciding[..., :-1][k], full[..., :-1][k])
        _assert_same(deciding[..., 1:][k], full[..., 1:][k])


def test_water_outside_the_bounded_range_is_evaluated_exactly():
    # hypersaline water (SA above the range where the derivative bounds were checked)
    sa, ct, p = _casts(n_lead=1, seed=2)
    sa[0, :2, 100:] += 10.0
    deciding = deciding_densities(sa, ct, {0.0: [26.6]})[0.0]
    full = _full(sa, ct, 0.0)
    _assert_same(deciding[0, 0, 100:-16], full[0, 0, 100:-16])


def test_derivative_bounds_hold_over_the_deciding_range():
    # TEOS-10 (gsw.rho_alpha_beta): rho*beta = d rho / d SA and rho*alpha = -d rho / d CT
    sa_lo, sa_hi = DECIDING_RANGE["SA"]
    ct_lo, ct_hi = DECIDING_RANGE["CT"]
    p_lo, p_hi = DECIDING_RANGE["p_ref"]
    sa, ct, p = np.meshgrid(np.linspace(sa_lo, sa_hi, 85), np.linspace(ct_lo, ct_hi, 86),
                            np.linspace(p_lo, p_hi, 23), indexing="ij")
    rho, alpha, beta = gsw.rho_alpha_beta(sa, ct, p)
    assert np.nanmax(rho * beta) < 0.9 * DRHO_DSA_BOUND
    assert np.nanmax(np.abs(rho * alpha)) < 0.9 * DRHO_DCT_BOUND


def test_pair_densities_are_computed_on_first_access():
    sa, ct, p = _casts(n_lead=1, seed=3)
    densities = PairDensities(sa, ct)
    assert 2000.0 not in densities
    _assert_same(densities[2000.0], _full(sa, ct, 2000.0))
    assert 2000.0 in densities


def test_class_weights_are_identical_for_every_block_size():
    # smaller and larger blocks decide different blocks, never different classes
    sa, ct, p = _casts(seed=4)
    by_p_ref = {}
    for v, pr in FACES:
        by_p_ref.setdefault(pr, []).append(v)
    n_pair = sa.shape[-2] - 1
    full = _weights([_full(sa, ct, pr) for _, pr in FACES], p, n_pair)
    for stride in (4, 32, 64):
        deciding = deciding_densities(sa, ct, by_p_ref, stride=stride)
        _assert_same(_weights([deciding[pr] for _, pr in FACES], p, n_pair), full, ulps=1e3)


def test_reference_pressure_outside_the_bounded_range_is_evaluated_everywhere():
    # above 11000 dbar the derivative bounds were not checked: every level exactly
    sa, ct, p = _casts(n_lead=1, seed=5)
    deciding = deciding_densities(sa, ct, {12000.0: [50.0]})[12000.0]
    _assert_same(deciding, _full(sa, ct, 12000.0))


def test_without_interface_values_every_block_keeps_its_top():
    # nothing to decide: each pair block holds the pair mean of its top level
    sa, ct, p = _casts(n_lead=1, n_station=5, seed=6)
    deciding = deciding_densities(sa, ct, {0.0: []}, stride=16)[0.0]
    full = _full(sa, ct, 0.0)
    body = (p.size - 1) // 16 * 16
    tops = np.repeat(full[..., 0:body:16], 16, axis=-1)
    _assert_same(deciding[..., :body], tops)
    _assert_same(deciding[..., body:], full[..., body:])


def test_a_density_exactly_at_an_interface_value_falls_in_the_same_class():
    # interfaces placed exactly on pair-mean potential densities of gsw (TEOS-10, gsw.rho):
    # a point at an interface value is the one place where a last-bit difference from gsw
    # could move it to the other side; the class weights must equal gsw's full evaluation
    sa, ct, p = _casts(n_lead=1, seed=7)
    full = _full(sa, ct, 0.0)
    rows, levels = np.nonzero(np.isfinite(full[0]))
    picks = [(rows[i], levels[i]) for i in (500, 2500, 4000)]
    values = np.sort([full[0, j, k] for j, k in picks])
    assert len(set(values)) == 3
    deciding = deciding_densities(sa, ct, {0.0: list(values)})[0.0]
    for j, k in picks:
        assert deciding[0, j, k] in values  # evaluated exactly: these levels can decide
    n_pair = sa.shape[-2] - 1
    ours = _weights([deciding] * 3, p, n_pair, values)
    expected = _weights([full] * 3, p, n_pair, values)
    _assert_same(ours, expected, ulps=1e3)
