"""Linear inverse solvers for ``E x + n = y`` with a prior on ``x`` and noise ``n``.

This module is the pure linear-algebra layer of the box inverse. It knows
nothing about sections, layers or files: it takes a constraint matrix ``E``
(one row per constraint, one column per unknown), a data vector ``y``, a prior
covariance ``R`` of the unknowns (``x ~ (0, R)``) and a noise covariance ``N``
(``n ~ (0, N)``), and returns an estimate with its uncertainty.

Three solvers share one interface (configure in the constructor, compute in
:meth:`fit`, read the results as attributes), so callers swap them by name
through :data:`SOLVERS` / :func:`make_solver`:

``"gauss-markov"`` -> :class:`GaussMarkov`
    Minimum-variance (Gauss–Markov) estimate.
``"svd"`` -> :class:`TruncatedSVD`
    Truncated singular value decomposition of the row- and column-scaled system.
``"bounded"`` -> :class:`BoundedLeastSquares`
    The Gauss–Markov objective minimised with bounds on the unknowns.

Results common to every solver (after ``fit(E, y)``), with ``M`` constraints
and ``K`` unknowns:

=============================  ==========  =================================================
attribute                      shape       meaning
=============================  ==========  =================================================
``estimate_``                  (K,)        estimated unknowns, units of ``x``
``covariance_``                (K, K)      error covariance of ``estimate_``, units of ``x`` ^2
``posterior_std_``             (K,)        ``sqrt(diag(covariance_))``, units of ``x``
``gain_``                      (K, M)      ``d estimate_ / d y`` (linear response to the data)
``resolution_``                (K, K)      model resolution ``T_v = gain_ @ E``
``data_resolution_``           (M, M)      data resolution ``T_u = E @ gain_``
``residuals_``                 (M,)        ``y - E @ estimate_``, units of ``y``
``normalized_residuals_``      (M,)        ``residuals_ / sqrt(diag(N))``, dimensionless
``residual_covariance_``       (M, M)      expected covariance of ``residuals_`` under the
                                           prior and noise model, units of ``y`` ^2
``chi2_``                      ChiSquared  misfit statistics with their expected values
``scaled_singular_values_``    (min(M,K),) singular values of ``W^-1 E S`` (``N = W W^T``,
                                           ``R = S S^T``), descending, dimensionless
=============================  ==========  =================================================

Settings (``rank``, ``form``, ``lower``, ``upper``) keep the constructor's names;
results end in ``_`` (scikit-learn style: ``rank`` is the setting of
:class:`TruncatedSVD`, ``rank_`` the rank it used). ``is_linear`` on the class
says whether the estimate is linear in the data with a data-independent gain
(:meth:`_LinearSolver.estimate_for`).

All covariance algebra goes through Cholesky factors and triangular solves; no
matrix is inverted explicitly except where a solver states it (the bounded
solver needs the inverse factor of a full prior covariance).

Reference for the estimators and their diagnostics: Wunsch, C. (1996), The
Ocean Circulation Inverse Problem, Cambridge University Press, chapter 3.
"""

from __future__ import annotations

import difflib
import inspect
from dataclasses import dataclass
from typing import Any, ClassVar, TypeVar

import numpy as np
import scipy.linalg as la
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import lsq_linear

from sectionkit.errors import ComputationError, ConfigError

__all__ = [
    "SOLVERS",
    "BoundedLeastSquares",
    "ChiSquared",
    "GaussMarkov",
    "TruncatedSVD",
    "make_solver",
    "output_std",
    "propagate",
]

Array = NDArray[np.float64]
_SolverT = TypeVar("_SolverT", bound="_LinearSolver")

#: Relative tolerance on the asymmetry of a full covariance matrix.
_SYMMETRY_RTOL = 1e-8


# --------------------------------------------------------------------------
# Covariance handling
# --------------------------------------------------------------------------



class NotFittedError(ComputationError, AttributeError):
    """A result was read before ``fit``; also an AttributeError so ``getattr`` defaults work."""

class _Covariance:
    """A covariance ``C = S S^T`` held as variances (diagonal) or a Cholesky factor.

    Parameters
    ----------
    variances : ndarray (n,), optional
        Diagonal of ``C`` when ``C`` is diagonal, units^2.
    matrix : ndarray (n, n), optional
        Full symmetric positive definite ``C``, units^2.
    factor : ndarray (n, n), optional
        Lower Cholesky factor ``S`` of ``matrix``, units.
    """

    def __init__(
        self,
        variances: Array | None = None,
        matrix: Array | None = None,
        factor: Array | None = None,
    ) -> None:
        self.variances = variances
        self._matrix = matrix
        self._factor = factor
        self._sqrt = None if variances is None else np.sqrt(variances)

    @property
    def is_diagonal(self) -> bool:
        return self.variances is not None

    @property
    def size(self) -> int:
        return int(self.diagonal.shape[0])

    @property
    def diagonal(self) -> Array:
        """Variances, units^2, shape (n,)."""
        return self.variances if self.is_diagonal else np.diag(self._matrix).copy()

    @property
    def matrix(self) -> Array:
        """The full matrix ``C``, units^2, shape (n, n)."""
        return np.diag(self.variances) if self.is_diagonal else self._matrix

    @property
    def factor(self) -> Array:
        """The square-root factor ``S`` (lower triangular), units, shape (n, n)."""
        return np.diag(self._sqrt) if self.is_diagonal else self._factor

    @staticmethod
    def _rows(v: Array, x: Array) -> Array:
        return v[:, None] if x.ndim == 2 else v

    def times(self, x: Array) -> Array:
        """``C @ x`` for ``x`` of shape (n,) or (n, k)."""
        if self.variances is not None:
            return self._rows(self.variances, x) * x
        return self.matrix @ x

    def solve(self, x: Array) -> Array:
        """``C^-1 @ x`` through the Cholesky factor."""
        return self.factor_t_solve(self.factor_solve(x))

    def factor_times(self, x: Array, transpose: bool = False) -> Array:
        """``S @ x`` (``S^T @ x`` with ``transpose``)."""
        if self.is_diagonal:
            return self._rows(self._sqrt, x) * x
        return (self._factor.T if transpose else self._factor) @ x

    def factor_t_times(self, x: Array) -> Array:
        """``S^T @ x``."""
        return self.factor_times(x, transpose=True)

    def factor_solve(self, x: Array, transpose: bool = False) -> Array:
        """``S^-1 @ x`` (``S^-T @ x`` with ``transpose``), a triangular solve."""
        if self.is_diagonal:
            return x / self._rows(self._sqrt, x)
        return la.solve_triangular(self._factor, x, lower=True, trans="T" if transpose else "N",
                                   check_finite=False)

    def factor_t_solve(self, x: Array) -> Array:
        """``S^-T @ x`` (triangular solve)."""
        return self.factor_solve(x, transpose=True)

    def inverse_factor(self) -> Array:
        """``S^-1`` as a matrix, units^-1, shape (n, n)."""
        if self._sqrt is not None:
            return np.diag(1.0 / self._sqrt)
        return self.factor_solve(np.eye(self.size))


