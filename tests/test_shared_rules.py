"""The rules that used to live in several places, each tested once where it now lives."""

from __future__ import annotations

import numpy as np
import pytest

from sectionkit.errors import ComputationError, ConfigError
from sectionkit.geometry import (
    along_line_distance,
    great_circle_distance,
    pair_along_line_distance,
)
from sectionkit.labels import pair_label, pair_labels, parse_pair_label, split_pair_label
from sectionkit.solvers import BoundedLeastSquares, GaussMarkov, TruncatedSVD


def test_pair_label_is_section_colon_index():
    # the form configuration overrides use (DESIGN.md section 6): "<section>:<k>"
    assert pair_label("south", 12) == "south:12"
    assert pair_labels("north", 3) == ["north:0", "north:1", "north:2"]


def test_a_pair_label_reads_back_to_its_section_and_index():
    assert parse_pair_label(pair_label("south", 7), {"south": 8}) == ("south", 7)
    assert split_pair_label("south:x") == ("south", None)


def test_a_pair_past_the_end_is_refused_with_the_valid_range():
    with pytest.raises(ConfigError, match=r"south has 8 pairs, south:0 to south:7"):
        parse_pair_label("south:8", {"south": 8}, "[inverse] bounds")


def test_a_pair_of_an_unknown_section_names_the_known_ones():
    with pytest.raises(ConfigError, match=r"sections: south, north"):
        parse_pair_label("east:1", {"south": 3, "north": 4})


def test_along_line_distance_accumulates_station_spacing():
    # three stations along the equator 1 degree apart: 1 degree of a 6371 km sphere each
    # (hand calculation: 6371e3 * pi / 180 = 111194.9 m)
    d = great_circle_distance(np.array([0.0, 1.0, 2.0]), np.zeros(3))
    np.testing.assert_allclose(along_line_distance(d), [0.0, 111194.93, 222389.85], rtol=1e-6)


def test_pair_distance_along_the_line_is_half_way_between_its_stations():
    np.testing.assert_allclose(pair_along_line_distance(np.array([10.0, 30.0, 20.0])),
                               [5.0, 25.0, 50.0])


def test_along_line_distance_keeps_leading_dimensions():
    d = np.array([[1.0, 2.0], [3.0, 4.0]])
    np.testing.assert_allclose(along_line_distance(d), [[0, 1, 3], [0, 3, 7]])


def _system(seed: int = 3, m: int = 4, k: int = 6):
    rng = np.random.default_rng(seed)
    return rng.normal(size=(m, k)), rng.normal(size=m), rng.uniform(0.5, 2.0, k), \
        rng.uniform(0.1, 0.4, m)


@pytest.mark.parametrize("solver", [GaussMarkov, TruncatedSVD])
def test_a_linear_solver_estimates_other_data_with_its_gain_as_a_new_fit_would(solver):
    # Gauss-Markov and truncated SVD: x_hat = x0 + K (y - E x0), K independent of y, x0
    # (Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3)
    e, y, r, n = _system()
    fitted = solver(r, n).fit(e, y)
    y2, x0 = y + 0.3, np.linspace(-0.2, 0.2, e.shape[1])
    again = solver(r, n).fit(e, y2, prior_mean=x0)
    np.testing.assert_allclose(fitted.estimate_for(y2, x0), again.estimate_, rtol=1e-10,
                               atol=1e-12)


def test_the_bounded_solver_is_not_linear_and_says_so():
    e, y, r, n = _system()
    fitted = BoundedLeastSquares(r, n, lower=-0.1, upper=0.1).fit(e, y)
    assert not BoundedLeastSquares.is_linear and GaussMarkov.is_linear
    with pytest.raises(ComputationError, match="fit it again"):
        fitted.estimate_for(y)


def test_every_solver_reports_the_singular_values_of_the_scaled_system():
    # E' = N^-1/2 E R^1/2 for diagonal N and R, computed with numpy alone
    e, y, r, n = _system()
    expected = np.linalg.svd(e * np.sqrt(r) / np.sqrt(n)[:, None], compute_uv=False)
    for fitted in (GaussMarkov(r, n).fit(e, y), TruncatedSVD(r, n).fit(e, y),
                   BoundedLeastSquares(r, n).fit(e, y)):
        np.testing.assert_allclose(fitted.scaled_singular_values_, expected, rtol=1e-10)


def test_rank_is_the_setting_and_rank_underscore_what_the_fit_used():
    e, y, r, n = _system()
    fitted = TruncatedSVD(r, n, rank=0).fit(e, y)
    assert fitted.rank == 0
    assert fitted.rank_ == int(np.sum(fitted.singular_values_ > 1.0))


def test_deepest_level_above_the_floor_counts_whole_grid_steps():
    # hand calculation: floors at 2000, 2009.99 and 2010 dbar on a 10 dbar grid
    from sectionkit.thermo import last_level

    np.testing.assert_array_equal(last_level(np.array([2000.0, 2009.99, 2010.0]), 10.0),
                                  [200, 200, 201])
    assert last_level(3 * 0.1, 0.1) == 3  # 0.30000000000000004 / 0.1 is 3 steps, not 2


def test_box_side_sign_is_plus_for_a_section_entering_and_minus_for_one_leaving():
    # DESIGN.md: positive transport of a section in ``enters`` enters the box
    from sectionkit.config import BoxSpec

    box = BoxSpec("interior", enters=["south"], leaves=["north"])
    assert (box.sign("south"), box.sign("north")) == (1.0, -1.0)
    with pytest.raises(ConfigError, match="does not bound box 'interior'"):
        box.sign("east")


def test_a_per_pair_argument_of_the_wrong_length_names_both_shapes():
    # gsw's style: the refusal states the shapes it found
    from _synthetic import thermocline_section

    from sectionkit.budget import section_values
    from sectionkit.layers import Interface
    from sectionkit.operator import build_operator

    op = build_operator(thermocline_section(n=5, dp=20.0, lat0=30.0, name="south"),
                        [Interface(27.0, 0.0)], ["warm", "cold"])
    with pytest.raises(ConfigError, match=r"adjustment has shape \(3, 7\), but section "
                                          r"'south' has 4 pairs.*\(\.\.\., 4\)"):
        section_values(op, np.zeros(4), np.zeros((3, 7)))
    leading = section_values(op, np.zeros(4), np.zeros((3, 4)))  # leading dims are fine
    assert leading["net"].shape == (3,)


def test_constraint_rows_are_named_kind_colon_class_and_read_back():
    # the box_budget.csv constraint column (DESIGN.md section 7): "mass:deep", "mass:total"
    from sectionkit.labels import constraint_label, split_constraint_label

    assert constraint_label("mass", "deep") == "mass:deep"
    assert constraint_label("mass") == "mass:total"
    assert split_constraint_label("salt:upper_deep") == ("salt", "upper_deep")
    assert split_constraint_label("net_mass") == ("net_mass", "")
