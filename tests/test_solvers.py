"""Tests of the linear inverse solvers (sectionkit.solvers).

Sources: Wunsch, C. (1996), The Ocean Circulation Inverse Problem (chapter 3,
Gauss–Markov estimation and the singular value decomposition); equation
numbers are not quoted because they are recalled from memory only. Statistical
facts (Gaussian coverage, variance of Gaussian quadratic forms, variance of a
sample covariance) are standard results, stated where used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sectionkit.errors import ComputationError, ConfigError
from sectionkit.solvers import (
    SOLVERS,
    BoundedLeastSquares,
    GaussMarkov,
    TruncatedSVD,
    make_solver,
    output_std,
    propagate,
)

# --------------------------------------------------------------------------
# Test systems
# --------------------------------------------------------------------------


@dataclass
class System:
    E: np.ndarray
    y: np.ndarray
    prior: np.ndarray  # as given to the solver: (K,) variances or (K, K)
    noise: np.ndarray  # (M,) variances or (M, M)

    @property
    def R(self) -> np.ndarray:
        return np.diag(self.prior) if self.prior.ndim == 1 else self.prior

    @property
    def N(self) -> np.ndarray:
        return np.diag(self.noise) if self.noise.ndim == 1 else self.noise

    @property
    def m(self) -> int:
        return self.E.shape[0]

    @property
    def k(self) -> int:
        return self.E.shape[1]


def _spd(rng: np.random.Generator, n: int, scale: float) -> np.ndarray:
    """A well-conditioned symmetric positive definite matrix with correlations."""
    a = rng.normal(size=(n, n))
    return scale * (a @ a.T / n + np.eye(n))


def make_system(m: int, k: int, full: bool, seed: int = 0) -> System:
    rng = np.random.default_rng(seed)
    E = rng.normal(size=(m, k))
    if full:
        prior = _spd(rng, k, 2.0)
        noise = _spd(rng, m, 0.3)
    else:
        prior = rng.uniform(0.5, 3.0, k)
        noise = rng.uniform(0.05, 0.6, m)
    y = rng.normal(size=m)
    return System(E, y, prior, noise)


SHAPES = {"underdetermined": (6, 10), "overdetermined": (12, 5)}
CASES = [(shape, full) for shape in SHAPES for full in (False, True)]
CASE_IDS = [f"{shape}-{'full' if full else 'diagonal'}" for shape, full in CASES]


@pytest.fixture(params=CASES, ids=CASE_IDS)
def system(request: pytest.FixtureRequest) -> System:
    shape, full = request.param
    return make_system(*SHAPES[shape], full=full, seed=len(shape) + full)


def normal_equation_solution(s: System) -> tuple[np.ndarray, np.ndarray]:
    """Weighted least squares with the prior term, by explicit inverses (reference only)."""
    n_inv = np.linalg.inv(s.N)
    information = s.E.T @ n_inv @ s.E + np.linalg.inv(s.R)
    covariance = np.linalg.inv(information)
    return covariance @ s.E.T @ n_inv @ s.y, covariance


# --------------------------------------------------------------------------
# Gauss–Markov
# --------------------------------------------------------------------------


def test_gauss_markov_equals_weighted_least_squares_normal_equations(system: System) -> None:
    # Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3 (from memory): the
    # Gauss-Markov estimate equals the minimiser of n^T N^-1 n + x^T R^-1 x, i.e.
    # (E^T N^-1 E + R^-1)^-1 E^T N^-1 y.
    expected, _ = normal_equation_solution(system)
    fitted = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    np.testing.assert_allclose(fitted.estimate_, expected, rtol=1e-9, atol=1e-12)


def test_gauss_markov_covariance_is_inverse_information_matrix(system: System) -> None:
    # Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3 (from memory):
    # P = (E^T N^-1 E + R^-1)^-1, the inverse of the information matrix.
    _, expected = normal_equation_solution(system)
    fitted = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    np.testing.assert_allclose(fitted.covariance_, expected, rtol=1e-9, atol=1e-12)


@settings(max_examples=40, deadline=None)
@given(
    m=st.integers(1, 12),
    k=st.integers(1, 12),
    full=st.booleans(),
    seed=st.integers(0, 2**31 - 1),
)
def test_gauss_markov_data_and_model_space_forms_agree(
    m: int, k: int, full: bool, seed: int
) -> None:
    # Matrix inversion lemma (Woodbury identity); Wunsch 1996, The Ocean Circulation
    # Inverse Problem, ch. 3 (from memory):
    # R E^T (E R E^T + N)^-1 = (E^T N^-1 E + R^-1)^-1 E^T N^-1.
    s = make_system(m, k, full, seed)
    data = GaussMarkov(s.prior, s.noise, form="data").fit(s.E, s.y)
    model = GaussMarkov(s.prior, s.noise, form="model").fit(s.E, s.y)
    scale = float(np.max(np.abs(s.R)))
    np.testing.assert_allclose(data.estimate_, model.estimate_, rtol=1e-8, atol=1e-10 * scale)
    np.testing.assert_allclose(data.covariance_, model.covariance_, atol=1e-9 * scale)
    np.testing.assert_allclose(data.resolution_, model.resolution_, atol=1e-9)


@pytest.mark.parametrize(
    ("shape", "form"), [("underdetermined", "data"), ("overdetermined", "model")]
)
def test_gauss_markov_uses_data_space_form_when_fewer_rows_than_unknowns(
    shape: str, form: str
) -> None:
    s = make_system(*SHAPES[shape], full=False)
    assert GaussMarkov(s.prior, s.noise).fit(s.E, s.y).form_used_ == form


def test_gauss_markov_resolution_is_identity_minus_posterior_over_prior(system: System) -> None:
    # Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3 (from memory):
    # T_v = R E^T (E R E^T + N)^-1 E = I - P R^-1.
    fitted = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    expected = np.eye(system.k) - fitted.covariance_ @ np.linalg.inv(system.R)
    np.testing.assert_allclose(fitted.resolution_, expected, atol=1e-9)


def test_gauss_markov_residual_covariance_is_noise_minus_mapped_posterior(
    system: System,
) -> None:
    # Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3 (from memory):
    # cov(n_hat) = N - E P E^T  (= N (E R E^T + N)^-1 N).
    fitted = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    expected = system.N - system.E @ fitted.covariance_ @ system.E.T
    np.testing.assert_allclose(fitted.residual_covariance_, expected, atol=1e-10)


def test_gauss_markov_covariance_is_error_covariance_of_the_linear_estimator(
    system: System,
) -> None:
    # Error of x_hat = K y with y = E x + n: (K E - I) x + K n, so
    # cov = (I - T_v) R (I - T_v)^T + K N K^T; for Gauss-Markov this is P
    # (Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3, from memory).
    fitted = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    i_minus_t = np.eye(system.k) - fitted.resolution_
    expected = i_minus_t @ system.R @ i_minus_t.T + fitted.gain_ @ system.N @ fitted.gain_.T
    np.testing.assert_allclose(fitted.covariance_, expected, atol=1e-10)


def test_gauss_markov_minimum_objective_equals_data_quadratic_form(system: System) -> None:
    # n_hat^T N^-1 n_hat + x_hat^T R^-1 x_hat = y^T (E R E^T + N)^-1 y at the
    # Gauss-Markov estimate (Wunsch 1996, The Ocean Circulation Inverse Problem,
    # ch. 3, from memory).
    fitted = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    c = system.E @ system.R @ system.E.T + system.N
    expected = float(system.y @ np.linalg.solve(c, system.y))
    assert fitted.chi2_.total == pytest.approx(expected, rel=1e-10)


def test_gauss_markov_expected_chi2_splits_constraints_between_residuals_and_estimate(
    system: System,
) -> None:
    # E[n_hat^T N^-1 n_hat] = M - tr(T_u), E[x_hat^T R^-1 x_hat] = tr(T_v) = tr(T_u),
    # total M (Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3, from memory;
    # follows from cov(n_hat) = N (E R E^T + N)^-1 N and cov(x_hat) = R - P).
    fitted = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    trace_u = float(np.trace(fitted.data_resolution_))
    assert fitted.chi2_.residuals_expected == pytest.approx(system.m - trace_u, rel=1e-10)
    assert fitted.chi2_.estimate_expected == pytest.approx(np.trace(fitted.resolution_), rel=1e-10)
    assert fitted.chi2_.total_expected == pytest.approx(system.m, rel=1e-12)


# --------------------------------------------------------------------------
# Truncated SVD
# --------------------------------------------------------------------------


def test_full_rank_svd_equals_weighted_least_squares_without_prior_term() -> None:
    # Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3 (from memory).
    # "Equals" here means: on an overdetermined system (M > K) whose scaled matrix
    # N^-1/2 E R^1/2 has full column rank, keeping all K singular values gives the
    # weighted least-squares solution (E^T N^-1 E)^-1 E^T N^-1 y, which has no prior
    # term (the column scaling by R^1/2 only reparametrises x), to rtol 1e-9.
    s = make_system(12, 5, full=True, seed=3)
    n_inv = np.linalg.inv(s.N)
    expected = np.linalg.solve(s.E.T @ n_inv @ s.E, s.E.T @ n_inv @ s.y)
    fitted = TruncatedSVD(s.prior, s.noise, rank=s.k).fit(s.E, s.y)
    np.testing.assert_allclose(fitted.estimate_, expected, rtol=1e-9, atol=1e-12)


def test_full_rank_svd_covariance_is_inverse_weighted_normal_matrix() -> None:
    # With all K singular values kept on a full-column-rank system there is no null
    # space, so P = S V Lambda^-2 V^T S^T = (E^T N^-1 E)^-1 (Wunsch 1996, The Ocean
    # Circulation Inverse Problem, ch. 3, from memory).
    s = make_system(12, 5, full=False, seed=4)
    expected = np.linalg.inv(s.E.T @ np.linalg.inv(s.N) @ s.E)
    fitted = TruncatedSVD(s.prior, s.noise, rank=s.k).fit(s.E, s.y)
    np.testing.assert_allclose(fitted.covariance_, expected, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("rank", [1, 2, 4, 6])
def test_rank_k_svd_resolution_has_trace_k(rank: int) -> None:
    # tr(S V_k V_k^T S^-1) = tr(V_k^T V_k) = k (Wunsch 1996, The Ocean Circulation
    # Inverse Problem, ch. 3, from memory).
    s = make_system(6, 10, full=True, seed=5)
    fitted = TruncatedSVD(s.prior, s.noise, rank=rank).fit(s.E, s.y)
    assert np.trace(fitted.resolution_) == pytest.approx(rank, rel=1e-10)


@pytest.mark.parametrize("rank", [1, 3, 5])
def test_rank_k_svd_data_resolution_has_trace_k(rank: int) -> None:
    # tr(U_k U_k^T) = k (Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3,
    # from memory); scaling back by W keeps the trace.
    s = make_system(12, 5, full=True, seed=6)
    fitted = TruncatedSVD(s.prior, s.noise, rank=rank).fit(s.E, s.y)
    assert np.trace(fitted.data_resolution_) == pytest.approx(rank, rel=1e-10)


def _symmetric_sqrt(a: np.ndarray) -> np.ndarray:
    w, v = np.linalg.eigh(a)
    return (v * np.sqrt(w)) @ v.T


def test_svd_singular_values_are_those_of_the_row_and_column_scaled_system() -> None:
    # Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3 (from memory): the
    # system is scaled as N^-1/2 E R^1/2; the solver's Cholesky factors differ from the
    # symmetric square roots by orthogonal factors, which leave singular values unchanged.
    s = make_system(7, 9, full=True, seed=7)
    scaled = np.linalg.inv(_symmetric_sqrt(s.N)) @ s.E @ _symmetric_sqrt(s.R)
    expected = np.linalg.svd(scaled, compute_uv=False)
    fitted = TruncatedSVD(s.prior, s.noise, rank=3).fit(s.E, s.y)
    np.testing.assert_allclose(fitted.singular_values_, expected, rtol=1e-10)


def test_automatic_rank_keeps_singular_values_above_unit_noise() -> None:
    # Rule stated in TruncatedSVD: rank=0 keeps the scaled singular values > 1.
    # Build E so that its scaled singular values are known: E = W U diag(s) V^T S^-1.
    rng = np.random.default_rng(8)
    m, k = 6, 8
    chosen = np.array([7.0, 3.0, 1.6, 1.05, 0.9, 0.2])
    u, _ = np.linalg.qr(rng.normal(size=(m, m)))
    v, _ = np.linalg.qr(rng.normal(size=(k, k)))
    prior = _spd(rng, k, 1.5)
    noise = rng.uniform(0.1, 1.0, m)
    scaled = u @ np.diag(chosen) @ v[:, :m].T
    E = np.diag(np.sqrt(noise)) @ scaled @ np.linalg.inv(np.linalg.cholesky(prior))
    fitted = TruncatedSVD(prior, noise).fit(E, rng.normal(size=m))
    np.testing.assert_allclose(fitted.singular_values_, chosen, rtol=1e-9)
    assert fitted.rank_ == 4


def test_svd_covariance_is_noise_part_plus_null_space_part() -> None:
    # Error of x_hat = K y with truth from the prior: (K E - I) x + K n, so
    # P = K N K^T + (I - T_v) R (I - T_v)^T (Wunsch 1996, The Ocean Circulation
    # Inverse Problem, ch. 3, from memory: solution variance plus null-space variance).
    s = make_system(6, 10, full=True, seed=9)
    fitted = TruncatedSVD(s.prior, s.noise, rank=3).fit(s.E, s.y)
    i_minus_t = np.eye(s.k) - fitted.resolution_
    expected = fitted.gain_ @ s.N @ fitted.gain_.T + i_minus_t @ s.R @ i_minus_t.T
    np.testing.assert_allclose(fitted.covariance_, expected, atol=1e-10)


# --------------------------------------------------------------------------
# Twin experiments
# --------------------------------------------------------------------------

# P(|z| <= 2) for a standard Gaussian z: erf(2 / sqrt 2) = 0.9545 (standard result).
TWO_SIGMA_COVERAGE = math.erf(2.0 / math.sqrt(2.0))


@dataclass
class Twin:
    system: System
    truth: np.ndarray  # (draws, K)
    estimates: np.ndarray  # (draws, K)
    std: np.ndarray  # (K,) posterior std (the same for every draw)
    covariance: np.ndarray  # (K, K)
    normalized_residuals: np.ndarray  # (draws, M)
    chi2_residuals: np.ndarray  # (draws,)
    chi2_total: np.ndarray  # (draws,)
    chi2_residuals_expected: float


def run_twin(solver_factory, system: System, draws: int, seed: int) -> Twin:
    """Draw truth from the prior and noise from N; fit each synthetic data vector."""
    rng = np.random.default_rng(seed)
    prior_factor = np.linalg.cholesky(system.R)
    noise_factor = np.linalg.cholesky(system.N)
    truth = rng.normal(size=(draws, system.k)) @ prior_factor.T
    noise = rng.normal(size=(draws, system.m)) @ noise_factor.T
    data = truth @ system.E.T + noise
    solver = solver_factory(system.prior, system.noise)
    estimates, norm_res, chi_res, chi_tot = [], [], [], []
    for y in data:
        solver.fit(system.E, y)
        estimates.append(solver.estimate_)
        norm_res.append(solver.normalized_residuals_)
        chi_res.append(solver.chi2_.residuals)
        chi_tot.append(solver.chi2_.total)
    return Twin(
        system=system,
        truth=truth,
        estimates=np.array(estimates),
        std=solver.posterior_std_,
        covariance=solver.covariance_,
        normalized_residuals=np.array(norm_res),
        chi2_residuals=np.array(chi_res),
        chi2_total=np.array(chi_tot),
        chi2_residuals_expected=solver.chi2_.residuals_expected,
    )


TWIN_DRAWS = 2000


@pytest.fixture(
    scope="module",
    params=[("underdetermined", False), ("overdetermined", True)],
    ids=["underdetermined-diagonal", "overdetermined-full"],
)
def gm_twin(request: pytest.FixtureRequest) -> Twin:
    shape, full = request.param
    system = make_system(*SHAPES[shape], full=full, seed=11)
    return run_twin(GaussMarkov, system, TWIN_DRAWS, seed=12)


def coverage_band(draws: int) -> tuple[float, float]:
    """3.5-sigma band for the pooled 2-sigma coverage fraction.

    The unknowns of one draw are correlated, so the pooled fraction is bounded
    by the worst case of perfectly correlated unknowns: its standard deviation is at
    most sqrt(p (1 - p) / draws) (binomial with one effective sample per draw).
    """
    p = TWO_SIGMA_COVERAGE
    half = 3.5 * math.sqrt(p * (1.0 - p) / draws)
    return p - half, p + half


def test_twin_truth_within_two_posterior_std_of_gauss_markov_estimate_95_percent(
    gm_twin: Twin,
) -> None:
    # Twin experiment (DESIGN.md section 9): with Gaussian truth and noise the
    # Gauss-Markov error is Gaussian with covariance P, so |error| <= 2 sigma for
    # erf(sqrt 2) = 95.45 % of the unknowns.
    inside = np.abs(gm_twin.estimates - gm_twin.truth) <= 2.0 * gm_twin.std
    low, high = coverage_band(TWIN_DRAWS)
    assert 0.938 < low and high < 0.971
    assert low <= inside.mean() <= high


def expected_normalized_residual_variance(system: System) -> tuple[float, float]:
    """Exact mean of r_i^2 / N_ii over constraints, and the std of its per-draw value.

    From n_hat = N (E R E^T + N)^-1 y with cov(y) = E R E^T + N:
    cov(n_hat) = N C^-1 N (Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3,
    from memory). The per-draw mean q = n_hat^T D n_hat with D = diag(1 / (M N_ii)) has
    E[q] = tr(D cov) and, n_hat being Gaussian, Var[q] = 2 tr((D cov)^2) (standard result
    for Gaussian quadratic forms).
    """
    c = system.E @ system.R @ system.E.T + system.N
    cov = system.N @ np.linalg.solve(c, system.N)
    d = np.diag(1.0 / (system.m * np.diag(system.N)))
    mean = float(np.trace(d @ cov))
    std = math.sqrt(2.0 * float(np.trace(d @ cov @ d @ cov)))
    return mean, std


def test_twin_normalized_residual_variance_matches_exact_expectation_not_one(
    gm_twin: Twin,
) -> None:
    # The normalized residuals are not of unit variance: the estimate absorbs part of
    # the noise, leaving mean(diag(N C^-1 N) / diag N) (= (M - tr T_u) / M for diagonal N).
    expected, per_draw_std = expected_normalized_residual_variance(gm_twin.system)
    sampling_std = per_draw_std / math.sqrt(TWIN_DRAWS)
    observed = float(np.mean(gm_twin.normalized_residuals**2))
    assert abs(observed - expected) < 4.0 * sampling_std
    assert abs(1.0 - expected) > 10.0 * sampling_std  # the naive value 1 is excluded


def test_twin_mean_residual_chi2_matches_its_expected_value(gm_twin: Twin) -> None:
    # E[n_hat^T N^-1 n_hat] = M - tr(T_u) (Wunsch 1996, The Ocean Circulation Inverse
    # Problem, ch. 3, from memory); Var = 2 tr((N^-1 N C^-1 N)^2) for Gaussian residuals.
    s = gm_twin.system
    c = s.E @ s.R @ s.E.T + s.N
    a = np.linalg.solve(c, s.N)  # N^-1 (N C^-1 N) = C^-1 N
    sampling_std = math.sqrt(2.0 * float(np.trace(a @ a)) / TWIN_DRAWS)
    assert float(np.trace(a)) == pytest.approx(gm_twin.chi2_residuals_expected, rel=1e-9)
    assert abs(gm_twin.chi2_residuals.mean() - gm_twin.chi2_residuals_expected) < 4 * sampling_std


def test_twin_mean_total_chi2_equals_number_of_constraints(gm_twin: Twin) -> None:
    # The Gauss-Markov objective at the estimate is y^T C^-1 y, chi-squared with M
    # degrees of freedom for Gaussian y (mean M, variance 2M; standard result).
    m = gm_twin.system.m
    assert abs(gm_twin.chi2_total.mean() - m) < 4.0 * math.sqrt(2.0 * m / TWIN_DRAWS)


def test_propagated_output_covariance_matches_twin_sample_covariance(gm_twin: Twin) -> None:
    # cov(G x_hat - G x) = G P G^T (DESIGN.md section 2). For Gaussian errors, a sample
    # covariance entry has variance (S_ij^2 + S_ii S_jj) / n (standard Wishart result).
    s = gm_twin.system
    g = np.random.default_rng(13).normal(size=(3, s.k))
    predicted = propagate(g, gm_twin.covariance)
    errors = (gm_twin.estimates - gm_twin.truth) @ g.T
    sample = errors.T @ errors / TWIN_DRAWS  # the errors have zero mean by construction
    tolerance = 4.0 * np.sqrt(
        (predicted**2 + np.outer(np.diag(predicted), np.diag(predicted))) / TWIN_DRAWS
    )
    assert np.all(np.abs(sample - predicted) < tolerance)


def test_twin_truth_within_two_posterior_std_of_truncated_svd_estimate_95_percent() -> None:
    # The truncated-SVD covariance includes the null-space part (I - T_v) R (I - T_v)^T
    # (Wunsch 1996, The Ocean Circulation Inverse Problem, ch. 3, from memory), so with
    # truth drawn from the prior it must cover the truth at the Gaussian 2-sigma rate;
    # without that part coverage would collapse for the unresolved unknowns.
    draws = 1500
    system = make_system(6, 10, full=True, seed=14)
    twin = run_twin(lambda r, n: TruncatedSVD(r, n, rank=3), system, draws, seed=15)
    inside = np.abs(twin.estimates - twin.truth) <= 2.0 * twin.std
    low, high = coverage_band(draws)
    assert low <= inside.mean() <= high


# --------------------------------------------------------------------------
# Bounded least squares
# --------------------------------------------------------------------------


def test_bounded_with_inactive_bounds_equals_gauss_markov(system: System) -> None:
    # Same objective as Gauss-Markov; bounds far outside the solution change nothing.
    gm = GaussMarkov(system.prior, system.noise).fit(system.E, system.y)
    width = 10.0 * (np.abs(gm.estimate_) + gm.posterior_std_)
    bounded = BoundedLeastSquares(system.prior, system.noise, lower=-width, upper=width)
    bounded.fit(system.E, system.y)
    assert not np.any(bounded.active_)
    np.testing.assert_allclose(bounded.estimate_, gm.estimate_, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(bounded.covariance_, gm.covariance_, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(bounded.resolution_, gm.resolution_, atol=1e-9)


def _bounded_case(side: str) -> tuple[System, BoundedLeastSquares, int, float]:
    """Put a bound one posterior std beyond the Gauss-Markov estimate of one unknown."""
    s = make_system(6, 10, full=False, seed=16)
    gm = GaussMarkov(s.prior, s.noise).fit(s.E, s.y)
    j = int(np.argmax(np.abs(gm.estimate_) / gm.posterior_std_))
    if side == "lower":
        bound = gm.estimate_[j] + gm.posterior_std_[j]
        lower = np.full(s.k, -np.inf)
        lower[j] = bound
        solver = BoundedLeastSquares(s.prior, s.noise, lower=lower)
    else:
        bound = gm.estimate_[j] - gm.posterior_std_[j]
        upper = np.full(s.k, np.inf)
        upper[j] = bound
        solver = BoundedLeastSquares(s.prior, s.noise, upper=upper)
    return s, solver.fit(s.E, s.y), j, bound


@pytest.mark.parametrize("side", ["lower", "upper"])
def test_bounded_estimate_respects_an_active_bound(side: str) -> None:
    _, fitted, j, bound = _bounded_case(side)
    assert fitted.estimate_[j] == bound
    assert fitted.active_[j] == (-1 if side == "lower" else 1)
    assert np.count_nonzero(fitted.active_) == 1


@pytest.mark.parametrize("side", ["lower", "upper"])
def test_bounded_estimate_satisfies_optimality_conditions(side: str) -> None:
    # Karush-Kuhn-Tucker conditions of bound-constrained least squares (Lawson &
    # Hanson 1974, Solving Least Squares Problems, from memory): the gradient of the
    # objective vanishes for free unknowns, is >= 0 at a lower bound, <= 0 at an upper.
    s, fitted, j, _ = _bounded_case(side)
    x = fitted.estimate_
    gradient = -s.E.T @ np.linalg.solve(s.N, s.y - s.E @ x) + np.linalg.solve(s.R, x)
    free = fitted.active_ == 0
    scale = float(np.max(np.abs(gradient)))
    np.testing.assert_allclose(gradient[free], 0.0, atol=1e-8 * max(scale, 1.0))
    if side == "lower":
        assert gradient[j] > 0
    else:
        assert gradient[j] < 0


def test_bounded_unknown_at_active_bound_has_zero_variance() -> None:
    # Approximation stated in BoundedLeastSquares: an unknown at a bound is held fixed.
    _, fitted, j, _ = _bounded_case("lower")
    assert fitted.posterior_std_[j] == 0.0
    assert np.all(fitted.covariance_[j] == 0.0) and np.all(fitted.covariance_[:, j] == 0.0)


def test_bounded_free_unknowns_covariance_is_restricted_information_inverse() -> None:
    # Holding the bound unknown fixed, the free unknowns' covariance is the inverse of
    # the information matrix E^T N^-1 E + R^-1 restricted to them (Wunsch 1996, The
    # Ocean Circulation Inverse Problem, ch. 3, from memory, applied to the reduced problem).
    s, fitted, j, _ = _bounded_case("upper")
    information = s.E.T @ np.linalg.inv(s.N) @ s.E + np.linalg.inv(s.R)
    free = np.flatnonzero(fitted.active_ == 0)
    expected = np.linalg.inv(information[np.ix_(free, free)])
    np.testing.assert_allclose(fitted.covariance_[np.ix_(free, free)], expected, rtol=1e-9)


# --------------------------------------------------------------------------
# Registry, interface and errors
# --------------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(SOLVERS))
def test_solvers_built_by_name_share_the_result_interface(name: str) -> None:
    s = make_system(6, 10, full=False, seed=17)
    fitted = make_solver(name, prior_variance=s.prior, noise_variance=s.noise).fit(s.E, s.y)
    assert isinstance(fitted, SOLVERS[name])
    assert fitted.estimate_.shape == fitted.posterior_std_.shape == (s.k,)
    assert fitted.covariance_.shape == fitted.resolution_.shape == (s.k, s.k)
    assert fitted.residuals_.shape == fitted.normalized_residuals_.shape == (s.m,)
    assert fitted.data_resolution_.shape == fitted.residual_covariance_.shape == (s.m, s.m)
    np.testing.assert_allclose(fitted.residuals_, s.y - s.E @ fitted.estimate_)
    np.testing.assert_allclose(fitted.normalized_residuals_, fitted.residuals_ / np.sqrt(s.noise))


def test_make_solver_passes_settings_to_the_solver() -> None:
    s = make_system(6, 10, full=False, seed=18)
    fitted = make_solver("SVD", prior_variance=s.prior, noise_variance=s.noise, rank=2)
    assert fitted.fit(s.E, s.y).rank_ == 2


@pytest.mark.parametrize("bad", [0.0, -0.5, np.nan, np.inf])
def test_non_positive_or_non_finite_prior_variance_is_config_error_naming_index(
    bad: float,
) -> None:
    prior = np.array([1.0, 2.0, bad, 1.0])
    with pytest.raises(ConfigError, match=r"prior_variance\[2\]") as info:
        GaussMarkov(prior, 1.0)
    assert repr(bad) in str(info.value)


def test_zero_scalar_prior_variance_is_config_error() -> None:
    with pytest.raises(ConfigError, match="prior_variance = 0.0"):
        TruncatedSVD(0.0, 1.0)


def test_full_prior_that_is_not_positive_definite_is_config_error() -> None:
    prior = np.array([[1.0, 2.0], [2.0, 1.0]])
    with pytest.raises(ConfigError, match="not positive definite"):
        GaussMarkov(prior, 1.0).fit(np.eye(2), np.ones(2))


def test_zero_noise_variance_is_config_error() -> None:
    with pytest.raises(ConfigError, match=r"noise_variance\[1\] = 0.0"):
        BoundedLeastSquares(1.0, [0.5, 0.0])


def test_prior_length_not_matching_unknowns_is_config_error() -> None:
    with pytest.raises(ConfigError, match="E has 4 columns.*prior_variance has 3 entries"):
        GaussMarkov([1.0, 1.0, 1.0], 1.0).fit(np.ones((2, 4)), np.ones(2))


def test_data_length_not_matching_rows_is_config_error() -> None:
    with pytest.raises(ConfigError, match=r"y has shape \(3,\) but E has 2 rows"):
        GaussMarkov(1.0, 1.0).fit(np.ones((2, 4)), np.ones(3))


def test_non_finite_constraint_matrix_is_computation_error() -> None:
    E = np.ones((2, 3))
    E[1, 2] = np.nan
    with pytest.raises(ComputationError, match=r"E\[1, 2\] = nan"):
        GaussMarkov(1.0, 1.0).fit(E, np.ones(2))


def test_svd_rank_above_limit_is_config_error_naming_rank_and_limit() -> None:
    s = make_system(5, 8, full=False, seed=19)
    with pytest.raises(ConfigError, match=r"rank = 6 .*= 5"):
        TruncatedSVD(s.prior, s.noise, rank=6).fit(s.E, s.y)


def test_negative_svd_rank_is_config_error() -> None:
    with pytest.raises(ConfigError, match="rank = -1"):
        TruncatedSVD(1.0, 1.0, rank=-1)


def test_bound_pair_not_ordered_is_config_error() -> None:
    with pytest.raises(ConfigError, match="unknown 1: lower bound 2.0 is not below"):
        BoundedLeastSquares(1.0, 1.0, lower=[0.0, 2.0], upper=1.0).fit(np.eye(2), np.ones(2))


@pytest.mark.parametrize(
    ("name", "closest"), [("gaus-markov", "gauss-markov"), ("svdd", "svd"), ("bounds", "bounded")]
)
def test_unknown_solver_name_is_config_error_naming_the_closest(name: str, closest: str) -> None:
    with pytest.raises(ConfigError, match=f"did you mean '{closest}'"):
        make_solver(name, prior_variance=1.0, noise_variance=1.0)


def test_unknown_solver_setting_is_config_error_naming_the_closest() -> None:
    with pytest.raises(ConfigError, match="no setting 'rnk'; did you mean 'rank'"):
        make_solver("svd", prior_variance=1.0, noise_variance=1.0, rnk=3)


def test_results_before_fit_are_computation_error() -> None:
    with pytest.raises(ComputationError, match=r"call fit\(E, y\) first"):
        _ = GaussMarkov(1.0, 1.0).estimate_


def test_missing_results_give_getattr_defaults() -> None:
    # callers (figures, captions) ask every solver for optional results this way
    assert getattr(GaussMarkov(1.0, 1.0), "estimate_", None) is None
    fitted = GaussMarkov(1.0, 1.0).fit(np.eye(2), np.ones(2))
    assert getattr(fitted, "singular_values_", None) is None


# --------------------------------------------------------------------------
# Propagation to linear outputs
# --------------------------------------------------------------------------


@pytest.mark.parametrize("diagonal", [False, True])
def test_output_std_is_square_root_of_propagated_variance(diagonal: bool) -> None:
    rng = np.random.default_rng(20)
    g = rng.normal(size=(50, 8))
    p = rng.uniform(0.1, 1.0, 8) if diagonal else _spd(rng, 8, 1.0)
    p_full = np.diag(p) if diagonal else p
    np.testing.assert_allclose(output_std(g, p), np.sqrt(np.diag(g @ p_full @ g.T)), rtol=1e-12)
    np.testing.assert_allclose(propagate(g, p), g @ p_full @ g.T, rtol=1e-12, atol=1e-14)


def test_propagation_broadcasts_over_leading_dimensions() -> None:
    rng = np.random.default_rng(21)
    g = rng.normal(size=(3, 4, 6))  # (member, output, unknown)
    p = _spd(rng, 6, 1.0)
    cov = propagate(g, p)
    assert cov.shape == (3, 4, 4)
    np.testing.assert_allclose(cov[2], g[2] @ p @ g[2].T, rtol=1e-12)
    np.testing.assert_allclose(output_std(g, p)[1], np.sqrt(np.diag(cov[1])), rtol=1e-12)


def test_propagation_with_mismatched_shapes_is_config_error() -> None:
    with pytest.raises(ConfigError, match="G has 3 columns"):
        propagate(np.ones((2, 3)), np.eye(4))
