"""Box inverse: conservation constraints assembled from the section operators.

For each box and each constraint the net inflow is linear in the unknowns,
``inflow = initial + E x``; conservation asks ``inflow + n = 0`` with noise
``n``, i.e. ``E x + n = y`` with ``y = -initial``.

Constraints (all in Sv, or Sv g/kg, or PW):
- ``mass:<class>``: in-situ-density weighted inflow of the class divided by
  rho0, plus transfers across its interfaces (W_n positive from class n to
  class n + 1, i.e. light to dense), plus known transports of that class;
- ``mass:total``: the sum over classes (transfers cancel);
- ``salt:<class>``: salt inflow as an anomaly from the box-class mean
  salinity, ``sum (salt - S_i mass)``, so it is not a copy of mass; a transfer
  carries the mean salinity of the two classes it joins;
- ``heat:<class>``: the same with potential enthalpy (rho0 c_p0 Theta_i);
- optionally ``net_mass`` of one section (row box ``section:<name>``): its net
  mass transport in its own frame, minus the stated value (a closed basin,
  a known throughflow).

Default salt (heat) noise (no ``noise_salt`` list, or 0 for a class) is
``noise_layer`` times the larger of the class's salinity (temperature)
spread and half the contrast with its neighbouring classes: transfers across
interfaces and mixing carry anomalies of that size, which the constraints do
not model.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from sectionkit.budget import (
    PW,
    QUANTITY_SCALE,
    QUANTITY_UNIT,
    SV,
    Q,
    UnknownLayout,
    class_transport_gradient,
)
from sectionkit.config import CONSTRAINT_KINDS, BoxSpec, InverseSpec, KnownTransport
from sectionkit.errors import ComputationError, ConfigError
from sectionkit.geometry import haversine
from sectionkit.labels import constraint_label
from sectionkit.operator import CP0, RHO0, SectionOperator
from sectionkit.solvers import make_solver, output_std
from sectionkit.tracers import (
    KMOL_PER_SV_UMOL,
    TRACER_NOISE_FLOOR,
    TracerOperator,
    box_tracer_parts,
)
from sectionkit.tracers import UNIT as TRACER_UNIT

SALT_NOISE_FLOOR = 0.005  # g/kg: smallest salinity spread used to scale salt-anomaly noise
TEMPERATURE_NOISE_FLOOR = 0.05  # degC, the same for heat
CORRELATION_NUGGET = 1e-6  # white fraction of correlated pair priors (positive definite)


@dataclass
class ConstraintSystem:
    """The assembled system ``E x + n = y``.

    Attributes
    ----------
    rows : list of (str, str)
        (box, constraint) of each row, e.g. ("interior", "mass:deep").
    matrix : ndarray (row, unknown)
        E, in row units per unknown unit.
    initial : ndarray (row,)
        Net inflow before adjustment (x = 0), row units.
    noise : ndarray (row,)
        One standard deviation of each row's noise, row units.
    prior : ndarray (unknown,)
        One standard deviation of each unknown's prior, unknown units (m s^-1,
        Sv or 1, as for :attr:`InverseResult.estimate`).
    units : list of str
        Unit of each row (display units: Sv, Sv g/kg, PW, kmol/s).
    prior_covariance : ndarray (unknown, unknown) or None
        Full prior covariance when unknowns are correlated (its diagonal is
        ``prior**2``); None for independent unknowns.
    prior_mean : ndarray (unknown,) or None
        Prior mean of each unknown (zero when None), e.g. reference-velocity
        adjustments from direct velocity measurements, unknown units.
    """

    rows: list[tuple[str, str]]
    matrix: np.ndarray
    initial: np.ndarray
    noise: np.ndarray
    prior: np.ndarray
    units: list[str]
    prior_covariance: np.ndarray | None = None
    prior_mean: np.ndarray | None = None

    def prior_matrix(self) -> np.ndarray:
        """The prior covariance as a full matrix, unknown units squared."""
        if self.prior_covariance is not None:
            return self.prior_covariance
        return np.diag(self.prior**2)

    @property
    def target(self) -> np.ndarray:
        """y = -initial: the adjustment must cancel the initial imbalance."""
        return -self.initial


def box_class_means(
    box: BoxSpec, operators: dict[str, SectionOperator]
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Area-weighted mean and spread of SA and CT per class over a box's sections.

    Returns
    -------
    sa_mean, sa_std, ct_mean, ct_std : ndarray (class,)
        g/kg and degC.
    """
    sums = sum(operators[name].class_moments for name in box.sections)
    area = np.where(sums[0] > 0, sums[0], np.nan)
    sa_mean = sums[1] / area
    ct_mean = sums[3] / area
    sa_std = np.sqrt(np.maximum(sums[2] / area - sa_mean**2, 0.0))
    ct_std = np.sqrt(np.maximum(sums[4] / area - ct_mean**2, 0.0))
    fill = np.nanmean
    return (np.nan_to_num(sa_mean, nan=fill(sa_mean)), np.nan_to_num(sa_std),
            np.nan_to_num(ct_mean, nan=fill(ct_mean)), np.nan_to_num(ct_std))