def _parse_covariance(value: ArrayLike, name: str, what: str) -> Array:
    """Check a variance setting and return it as a float array (0-, 1- or 2-D).

    Parameters
    ----------
    value : float or array_like (n,) or (n, n)
        Variances (one per item, or one for all) or a full covariance matrix, units^2.
    name : str
        Setting name used in messages, e.g. ``"prior_variance"``.
    what : str
        What one entry refers to, e.g. ``"unknown"`` or ``"constraint"``.

    Raises
    ------
    ConfigError
        When the values are not finite, not positive, not square and symmetric,
        or not positive definite.
    """
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ConfigError(
            f"{name} must be a number, a 1-D array of variances or a square covariance "
            f"matrix; got {value!r} ({exc})"
        ) from None
    if arr.ndim == 0:
        if not (np.isfinite(arr) and arr > 0):
            raise ConfigError(
                f"{name} = {float(arr)} is not a positive finite variance; every "
                f"{what} needs a variance > 0 (a zero variance would pin it — remove "
                f"that {what} from the problem instead)"
            )
        return arr
    if arr.ndim == 1:
        bad = np.flatnonzero(~(np.isfinite(arr) & (arr > 0)))
        if bad.size:
            listed = ", ".join(f"{name}[{i}] = {float(arr[i])}" for i in bad[:5])
            more = f" and {bad.size - 5} more" if bad.size > 5 else ""
            raise ConfigError(
                f"{listed}{more}: variances must be positive and finite, one per {what} "
                f"(a zero variance would pin that {what} — remove it from the problem "
                f"instead)"
            )
        if arr.size == 0:
            raise ConfigError(f"{name} is empty; give one variance per {what}")
        return arr
    if arr.ndim == 2:
        n, m = arr.shape
        if n != m or n == 0:
            raise ConfigError(
                f"{name} has shape {arr.shape}; a full covariance must be square ({what} x {what})"
            )
        if not np.all(np.isfinite(arr)):
            i, j = np.argwhere(~np.isfinite(arr))[0]
            raise ConfigError(f"{name}[{i}, {j}] = {float(arr[i, j])} is not finite")
        diag = np.diag(arr)
        bad = np.flatnonzero(diag <= 0)
        if bad.size:
            i = int(bad[0])
            raise ConfigError(
                f"{name}[{i}, {i}] = {float(diag[i])}: variances on the diagonal must be "
                f"positive (one per {what})"
            )
        scale = float(np.max(np.abs(arr)))
        asym = float(np.max(np.abs(arr - arr.T)))
        if asym > _SYMMETRY_RTOL * scale:
            i, j = np.unravel_index(int(np.argmax(np.abs(arr - arr.T))), arr.shape)
            raise ConfigError(
                f"{name} is not symmetric: [{i}, {j}] = {float(arr[i, j])} but "
                f"[{j}, {i}] = {float(arr[j, i])}"
            )
        return 0.5 * (arr + arr.T)
    raise ConfigError(
        f"{name} has {arr.ndim} dimensions; give a number, a 1-D array of variances or a "
        f"square covariance matrix"
    )


def _build_covariance(spec: Array, n: int, name: str, what: str, source: str) -> _Covariance:
    """Expand a parsed variance setting to ``n`` items and factor it.

    Parameters
    ----------
    spec : ndarray () or (n,) or (n, n)
        Output of :func:`_parse_covariance`, units^2.
    n : int
        Number of items the problem has (unknowns or constraints).
    name, what : str
        Setting name and item name for messages.
    source : str
        Where ``n`` comes from, for messages (e.g. ``"E has 12 columns"``).
    """
    if spec.ndim == 0:
        return _Covariance(variances=np.full(n, float(spec)))
    if spec.shape[0] != n:
        kind = "entries" if spec.ndim == 1 else "rows"
        raise ConfigError(
            f"{source} but {name} has {spec.shape[0]} {kind}; give one variance per {what}"
        )
    if spec.ndim == 1:
        return _Covariance(variances=spec)
    try:
        factor = la.cholesky(spec, lower=True, check_finite=False)
    except la.LinAlgError:
        eig = float(np.linalg.eigvalsh(spec)[0])
        raise ConfigError(
            f"{name} is not positive definite (smallest eigenvalue {eig:.3g}); a full "
            f"covariance must be symmetric positive definite"
        ) from None
    return _Covariance(matrix=spec, factor=factor)


