"""Monte Carlo ensembles: reproducible anywhere, and statistically consistent with the inverse.

Facts checked:
- a dask.distributed LocalCluster (2 worker processes) gives the serial
  numbers to 1e-12, for an ensemble and for a chunked model-output section;
- member m's draws do not depend on the ensemble size;
- CTD sensor draws have the stated standard deviations, per station;
- in a twin experiment whose truth and data noise follow the inverse's own
  prior and noise model, the errors of the adjusted outputs have the linear
  posterior standard deviation sqrt(g P g^T) (Gauss–Markov; Wunsch 1996, The
  Ocean Circulation Inverse Problem, ch. 3) — a chi-square test per output;
- with only the data noise perturbed, the spread of the adjusted outputs is
  the linear propagation sqrt(g K N K^T g^T) of that noise through the gain
  K = R E^T (E R E^T + N)^-1 — the same test;
- the command writes ensemble_summary.csv and ensemble.nc, and a failed write
  leaves nothing behind.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from _synthetic import synthetic_model_output, synthetic_section
from scipy import stats

from sectionkit.config import Config, parse_config
from sectionkit.ensemble import (
    Perturbation,
    members_equal,
    perturb_section,
    run_ensemble,
    write_ensemble,
)
from sectionkit.modelsection import section_time_series
from sectionkit.study import Study

distributed = pytest.importorskip("distributed")

LAYERS = ["upper", "intermediate", "deep"]
#: Family-wise false-alarm rate of each chi-square test (split over its outputs, Bonferroni).
ALPHA = 1e-3


def _config(**inverse) -> Config:
    inv = {"conserve": ["mass", "salt"], "noise_class": [1.0, 0.5, 0.5], "prior_velocity": 0.01}
    inv.update(inverse)
    return parse_config({
        "title": "invented twin box",
        "grid": {"dp": 25.0},
        "sections": [{"name": "south", "file": "south.nc"},
                     {"name": "north", "file": "north.nc", "into_box": False}],
        "reference": {"pressure": 3000.0},
        "ekman": {"stress": {"south": [0.05, 0.0]}},
        "classes": {"interfaces": [{"sigma": 26.8, "p_ref": 0.0},
                                  {"sigma": 36.95, "p_ref": 2000.0}],
                   "names": LAYERS},
        "inverse": inv,
    })


def _sections() -> dict[str, xr.Dataset]:
    return {"south": synthetic_section(8, 25.0, 5000.0, lat=28.0, seed=1, name="south", noise=20),
            "north": synthetic_section(10, 25.0, 5000.0, lat=34.0, seed=2, name="north",
                                       noise=20)}


def _chi2_accepts(z: np.ndarray, alpha: float) -> np.ndarray:
    """Two-sided chi-square test of unit variance for each column of z (member, output).

    Under the null hypothesis sum_m z^2 ~ chi2(M) for each output; the
    acceptance band holds it with probability 1 - alpha / n_outputs each.
    """
    m, k = z.shape
    lo, hi = stats.chi2.ppf([alpha / (2 * k), 1 - alpha / (2 * k)], m)
    s = (z**2).sum(axis=0)
    return (s > lo) & (s < hi)


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None)
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


def test_cluster_ensemble_equals_serial(client):
    cfg, sections = _config(), _sections()
    perturb = Perturbation(reference_range=(2000.0, 3500.0), prior_factor=(0.5, 2.0))
    on_cluster = run_ensemble(cfg, 8, seed=7, client=client, perturb=perturb, sections=sections)
    serial = run_ensemble(cfg, 8, seed=7, client=None, perturb=perturb, sections=sections)
    assert members_equal(on_cluster, serial) <= 1e-12
    for name in ("volume_summary", "net_summary", "overturning_summary"):
        np.testing.assert_allclose(on_cluster[name].values, serial[name].values, rtol=1e-12)
    # the members really differ: sensors, references and priors were drawn
    assert float(serial["net"].std("member").min()) > 0
    assert np.unique(serial["reference_pressure"].values).size == 8


def test_cluster_model_output_time_series_equals_eager_numpy(client):
    cfg = _config()
    eager = section_time_series(synthetic_model_output(50, 8), cfg, "south")
    lazy = section_time_series(synthetic_model_output(50, 8, chunks=10), cfg, "south")
    computed = client.compute(lazy).result()
    for name in ("volume_transport", "net", "heat", "overturning", "overturning_density",
                 "psi_depth"):
        a, b = computed[name].values, eager[name].values
        assert np.nanmax(np.abs(a - b)) <= 1e-12 * np.nanmax(np.abs(b)), name


def test_member_draws_do_not_depend_on_ensemble_size():
    cfg, sections = _config(), _sections()
    perturb = Perturbation(reference_range=(2500.0, 3000.0))
    three = run_ensemble(cfg, 3, seed=1, perturb=perturb, sections=sections)
    five = run_ensemble(cfg, 5, seed=1, perturb=perturb, sections=sections)
    assert members_equal(three, five.isel(member=slice(0, 3))) == 0.0
    other_seed = run_ensemble(cfg, 3, seed=2, perturb=perturb, sections=sections)
    assert members_equal(three, other_seed) > 1e-6


def test_sensor_draws_have_the_stated_spread_per_station():
    section = _sections()["north"]
    perturb = Perturbation(temperature=0.002, salinity=0.002, pressure=0.0)
    rng = np.random.default_rng(0)
    d_ct = []
    for _ in range(200):
        out = perturb_section(section, rng, perturb)
        diff = (out["CT"] - section["CT"]).values
        # one offset per station, held down the whole cast (calibration bias)
        assert np.nanmax(np.nanstd(diff, axis=1)) < 1e-12
        d_ct.append(np.nanmean(diff, axis=1))
    d_ct = np.concatenate(d_ct)
    # sample std of 1600 draws: relative sampling error ~1/sqrt(2 n) = 1.8 %; 5 sigma band
    assert abs(d_ct.std() / 0.002 - 1) < 5 / np.sqrt(2 * d_ct.size)


def test_cluster_tasks_of_several_members_equal_serial(client):
    # 35 members on 2 workers run as tasks of 4 members (the last of 3)
    from sectionkit.ensemble import member_batch_size

    assert member_batch_size(35, 2) == 4
    cfg, sections = _config(), _sections()
    perturb = Perturbation(reference_range=(2000.0, 3500.0), prior_factor=(0.5, 2.0))
    seen = []
    on_cluster = run_ensemble(cfg, 35, seed=3, client=client, perturb=perturb,
                              sections=sections, progress=seen.append)
    serial = run_ensemble(cfg, 35, seed=3, client=None, perturb=perturb, sections=sections)
    assert members_equal(on_cluster, serial) == 0.0
    assert seen[0] == 0 and seen[-1] == 35 and seen == sorted(seen)


def test_pressure_error_moves_the_cast():
    # a cast whose pressure sensor reads p + dp reports at p the water from p - dp
    section = _sections()["south"]
    p = section["pressure"].values
    lin = section.copy()
    wet = np.isfinite(section["CT"].values)
    lin["CT"] = (("station", "pressure"), np.where(wet, 10.0 - 0.001 * p, np.nan))
    perturb = Perturbation(temperature=0.0, salinity=0.0, pressure=3.0)
    rng = np.random.default_rng(4)
    out = perturb_section(lin, rng, perturb)
    shift = np.random.default_rng(4).normal(0.0, 1.0, section.sizes["station"]) * 3.0
    diff = (out["CT"] - lin["CT"]).values
    interior = (p > 20.0) & (p < 2500.0)
    np.testing.assert_allclose(diff[:, interior], np.broadcast_to(0.001 * shift[:, None],
                                                                  diff[:, interior].shape),
                               atol=1e-12)
    assert np.array_equal(np.isnan(out["CT"].values), ~wet)


def test_twin_errors_match_linear_posterior_errors():
    # Truth x_t ~ N(0, R) and noise n ~ N(0, N) exactly as the Gauss-Markov inverse assumes:
    # the error of each adjusted output g x_hat - g x_t is N(0, g P g^T). For each of the
    # outputs, sum over members of (error / Results.error)^2 ~ chi2(M); accepted within the
    # two-sided band of probability 1 - ALPHA/k (k = 10 outputs). With M = 600 the band is
    # chi2(600) quantiles / 600 = [0.79, 1.24] in variance, so posterior errors wrong by 20 %
    # (variance x 0.64 or x 1.56) are rejected — checked below as a control.
    cfg, sections = _config(), _sections()
    members = 600
    twin = run_ensemble(cfg, members, seed=11, sections=sections,
                        perturb=Perturbation(0.0, 0.0, 0.0, constraints="twin"))
    z, sigma = [], []
    for name in ("volume", "net", "heat"):
        err = (twin[name] - twin[f"{name}_truth"]).values.reshape(members, -1)
        sig = twin[f"{name}_base_error"].values.reshape(-1)
        # the posterior is the same for every member (only y changed)
        np.testing.assert_allclose(twin[f"{name}_error"].values.reshape(members, -1),
                                   np.broadcast_to(sig, err.shape), rtol=1e-12)
        z.append(err / sig)
        sigma.append(sig)
    z = np.concatenate(z, axis=1)
    assert np.all(np.concatenate(sigma) > 0)
    assert _chi2_accepts(z, ALPHA).all(), (z**2).mean(axis=0)
    assert not _chi2_accepts(z / 0.8, ALPHA).any()
    assert not _chi2_accepts(z / 1.25, ALPHA).any()


def test_data_noise_spread_matches_its_linear_propagation():
    # Only y is perturbed, by n ~ N(0, N): x_hat moves by K n, so each adjusted output moves by
    # g K n with variance g K N K^T g^T, K = R E^T (E R E^T + N)^-1 computed here directly.
    cfg, sections = _config(), _sections()
    members = 250
    ens = run_ensemble(cfg, members, seed=12, sections=sections,
                       perturb=Perturbation(0.0, 0.0, 0.0, constraints="noise"))
    base = Study.from_config(cfg, sections=sections).solve()
    system = base.inverse.system
    active = system.prior > 0
    e = system.matrix[:, active]
    r = np.diag(system.prior[active] ** 2)
    n = np.diag(system.noise**2)
    gain = r @ e.T @ np.linalg.inv(e @ r @ e.T + n)
    z = []
    for section in ("south", "north"):
        out = base.outputs[section]
        for layer in LAYERS:
            g = out.gradient[out.index(f"volume:{layer}")][active]
            sd = float(np.sqrt(g @ gain @ n @ gain.T @ g))
            moved = ens["volume"].sel(section=section, **{"class": layer}).values - base.value(
                section, f"volume:{layer}")
            z.append(moved / sd)
    z = np.stack(z, axis=1)
    assert _chi2_accepts(z, ALPHA).all(), (z**2).mean(axis=0)
    # the posterior error is a different (larger) quantity: the test can tell them apart
    post = np.array([[base.error(s, f"volume:{la}") for la in LAYERS] for s in ("south",
                                                                               "north")])
    moved = (ens["volume"] - ens["volume_base"]).values.reshape(members, -1)
    assert not _chi2_accepts(moved / post.reshape(-1), ALPHA).any()


def test_summary_statistics_are_those_of_the_members():
    cfg, sections = _config(), _sections()
    ens = run_ensemble(cfg, 12, seed=3, sections=sections)
    values = ens["volume"].values
    summary = ens["volume_summary"]
    np.testing.assert_allclose(summary.sel(statistic="mean").values, values.mean(axis=0))
    np.testing.assert_allclose(summary.sel(statistic="std").values, values.std(axis=0, ddof=1))
    np.testing.assert_allclose(summary.sel(statistic="p97.5").values,
                               np.percentile(values, 97.5, axis=0))
    np.testing.assert_allclose(
        ens["volume_spread_ratio"].values,
        values.std(axis=0, ddof=1) / ens["volume_base_error"].values)
    # CF / UDUNITS units (1 Sv = 1e6 m3 s-1, 1 PW = 1e15 W); "Sv" only as the display unit
    assert ens["volume"].attrs["units"] == "1e6 m3 s-1" and ens["heat"].attrs["units"] == "1e15 W"
    assert ens["volume"].attrs["display_units"] == "Sv"
    assert list(ens["class"].values) == LAYERS


def _write_cf(section: xr.Dataset, path: Path) -> None:
    """A CF profile file (DESIGN.md §3) holding SA and CT by standard_name."""
    xr.Dataset(
        {
            "pres": ("pressure", section["pressure"].values,
                     {"standard_name": "sea_water_pressure", "units": "dbar", "axis": "Z"}),
            "SA": (("station", "pressure"), section["SA"].values,
                   {"standard_name": "sea_water_absolute_salinity", "units": "g/kg"}),
            "CT": (("station", "pressure"), section["CT"].values,
                   {"standard_name": "sea_water_conservative_temperature", "units": "degC"}),
            "lat": ("station", section["lat"].values,
                    {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("station", section["lon"].values,
                    {"standard_name": "longitude", "units": "degrees_east"}),
            "depth": ("station", section["bottom_depth"].values,
                      {"standard_name": "sea_floor_depth_below_sea_surface", "units": "m"}),
        },
        attrs={"featureType": "profile", "Conventions": "CF-1.8"},
    ).to_netcdf(path)


def test_command_writes_summary_and_netcdf(tmp_path):
    from sectionkit.cli import main

    cfg, sections = _config(), _sections()
    for name, section in sections.items():
        _write_cf(section, tmp_path / f"{name}.nc")
    cfg.save(tmp_path / "box.toml")
    out = tmp_path / "out"
    assert main(["ensemble", str(tmp_path / "box.toml"), "--members", "4", "--out", str(out),
                 "--serial", "--seed", "5"]) == 0
    assert sorted(os.listdir(out)) == ["ensemble.nc", "ensemble_summary.csv"]
    with open(out / "ensemble_summary.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 2 * (3 * len(LAYERS) + 6)
    assert {r["output"] for r in rows} >= {"volume", "net", "heat", "overturning"}
    saved = xr.open_dataset(out / "ensemble.nc")
    assert saved.sizes["member"] == 4 and int(saved.attrs["seed"]) == 5
    saved.close()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out.tmp")]


def test_failed_write_leaves_nothing_behind(tmp_path):
    cfg, sections = _config(), _sections()
    ens = run_ensemble(cfg, 2, seed=0, sections=sections)
    bad = ens.assign_attrs(unwritable={"a nested": "dict"})  # netCDF cannot store it
    with pytest.raises((TypeError, ValueError)):
        write_ensemble(bad, tmp_path / "out")
    assert list(tmp_path.iterdir()) == []
