"""Posterior residual std of the box constraints and correlated reference-velocity priors.

Sources: Wunsch 1996, *The Ocean Circulation Inverse Problem*, ch. 3 (Gauss–Markov
estimate, posterior covariance P = R - R E^T (E R E^T + N)^-1 E R, residual
covariance N - E P E^T); gsw.distance for pair widths and mid-point distances.
"""

from __future__ import annotations

import gsw
import numpy as np
import pytest
from _synthetic import thermocline_section

from sectionkit.config import parse_config
from sectionkit.errors import ConfigError
from sectionkit.study import Study
from sectionkit.tables import box_table, unknowns_table

FACES = [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 36.9, "p_ref": 2000.0}]
NAMES = ["upper", "intermediate", "deep"]


def _config(**inverse):
    return parse_config({
        "sections": [{"name": "south", "file": "s.nc"},
                     {"name": "north", "file": "n.nc", "into_box": False}],
        "reference": {"pressure": 2000.0},
        "layers": {"interfaces": FACES, "names": NAMES},
        "inverse": {"noise_layer": [0.5, 0.5, 0.5], "prior_velocity": 0.01, **inverse},
    })


def _sections(bottoms=None):
    return {"south": thermocline_section(n=7, dp=20.0, lat0=26.0, name="south", bottoms=bottoms),
            "north": thermocline_section(n=6, dp=20.0, lat0=36.0, tilt=100.0, name="north",
                                         bottoms=None if bottoms is None else bottoms[:6])}


def _gauss_markov(e, r, n, y):
    """Gauss–Markov estimate and posterior covariance written out (Wunsch 1996, ch. 3)."""
    c = e @ r @ e.T + n
    x = r @ e.T @ np.linalg.solve(c, y)
    p = r - r @ e.T @ np.linalg.solve(c, e @ r)
    return x, p


def test_box_budget_posterior_residual_std_is_sqrt_diag_of_n_minus_e_p_et():
    study = Study.from_config(_config(), sections=_sections())
    results = study.solve()
    system = results.inverse.system
    active = system.prior > 0
    e = system.matrix[:, active]
    _, p = _gauss_markov(e, np.diag(system.prior[active] ** 2), np.diag(system.noise**2),
                         system.target)
    expected = np.sqrt(system.noise**2 - np.einsum("ij,jk,ik->i", e, p, e))
    table = box_table(results)
    np.testing.assert_allclose(table["posterior_residual_std"], expected, rtol=1e-6)
    np.testing.assert_allclose(table["posterior_normalized_residual"],
                               table["adjusted"] / expected, rtol=1e-6)
    # the residual the estimate can achieve is smaller than the noise
    assert np.all(table["posterior_residual_std"] < table["noise"])
    # the contract keeps normalized_residual = adjusted / noise
    np.testing.assert_allclose(table["normalized_residual"], table["adjusted"] / table["noise"])


def test_workbench_box_table_judges_residuals_by_their_posterior_std():
    from sectionkit.workbench.model import BoxBudget
    from sectionkit.workbench.render import box_budget_html

    # hand-made numbers: adjusted 0.3 against a posterior std of 0.1 is 3 (flagged), while
    # against the noise of 0.5 it would be 0.6
    budget = BoxBudget((("box", "mass:upper"),), np.array([2.0]), np.array([0.3]),
                       np.array([0.5]), ("Sv",), np.array([0.1]))
    assert budget.posterior_normalized_residual[0] == pytest.approx(3.0)
    page = box_budget_html(budget, inverse=True)
    assert "adjusted / posterior std" in page and "fde2c8" in page
    assert budget.to_frame()["posterior_normalized_residual"][0] == pytest.approx(3.0)