def _sym(a: Array) -> Array:
    """Symmetric part of a square matrix."""
    return 0.5 * (a + a.T)


def _data_factor(E: Array, re_t: Array, noise: _Covariance, advice: str) -> Array:
    """Lower Cholesky factor of the data covariance ``C = E R E^T + N``.

    Parameters
    ----------
    E : ndarray (M, K)
        Constraint matrix, units of ``y`` per unit of ``x``.
    re_t : ndarray (K, M)
        ``R E^T``, units of ``x`` times units of ``y``.
    noise : _Covariance
        ``N``, units of ``y`` squared.
    advice : str
        What to do when ``C`` is not positive definite, for the message.
    """
    try:
        return la.cholesky(_sym(E @ re_t + noise.matrix), lower=True, check_finite=False)
    except la.LinAlgError:
        raise ComputationError(
            f"E R E^T + N is not positive definite to working precision; {advice}"
        ) from None


# --------------------------------------------------------------------------
# Results shared by every solver
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class ChiSquared:
    """Misfit statistics of a fitted solver and their expected values.

    The expected values are those implied by the solver's own model: truth
    drawn from the prior ``x ~ (0, R)``, noise ``n ~ (0, N)``, and the estimate
    a linear function ``gain @ y`` of the data (exact for :class:`GaussMarkov`
    and :class:`TruncatedSVD`; for :class:`BoundedLeastSquares` the linear
    response about the active set).

    Attributes
    ----------
    residuals : float
        ``r^T N^-1 r`` with ``r = y - E x_hat``, dimensionless.
    residuals_expected : float
        Its expectation ``trace(N^-1 residual_covariance)``; ``M - trace(T_u)``
        for Gauss–Markov.
    estimate : float
        ``x_hat^T R^-1 x_hat``, the estimate measured against the prior, dimensionless.
    estimate_expected : float
        Its expectation ``trace(R^-1 gain C gain^T)`` with ``C = E R E^T + N``;
        ``trace(T_v)`` for Gauss–Markov.
    total : float
        ``residuals + estimate`` (the weighted objective at the estimate).
    total_expected : float
        ``residuals_expected + estimate_expected``; equal to the number of
        constraints ``M`` for Gauss–Markov.
    n_constraints : int
        ``M``.
    """

    residuals: float
    residuals_expected: float
    estimate: float
    estimate_expected: float
    total: float
    total_expected: float
    n_constraints: int


