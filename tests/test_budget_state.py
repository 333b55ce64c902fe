"""The one budget state: every front end's linear update equals a fresh batch solve.

Expectations come from a fresh ``Study`` with the changed configuration (the
batch path) or from Wunsch's Gauss-Markov formulas written out with numpy
(Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3):
``x = x0 + R E^T (E R E^T + N)^-1 (y - E x0)``.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from _synthetic import thermocline_section

from sectionkit.budget import UnknownLayout
from sectionkit.config import parse_config
from sectionkit.errors import ConfigError
from sectionkit.inverse import assemble
from sectionkit.state import BudgetState
from sectionkit.study import Study


def _config(pressure: float = 1000.0, **inverse) -> dict:
    return {
        "sections": [{"name": "south", "file": "s.nc"},
                     {"name": "north", "file": "n.nc", "into_box": False}],
        "reference": {"pressure": pressure},
        "layers": {"interfaces": [{"sigma": 27.0, "p_ref": 0.0}], "names": ["warm", "cold"]},
        "inverse": {"prior_velocity": 0.01, "prior_diapycnal": 0.5, "noise_layer": [0.5, 0.5],
                    "conserve": ["mass", "salt"], **inverse},
    }


@pytest.fixture(scope="module")
def sections():
    return {"south": thermocline_section(n=6, dp=20.0, lat0=26.0, name="south"),
            "north": thermocline_section(n=5, dp=20.0, lat0=36.0, name="north")}


def _study(sections, pressure=1000.0, **inverse) -> Study:
    return Study.from_config(parse_config(_config(pressure, **inverse)), sections=sections)


def test_derived_constraints_equal_those_assembled_for_the_new_reference(sections):
    moved = _study(sections, 1000.0)
    fresh = _study(sections, 1500.0)
    derived = BudgetState.prepare(moved).derive(fresh.references())
    batch = BudgetState.prepare(fresh)
    np.testing.assert_allclose(derived.system.initial, batch.system.initial,
                               rtol=1e-10, atol=1e-9 * np.abs(batch.system.initial).max())
    np.testing.assert_allclose(derived.system.matrix, batch.system.matrix, rtol=1e-12)


def test_reused_linear_solver_gives_the_fresh_solve_of_the_new_reference(sections):
    moved = _study(sections, 1000.0)
    fresh = _study(sections, 1500.0)
    base = BudgetState.prepare(moved)
    derived = base.derive(fresh.references()).solve(reuse=base.solve())
    batch = BudgetState.prepare(fresh).solve()
    scale = np.abs(batch.estimate).max()
    np.testing.assert_allclose(derived.estimate, batch.estimate, atol=1e-8 * scale)
    np.testing.assert_allclose(derived.covariance, batch.covariance,
                               atol=1e-10 * np.abs(batch.covariance).max())


def test_solving_with_other_data_is_the_gauss_markov_estimate_for_that_data(sections):
    state = BudgetState.prepare(_study(sections))
    system = state.system
    y = system.target + np.linspace(-0.3, 0.3, system.target.size)
    got = state.solve(y).estimate
    active = system.prior > 0
    e, r, n = system.matrix[:, active], np.diag(system.prior[active] ** 2), np.diag(
        system.noise**2)
    expected = r @ e.T @ np.linalg.solve(e @ r @ e.T + n, y)  # Wunsch 1996, ch. 3
    np.testing.assert_allclose(got[active], expected, rtol=1e-8,
                               atol=1e-10 * np.abs(expected).max())


def test_ensemble_resolve_equals_the_state_solved_with_the_same_data(sections):
    from sectionkit.ensemble import resolve_with_data

    study = _study(sections)
    results = study.solve()
    y = results.inverse.system.target * 0.5
    member = resolve_with_data(study, results, y)
    np.testing.assert_allclose(member.estimate, results.state.solve(y).estimate, rtol=1e-12,
                               atol=1e-15)
    assert member.value("south", "net") != pytest.approx(results.value("south", "net"))


def test_priors_follow_the_layout_not_the_order_of_the_unknowns(sections):
    # the transfers placed first: each pair's prior must still land on its own column
    study = _study(sections)
    normal = study.layout()
    n_dia = len(normal.diapycnal)
    shifted = UnknownLayout(
        {name: slice(sl.start + n_dia, sl.stop + n_dia) for name, sl in normal.pair_slices.items()},
        {key: k for k, key in enumerate(sorted(normal.diapycnal))}, {}, normal.size, [])
    cfg = study.config
    system = assemble(study.operators, {n: r.offset for n, r in study.references().items()},
                      study.ekman(), cfg.effective_boxes(), cfg.inverse, shifted,
                      cfg.layer_names, study.velocity_prior())
    assert np.all(system.prior[:n_dia] == cfg.inverse.prior_diapycnal)
    assert np.all(system.prior[n_dia:] == cfg.inverse.prior_velocity)


def test_bounds_name_pairs_through_the_layout(sections):
    state = BudgetState.prepare(_study(sections, solver="bounded",
                                       bounds={"north:2": [-0.001, 0.001]}))
    k = state.layout.pair_slices["north"].start + 2
    assert state.lower[k] == -0.001 and state.upper[k] == 0.001
    assert np.isinf(state.lower[np.arange(state.layout.size) != k]).all()
    assert not state.is_linear


def test_a_bound_on_a_missing_pair_is_one_clear_error(sections):
    study = _study(sections, solver="bounded")
    study.config.inverse.bounds = {"north:9": (-0.001, 0.001)}
    with pytest.raises(ConfigError, match=r"north has 4 pairs, north:0 to north:3"):
        BudgetState.prepare(study)


def test_the_state_is_immutable(sections):
    state = BudgetState.prepare(_study(sections))
    with pytest.raises(dataclasses.FrozenInstanceError):
        state.layout = None


def test_select_by_registry_name_gives_the_class_transports_and_their_errors(sections):
    # the registry's name for a number and its key in a section's outputs are one thing;
    # the error is sqrt(g P g^T) of that row (DESIGN.md section 2), written out with numpy
    results = _study(sections).solve()
    sel = results.select("class_volume_transport", "south")
    out = results.outputs["south"]
    rows = [out.index(f"volume:{c}") for c in ("warm", "cold")]
    np.testing.assert_allclose(sel.initial, out.initial[rows], rtol=1e-14)
    g = out.gradient[rows]
    np.testing.assert_allclose(sel.adjusted, out.initial[rows] + g @ results.estimate, rtol=1e-12)
    np.testing.assert_allclose(sel.error, np.sqrt(np.diag(g @ results.covariance @ g.T)),
                               rtol=1e-10)
    assert results.select("overturning_depth", "north").adjusted.shape == (1,)


def test_several_outputs_selected_together_equal_each_selected_alone(sections):
    results = _study(sections).solve()
    names = ["class_volume_transport", "class_heat_transport", "overturning_depth",
             "net_volume_transport"]
    together = results.select_many(names, "north")
    for name in names:
        alone = results.select(name, "north")
        assert together[name].keys == alone.keys
        for field in ("initial", "adjusted", "error"):
            np.testing.assert_allclose(getattr(together[name], field), getattr(alone, field),
                                       rtol=1e-12, atol=1e-15)