def test_prior_std_of_a_section_net_transport_is_the_analytic_double_sum():
    # flat bottom at 3000 dbar on the grid: each pair's area is its width (gsw.distance)
    # times the water depth (gsw.z_from_p at the mid-latitude); with a Gaussian
    # correlation exp(-d^2 / 2L^2) of mid-point distance d, the prior variance of the
    # net transport is sum_j sum_k A_j A_k s^2 rho_jk (analytic double sum)
    length_km, s = 150.0, 0.01
    study = Study.from_config(_config(prior_correlation_km=length_km),
                              sections=_sections(np.full(7, 3000.0)))
    results = study.solve()
    ds = study.sections["south"]
    lon, lat = ds["lon"].values, ds["lat"].values
    width = gsw.distance(lon, lat)  # m, between consecutive stations
    lat_mid = 0.5 * (lat[:-1] + lat[1:])
    lon_mid = 0.5 * (lon[:-1] + lon[1:])
    depth = -gsw.z_from_p(3000.0, lat_mid)
    area = width * depth  # m^2
    n = lon_mid.size
    d = np.array([[gsw.distance([lon_mid[j], lon_mid[k]], [lat_mid[j], lat_mid[k]])[0]
                   if j != k else 0.0 for k in range(n)] for j in range(n)]) / 1e3
    rho = np.exp(-0.5 * (d / length_km) ** 2)
    expected = np.sqrt(np.sum(np.outer(area, area) * s**2 * rho)) / 1e6  # Sv
    out = results.outputs["south"]
    g = out.gradient[out.index("net")]
    prior = results.inverse.system.prior_matrix()
    assert np.sqrt(g @ prior @ g) == pytest.approx(expected, rel=1e-5)
    # independent pairs would give a much smaller std: the correlation matters here
    assert np.sqrt(np.sum(area**2) * s**2) / 1e6 < 0.7 * expected


def test_correlated_prior_estimate_equals_the_written_out_gauss_markov_solution():
    study = Study.from_config(_config(prior_correlation_km=300.0), sections=_sections())
    results = study.solve()
    system = results.inverse.system
    assert system.prior_covariance is not None
    active = system.prior > 0
    x, p = _gauss_markov(system.matrix[:, active],
                         system.prior_covariance[np.ix_(active, active)],
                         np.diag(system.noise**2), system.target)
    sd = np.sqrt(np.diag(p))
    np.testing.assert_allclose(results.estimate[active], x, atol=1e-6 * sd.max())
    np.testing.assert_allclose(np.sqrt(np.diag(results.covariance))[active], sd, rtol=1e-6)


def test_pairs_of_different_sections_stay_uncorrelated():
    study = Study.from_config(_config(prior_correlation_km=5000.0), sections=_sections())
    results = study.solve()
    system = results.inverse.system
    south = results.layout.pair_slices["south"]
    north = results.layout.pair_slices["north"]
    assert np.all(system.prior_covariance[south, north] == 0.0)
    assert np.all(system.prior_covariance[south, south] > 0.0)


def test_negative_prior_correlation_length_is_refused():
    with pytest.raises(ConfigError, match="prior_correlation_km = -5 must not be negative"):
        _config(prior_correlation_km=-5.0)


def test_inverse_unknowns_table_keeps_its_contract_columns_kinds_and_names():
    # output contract of issue 10 / DESIGN.md §7: add columns, never rename
    config = parse_config({
        "sections": [{"name": "south", "file": "s.nc"},
                     {"name": "north", "file": "n.nc", "into_box": False}],
        "reference": {"pressure": 2000.0},
        "ekman": {"stress": {"south": [-0.05, 0.0]}},
        "layers": {"interfaces": FACES, "names": NAMES},
        "inverse": {"noise_layer": [0.5, 0.5, 0.5]},
    })
    study = Study.from_config(config, sections=_sections())
    table = unknowns_table(study, study.solve())
    assert list(table.columns[:7]) == ["unknown", "kind", "unit", "prior_std", "estimate",
                                       "posterior_std", "resolution"]
    kinds = dict(zip(table["unknown"], table["kind"], strict=True))
    assert kinds["south:0"] == kinds["north:4"] == "reference_velocity"
    assert kinds["box:W0"] == kinds["box:W1"] == "diapycnal_transfer"
    assert kinds["south:ekman"] == "ekman_fraction"