class _LinearSolver:
    """Common machinery: validation, fitted-attribute bookkeeping, diagnostics.

    Subclasses implement :meth:`_solve`, returning ``(estimate, covariance, gain)``.
    """

    #: Registry name of the solver.
    name: ClassVar[str] = ""
    #: Names of the attributes that exist only after :meth:`fit`.
    #: True when the estimate is ``prior_mean + gain_ @ (y - E prior_mean)`` with a gain that
    #: does not depend on ``y``: :meth:`estimate_for` then gives the estimate for other data
    #: without a new fit.
    is_linear: ClassVar[bool] = True
    #: Names of the attributes that exist only after :meth:`fit` (scikit-learn style:
    #: fitted results end in ``_``, settings do not).
    _fitted_names: ClassVar[tuple[str, ...]] = (
        "estimate_",
        "covariance_",
        "posterior_std_",
        "gain_",
        "resolution_",
        "data_resolution_",
        "residuals_",
        "normalized_residuals_",
        "residual_covariance_",
        "chi2_",
        "scaled_singular_values_",
    )

    estimate_: Array
    covariance_: Array
    posterior_std_: Array
    gain_: Array
    resolution_: Array
    data_resolution_: Array
    residuals_: Array
    normalized_residuals_: Array
    residual_covariance_: Array
    chi2_: ChiSquared
    scaled_singular_values_: Array

    def __init__(self, prior_variance: ArrayLike, noise_variance: ArrayLike) -> None:
        self.prior_variance = _parse_covariance(prior_variance, "prior_variance", "unknown")
        self.noise_variance = _parse_covariance(noise_variance, "noise_variance", "constraint")

    def __getattr__(self, attr: str) -> Any:
        # Only reached when normal lookup fails, i.e. before fit() for results.
        if attr in type(self)._fitted_names:
            raise NotFittedError(
                f"{type(self).__name__}.{attr} is not available yet: call fit(E, y) first"
            )
        raise AttributeError(f"{type(self).__name__!r} object has no attribute {attr!r}")

    def __repr__(self) -> str:
        params = inspect.signature(type(self).__init__).parameters
        shown = []
        for key in list(params)[1:]:
            value = self.__dict__.get(key)
            if isinstance(value, np.ndarray):
                text = f"{float(value):g}" if value.ndim == 0 else f"<array {value.shape}>"
            else:
                text = repr(value)
            shown.append(f"{key}={text}")
        return f"{type(self).__name__}({', '.join(shown)})"

    # -- public ------------------------------------------------------------

    def fit(
        self: _SolverT, E: ArrayLike, y: ArrayLike, prior_mean: ArrayLike | None = None
    ) -> _SolverT:
        """Estimate the unknowns from ``E x + n = y``.

        Parameters
        ----------
        E : array_like (M, K)
            Constraint matrix: row i gives the response of constraint i to
            each unknown, units of ``y`` per unit of ``x``.
        y : array_like (M,)
            Constraint data (what ``E x`` should equal up to noise), units of ``y``.
        prior_mean : array_like (K,), optional
            Prior mean ``x0`` of the unknowns (zero when None), units of ``x``.
            The solver estimates ``x - x0`` from ``y - E x0`` with the same
            prior covariance, so for Gauss–Markov
            ``x_hat = x0 + R E^T (E R E^T + N)^-1 (y - E x0)`` and ``P`` is
            unchanged (Wunsch 1996, chapter 3); bounds still apply to ``x``.

        Returns
        -------
        self
            The solver, with the result attributes set.

        Raises
        ------
        ConfigError
            Shapes of ``E``, ``y`` and the variances disagree.
        ComputationError
            ``E`` or ``y`` is not finite, or the factorisation fails.
        """
        E, y = self._check_system(E, y)
        m, k = E.shape
        prior = _build_covariance(
            self.prior_variance,
            k,
            "prior_variance",
            "unknown",
            f"E has {k} columns (unknowns)",
        )
        noise = _build_covariance(
            self.noise_variance,
            m,
            "noise_variance",
            "constraint",
            f"E has {m} rows (constraints) and y has {m} values",
        )
        x0 = self._check_prior_mean(prior_mean, k)
        self._prior_mean = x0
        estimate, covariance, gain = self._solve(E, y - E @ x0, prior, noise)
        self._finish(E, y, prior, noise, estimate + x0, covariance, gain)
        return self

    def estimate_for(self, y: ArrayLike, prior_mean: ArrayLike | None = None) -> Array:
        """The estimate for other data ``y`` with the fitted gain, without a new fit.

        For a linear solver (``is_linear``) the estimate is
        ``x0 + gain_ (y - E x0)`` and neither the gain nor the covariance
        depends on ``y`` or ``x0``; so this equals a new :meth:`fit` on the same
        ``E`` and covariances, and ``covariance_`` holds for it too.

        Parameters
        ----------
        y : array_like (M,)
            Constraint data, units of ``y``.
        prior_mean : array_like (K,), optional
            Prior mean ``x0``, units of ``x`` (zero when None).

        Returns
        -------
        ndarray (K,)
            Units of ``x``.

        Raises
        ------
        ComputationError
            The solver is not linear (its gain depends on the data).
        """
        if not type(self).is_linear:
            raise ComputationError(f"{type(self).__name__} is not linear in the data (its gain "
                                   "depends on which bounds are active): fit it again")
        gain = self.gain_
        k, m = gain.shape
        y = np.asarray(y, dtype=float)
        if y.shape != (m,):
            raise ConfigError(f"y has shape {y.shape} but the fitted gain expects ({m},)")
        x0 = self._check_prior_mean(prior_mean, k)
        return x0 + gain @ (y - self._fitted_matrix @ x0)

    @staticmethod
    def _check_prior_mean(prior_mean: ArrayLike | None, k: int) -> Array:
        if prior_mean is None:
            return np.zeros(k)
        x0 = np.asarray(prior_mean, dtype=float)
        if x0.shape != (k,):
            raise ConfigError(
                f"prior_mean has shape {x0.shape} but E has {k} columns; give one prior mean "
                f"per unknown (shape ({k},))"
            )
        if not np.all(np.isfinite(x0)):
            i = int(np.flatnonzero(~np.isfinite(x0))[0])
            raise ConfigError(f"prior_mean[{i}] = {float(x0[i])} is not finite")
        return x0

    # -- to implement ------------------------------------------------------

    def _solve(
        self, E: Array, y: Array, prior: _Covariance, noise: _Covariance
    ) -> tuple[Array, Array, Array]:
        raise NotImplementedError

    # -- helpers -----------------------------------------------------------

    @staticmethod
    def _check_system(E: ArrayLike, y: ArrayLike) -> tuple[Array, Array]:
        E = np.asarray(E, dtype=float)
        y = np.asarray(y, dtype=float)
        if E.ndim != 2:
            raise ConfigError(
                f"E must be a 2-D matrix (constraints x unknowns); got shape {E.shape}"
            )
        m, k = E.shape
        if m == 0 or k == 0:
            raise ConfigError(
                f"E has shape {E.shape}; an inverse needs at least one constraint and one unknown"
            )
        if y.ndim != 1 or y.shape[0] != m:
            raise ConfigError(
                f"y has shape {y.shape} but E has {m} rows; give one data value per "
                f"constraint (shape ({m},))"
            )
        if not np.all(np.isfinite(E)):
            i, j = np.argwhere(~np.isfinite(E))[0]
            raise ComputationError(
                f"E[{i}, {j}] = {float(E[i, j])}: the constraint matrix must be finite"
            )
        if not np.all(np.isfinite(y)):
            i = int(np.flatnonzero(~np.isfinite(y))[0])
            raise ComputationError(f"y[{i}] = {float(y[i])}: the constraint data must be finite")
        return E, y

    def _finish(
        self,
        E: Array,
        y: Array,
        prior: _Covariance,
        noise: _Covariance,
        estimate: Array,
        covariance: Array,
        gain: Array,
    ) -> None:
        """Set the result attributes shared by every solver."""
        m, _ = E.shape
        self._fitted_matrix = E
        self.estimate_ = estimate
        self.covariance_ = _sym(covariance)
        self.posterior_std_ = np.sqrt(np.clip(np.diag(self.covariance_), 0.0, None))
        self.gain_ = gain
        self.resolution_ = gain @ E
        self.data_resolution_ = E @ gain
        self.residuals_ = y - E @ estimate
        self.normalized_residuals_ = self.residuals_ / np.sqrt(noise.diagonal)
        svd = getattr(self, "singular_values_", None)
        if svd is None:
            scaled = prior.factor_t_times(noise.factor_solve(E).T).T  # W^-1 E S
            svd = la.svdvals(scaled, check_finite=False)
        self.scaled_singular_values_ = np.asarray(svd, dtype=float)

        # Expected statistics under the model y = E x + n, x ~ (0, R), n ~ (0, N):
        # cov(y) = C = E R E^T + N = L L^T, residual r = (I - T_u) y, estimate = gain y.
        data_factor = _data_factor(E, prior.times(E.T), noise,
                                   "the noise variances are too small compared with the "
                                   "prior-projected data variance")
        resid_factor = data_factor - self.data_resolution_ @ data_factor  # (I - T_u) L
        self.residual_covariance_ = resid_factor @ resid_factor.T
        chi_res = float(np.sum(noise.factor_solve(self.residuals_) ** 2))
        # the estimate measured against the prior: its departure from the prior mean
        chi_est = float(np.sum(prior.factor_solve(estimate - self._prior_mean) ** 2))
        exp_res = float(np.sum(noise.factor_solve(resid_factor) ** 2))
        exp_est = float(np.sum(prior.factor_solve(gain @ data_factor) ** 2))
        self.chi2_ = ChiSquared(
            residuals=chi_res,
            residuals_expected=exp_res,
            estimate=chi_est,
            estimate_expected=exp_est,
            total=chi_res + chi_est,
            total_expected=exp_res + exp_est,
            n_constraints=m,
        )