def assemble(
    operators: dict[str, SectionOperator],
    offsets: dict[str, np.ndarray],
    ekman: dict[str, np.ndarray],
    boxes: list[BoxSpec],
    spec: InverseSpec,
    layout: UnknownLayout,
    layer_names: list[str],
    velocity_prior: dict[str, np.ndarray] | None = None,
    tracers: dict[str, TracerOperator] | None = None,
    velocity_prior_mean: np.ndarray | None = None,
) -> ConstraintSystem:
    """Build the conservation constraints of every box.

    Parameters
    ----------
    operators : dict of str -> SectionOperator
        Section operators by name.
    offsets : dict of str -> ndarray (pair,)
        Reference offsets of the chosen references, m s^-1.
    ekman : dict of str -> ndarray (pair,)
        Ekman volume transport per pair, m^3 s^-1.
    boxes : list of BoxSpec
        The boxes.
    spec : InverseSpec
        Constraints, priors and noise.
    layout : UnknownLayout
        Unknown layout (pairs, transfers, Ekman factors).
    layer_names : list of str
        Class names.
    velocity_prior : dict of str -> ndarray (pair,), optional
        Prior standard deviation of each section's pair adjustments (m s^-1);
        the global ``prior_velocity`` where None.
    tracers : dict of str -> TracerOperator, optional
        Tracer operators by section, for tracers named in ``spec.conserve``
        (rows ``<tracer>:<class>`` in kmol s^-1, see :mod:`sectionkit.tracers`).
    velocity_prior_mean : ndarray (unknown,), optional
        Prior mean of every unknown (m s^-1 for the pairs), e.g. from direct
        velocity profiles, placed by the layout; zero where None.
    """
    n_class = len(layer_names)
    rows: list[tuple[str, str]] = []
    e_rows: list[np.ndarray] = []
    initial: list[float] = []
    noise: list[float] = []
    units: list[str] = []
    known_by_box: dict[str, list[KnownTransport]] = {}
    for kt in spec.known:
        known_by_box.setdefault(kt.box or boxes[0].name, []).append(kt)

    for box in boxes:
        sections = box.sections
        per = {}
        for name in sections:
            op = operators[name]
            t = op.transports(offsets[name], 0.0, ekman[name], 1.0).sum(axis=-2)  # (q, class)
            per[name] = {
                kind: (t[Q[kind]] / QUANTITY_SCALE[kind],
                       class_transport_gradient(op, kind, layout, ekman[name]))
                for kind in ("mass", "salt", "heat")
            }
        sa_mean, sa_std, ct_mean, ct_std = box_class_means(box, operators)
        known = known_by_box.get(box.name, [])

        def net(kind: str, per=per, box=box, sections=sections):
            value = sum(box.sign(s) * per[s][kind][0] for s in sections)
            grad = sum(box.sign(s) * per[s][kind][1] for s in sections)
            return np.asarray(value, float), np.asarray(grad, float)

        mass_v, mass_g = net("mass")
        dia = np.zeros((n_class, layout.size))
        per_interface = interface_transfers(n_class)
        for n in range(n_class - 1):
            idx = layout.diapycnal.get((box.name, n))
            if idx is not None:
                dia[:, idx] = per_interface[:, n]
        known_v = np.zeros(n_class)
        known_var = np.zeros(n_class)
        for kt in known:
            i = layer_names.index(kt.layer)
            known_v[i] += kt.transport
            known_var[i] += kt.noise**2

        if "mass" in spec.conserve:
            for i, layer in enumerate(layer_names):
                rows.append((box.name, constraint_label("mass", layer)))
                e_rows.append(mass_g[i] + dia[i])
                initial.append(float(mass_v[i] + known_v[i]))
                noise.append(float(np.sqrt(spec.noise_layer[i] ** 2 + known_var[i])))
                units.append(QUANTITY_UNIT["mass"])
            rows.append((box.name, constraint_label("mass")))
            e_rows.append(mass_g.sum(axis=0))
            initial.append(float(mass_v.sum() + known_v.sum()))
            noise.append(float(np.sqrt(spec.noise_total**2 + known_var.sum())))
            units.append(QUANTITY_UNIT["mass"])
        if "salt" in spec.conserve:
            salt_v, salt_g = net("salt")
            dia_s = transfer_anomaly(dia, sa_mean)
            contrast = _neighbour_contrast(sa_mean)
            for i, layer in enumerate(layer_names):
                rows.append((box.name, constraint_label("salt", layer)))
                e_rows.append(salt_g[i] - sa_mean[i] * mass_g[i] + dia_s[i])
                initial.append(float(salt_v[i] - sa_mean[i] * mass_v[i]))
                spread = max(sa_std[i], contrast[i], SALT_NOISE_FLOOR)
                noise.append(spec.noise_salt[i] if spec.noise_salt and spec.noise_salt[i] > 0
                             else spec.noise_layer[i] * spread)
                units.append(QUANTITY_UNIT["salt"])
        if "heat" in spec.conserve:
            heat_v, heat_g = net("heat")
            h = RHO0 * CP0 * SV / PW  # PW per (Sv degC)
            dia_h = transfer_anomaly(dia, ct_mean) * h
            contrast = _neighbour_contrast(ct_mean)
            for i, layer in enumerate(layer_names):
                rows.append((box.name, constraint_label("heat", layer)))
                e_rows.append(heat_g[i] - h * ct_mean[i] * mass_g[i] + dia_h[i])
                initial.append(float(heat_v[i] - h * ct_mean[i] * mass_v[i]))
                spread = max(ct_std[i], contrast[i], TEMPERATURE_NOISE_FLOOR)
                noise.append(spec.noise_heat[i] if spec.noise_heat and spec.noise_heat[i] > 0
                             else spec.noise_layer[i] * spread * h)
                units.append(QUANTITY_UNIT["heat"])
        for tracer in [c for c in spec.conserve if c not in CONSTRAINT_KINDS]:
            # like salt: anomaly from the box-class mean concentration, k converts
            # Sv x umol/kg of mass transport to kmol/s (sectionkit.tracers)
            area = sum(operators[s].class_area for s in sections)
            t_v, t_g, c_mean, c_std = box_tracer_parts(
                tracer, {s: box.sign(s) for s in sections}, tracers or {}, area, offsets,
                ekman, layout,
            )
            k = KMOL_PER_SV_UMOL
            dia_c = transfer_anomaly(dia, c_mean) * k
            contrast = _neighbour_contrast(c_mean)
            stated = spec.noise_tracer.get(tracer)
            for i, layer in enumerate(layer_names):
                rows.append((box.name, constraint_label(tracer, layer)))
                e_rows.append(t_g[i] - k * c_mean[i] * mass_g[i] + dia_c[i])
                initial.append(float(t_v[i] - k * c_mean[i] * mass_v[i]))
                spread = max(c_std[i], contrast[i], TRACER_NOISE_FLOOR)
                noise.append(stated[i] if stated else spec.noise_layer[i] * spread * k)
                units.append(TRACER_UNIT)
    for net in spec.section_net:
        op = operators[net.section]
        t = op.transports(offsets[net.section], 0.0, ekman[net.section], 1.0)[Q["mass"]].sum() / SV
        rows.append((f"section:{net.section}", "net_mass"))
        e_rows.append(class_transport_gradient(op, "mass", layout, ekman[net.section])
                      .sum(axis=0))
        initial.append(float(t - net.transport))
        noise.append(net.noise)
        units.append(QUANTITY_UNIT["mass"])
    if not rows:
        raise ConfigError("[inverse] conserve is empty: name at least one of mass, salt, heat")

    prior = np.zeros(layout.size)
    for name, sl in layout.pair_slices.items():
        prior[sl] = spec.prior_velocity if velocity_prior is None else velocity_prior[name]
    for idx in layout.diapycnal.values():
        prior[idx] = spec.prior_diapycnal
    for idx in layout.ekman.values():
        prior[idx] = spec.prior_ekman
    covariance = None
    if spec.prior_correlation_km > 0:
        covariance = np.diag(prior**2)
        for name, op in operators.items():
            sl = layout.pair_slices[name]
            rho = along_section_correlation(op.pairs["lon"].values, op.pairs["lat"].values,
                                            spec.prior_correlation_km)
            covariance[sl, sl] = rho * np.outer(prior[sl], prior[sl])
    prior_mean = None
    if velocity_prior_mean is not None and np.any(velocity_prior_mean != 0):
        prior_mean = np.asarray(velocity_prior_mean, dtype=float)
    return ConstraintSystem(rows, np.vstack(e_rows), np.asarray(initial), np.asarray(noise),
                            prior, units, covariance, prior_mean)


