"""Class weights and class integrals (compiled kernels) against independent computations.

The expectations are built here without the code under test: exact integrals
of piecewise-linear profiles written out in plain Python (a cell is cut where
any interface density, linear in pressure within the cell, equals its value),
a hand calculation, and numpy's einsum over those weights.
"""

from __future__ import annotations

import numpy as np
import pytest

from sectionkit.errors import ComputationError, ConfigError
from sectionkit.layers import class_levels
from sectionkit.operator import CP0, RHO0, _class_integrals


def _weights_by_hand(faces, values, thickness, width, tail=None):
    """Dense class weights (..., pair, class, level), m, by exact integration cell by cell.

    Within a cell of fraction t in [0, 1], each interface density is linear; the
    class is the number of interfaces it is denser than. Over a part [t0, t1] of
    class i, the linear field q0 (1 - t) + q1 t integrates to
    q0 h ((t1 - t0) - (t1^2 - t0^2) / 2) + q1 h (t1^2 - t0^2) / 2, h = thickness * width.
    """
    lead = faces[0].shape[:-1]
    n_lev = faces[0].shape[-1]
    w = np.zeros(lead + (len(values) + 1, n_lev))
    for at in np.ndindex(*lead):
        pair = at[-1]
        cols = [face[at] for face in faces]
        have = np.isfinite(cols[0])
        for k in range(n_lev - 1):
            if not (have[k] and have[k + 1]):
                continue
            h = thickness[pair, k] * width[pair, k]
            cuts = {0.0, 1.0}
            for col, v in zip(cols, values, strict=True):
                top, bottom = col[k] - v, col[k + 1] - v
                if (top > 0) != (bottom > 0):
                    cuts.add(top / (top - bottom))
            cuts = sorted(cuts)
            for t0, t1 in zip(cuts[:-1], cuts[1:], strict=False):
                tm = 0.5 * (t0 + t1)
                klass = sum(bool(col[k] * (1 - tm) + col[k + 1] * tm > v)
                            for col, v in zip(cols, values, strict=True))
                w[at + (klass, k)] += h * ((t1 - t0) - (t1**2 - t0**2) / 2)
                w[at + (klass, k + 1)] += h * (t1**2 - t0**2) / 2
        if tail is not None and have.any():
            k = np.flatnonzero(have)[-1]
            klass = sum(bool(col[k] > v) for col, v in zip(cols, values, strict=True))
            w[at + (klass, k)] += tail[pair]
    return w


def _profiles(seed=0, n_lead=2, n_pair=4, n_lev=40):
    """Two interface densities (at two reference pressures) with inversions, cells that
    several interfaces cross, and bottoms at different depths (NaN below)."""
    rng = np.random.default_rng(seed)
    p = np.arange(n_lev) * 10.0
    base = 25.0 + 3.0 * np.sqrt(p / p[-1])[None, None, :] + rng.normal(
        scale=0.25, size=(n_lead, n_pair, n_lev))  # noise of this size makes inversions
    face0 = base.copy()
    face1 = 36.0 + 2.0 * (base - 25.0) + rng.normal(scale=0.4, size=base.shape)
    # one cell that three interfaces cross going down (25.6 -> 27.6 spans 25.9, 26.4, 27.2)
    face0[0, 1, 5], face0[0, 1, 6] = 25.6, 27.6
    # one cell where the first face gets denser and the second lighter across their values
    face0[1, 2, 8], face0[1, 2, 9] = 25.8, 26.0
    face1[1, 2, 8], face1[1, 2, 9] = 37.6, 37.2
    bottoms = [[40, 31, 12, 2], [40, 40, 25, 0]]
    for m in range(n_lead):
        for j in range(n_pair):
            face0[m, j, bottoms[m][j]:] = np.nan
            face1[m, j, bottoms[m][j]:] = np.nan
    values = np.array([25.9, 26.4, 27.2, 37.4])
    faces = [face0, face0, face0, face1]
    thickness = np.tile(np.diff(p) * 1.02, (n_pair, 1)) * np.linspace(1.0, 1.1, n_pair)[:, None]
    width = np.clip(np.linspace(1.3, -0.2, n_lev - 1), 0.0, 1.0)[None, :] * np.ones((n_pair, 1))
    tail = np.array([3.0, 1.5, 0.0, 7.0])
    return faces, values, thickness, width, tail


def test_hand_calculation_of_one_crossed_cell_and_the_tail():
    # sigma 26, 27, 28 over two 10 m cells, interface 26.5: the first cell is crossed at
    # its middle. Upper half (class 0): int_0^0.5 (1 - t) dt = 3/8, int_0^0.5 t dt = 1/8;
    # lower half (class 1): 1/8 and 3/8; the second cell is class 1 (5 m each level);
    # the 2 m tail goes to the last level (hand calculation)
    sigma = np.array([[26.0, 27.0, 28.0]])
    levels = class_levels([sigma], np.array([26.5]), np.full((1, 2), 10.0), np.ones((1, 2)),
                          np.array([2.0]))
    expected = np.array([[[3.75, 1.25, 0.0], [1.25, 3.75 + 5.0, 5.0 + 2.0]]])
    np.testing.assert_allclose(levels.dense(), expected, rtol=1e-15, atol=1e-15)
    np.testing.assert_allclose(levels.column, [[5.0, 10.0, 7.0]], rtol=1e-15)
    assert levels.level_class.tolist() == [[0, 1, 1]]