# --------------------------------------------------------------------------
# Gauss–Markov
# --------------------------------------------------------------------------


class GaussMarkov(_LinearSolver):
    """Minimum-variance (Gauss–Markov) estimate of ``x`` in ``E x + n = y``.

    With prior ``x ~ (0, R)`` and noise ``n ~ (0, N)`` (Wunsch 1996, The Ocean
    Circulation Inverse Problem, chapter 3)::

        x_hat = R E^T (E R E^T + N)^-1 y
        P     = R - R E^T (E R E^T + N)^-1 E R

    Two algebraically equal forms are available:

    * data space (``form="data"``): Cholesky of the M x M matrix ``E R E^T + N``;
    * model space (``form="model"``), the information form
      ``P = (E^T N^-1 E + R^-1)^-1``, ``x_hat = P E^T N^-1 y``, computed on the
      scaled system ``E' = W^-1 E S`` (``N = W W^T``, ``R = S S^T``) as
      ``P = S (I + E'^T E')^-1 S^T`` so that neither ``R`` nor ``N`` is inverted.

    ``form="auto"`` (default) uses the data-space form when there are fewer
    constraints than unknowns (M < K) and the model-space form otherwise.

    Parameters
    ----------
    prior_variance : float or array_like (K,) or (K, K)
        Prior variance of every unknown (one number for all, one per unknown,
        or a full symmetric positive definite covariance), units of ``x`` squared
        (e.g. m^2 s^-2 for reference velocities, Sv^2 for transfers).
    noise_variance : float or array_like (M,) or (M, M)
        Noise variance of each constraint (or full covariance), units of ``y``
        squared (e.g. Sv^2).
    form : {"auto", "data", "model"}
        Which algebraic form to compute; all give the same result.

    Attributes
    ----------
    form_used_ : str
        ``"data"`` or ``"model"``: the form that :meth:`fit` used.
    estimate_, covariance_, posterior_std_, gain_, resolution_, data_resolution_,
    residuals_, normalized_residuals_, residual_covariance_, chi2_
        See the module documentation. Here ``gain_ = R E^T (E R E^T + N)^-1``,
        ``resolution = T_v = R E^T (E R E^T + N)^-1 E = I - P R^-1``,
        ``residual_covariance = N - E P E^T``, and the expected ``chi2.total``
        is exactly M.
    """

    name = "gauss-markov"
    _fitted_names = (*_LinearSolver._fitted_names, "form_used_")
    _FORMS = ("auto", "data", "model")

    form_used_: str

    def __init__(
        self, prior_variance: ArrayLike, noise_variance: ArrayLike, form: str = "auto"
    ) -> None:
        super().__init__(prior_variance, noise_variance)
        if form not in self._FORMS:
            raise ConfigError(f"form = {form!r} is not one of {', '.join(self._FORMS)}")
        self.form = form

    def _solve(
        self, E: Array, y: Array, prior: _Covariance, noise: _Covariance
    ) -> tuple[Array, Array, Array]:
        m, k = E.shape
        form = self.form if self.form != "auto" else ("data" if m < k else "model")
        self.form_used_ = form
        if form == "data":
            re_t = prior.times(E.T)  # R E^T, (K, M)
            c_factor = _data_factor(E, re_t, noise, "use form='model' or larger noise variances")
            gain = la.cho_solve((c_factor, True), re_t.T, check_finite=False).T  # R E^T C^-1
            covariance = prior.matrix - gain @ re_t.T
            return gain @ y, covariance, gain

        z = noise.factor_solve(E)  # W^-1 E, (M, K)
        e_scaled = prior.factor_t_times(z.T).T  # W^-1 E S
        info = np.eye(k) + e_scaled.T @ e_scaled  # I + E'^T E'
        try:
            info_factor = la.cholesky(info, lower=True, check_finite=False)
        except la.LinAlgError:
            raise ComputationError(
                "I + E'^T E' is not positive definite to working precision; the scaled "
                "system is too badly conditioned — use form='data'"
            ) from None
        half = la.solve_triangular(
            info_factor, prior.factor.T, lower=True, check_finite=False
        )  # Lg^-1 S^T, so that P = half^T half
        covariance = half.T @ half
        gain = covariance @ noise.factor_t_solve(z).T  # P E^T N^-1
        return gain @ y, covariance, gain