def along_section_correlation(
    lon: np.ndarray, lat: np.ndarray, correlation_km: float
) -> np.ndarray:
    """Gaussian correlation of the reference-velocity priors of one section's pairs.

    ``rho_jk = (1 - eps) exp(-d_jk^2 / (2 L^2)) + eps delta_jk`` with ``d_jk``
    the great-circle distance between the mid-points of pairs j and k, ``L``
    the correlation length (common practice for smooth reference-velocity
    errors) and ``eps = CORRELATION_NUGGET`` a small white part.

    Parameters
    ----------
    lon, lat : ndarray (pair,)
        Pair mid-points, degrees_east and degrees_north.
    correlation_km : float
        Correlation length L, km; 0 gives the identity (independent pairs).

    Returns
    -------
    ndarray (pair, pair)
        Correlation matrix, dimensionless.
    """
    lon = np.asarray(lon, float)
    lat = np.asarray(lat, float)
    if correlation_km <= 0:
        return np.eye(lon.size)
    d = haversine(lon[:, None], lat[:, None], lon[None, :], lat[None, :]) / 1e3
    # a white part of CORRELATION_NUGGET keeps the matrix positive definite when L is
    # long against the pair spacing (a Gaussian kernel is then numerically singular)
    return ((1.0 - CORRELATION_NUGGET) * np.exp(-0.5 * (d / correlation_km) ** 2)
            + CORRELATION_NUGGET * np.eye(lon.size))


