"""The demo's exchange-format line: the same casts as its NetCDF file, flags, tracers, LADCP."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sectionkit import demo
from sectionkit.config import load_config
from sectionkit.io import load_section
from sectionkit.study import Study


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    return demo.write_demo(tmp_path_factory.mktemp("demo_exchange"), small=True)


def test_exchange_casts_hold_the_netcdf_section(small):
    # float32 values written with 7 decimals: the two files give one section (to 1e-7)
    nc, _ = load_section(small["north"], dp=10.0)
    ex, cautions = load_section(small["north_ctd"], dp=10.0)
    for name in ("SA", "CT", "bottom_pressure", "lat", "lon"):
        np.testing.assert_allclose(ex[name].values, nc[name].values, rtol=0, atol=2e-7)
    # the flagged bad scan is dropped, the questionable samples are used with a caution
    assert cautions.of_kind("flagged-dropped") and cautions.of_kind("questionable-flag")
    assert not cautions.of_kind("incomplete-samples")


def test_demo_configuration_reads_the_exchange_line_with_tracers_and_ladcp(small):
    cfg = load_config(small["config"])
    north = cfg.sections[-1]
    assert north.file == small["north_ctd"].name and north.bottle and north.adcp
    assert cfg.tracers == ["oxygen", "silicate"] and cfg.adcp.use == "prior"
    study = Study.from_config(cfg)
    results = study.solve()
    assert set(results.tracers) == {"north"}
    assert results.inverse.system.prior_mean is not None


def test_ladcp_profiles_are_the_truth_within_their_invented_noise(small):
    # the LADCP velocity normal to the line, averaged over the configured range, against
    # the truth's absolute velocity of the same pairs (truth_pairs.csv b_true plus the
    # geostrophic shear): the stated 0.02 m/s error covers the invented noise
    study = Study.from_config(load_config(small["config"]))
    truth = pd.read_csv(small["truth_pairs"])
    b_true = truth[truth["section"] == "north"]["b_true_m_s"].to_numpy()
    refs = study.references()
    direct = study.direct["north"]
    have = np.isfinite(direct.velocity)
    misfit = direct.velocity[have] - (refs["north"].offset + b_true)[have]
    assert have.sum() >= 0.75 * have.size
    assert np.sqrt(np.mean(misfit**2)) < 0.02