# --------------------------------------------------------------------------
# Truncated SVD
# --------------------------------------------------------------------------


class TruncatedSVD(_LinearSolver):
    """Truncated SVD solution of the row- and column-scaled system.

    The system is scaled by square-root factors of the noise and prior
    covariances, ``N = W W^T`` and ``R = S S^T`` (Cholesky factors; any square
    root gives the same singular values and the same solution)::

        E' = W^-1 E S,   y' = W^-1 y,   x = S x',   E' = U Lambda V^T

    and the rank-k solution is ``x_hat = S V_k Lambda_k^-1 U_k^T y'``
    (Wunsch 1996, The Ocean Circulation Inverse Problem, chapter 3).

    **Rank rule** (``rank=0``): k is the number of singular values of the
    scaled system larger than 1. In scaled variables the prior has unit
    variance and the noise has unit variance in every data direction, so the
    data component along ``u_i`` has signal variance ``lambda_i^2`` and noise
    variance 1: directions with ``lambda_i > 1`` are kept because their signal
    exceeds the noise (equivalently, the Gauss–Markov filter factor
    ``lambda_i^2 / (lambda_i^2 + 1)`` exceeds one half). k may be 0, in which
    case the estimate is the prior mean (zero) and the covariance is ``R``.

    **Covariance**, with ``T_v = S V_k V_k^T S^-1`` the model resolution::

        P = S V_k Lambda_k^-2 V_k^T S^T  +  (I - T_v) R (I - T_v)^T
          = S [V_k Lambda_k^-2 V_k^T + (I - V_k V_k^T)] S^T

    the first term is the noise propagated into the estimate, the second the
    part of the prior truth that the kept singular vectors cannot see
    (null space plus truncated directions), assuming the truth is drawn from
    the prior.

    Parameters
    ----------
    prior_variance : float or array_like (K,) or (K, K)
        Prior variance of every unknown (or full covariance) used to scale the
        columns, units of ``x`` squared.
    noise_variance : float or array_like (M,) or (M, M)
        Noise variance of each constraint (or full covariance) used to scale
        the rows, units of ``y`` squared.
    rank : int
        Number of singular values kept, 1 <= rank <= min(M, K); 0 (default)
        applies the rank rule above.

    Attributes
    ----------
    rank : int
        The setting (0 = automatic).
    rank_ : int
        The rank k actually used (after :meth:`fit`).
    singular_values_ : ndarray (min(M, K),)
        All singular values of the scaled system ``E'``, descending, dimensionless
        (the same as ``scaled_singular_values_``).
    estimate_, covariance_, posterior_std_, gain_, resolution_, data_resolution_,
    residuals_, normalized_residuals_, residual_covariance_, chi2_
        See the module documentation. ``resolution_ = S V_k V_k^T S^-1`` and
        ``data_resolution_ = W U_k U_k^T W^-1`` (the maps from truth to
        estimate and from data to ``E x_hat``, in original units; for diagonal
        noise its diagonal equals that of ``U_k U_k^T``). Both have trace k.
    """

    name = "svd"
    _fitted_names = (*_LinearSolver._fitted_names, "rank_", "singular_values_")

    rank_: int
    singular_values_: Array

    def __init__(self, prior_variance: ArrayLike, noise_variance: ArrayLike, rank: int = 0) -> None:
        super().__init__(prior_variance, noise_variance)
        if isinstance(rank, bool) or not isinstance(rank, int | np.integer) or rank < 0:
            raise ConfigError(
                f"rank = {rank!r}: give a whole number of singular values to keep, "
                f"or 0 to choose it from the noise level"
            )
        self.rank = int(rank)

    def _solve(
        self, E: Array, y: Array, prior: _Covariance, noise: _Covariance
    ) -> tuple[Array, Array, Array]:
        m, k_unknowns = E.shape
        limit = min(m, k_unknowns)
        if self.rank > limit:
            raise ConfigError(
                f"rank = {self.rank} is larger than min(constraints, unknowns) = "
                f"min({m}, {k_unknowns}) = {limit}; choose rank <= {limit} "
                f"(or 0 to pick it from the noise level)"
            )
        z = noise.factor_solve(E)
        e_scaled = prior.factor_t_times(z.T).T  # W^-1 E S
        try:
            u, s, vt = la.svd(e_scaled, full_matrices=False, check_finite=False)
        except la.LinAlgError:
            raise ComputationError("the SVD of the scaled system did not converge") from None
        self.singular_values_ = s
        rank = self.rank if self.rank else int(np.sum(s > 1.0))
        tol = (s[0] if s.size else 0.0) * max(m, k_unknowns) * np.finfo(float).eps
        if rank and s[rank - 1] <= tol:
            numerical = int(np.sum(s > tol))
            raise ComputationError(
                f"rank = {rank} keeps singular value {s[rank - 1]:.3g}, which is zero to "
                f"working precision (the scaled system has numerical rank {numerical}); "
                f"choose rank <= {numerical}"
            )
        self.rank_ = rank
        uk, sk, vk = u[:, :rank], s[:rank], vt[:rank].T
        s_vk = prior.factor_times(vk)  # S V_k, (K, k)
        gain = s_vk @ (noise.factor_t_solve(uk) / sk).T  # S V_k Lambda^-1 U_k^T W^-1
        noise_part = s_vk / sk
        covariance = prior.matrix - s_vk @ s_vk.T + noise_part @ noise_part.T
        return gain @ y, covariance, gain