def _neighbour_contrast(class_mean: np.ndarray) -> np.ndarray:
    """Half the largest difference between each class mean and its neighbours."""
    diff = np.abs(np.diff(class_mean))
    left = np.concatenate([[0.0], diff])
    right = np.concatenate([diff, [0.0]])
    return 0.5 * np.maximum(left, right)


def interface_transfers(n_class: int) -> np.ndarray:
    """Mass coefficients of one transfer per interface, Sv per Sv.

    W_n is positive from the lighter class n to the denser class n + 1: it
    leaves class n (-1) and enters class n + 1 (+1).

    Parameters
    ----------
    n_class : int
        Number of classes, dimensionless.

    Returns
    -------
    ndarray (class, interface)
    """
    out = np.zeros((n_class, max(n_class - 1, 0)))
    for n in range(n_class - 1):
        out[n, n] = -1.0
        out[n + 1, n] = 1.0
    return out


def transfer_anomaly(dia: np.ndarray, class_mean: np.ndarray) -> np.ndarray:
    """Property anomaly carried by the diapycnal transfers, relative to each class mean.

    A transfer joins two classes and carries the mean of their two class means
    (layered box budget: Wunsch 1996, *The Ocean Circulation Inverse Problem*,
    ch. 2; Ganachaud 2003, J. Geophys. Res.). Transfer W_n, from class n to
    class n + 1, carries ``k_n = (C_n + C_{n+1}) / 2``; in its column class n's
    anomaly row holds ``-(k_n - C_n)`` and class n + 1's ``+(k_n - C_{n+1})``;
    no other row holds anything.

    Parameters
    ----------
    dia : ndarray (class, unknown)
        Mass coefficients of the transfers: in each transfer's column -1 in the
        class it leaves and +1 in the class it enters (Sv per Sv); other
        columns all zero.
    class_mean : ndarray (class,)
        Box-class mean of the property (g/kg, degC, ...).

    Returns
    -------
    ndarray (class, unknown)
        Anomaly coefficient of every transfer in every class row, property
        unit per Sv of transfer.
    """
    dia = np.asarray(dia, float)
    class_mean = np.asarray(class_mean, float)
    joined = dia != 0.0
    n_joined = joined.sum(axis=0)
    used = n_joined > 0
    if np.any(n_joined[used] != 2):
        raise ComputationError("a diapycnal transfer column must join exactly two classes; "
                               "this is a bug in the constraint assembly, please report it")
    carried = np.zeros(dia.shape[1])
    carried[used] = (joined[:, used] * class_mean[:, None]).sum(axis=0) / 2.0
    return np.where(joined, dia * (carried[None, :] - class_mean[:, None]), 0.0)


