"""Box inverse assembled from real section operators: twin experiments and box bookkeeping."""

from __future__ import annotations

import numpy as np
import pytest
from _synthetic import thermocline_section

from sectionkit.config import parse_config
from sectionkit.errors import ConfigError
from sectionkit.inverse import ConstraintSystem, assemble, solve
from sectionkit.study import Study

FACES = [{"sigma": 26.8, "p_ref": 0.0}, {"sigma": 36.9, "p_ref": 2000.0}]
NAMES = ["upper", "intermediate", "deep"]


def _sections():
    return {
        "south": thermocline_section(n=7, dp=20.0, lat0=26.0, name="south"),
        "middle": thermocline_section(n=6, dp=20.0, lat0=33.0, tilt=200.0, name="middle"),
        "north": thermocline_section(n=6, dp=20.0, lat0=40.0, tilt=100.0, name="north"),
    }


def _two_box_config(**inverse):
    return parse_config({
        "title": "two boxes",
        "sections": [{"name": "south", "file": "s.nc"}, {"name": "middle", "file": "m.nc"},
                     {"name": "north", "file": "n.nc"}],
        "boxes": [{"name": "lower", "enters": ["south"], "leaves": ["middle"]},
                  {"name": "upper", "enters": ["middle"], "leaves": ["north"]}],
        "reference": {"pressure": 2000.0},
        "ekman": {"stress": {"south": [-0.06, 0.0]}},
        "layers": {"interfaces": FACES, "names": NAMES},
        "inverse": {"noise_layer": [0.5, 0.5, 0.5], "prior_velocity": 0.01, **inverse},
    })


def _system(study: Study):
    refs = study.references()
    layout = study.layout()
    system = assemble(study.operators, {n: r.offset for n, r in refs.items()}, study.ekman(),
                      study.config.effective_boxes(), study.config.inverse, layout,
                      study.config.layer_names, study.velocity_prior(layout))
    return system, layout


def test_shared_section_enters_one_box_and_leaves_the_other_with_equal_magnitude():
    study = Study.from_config(_two_box_config(), sections=_sections())
    system, layout = _system(study)
    cols = layout.pair_slices["middle"]
    row_lower = system.rows.index(("lower", "mass:deep"))
    row_upper = system.rows.index(("upper", "mass:deep"))
    np.testing.assert_allclose(system.matrix[row_lower, cols], -system.matrix[row_upper, cols])
    assert np.abs(system.matrix[row_lower, cols]).sum() > 0


def test_mass_total_row_is_sum_of_class_rows():
    study = Study.from_config(_two_box_config(), sections=_sections())
    system, _ = _system(study)
    rows = [system.rows.index(("lower", f"mass:{n}")) for n in NAMES]
    total = system.rows.index(("lower", "mass:total"))
    np.testing.assert_allclose(system.matrix[rows].sum(axis=0), system.matrix[total], atol=1e-9)
    np.testing.assert_allclose(system.initial[rows].sum(), system.initial[total], rtol=1e-12)


def test_twin_truth_lies_within_two_sigma_at_the_stated_rate():
    # twin experiment (Wunsch 1996, The Ocean Circulation Inverse Problem): truth
    # drawn from the priors, noise from N; with the real constraint matrix of three
    # sections and two boxes, the truth lies within 2 posterior std of the estimate
    # for ~95 % of unknowns and of derived class transports.
    study = Study.from_config(_two_box_config(), sections=_sections())
    system, layout = _system(study)
    base = study.solve(inverse=False)
    g = np.vstack([base.outputs[s].gradient[[base.outputs[s].index(f"volume:{n}")
                                             for n in NAMES]] for s in study.operators])
    rng = np.random.default_rng(2026)
    inside_x = inside_t = count_x = count_t = 0
    scaled = []
    for _ in range(200):
        x_true = rng.normal(0.0, system.prior)
        noise = rng.normal(0.0, system.noise)
        twin = ConstraintSystem(system.rows, system.matrix,
                                -(system.matrix @ x_true + noise), system.noise, system.prior,
                                system.units)
        result = solve(twin, study.config.inverse)
        sd = np.sqrt(np.diag(result.covariance))
        inside_x += np.sum(np.abs(result.estimate - x_true) <= 2 * sd)
        count_x += sd.size
        sd_t = np.sqrt(np.einsum("ij,jk,ik->i", g, result.covariance, g))
        inside_t += np.sum(np.abs(g @ (result.estimate - x_true)) <= 2 * sd_t)
        count_t += sd_t.size
        # the posterior residual y - E x = -adjusted, scaled by its predicted std
        residual_sd = np.sqrt(np.diag(result.solver.residual_covariance_))
        scaled.append(-result.adjusted / residual_sd)
    rate_x = inside_x / count_x
    rate_t = inside_t / count_t
    # 95.45 % expected; band from the binomial spread of correlated draws
    assert 0.92 < rate_x < 0.98, rate_x
    assert 0.91 < rate_t < 0.99, rate_t
    # residuals scaled by their predicted std (N - E P E^T) have unit variance:
    # 200 draws x rows; the band is about 4 standard errors of a chi-square mean
    variance = np.mean(np.square(scaled))
    assert 0.85 < variance < 1.15, variance


def test_inverse_moves_imbalance_consistent_with_priors_to_within_noise():
    # an imbalance made by a reference error drawn from the priors (twin, known
    # truth) is removed to within the noise by the Gauss-Markov adjustment
    study = Study.from_config(_two_box_config(), sections=_sections())
    system, _ = _system(study)
    x_true = np.random.default_rng(7).normal(0.0, system.prior) * 1.5
    twin = ConstraintSystem(system.rows, system.matrix, -(system.matrix @ x_true),
                            system.noise, system.prior, system.units)
    result = solve(twin, study.config.inverse)
    assert np.max(np.abs(twin.initial / twin.noise)) > 3
    assert np.all(np.abs(result.normalized_residuals) < 2.0)


def test_known_transport_naming_a_missing_class_is_refused():
    with pytest.raises(ConfigError, match="class 'uper' does not exist.*did you mean 'upper'"):
        _two_box_config(known=[{"name": "strait", "transport": 1.0, "noise": 0.1,
                                "class": "uper", "box": "lower"}])


def test_box_naming_a_missing_section_is_refused():
    with pytest.raises(ConfigError, match="'nroth', which does not exist"):
        parse_config({"sections": [{"name": "north", "file": "x.nc"}],
                      "boxes": [{"name": "b", "enters": ["nroth"]}]})


def test_zero_prior_velocity_is_refused():
    with pytest.raises(ConfigError, match="prior_velocity = 0 must be positive"):
        _two_box_config(prior_velocity=0.0)


def test_rank_larger_than_system_is_refused():
    study = Study.from_config(_two_box_config(solver="svd", rank=500), sections=_sections())
    with pytest.raises(ConfigError, match="rank"):
        study.solve()
