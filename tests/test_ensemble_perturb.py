"""Sensor perturbations of ensemble members against numpy's own interpolation."""

from __future__ import annotations

import numpy as np
from _synthetic import synthetic_section

from sectionkit.ensemble import NO_PERTURBATION, Perturbation, perturb_section, shift_profiles


def _interp_loop(values, p, shift):
    # the definition: each cast moved with numpy.interp over its own valid levels
    out = values.copy()
    for s in range(values.shape[0]):
        ok = np.isfinite(values[s])
        if ok.sum() >= 2 and shift[s] != 0.0:
            out[s, ok] = np.interp(p[ok] - shift[s], p[ok], values[s, ok])
    return out


def test_shifted_casts_equal_numpy_interp():
    rng = np.random.default_rng(0)
    p = np.arange(300) * 2.0
    values = np.cumsum(rng.normal(size=(9, 300)), axis=-1)
    for s, count in enumerate([0, 1, 2, 3, 100, 299, 300, 300, 250]):
        values[s, count:] = np.nan
    shift = rng.normal(size=9) * 3.0
    shift[7] = 0.0
    shift[6] = 700.0  # further than the cast is long: the end value is held
    np.testing.assert_allclose(shift_profiles(values, p, shift), _interp_loop(values, p, shift),
                               rtol=1e-13, atol=1e-13)


def test_shift_on_an_uneven_grid_equals_numpy_interp():
    rng = np.random.default_rng(1)
    p = np.cumsum(rng.uniform(1.0, 3.0, 120))
    values = np.cumsum(rng.normal(size=(4, 120)), axis=-1)
    values[2, 60:] = np.nan
    shift = rng.normal(size=4) * 2.0
    np.testing.assert_array_equal(shift_profiles(values, p, shift),
                                  _interp_loop(values, p, shift))


def test_a_perturbed_section_is_the_shifted_cast_plus_its_offsets():
    # the definition, rebuilt with numpy alone: the draws in their documented order
    # (pressure, temperature, salinity), each cast moved by numpy.interp, then the offsets
    section = synthetic_section(7, 10.0, 2000.0, lat=30.0, seed=4, name="x", noise=5.0)
    sa = section["SA"].transpose("station", "pressure").values
    ct = section["CT"].transpose("station", "pressure").values
    p = section["pressure"].values
    for mode in ("station", "level"):
        perturb = Perturbation(pressure=3.0, temperature=0.01, salinity=0.02, mode=mode)
        rng = np.random.default_rng(11)
        shape = (7, 1) if mode == "station" else sa.shape
        dp = rng.normal(0.0, 1.0, 7) * 3.0
        dt = rng.normal(0.0, 1.0, shape) * 0.01
        ds = rng.normal(0.0, 1.0, shape) * 0.02
        out = perturb_section(section, np.random.default_rng(11), perturb)
        np.testing.assert_allclose(out["SA"].transpose("station", "pressure").values,
                                   _interp_loop(sa, p, dp) + ds, rtol=0, atol=1e-12)
        np.testing.assert_allclose(out["CT"].transpose("station", "pressure").values,
                                   _interp_loop(ct, p, dp) + dt, rtol=0, atol=1e-12)


def test_perturbing_a_section_leaves_the_original_unchanged():
    section = synthetic_section(6, 10.0, 2000.0, lat=30.0, seed=3, name="x", noise=5.0)
    before = section.copy(deep=True)
    out = perturb_section(section, np.random.default_rng(5), Perturbation())
    assert section.identical(before)
    assert not np.array_equal(out["SA"].values, section["SA"].values, equal_nan=True)
    same = perturb_section(section, np.random.default_rng(5), NO_PERTURBATION)
    np.testing.assert_array_equal(same["CT"].values, section["CT"].values)


def test_a_member_leaves_the_studys_configuration_unchanged():
    # members draw their own reference and prior factor on a copy of the configuration
    from sectionkit.config import parse_config
    from sectionkit.ensemble import run_member
    from sectionkit.study import Study

    config = parse_config({
        "grid": {"dp": 25.0},
        "sections": [{"name": "south", "file": "south.nc"}],
        "reference": {"pressure": 3000.0},
        "layers": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0}]},
        "inverse": {"conserve": ["mass"], "noise_layer": [1.0, 1.0], "prior_velocity": 0.01},
    })
    section = synthetic_section(8, 25.0, 5000.0, lat=28.0, seed=1, name="south", noise=20)
    study = Study.from_config(config, sections={"south": section})
    perturb = Perturbation(reference_range=(2000.0, 2500.0), prior_factor=(3.0, 4.0))
    record = run_member(study, np.random.SeedSequence(0), perturb)
    assert 2000.0 <= float(record["reference_pressure"]) <= 2500.0
    assert study.config.reference.pressure == 3000.0
    assert study.config.inverse.prior_velocity == 0.01