def test_weights_equal_the_exact_integration_with_inversions_and_multiple_crossings():
    faces, values, thickness, width, tail = _profiles()
    levels = class_levels(faces, values, thickness, width, tail)
    expected = _weights_by_hand(faces, values, thickness, width, tail)
    scale = np.abs(expected).max()
    np.testing.assert_allclose(levels.dense(), expected, rtol=0, atol=1e-13 * scale)
    # the full column: every class together, and no weight where there is no data
    np.testing.assert_allclose(levels.column, expected.sum(axis=-2), rtol=0, atol=1e-13 * scale)
    missing = ~np.isfinite(faces[0])
    assert np.all(levels.level_class[missing] == len(values) + 1)
    assert np.all(levels.column[missing] == 0.0)
    # the test cases are there: a cell with three crossings, one whose class is the same
    # at both ends but not inside
    assert np.count_nonzero(expected[0, 1, :, 5] > 0) == 4
    assert levels.level_class[1, 2, 8] == levels.level_class[1, 2, 9]
    assert np.count_nonzero(expected[1, 2, :, 8] > 0) >= 2


def test_leading_dimensions_are_rows_of_the_same_computation():
    faces, values, thickness, width, tail = _profiles(seed=1)
    both = class_levels(faces, values, thickness, width, tail).dense()
    for m in range(2):
        alone = class_levels([face[m] for face in faces], values, thickness, width, tail)
        np.testing.assert_array_equal(both[m], alone.dense())
    # a stacked (..., pair, interface, level) array gives the same weights as the list
    stacked = class_levels(np.stack(faces, axis=-2), values, thickness, width, tail).dense()
    np.testing.assert_array_equal(stacked, both)


def test_too_many_interfaces_are_refused():
    sigma = np.zeros((1, 5))
    with pytest.raises(ConfigError, match="63 interfaces"):
        class_levels([sigma] * 63, np.zeros(63), np.ones((1, 4)), np.ones((1, 4)))


def _fields(faces, seed=0):
    """Velocity, response, density, salinity and CT on the faces' grid, NaN where they are."""
    rng = np.random.default_rng(seed)
    shape = faces[0].shape
    gone = np.isnan(faces[0])
    v = rng.normal(scale=0.05, size=shape)
    response = np.where(rng.uniform(size=shape) < 0.8, 1.0, 0.0)
    rho = 1025.0 + rng.normal(scale=2.0, size=shape)
    sa = 35.0 + rng.normal(scale=0.3, size=shape)
    ct = 10.0 + rng.normal(scale=4.0, size=shape)
    for a in (v, response, rho, sa, ct):
        a[gone] = np.nan
    return v, response, rho, sa, ct


def test_class_integrals_equal_einsum_over_exact_weights():
    faces, values, thickness, width, tail = _profiles(seed=2)
    levels = class_levels(faces, values, thickness, width, tail)
    v, response, rho, sa, ct = _fields(faces, seed=3)
    got = _class_integrals(levels, v, response, rho, sa, ct)
    # the 13 fields written out: with m = rho / RHO0 and h = rho c_p0 CT,
    # v, v m, v m S, v h, the same with the response, then 1, S, S^2, CT, CT^2
    m = rho / RHO0
    h = rho * CP0 * ct
    fields = np.stack([v, v * m, v * m * sa, v * h, response, response * m, response * m * sa,
                       response * h, np.ones_like(v), sa, sa**2, ct, ct**2], axis=-1)
    fields = np.nan_to_num(fields)  # no data below the bottom: no contribution
    w = _weights_by_hand(faces, values, thickness, width, tail)
    expected = np.einsum("...jik,...jkf->...jif", w, fields)
    magnitude = np.einsum("...jik,...jkf->...jif", np.abs(w), np.abs(fields))
    assert got.shape == expected.shape == (2, 4, len(values) + 1, 13)
    # round-off of sums of about 40 terms, relative to the sum of their sizes
    assert np.all(np.abs(got - expected) <= 1e-13 * magnitude + 1e-300)
    assert np.all(np.isfinite(got))


def test_class_integrals_of_one_row_do_not_depend_on_the_others():
    faces, values, thickness, width, tail = _profiles(seed=4)
    levels = class_levels(faces, values, thickness, width, tail)
    fields = _fields(faces, seed=5)
    both = _class_integrals(levels, *fields)
    alone = class_levels([face[1] for face in faces], values, thickness, width, tail)
    np.testing.assert_array_equal(_class_integrals(alone, *(a[1] for a in fields)), both[1])


def test_class_integrals_refuse_fields_of_another_shape():
    faces, values, thickness, width, tail = _profiles(seed=6)
    levels = class_levels(faces, values, thickness, width, tail)
    v, response, rho, sa, ct = _fields(faces, seed=7)
    with pytest.raises(ComputationError, match=r"_class_integrals: rho has shape \(4, 40\); "
                       r"expected \(2, 4, 40\) \(as v\)"):
        _class_integrals(levels, v, response, rho[0], sa, ct)
