"""The budget state: references, Ekman transports, unknowns and constraints, in one object.

Every transport is linear in the reference velocity of each pair (DESIGN.md
§2): a reference change moves the offsets, an inverse moves the
adjustments, and both move every reported number and every constraint row
by a linear term. :class:`BudgetState` holds one such state, immutable,
and is the only place that builds constraints, applies a solver's gain or
turns an estimate into outputs. Every front end goes through it:

- :meth:`sectionkit.study.Study.solve` (command line, tables, figures):
  :meth:`BudgetState.prepare` then :meth:`BudgetState.solve`;
- the workbench's reference slider: :meth:`BudgetState.derive` with the new
  references, then :meth:`BudgetState.solve` reusing the fitted linear
  solver (its gain and covariance do not depend on the data);
- ensembles: :meth:`BudgetState.solve` with other constraint data;
- the demo's truth and the xarray layer use the same constraint rows and the
  same output definitions (:func:`sectionkit.budget.section_values`).

:class:`Results` is what a solve gives: the state, the inverse (or None),
every section's outputs as linear functionals of the unknowns, and the
cautions collected on the way.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from sectionkit.budget import LinearOutputs, UnknownLayout, section_outputs
from sectionkit.config import InverseSpec
from sectionkit.errors import Cautions
from sectionkit.inverse import ConstraintSystem, InverseResult, assemble, solve
from sectionkit.operator import QUANTITIES, SectionOperator
from sectionkit.outputs import REGISTRY
from sectionkit.solvers import SOLVERS, output_std
from sectionkit.tracers import TracerOperator, tracer_outputs

if TYPE_CHECKING:  # pragma: no cover
    from sectionkit.study import Study

__all__ = ["BudgetState", "ReferenceState", "Results", "Selection"]


@dataclass(frozen=True)
class ReferenceState:
    """Resolved references of one section.

    Attributes
    ----------
    kinds : list of str
        Reference kind of every pair (``pressure``, ``bottom``, ``isopycnal``,
        ``velocity``).
    pressure : ndarray (pair,)
        Reference pressure actually used, dbar (NaN for a velocity reference).
    offset : ndarray (pair,)
        Velocity added to the relative velocity so the reference holds, m s^-1.
    """

    kinds: list[str]
    pressure: np.ndarray
    offset: np.ndarray


@dataclass(frozen=True)
class BudgetState:
    """One linear budget state of a study (immutable).

    Attributes
    ----------
    operators : mapping of str -> SectionOperator
        Section operators in configuration order.
    references : mapping of str -> ReferenceState
        Resolved references of every section.
    ekman : mapping of str -> ndarray (pair,)
        Ekman volume transport of every pair, m^3 s^-1.
    layout : UnknownLayout
        Where each unknown sits in the state vector.
    reference_salinity : float or None
        Salinity of the freshwater transport, g/kg (section mean when None).
    system : ConstraintSystem or None
        The box constraints, priors and noise; None without an inverse.
    spec : InverseSpec or None
        Solver and its settings; None without an inverse.
    lower, upper : ndarray (unknown,) or None
        Bounds of the unknowns for the bounded solver, unknown units.
    direct_velocity : mapping of str -> ndarray (pair,), optional
        Reference velocities from direct measurements that set the pairs'
        prior means (``[adcp] use = "prior"``), m s^-1, NaN where a pair has
        none: the prior mean of such a pair is ``direct - offset``, so it
        follows the references.
    tracer_operators : mapping of str -> TracerOperator
        Bottle-tracer operators by section.
    """

    operators: Mapping[str, SectionOperator]
    references: Mapping[str, ReferenceState]
    ekman: Mapping[str, np.ndarray]
    layout: UnknownLayout
    reference_salinity: float | None = None
    system: ConstraintSystem | None = None
    spec: InverseSpec | None = None
    lower: np.ndarray | None = None
    upper: np.ndarray | None = None
    direct_velocity: Mapping[str, np.ndarray] | None = None
    tracer_operators: Mapping[str, TracerOperator] = field(default_factory=dict)

    # ------------------------------------------------------------ construction
    @classmethod
    def prepare(cls, study: Study, cautions: Cautions | None = None, *,
                inverse: bool = True) -> BudgetState:
        """The state of a study's configuration on its built operators.

        Parameters
        ----------
        study : Study
            Configuration, operators, direct velocities and tracers.
        cautions : Cautions, optional
            Receives the reference cautions (reference below the floor, ...).
        inverse : bool
            Assemble the configured inverse (ignored when there is none).
        """
        cfg = study.config
        refs = study.references(cautions)
        ekman = study.ekman()
        layout = study.layout()
        state = cls(study.operators, refs, ekman, layout, cfg.reference_salinity,
                    tracer_operators=dict(study.tracer_operators))
        if not inverse or cfg.inverse is None:
            return state
        direct = None
        if study.direct and cfg.adcp is not None and cfg.adcp.use == "prior":
            direct = {name: (study.direct[name].velocity if name in study.direct
                             else np.full(op.n_pair, np.nan))
                      for name, op in study.operators.items()}
        lower = upper = None
        if cfg.inverse.bounds:
            lower = np.full(layout.size, -np.inf)
            upper = np.full(layout.size, np.inf)
            for label, (lo, hi) in cfg.inverse.bounds.items():
                k = layout.pair_index(label, "[inverse] bounds")
                lower[k], upper[k] = lo, hi
        state = dataclasses.replace(state, spec=cfg.inverse, lower=lower, upper=upper,
                                    direct_velocity=direct)
        system = assemble(study.operators, state.offsets, ekman, cfg.effective_boxes(),
                          cfg.inverse, layout, cfg.layer_names, study.velocity_prior(layout),
                          tracers=study.tracer_operators,
                          velocity_prior_mean=state._direct_prior_mean(refs))
        return dataclasses.replace(state, system=system)

    def derive(self, references: Mapping[str, ReferenceState]) -> BudgetState:
        """The same state with other references (the workbench's reference controls).

        The operators, unknowns, priors, noise and constraint matrix stay;
        every constraint row moves by ``E_pairs (offset_new - offset)`` (a
        change of offset moves a row exactly as the same adjustment would),
        and prior means set by direct velocities follow the new offsets.

        Parameters
        ----------
        references : mapping of str -> ReferenceState
            New references of every section.
        """
        shift = self.pair_vector({name: references[name].offset - self.references[name].offset
                                  for name in self.operators})
        system = self.system
        if system is not None:
            system = dataclasses.replace(
                system, initial=system.initial + system.matrix @ shift,
                prior_mean=self._direct_prior_mean(references, system.prior_mean))
        return dataclasses.replace(self, references=dict(references), system=system)

    # ------------------------------------------------------------ solving
    def solve(self, target: np.ndarray | None = None, *,
              reuse: InverseResult | None = None) -> InverseResult | None:
        """Solve the inverse (None without one).

        Parameters
        ----------
        target : ndarray (row,), optional
            Other constraint data ``y`` of ``E x + n = y`` (an ensemble
            member's), row units; the state's own ``-initial`` when None.
        reuse : InverseResult, optional
            A fit of a state with the same constraint matrix, priors and noise
            (e.g. before a reference change). With a linear solver its gain
            gives the estimate for this state's data without a new fit, and
            its posterior covariance holds unchanged; the solver's misfit
            statistics stay those of that fit. Ignored for a non-linear solver.
        """
        system = self.system
        if system is None:
            return None
        if target is not None:
            system = dataclasses.replace(system, initial=-np.asarray(target, dtype=float))
        if reuse is not None and type(reuse.solver).is_linear:
            active = system.prior > 0
            x0 = None if system.prior_mean is None else system.prior_mean[active]
            estimate = np.zeros(system.prior.size)
            estimate[active] = reuse.solver.estimate_for(system.target, x0)
            return InverseResult(system, estimate, reuse.covariance, reuse.solver)
        return solve(system, self.spec, self.lower, self.upper)

    @property
    def is_linear(self) -> bool:
        """True when the estimate is linear in the data (no inverse, or a linear solver)."""
        return self.spec is None or SOLVERS[self.spec.solver].is_linear

    # ------------------------------------------------------------ outputs
    @property
    def offsets(self) -> dict[str, np.ndarray]:
        """Reference offset of every pair by section, m s^-1."""
        return {name: ref.offset for name, ref in self.references.items()}

    def outputs(self, estimate: np.ndarray | None = None) -> dict[str, LinearOutputs]:
        """Every section's reported numbers as ``initial + G x``.

        Parameters
        ----------
        estimate : ndarray (unknown,), optional
            The state at which the overturning extremes are located (the
            adjusted one); the initial state when None.
        """
        return {name: section_outputs(op, self.references[name].offset, self.ekman[name],
                                      self.layout, self.reference_salinity, estimate)
                for name, op in self.operators.items()}

    def tracer_outputs(self) -> dict[str, LinearOutputs]:
        """Bottle-tracer class transports of every section that has tracers, kmol s^-1."""
        return {name: tracer_outputs(top, self.operators[name].layer_names,
                                     self.references[name].offset, self.ekman[name], self.layout)
                for name, top in self.tracer_operators.items()}

    def class_transports(self, name: str) -> dict[str, np.ndarray]:
        """Initial class transports of one section (adjustment zero), by quantity.

        Parameters
        ----------
        name : str
            Section.

        Returns
        -------
        dict of str -> ndarray (class,)
            ``volume`` and ``mass`` (divided by rho0) in m^3 s^-1, ``salt`` in
            g/kg m^3 s^-1, ``heat`` in W; Ekman transport included.
        """
        op = self.operators[name]
        t = op.transports(self.references[name].offset, 0.0, self.ekman[name], 1.0).sum(axis=-2)
        return dict(zip(QUANTITIES, t, strict=True))

    def results(self, inverse: InverseResult | None, cautions: Cautions) -> Results:
        """The results of this state with a solved inverse (or none)."""
        x = None if inverse is None else inverse.estimate
        return Results(self, self.outputs(x), inverse, cautions, self.tracer_outputs())

    # ------------------------------------------------------------ helpers
    def pair_vector(self, per_section: Mapping[str, np.ndarray]) -> np.ndarray:
        """A vector over all unknowns with per-pair values placed by the layout (0 elsewhere)."""
        out = np.zeros(self.layout.size)
        for name, values in per_section.items():
            out[self.layout.pair_slices[name]] = values
        return out

    def _direct_prior_mean(self, references: Mapping[str, ReferenceState],
                           current: np.ndarray | None = None) -> np.ndarray | None:
        """Prior mean of every unknown from direct velocities (``direct - offset``), or None."""
        if self.direct_velocity is None:
            return current
        mean = self.pair_vector({
            name: np.where(np.isfinite(v), v - references[name].offset, 0.0)
            for name, v in self.direct_velocity.items()})
        return mean if np.any(mean != 0) else None


@dataclass(frozen=True)
class Selection:
    """Values of one named output of one section (see :meth:`Results.select`).

    Attributes
    ----------
    keys : list of str
        Names of the values in the section's linear outputs.
    initial, adjusted, error : ndarray (value,)
        Before and after the inverse, and the posterior standard deviation
        (NaN without an inverse), in reporting units.
    gradient : ndarray (value, unknown)
        Derivative with respect to every unknown, reporting units per unknown unit.
    """

    keys: list[str]
    initial: np.ndarray
    adjusted: np.ndarray
    error: np.ndarray
    gradient: np.ndarray


@dataclass
class Results:
    """Everything a report needs, for one solved budget state.

    Attributes
    ----------
    state : BudgetState
        What was solved.
    outputs : dict of str -> LinearOutputs
        Every section's reported numbers (Sv, PW, Sv g/kg, dbar) as
        ``initial + G x``; select them by registry name (:meth:`select`).
    references, ekman, layout, estimate, covariance
        Properties: the state's references (dbar, m s^-1), Ekman transports
        (m^3 s^-1), unknowns, and the inverse's estimate and covariance
        (unknown units: m s^-1, Sv or 1).
    inverse : InverseResult or None
        The solved inverse; None without one.
    cautions : Cautions
        What a scientist should know about these numbers.
    tracers : dict of str -> LinearOutputs
        Bottle-tracer class transports by section, kmol s^-1.
    """

    state: BudgetState
    outputs: dict[str, LinearOutputs]
    inverse: InverseResult | None
    cautions: Cautions
    tracers: dict[str, LinearOutputs] = field(default_factory=dict)

    @property
    def references(self) -> Mapping[str, ReferenceState]:
        """Resolved references of every section."""
        return self.state.references

    @property
    def ekman(self) -> Mapping[str, np.ndarray]:
        """Ekman volume transport per pair of every section, m^3 s^-1."""
        return self.state.ekman

    @property
    def layout(self) -> UnknownLayout:
        """The unknowns."""
        return self.state.layout

    @property
    def estimate(self) -> np.ndarray:
        """Adjusted unknowns (zeros without an inverse), unknown units (m s^-1, Sv or 1)."""
        return self.inverse.estimate if self.inverse else np.zeros(self.layout.size)

    @property
    def covariance(self) -> np.ndarray | None:
        """Posterior covariance, unknown units squared (None without an inverse)."""
        return self.inverse.covariance if self.inverse else None

    def value(self, section: str, key: str, adjusted: bool = True) -> float:
        """One value of one section by its key in the linear outputs (``"net"``,
        ``"volume:<class>"``), initial or adjusted, reporting units; reports select by
        registry name (:meth:`select`)."""
        sel = self.block(section, [key])
        return float(sel.adjusted[0] if adjusted else sel.initial[0])

    def error(self, section: str, key: str) -> float:
        """Posterior standard deviation of one value by its key (as :meth:`value`),
        sqrt(G P G^T), reporting units; NaN without an inverse."""
        return float(self.block(section, [key]).error[0])

    def block(self, section: str, keys: list[str]) -> Selection:
        """Initial, adjusted and error of the outputs ``keys`` of one section."""
        out = self.outputs[section]
        idx = np.array([out.index(k) for k in keys], dtype=int)
        gradient = out.rows(idx)
        initial = out.initial[idx]
        adjusted = initial if self.inverse is None else initial + gradient @ self.estimate
        if self.covariance is None:
            error = np.full(idx.size, np.nan)
        else:
            error = output_std(gradient, self.covariance)
        return Selection(list(keys), initial, adjusted, error, gradient)

    def tracer_values(self, section: str) -> Selection | None:
        """Every bottle-tracer transport of one section (kmol s^-1), or None without tracers.

        The keys are :func:`sectionkit.tracers.output_name` (``<tracer>:<class>``
        and ``<tracer>:total``).
        """
        out = self.tracers.get(section)
        if out is None:
            return None
        adjusted = out.initial if self.inverse is None else out.value(self.estimate)
        return Selection(list(out.names), out.initial, adjusted, out.std(self.covariance),
                         out.gradient)

    def select(self, output: str, section: str) -> Selection:
        """One registered output of one section by name (:data:`sectionkit.outputs.REGISTRY`).

        Parameters
        ----------
        output : str
            Registry name, e.g. ``"class_volume_transport"`` or ``"overturning_depth"``.
        section : str
            Section name.

        Returns
        -------
        Selection
            Values along the output's dimensions other than ``section`` (classes,
            interfaces or levels).
        """
        spec = REGISTRY[output]
        op = self.state.operators[section]
        return self.block(section, spec.keys(list(op.layer_names), len(op.interfaces),
                                             op.pressure.size))

    def select_many(self, outputs: list[str], section: str) -> dict[str, Selection]:
        """Several registered outputs of one section (as :meth:`select`), formed together.

        Parameters
        ----------
        outputs : list of str
            Registry names.
        section : str
            Section name.

        Returns
        -------
        dict of str -> Selection
            By registry name; the values equal :meth:`select`'s (one block of
            rows and one error propagation for all of them).
        """
        op = self.state.operators[section]
        keys = {name: REGISTRY[name].keys(list(op.layer_names), len(op.interfaces),
                                          op.pressure.size) for name in outputs}
        whole = self.block(section, [k for ks in keys.values() for k in ks])
        out: dict[str, Selection] = {}
        start = 0
        for name, ks in keys.items():
            part = slice(start, start + len(ks))
            out[name] = Selection(list(ks), whole.initial[part], whole.adjusted[part],
                                  whole.error[part], whole.gradient[part])
            start = part.stop
        return out

    def with_data(self, target: np.ndarray) -> Results:
        """The same state solved with other constraint data ``y`` (an ensemble member's).

        Parameters
        ----------
        target : ndarray (row,)
            ``y`` of ``E x + n = y``, row units.
        """
        return self.state.results(self.state.solve(target), self.cautions)