@dataclass
class InverseResult:
    """The solved inverse.

    Attributes
    ----------
    system : ConstraintSystem
        What was solved.
    estimate : ndarray (unknown,)
        Adjusted unknowns, unknown units: m s^-1 for a pair's reference-velocity
        adjustment, Sv for a diapycnal transfer, 1 for a fractional Ekman
        adjustment (see :class:`sectionkit.budget.UnknownLayout`).
    covariance : ndarray (unknown, unknown)
        Posterior covariance P, products of the unknowns' units.
    solver : object
        The fitted solver (singular values, resolution, ...; see
        :mod:`sectionkit.solvers` for the fitted attributes and their units).
    """

    system: ConstraintSystem
    estimate: np.ndarray
    covariance: np.ndarray
    solver: object

    @property
    def adjusted(self) -> np.ndarray:
        """Net inflow of every constraint after adjustment."""
        return self.system.initial + self.system.matrix @ self.estimate

    @property
    def normalized_residuals(self) -> np.ndarray:
        """Adjusted inflow divided by its noise (DESIGN.md §7)."""
        return self.adjusted / self.system.noise

    @cached_property
    def posterior_residual_std(self) -> np.ndarray:
        """Standard deviation of each constraint's residual the estimate can achieve, row units.

        Computed once per result (the workbench's reference slider reads it at
        every step; it does not depend on the data).

        ``sqrt(diag(N - E P E^T))`` (Wunsch 1996, *The Ocean Circulation
        Inverse Problem*, ch. 3): the noise less the part of it the adjusted
        unknowns absorb. Zero (to rounding) where the unknowns fit a row exactly.
        """
        projected = output_std(self.system.matrix, self.covariance) ** 2  # diag(E P E^T)
        return np.sqrt(np.maximum(self.system.noise**2 - projected, 0.0))

    @property
    def posterior_normalized_residuals(self) -> np.ndarray:
        """Adjusted inflow over its posterior residual std; NaN where that std is zero."""
        sd = self.posterior_residual_std
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(sd > 0, self.adjusted / sd, np.nan)

    @property
    def solved_for(self) -> np.ndarray:
        """True for every unknown with a prior (the solver's columns), bool (unknown,)."""
        return self.system.prior > 0

    @property
    def resolution_diagonal(self) -> np.ndarray:
        """Diagonal of the solver's model resolution per unknown, dimensionless.

        1 for an unknown the constraints determine fully, 0 for one they cannot
        see; 0 also for an unknown that was not solved for (no prior, see
        :attr:`solved_for`).
        """
        out = np.zeros(self.system.prior.size)
        out[self.solved_for] = np.diag(self.solver.resolution_)
        return out

    @property
    def scaled_singular_values(self) -> np.ndarray:
        """Singular values of the noise- and prior-scaled constraint matrix, descending, 1."""
        return self.solver.scaled_singular_values_

    @property
    def rank(self) -> int | None:
        """Rank the truncated SVD kept; None for solvers without one."""
        rank = getattr(self.solver, "rank_", None)
        return None if rank is None else int(rank)

    def summary(self) -> dict:
        """Solver, size, rank and chi-squared statistics, for reports."""
        chi2 = self.solver.chi2_
        info = {
            "solver": type(self.solver).__name__,
            "constraints": int(self.system.matrix.shape[0]),
            "unknowns": int(np.count_nonzero(self.system.prior > 0)),
            "chi2_residuals": float(chi2.residuals),
            "chi2_residuals_expected": float(chi2.residuals_expected),
            "chi2_estimate": float(chi2.estimate),
            "chi2_estimate_expected": float(chi2.estimate_expected),
        }
        if self.rank is not None:
            info["rank"] = self.rank
        return info


def solve(
    system: ConstraintSystem,
    spec: InverseSpec,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
) -> InverseResult:
    """Solve ``E x + n = y`` with the configured solver.

    Parameters
    ----------
    system : ConstraintSystem
        Assembled constraints.
    spec : InverseSpec
        Solver name and rank.
    lower, upper : ndarray (unknown,), optional
        Bounds for the bounded solver, unknown units.
    """
    active = system.prior > 0
    e = system.matrix[:, active]
    prior_variance = (system.prior[active] ** 2 if system.prior_covariance is None
                      else system.prior_covariance[np.ix_(active, active)])
    settings: dict = {
        "prior_variance": prior_variance,
        "noise_variance": system.noise**2,
    }
    if spec.solver == "svd":
        settings["rank"] = spec.rank
    if spec.solver == "bounded":
        settings["lower"] = None if lower is None else lower[active]
        settings["upper"] = None if upper is None else upper[active]
    solver = make_solver(spec.solver, **settings)
    mean = None if system.prior_mean is None else system.prior_mean[active]
    solver.fit(e, system.target, prior_mean=mean)
    estimate = np.zeros(system.prior.size)
    estimate[active] = solver.estimate_
    cov = np.zeros((system.prior.size, system.prior.size))
    cov[np.ix_(active, active)] = solver.covariance_
    return InverseResult(system, estimate, cov, solver)