# --------------------------------------------------------------------------
# Bounded least squares
# --------------------------------------------------------------------------


class BoundedLeastSquares(_LinearSolver):
    """The Gauss–Markov objective minimised subject to bounds on the unknowns.

    Minimises ``|W^-1 (y - E x)|^2 + |S^-1 x|^2`` (``N = W W^T``, ``R = S S^T``;
    the objective whose unconstrained minimum is the Gauss–Markov estimate)
    subject to ``lower <= x <= upper``, with :func:`scipy.optimize.lsq_linear`
    (bounded-variable least squares, an active-set method that returns the
    exact unconstrained solution when no bound is active).

    **Covariance approximation.** Unknowns at an active bound are treated as
    known exactly: their variance (row and column of ``covariance``) is zero,
    and the free unknowns get the Gauss–Markov covariance of the problem with
    the bound unknowns held fixed, ``P_ff = (E_f^T N^-1 E_f + (R^-1)_ff)^-1``
    (the information matrix restricted to the free unknowns). With no active
    bound this is exactly the Gauss–Markov ``P``. It ignores the probability
    mass the bounds cut off and the chance that the active set would change
    with other noise. ``gain``, ``resolution`` and the expected ``chi2`` values
    are the linear response about the active set found.

    Parameters
    ----------
    prior_variance : float or array_like (K,) or (K, K)
        Prior variance of every unknown (or full covariance), units of ``x``
        squared. A full matrix needs its inverse Cholesky factor, which is
        formed explicitly.
    noise_variance : float or array_like (M,) or (M, M)
        Noise variance of each constraint (or full covariance), units of ``y``
        squared.
    lower, upper : float or array_like (K,), optional
        Bounds on the unknowns, units of ``x``; ``None`` or ``-inf`` / ``inf``
        for no bound. Each lower bound must be strictly below its upper bound.

    Attributes
    ----------
    active_ : ndarray of int (K,)
        -1 where the unknown sits at its lower bound, +1 at its upper bound, 0 free.
    estimate_, covariance_, posterior_std_, gain_, resolution_, data_resolution_,
    residuals_, normalized_residuals_, residual_covariance_, chi2_
        See the module documentation and the covariance approximation above.
    """

    name = "bounded"
    _fitted_names = (*_LinearSolver._fitted_names, "active_")
    is_linear = False  # the active set, hence the gain, depends on the data

    active_: NDArray[np.int_]

    def __init__(
        self,
        prior_variance: ArrayLike,
        noise_variance: ArrayLike,
        lower: ArrayLike | None = None,
        upper: ArrayLike | None = None,
    ) -> None:
        super().__init__(prior_variance, noise_variance)
        self.lower = self._parse_bound(lower, "lower", -np.inf)
        self.upper = self._parse_bound(upper, "upper", np.inf)

    @staticmethod
    def _parse_bound(value: ArrayLike | None, name: str, default: float) -> Array:
        if value is None:
            return np.array(default)
        try:
            arr = np.array(value, dtype=float)
        except (TypeError, ValueError):
            raise ConfigError(
                f"{name} = {value!r} is not a number or an array of numbers"
            ) from None
        if arr.ndim > 1:
            raise ConfigError(f"{name} has shape {arr.shape}; give one bound or one per unknown")
        if np.any(np.isnan(arr)):
            i = int(np.flatnonzero(np.isnan(arr.reshape(-1)))[0])
            raise ConfigError(f"{name}[{i}] is NaN; use -inf / inf for no bound")
        return arr

    def _bounds(self, k: int) -> tuple[Array, Array]:
        bounds = []
        for name, arr in (("lower", self.lower), ("upper", self.upper)):
            if arr.ndim == 1 and arr.shape[0] != k:
                raise ConfigError(
                    f"E has {k} columns (unknowns) but {name} has {arr.shape[0]} entries; "
                    f"give one bound or one per unknown"
                )
            bounds.append(np.broadcast_to(arr, (k,)).astype(float))
        lower, upper = bounds
        bad = np.flatnonzero(lower >= upper)
        if bad.size:
            i = int(bad[0])
            raise ConfigError(
                f"unknown {i}: lower bound {float(lower[i])} is not below upper bound "
                f"{float(upper[i])}; each lower bound must be strictly below its upper bound "
                f"(to fix an unknown, remove it from the problem)"
            )
        return lower, upper

    def _solve(
        self, E: Array, y: Array, prior: _Covariance, noise: _Covariance
    ) -> tuple[Array, Array, Array]:
        m, k = E.shape
        lower, upper = self._bounds(k)
        # fit() hands over the departure from the prior mean: shift the bounds with it
        lower, upper = lower - self._prior_mean, upper - self._prior_mean
        z = noise.factor_solve(E)  # W^-1 E
        stacked = np.vstack([z, prior.inverse_factor()])  # [W^-1 E; S^-1]
        rhs = np.concatenate([noise.factor_solve(y), np.zeros(k)])
        result = lsq_linear(stacked, rhs, bounds=(lower, upper), method="bvls", tol=1e-12)
        if result.status <= 0:
            raise ComputationError(
                f"bounded least squares did not converge: {result.message} (status {result.status})"
            )
        active = np.asarray(result.active_mask, dtype=int)
        estimate = np.clip(result.x, lower, upper)
        estimate[active < 0] = lower[active < 0]
        estimate[active > 0] = upper[active > 0]
        self.active_ = active

        free = np.flatnonzero(active == 0)
        covariance = np.zeros((k, k))
        gain = np.zeros((k, m))
        if free.size:
            # Information matrix restricted to the free unknowns, A_f^T A_f, via QR of A_f.
            r_f = la.qr(stacked[:, free], mode="r", check_finite=False)[0][: free.size]
            half = la.solve_triangular(
                r_f, np.eye(free.size), lower=False, check_finite=False
            )  # R_f^-1, so P_ff = R_f^-1 R_f^-T
            p_free = half @ half.T
            covariance[np.ix_(free, free)] = p_free
            gain[free] = p_free @ noise.factor_t_solve(z[:, free]).T  # P_ff E_f^T N^-1
        return estimate, covariance, gain


