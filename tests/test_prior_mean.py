"""Solvers with a non-zero prior mean, against the closed-form Gauss–Markov estimate."""

from __future__ import annotations

import numpy as np
import pytest

from sectionkit.errors import ConfigError
from sectionkit.solvers import BoundedLeastSquares, GaussMarkov, TruncatedSVD


def _problem(m=6, k=9, seed=4):
    rng = np.random.default_rng(seed)
    E = rng.normal(size=(m, k))
    R = rng.uniform(0.5, 2.0, k) ** 2  # prior variances
    N = rng.uniform(0.1, 0.3, m) ** 2  # noise variances
    x0 = rng.normal(0.0, 1.0, k)
    y = rng.normal(size=m)
    return E, y, R, N, x0


def _closed_form(E, y, R, N, x0):
    # Wunsch (1996), The Ocean Circulation Inverse Problem, ch. 3, with prior mean x0:
    # x = x0 + R E^T (E R E^T + N)^-1 (y - E x0),  P = R - R E^T (E R E^T + N)^-1 E R
    Rm, Nm = np.diag(R), np.diag(N)
    C = E @ Rm @ E.T + Nm
    gain = Rm @ E.T @ np.linalg.inv(C)
    return x0 + gain @ (y - E @ x0), Rm - gain @ E @ Rm


@pytest.mark.parametrize("form", ["data", "model"])
@pytest.mark.parametrize("shape", [(6, 9), (12, 5)])
def test_gauss_markov_with_prior_mean_equals_the_closed_form(form, shape):
    E, y, R, N, x0 = _problem(*shape)
    x, P = _closed_form(E, y, R, N, x0)
    solver = GaussMarkov(R, N, form=form).fit(E, y, prior_mean=x0)
    np.testing.assert_allclose(solver.estimate_, x, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(solver.covariance_, P, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(solver.residuals_, y - E @ x, rtol=1e-9, atol=1e-12)


def test_prior_mean_is_the_answer_when_the_data_say_nothing_new():
    # data equal to E x0: nothing to adjust (closed form: y - E x0 = 0)
    E, _, R, N, x0 = _problem()
    solver = GaussMarkov(R, N).fit(E, E @ x0, prior_mean=x0)
    np.testing.assert_allclose(solver.estimate_, x0, rtol=0, atol=1e-12)
    assert solver.chi2_.estimate == pytest.approx(0.0, abs=1e-20)


def test_chi2_of_the_estimate_is_measured_from_the_prior_mean():
    E, y, R, N, x0 = _problem()
    x, _ = _closed_form(E, y, R, N, x0)
    solver = GaussMarkov(R, N).fit(E, y, prior_mean=x0)
    assert solver.chi2_.estimate == pytest.approx(float(np.sum((x - x0) ** 2 / R)), rel=1e-9)


def test_bounded_solver_with_loose_bounds_and_prior_mean_equals_gauss_markov():
    E, y, R, N, x0 = _problem()
    x, P = _closed_form(E, y, R, N, x0)
    solver = BoundedLeastSquares(R, N, lower=-100.0, upper=100.0).fit(E, y, prior_mean=x0)
    np.testing.assert_allclose(solver.estimate_, x, rtol=1e-7, atol=1e-9)


def test_bounds_apply_to_the_unknowns_not_to_their_departure_from_the_prior_mean():
    E, y, R, N, _ = _problem()
    x0 = np.full(E.shape[1], 5.0)  # prior mean outside the bounds
    solver = BoundedLeastSquares(R, N, lower=-1.0, upper=1.0).fit(E, y, prior_mean=x0)
    assert np.all(solver.estimate_ <= 1.0 + 1e-12) and np.all(solver.estimate_ >= -1.0 - 1e-12)


def test_svd_at_full_rank_with_prior_mean_solves_the_shifted_system():
    # square, full-rank scaled system: the rank-k solution is exact for y - E x0
    E, y, R, N, x0 = _problem(5, 5)
    solver = TruncatedSVD(R, N, rank=5).fit(E, y, prior_mean=x0)
    np.testing.assert_allclose(solver.estimate_, x0 + np.linalg.solve(E, y - E @ x0),
                               rtol=1e-8, atol=1e-10)


def test_prior_mean_of_the_wrong_length_is_refused():
    E, y, R, N, x0 = _problem()
    with pytest.raises(ConfigError, match="one prior mean per unknown"):
        GaussMarkov(R, N).fit(E, y, prior_mean=x0[:-1])