# --------------------------------------------------------------------------
# Registry
# --------------------------------------------------------------------------

#: Solvers by configuration name (``[inverse] solver = ...``).
SOLVERS: dict[str, type[_LinearSolver]] = {
    "gauss-markov": GaussMarkov,
    "svd": TruncatedSVD,
    "bounded": BoundedLeastSquares,
}


def make_solver(name: str, **settings: Any) -> _LinearSolver:
    """Construct a solver from its configuration name and settings.

    Parameters
    ----------
    name : str
        A key of :data:`SOLVERS` (case and ``_``/``-`` are not significant).
    **settings
        Constructor arguments of that solver: ``prior_variance`` (units of
        ``x`` squared), ``noise_variance`` (units of ``y`` squared), and
        ``rank`` (svd), ``lower`` / ``upper`` (bounded, units of ``x``),
        ``form`` (gauss-markov).

    Returns
    -------
    solver
        An unfitted solver; call ``.fit(E, y)``.

    Raises
    ------
    ConfigError
        Unknown solver name or setting (the message names the closest valid
        one), a missing setting, or an invalid value.
    """
    key = str(name).strip().lower().replace("_", "-")
    if key not in SOLVERS:
        valid = ", ".join(SOLVERS)
        close = difflib.get_close_matches(key, list(SOLVERS), n=1, cutoff=0.0)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(f"unknown solver {name!r}{hint} (valid solvers: {valid})")
    cls = SOLVERS[key]
    params = list(inspect.signature(cls.__init__).parameters.values())[1:]
    names = [p.name for p in params]
    for setting in settings:
        if setting not in names:
            close = difflib.get_close_matches(setting, names, n=1, cutoff=0.0)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise ConfigError(
                f"solver {key!r} has no setting {setting!r}{hint} "
                f"(valid settings: {', '.join(names)})"
            )
    missing = [
        p.name for p in params if p.default is inspect.Parameter.empty and p.name not in settings
    ]
    if missing:
        raise ConfigError(f"solver {key!r} needs the setting(s) {', '.join(missing)}")
    return cls(**settings)


# --------------------------------------------------------------------------
# Propagation to linear outputs
# --------------------------------------------------------------------------


def _check_propagation(G: ArrayLike, P: ArrayLike) -> tuple[Array, Array]:
    g = np.asarray(G, dtype=float)
    p = np.asarray(P, dtype=float)
    if g.ndim == 0:
        raise ConfigError("G must have at least one dimension (unknowns last)")
    k = g.shape[-1]
    if p.ndim == 1:
        ok = p.shape[0] == k
    elif p.ndim == 2:
        ok = p.shape == (k, k)
    else:
        ok = False
    if not ok:
        raise ConfigError(
            f"G has {k} columns (unknowns) but P has shape {p.shape}; P must be ({k}, {k}) "
            f"or the ({k},) variances of a diagonal covariance"
        )
    return g, p


def _g_times_p(G: ArrayLike, P: ArrayLike) -> tuple[Array, Array]:
    """``G`` as an array and ``G P`` (P full or its diagonal), after checking their shapes."""
    g, p = _check_propagation(G, P)
    return g, (g * p if p.ndim == 1 else g @ p)


def propagate(G: ArrayLike, P: ArrayLike) -> Array:
    """Covariance of linear outputs ``G x``: ``G P G^T``.

    Parameters
    ----------
    G : array_like (..., L, K) or (K,)
        Output operator: row l gives output l per unit of each unknown, units
        of output per unit of ``x``. Leading dimensions broadcast.
    P : array_like (K, K) or (K,)
        Covariance of the unknowns (or their variances when diagonal), units of
        ``x`` squared.

    Returns
    -------
    ndarray (..., L, L) or ()
        Covariance of the outputs, units of output squared (a scalar variance
        when ``G`` is one row given as a 1-D array).

    Raises
    ------
    ConfigError
        ``G`` and ``P`` do not match.
    """
    g, gp = _g_times_p(G, P)
    if g.ndim == 1:
        return np.asarray(gp @ g)
    out = gp @ np.swapaxes(g, -1, -2)
    return 0.5 * (out + np.swapaxes(out, -1, -2))


def output_std(G: ArrayLike, P: ArrayLike) -> Array:
    """Standard deviation of each linear output ``G x``: ``sqrt(diag(G P G^T))``.

    Only the diagonal is computed (``einsum`` of ``G P`` with ``G``), so many
    output rows cost O(L K^2) time and O(L K) memory instead of the O(L^2)
    of the full output covariance.

    ``G`` and ``P`` are as for :func:`propagate` (a ``ConfigError`` when they
    do not match). Returns the standard deviation of each output, units of
    output, shape (..., L) (or () for one row given as a 1-D ``G``).
    """
    g, gp = _g_times_p(G, P)
    var = np.einsum("...k,...k->...", gp, g)
    return np.sqrt(np.clip(var, 0.0, None))
