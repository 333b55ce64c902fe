"""The workbench's state model: one study, its configuration, and what follows from it.

The model knows nothing of widgets. Every control of the workbench is a
method here that derives a new :class:`~sectionkit.config.Config` from the
current one, validates it exactly as a saved file would be validated, and
recomputes only what depends on the change:

* a new reference (global level, mode or a pair's override) is a linear
  update: the reference offsets are resolved again (cheap), the budget state
  is derived with them (:meth:`sectionkit.state.BudgetState.derive`), the class
  transports are ``relative + area * offset`` and, with an inverse, the new
  estimate comes from the fitted linear solver's gain (no new fit). The
  full budget (overturning, heat, freshwater) is recomputed only when asked
  for (:attr:`WorkbenchState.results`), so a slider never waits for it;
* a new Ekman stress or inverse setting runs :meth:`Study.solve` on the
  stored operators (no dynamic height);
* new class interfaces, bottom-triangle rule or Ekman depth rebuild the
  section operators;
* a configuration naming other section files loads them.

Each change is recorded for undo/redo (a dragged slider is one step),
written to an autosave file beside the session (atomic write) and announced
to listeners as a :class:`Change`.

This module holds the controls and the history. The numbers live in
:mod:`sectionkit.workbench.snapshot` (:class:`~sectionkit.workbench.snapshot.Engine`:
full solves and linear updates, and the value objects the tables show); the
files in :mod:`sectionkit.workbench.session` (autosave writer, backups).
"""

from __future__ import annotations

import copy
import dataclasses
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sectionkit.config import (
    Config,
    InverseSpec,
    KnownTransport,
    SectionNet,
    _reference_to_toml,
    load_config,
    parse_config,
    parse_reference,
)
from sectionkit.errors import Cautions, ConfigError, SectionkitError
from sectionkit.geometry import along_line_distance
from sectionkit.geostrophy import TRIANGLE_RULES, ReferenceChoice
from sectionkit.labels import parse_pair_label
from sectionkit.layers import Interface, check_interfaces
from sectionkit.study import NET_MASS_HEAT_TOLERANCE, Results, Study
from sectionkit.workbench.session import (
    AUTOSAVE_COALESCE as AUTOSAVE_COALESCE,  # re-exported: the module's public names
)
from sectionkit.workbench.session import (
    AUTOSAVE_SUFFIX,
    AutosaveWriter,
    keep_backup,
    portable,
)
from sectionkit.workbench.snapshot import (
    BoxBudget,
    ClassTransports,
    Engine,
    InverseView,
    LineDirection,
    ReferenceSensitivity,
    VelocitySection,
    class_names_by_bounds,
    data_key,
    inverse_view,
    level_of_no_motion,
    line_direction,
    map_class_settings,
    operator_key,
    reference_error_key,
    reference_sensitivity,
    solve_key,
)

REFERENCE_MODES = ("pressure", "bottom", "isopycnal")
GESTURE_GAP = 1.0  # s: changes of one control closer than this are one undo step (a drag)

Listener = Callable[["Change"], None]


# ---------------------------------------------------------------- value objects
@dataclass(frozen=True)
class Change:
    """What a control changed, as told to listeners.

    Attributes
    ----------
    kind : str
        ``"reference"``, ``"classes"``, ``"ekman"``, ``"inverse"``, ``"load"``,
        ``"undo"`` or ``"redo"``.
    description : str
        One line for a status bar, e.g. ``"reference: level of no motion at
        2000 dbar"``; an undo says ``"undid: <what>"``.
    linear : bool
        True when the class table was updated by the linear reference update
        (the full budget is computed on demand); False when everything was
        recomputed.
    gesture : str or None
        The control being dragged when the change is one step of a drag
        (its steps form one undo step), else None.
    """

    kind: str
    description: str
    linear: bool
    gesture: str | None = None


# ---------------------------------------------------------------- the model
class WorkbenchState:
    """State of an interactive budget study.

    Parameters
    ----------
    config : Config
        The starting configuration.
    sections : dict of str -> xr.Dataset, optional
        Already loaded canonical sections by name; read from the
        configuration's files when None.
    session : str or Path, optional
        The configuration file this session belongs to; the autosave file
        ``<stem>.autosave.toml`` is written beside it.
    autosave : str, Path, bool or None
        Path of the autosave file; True (default) for the one beside
        ``session``; False or None to switch autosaving off.
    study : Study, optional
        An already built study of ``config`` (its operators are reused).

    Notes
    -----
    Configurations are never modified in place: each control derives a new
    one, so the undo history holds the exact earlier states.
    """

    def __init__(
        self,
        config: Config,
        sections: dict[str, Any] | None = None,
        *,
        session: str | Path | None = None,
        autosave: str | Path | bool | None = True,
        study: Study | None = None,
    ) -> None:
        self.session = Path(session) if session is not None else None
        if autosave is True:
            self.autosave_path = (
                self.session.with_name(self.session.stem + AUTOSAVE_SUFFIX)
                if self.session is not None else None
            )
        elif autosave:
            self.autosave_path = Path(autosave)
        else:
            self.autosave_path = None
        self._writer = AutosaveWriter(self.autosave_path) if self.autosave_path else None
        self._listeners: list[Listener] = []
        self._undo: list[tuple[Config, str]] = []  # (configuration before, what changed)
        self._redo: list[tuple[Config, str]] = []
        self._gesture: str | None = None
        self._gesture_time = 0.0
        self.clock: Callable[[], float] = time.monotonic
        self._stashed_inverse: InverseSpec | None = None  # while the inverse is off
        self._stashed_names: list[str] = []  # the classes its per-class settings belong to
        self.resumed_from: Path | None = None
        self.resume_error: str | None = None
        config = self._validated(config)
        study = study if study is not None else Study.from_config(config, sections=sections)
        study.config = config
        self.engine = Engine(study, self._known_transports)
        self._config = config
        self._reviewed: set[str] = set(config.layer_names)
        self._key = solve_key(config)
        self.engine.solve_full(self._key)

    # ------------------------------------------------------------ opening
    @classmethod
    def open(
        cls,
        path: str | Path,
        *,
        resume: bool = False,
        autosave: str | Path | bool | None = True,
    ) -> WorkbenchState:
        """Open a TOML configuration as a session.

        Parameters
        ----------
        path : str or Path
            The configuration file.
        resume : bool
            Start from the session's autosave file when there is one (the
            state the last session ended in, even after a crash).
        autosave : str, Path, bool or None
            As for the constructor.
        """
        path = Path(path)
        config = load_config(path)
        state = cls(config, session=path, autosave=autosave)
        previous = state.autosave_path or path.with_name(path.stem + AUTOSAVE_SUFFIX)
        if resume and previous.is_file():
            sections = dict(state.study.sections)
            try:
                state.load(previous, record=False, kind="load")
                state.resumed_from = previous
            except Exception as exc:  # any failure: the work must not be lost, nor the session
                kept = keep_backup(previous)
                reason = str(exc) if isinstance(exc, SectionkitError) else (
                    f"{type(exc).__name__}: {exc}")
                # a failed load may have been part-way: start again from the configuration
                state = cls(config, sections, session=path, autosave=autosave)
                state.resume_error = (
                    f"could not resume from {previous.name} ({reason}); opened {path.name} "
                    f"instead, and kept the autosave as {kept.name}")
        return state

    @property
    def study(self) -> Study:
        """The study of the current configuration (operators, sections)."""
        return self.engine.study

    @study.setter
    def study(self, study: Study) -> None:
        self.engine.study = study

    def _known_transports(self) -> list[KnownTransport]:
        """Known transports entering the boxes, also while the inverse is switched off."""
        inverse = self._config.inverse or self._stashed_inverse
        return list(inverse.known) if inverse is not None else []

    # ------------------------------------------------------------ listeners
    def add_listener(self, listener: Listener) -> None:
        """Call ``listener(change)`` after every change."""
        self._listeners.append(listener)

    def remove_listener(self, listener: Listener) -> None:
        """Stop calling a listener."""
        self._listeners.remove(listener)

    # ------------------------------------------------------------ read access
    @property
    def config(self) -> Config:
        """A copy of the current configuration."""
        return copy.deepcopy(self._config)

    @property
    def results(self) -> Results:
        """The full results of the current configuration (computed when stale).

        Identical to ``Study.from_config(config).solve()`` of the same
        configuration.
        """
        if self.engine.full is None:
            self.engine.solve_full(self._key)
        assert self.engine.full is not None
        return self.engine.full

    @property
    def results_current(self) -> bool:
        """Whether :attr:`results` is ready without computing."""
        return self.engine.full is not None

    @property
    def section_names(self) -> list[str]:
        """Section names in configuration order."""
        return self._config.section_names()

    @property
    def layer_names(self) -> list[str]:
        """Class names, light to dense."""
        return list(self._config.layer_names)

    def pair_labels(self, section: str) -> list[str]:
        """Pair names ``"<section>:<k>"`` of one section."""
        return self.study.operators[section].pair_labels

    def pair_positions(self, section: str) -> tuple[np.ndarray, np.ndarray]:
        """Mid-point longitude and latitude of each pair, degrees."""
        g = self.study.operators[section].pairs
        return g["lon"].values.copy(), g["lat"].values.copy()

    def pressure_range(self) -> tuple[float, float, float]:
        """Shallowest, deepest grid pressure and grid step of the study, dbar."""
        deepest = max(float(op.pressure[-1]) for op in self.study.operators.values())
        return 0.0, deepest, float(self._config.dp)

    def class_table(self) -> ClassTransports:
        """Class transports of the current state (updated at once by every change)."""
        return self.engine.snap.classes

    def box_budget(self) -> BoxBudget:
        """Box constraints of the current state (updated at once by every change).

        With an inverse these are the rows of box_budget.csv; without one,
        the net mass inflow of each class and in total (noise NaN).
        """
        return self.engine.snap.box

    def reference_pressures(self, section: str) -> np.ndarray:
        """Pressure each pair's reference actually uses, dbar."""
        return self.engine.snap.ref_pressure[section].copy()

    def reference_cautions(self) -> list[str]:
        """Cautions of the current references (fall-backs) and of loading."""
        if self.engine.snap.cautions is None:
            cautions = Cautions()
            cautions.extend(self.study.load_cautions)
            self.study.references(cautions)
            self.engine.snap.cautions = cautions
        return [str(c) for c in self.engine.snap.cautions]

    def cautions(self) -> list[str]:
        """Every caution of the full results (loading, equator, references, heat)."""
        return [str(c) for c in self.results.cautions]

    def tables(self) -> dict[str, pd.DataFrame]:
        """The four §7 tables of the current state, exactly as a batch run writes them."""
        from sectionkit.tables import tables

        return tables(self.study, self.results)

    def section_numbers(self) -> pd.DataFrame:
        """Net, heat, freshwater and overturning of each section with errors (section_summary)."""
        from sectionkit.tables import summary_table

        table = summary_table(self.study, self.results)
        hot = table["net_mass_sv"].abs() > NET_MASS_HEAT_TOLERANCE
        table["heat_kind"] = np.where(hot, "temperature transport", "heat transport")
        return table

    def direction(self, section: str) -> LineDirection:
        """What positive transport means for a line ("northward across S01→S47", boxes)."""
        return line_direction(self.study, self._config, section)

    def reference_sensitivity(self) -> ReferenceSensitivity:
        """Class transports (no inverse) for a global level of no motion at every pressure."""
        key = (self._key, repr(sorted(self._config.overrides.items())))
        cache = getattr(self, "_sensitivity_cache", None)
        if cache is None or cache[0] != key:
            ekman = self.engine.base.ekman if self.engine.base is not None else self.study.ekman()
            cache = (key, reference_sensitivity(self.study, ekman, self.engine.snap.offsets))
            self._sensitivity_cache = cache
        return dataclasses.replace(cache[1], current=level_of_no_motion(self._config))

    def inverse_view(self) -> InverseView | None:
        """The inverse's adjustments, transfers, singular values and residuals (None if off)."""
        return inverse_view(self.study, self.results)

    def rank_used(self) -> int | None:
        """Singular values the truncated SVD kept (None for the other solvers or no inverse)."""
        base = self.engine.base
        if base is None or base.inverse is None:
            return None
        return base.inverse.rank

    @property
    def flagged_classes(self) -> list[str]:
        """Classes whose inverse settings are defaults given by a change of classes.

        A class is flagged when a change of interfaces created it; editing
        the per-class settings (or loading a file) clears the flags.
        """
        if self._config.inverse is None and self._stashed_inverse is None:
            return []
        return [n for n in self._config.layer_names if n not in self._reviewed]

    def velocity_section(self, section: str) -> VelocitySection:
        """Absolute velocity of a section for the current references and adjustments."""
        op = self.study.operators[section]
        snap = self.engine.snap
        adjustment: np.ndarray | float = 0.0
        if snap.estimate is not None:
            adjustment = snap.estimate[snap.layout.pair_slices[section]]
        velocity = op.absolute_velocity(snap.offsets[section], adjustment)
        distance = along_line_distance(op.pairs["distance"].values) / 1e3
        faces = tuple(
            (face.display(), op.sigma_pair[face.p_ref], float(face.sigma))  # "σ₁ 32.15"
            for face in self._config.interfaces
        )
        cache = getattr(self, "_interface_cache", {})
        if cache.get(section, (None,))[0] is not op:
            from sectionkit.figures import interface_field, interface_pressure

            cache[section] = (op, tuple(
                (label, interface_pressure(interface_field(field), op.pressure, value))
                for label, field, value in faces))
            self._interface_cache = cache
        return VelocitySection(
            section=section,
            station_distance=distance,
            pressure=op.pressure.copy(),
            velocity=velocity,
            reference_pressure=snap.ref_pressure[section].copy(),
            bottom_pressure=self.study.sections[section]["bottom_pressure"].values.astype(float),
            interfaces=faces,
            reference=self._config.reference.describe(),
            adjusted=snap.estimate is not None,
            interface_pressure=cache[section][1],
        )

    def station_positions(self, section: str) -> tuple[np.ndarray, np.ndarray]:
        """Longitude and latitude of each station, degrees."""
        ds = self.study.sections[section]
        return ds["lon"].values.astype(float), ds["lat"].values.astype(float)

    def describe_reference(self, label: str | None = None) -> str:
        """The global reference (or one pair's) in words."""
        ref = self._config.reference if label is None else self._config.reference_for(label)
        return ref.describe()

    def overrides(self) -> dict[str, ReferenceChoice]:
        """Per-pair reference overrides by pair label."""
        return dict(self._config.overrides)

    # ------------------------------------------------------------ controls: reference
    def set_reference(self, choice: ReferenceChoice | float | str | dict, *,
                      gesture: str | None = None) -> Change:
        """Set the global reference of every pair without an override.

        Parameters
        ----------
        choice : ReferenceChoice, float, "bottom" or dict
            A reference, a pressure (dbar), ``"bottom"`` (deepest common
            level) or the TOML table form (``{sigma, p_ref}`` or
            ``{velocity, pressure, error}``).
        gesture : str, optional
            Name of a control being dragged: consecutive changes of the
            same gesture less than ``GESTURE_GAP`` apart are one undo step.
        """
        ref = _as_reference(choice, "global reference")
        return self._change_reference(f"reference: {ref.describe()}",
                                      dataclasses.replace(self._config, reference=ref),
                                      global_only=True, gesture=gesture)

    def set_reference_pressure(self, pressure: float, *, gesture: str | None = None) -> Change:
        """Level of no motion at ``pressure`` dbar (the deepest common level where shallower).

        Parameters
        ----------
        pressure : float
            dbar.
        gesture : str, optional
            As for :meth:`set_reference` (a dragged slider passes its name).
        """
        return self.set_reference(ReferenceChoice("pressure", pressure=float(pressure)),
                                  gesture=gesture)

    def set_reference_bottom(self) -> Change:
        """Level of no motion at each pair's deepest common level."""
        return self.set_reference(ReferenceChoice("bottom"))

    def set_reference_isopycnal(self, sigma: float, p_ref: float = 0.0) -> Change:
        """Level of no motion on the isopycnal ``sigma`` (kg m^-3) referred to ``p_ref`` (dbar)."""
        return self.set_reference(
            ReferenceChoice("isopycnal", sigma=float(sigma), sigma_p_ref=float(p_ref)))

    def set_reference_mode(self, mode: str, *, pressure: float | None = None,
                           sigma: float | None = None, p_ref: float = 0.0) -> Change:
        """Switch the global reference mode.

        Parameters
        ----------
        mode : {"pressure", "bottom", "isopycnal"}
            Level of no motion at a pressure, the deepest common level or an
            isopycnal.
        pressure : float, optional
            For ``"pressure"``, dbar (default: the current one, else 2000).
        sigma : float, optional
            For ``"isopycnal"``, kg m^-3 (default: the densest interface).
        p_ref : float
            For ``"isopycnal"``, dbar.
        """
        if mode not in REFERENCE_MODES:
            raise ConfigError(f"reference mode {mode!r} is not one of {', '.join(REFERENCE_MODES)}")
        current = self._config.reference
        if mode == "bottom":
            return self.set_reference_bottom()
        if mode == "pressure":
            if pressure is None:
                pressure = current.pressure if current.pressure is not None else 2000.0
            return self.set_reference_pressure(pressure)
        if sigma is None:
            if not self._config.interfaces:
                raise ConfigError("an isopycnal reference needs sigma (there are no interfaces "
                                  "to take one from)")
            face = self._config.interfaces[-1]
            sigma, p_ref = face.sigma, face.p_ref
        return self.set_reference_isopycnal(sigma, p_ref)

    def set_override(self, label: str, choice: ReferenceChoice | float | str | dict) -> Change:
        """Give one pair its own reference.

        Parameters
        ----------
        label : str
            Pair name ``"<section>:<k>"``.
        choice : ReferenceChoice, float, "bottom" or dict
            As for :meth:`set_reference`.
        """
        self._check_label(label)
        ref = _as_reference(choice, f"override {label!r}")
        overrides = {**self._config.overrides, label: ref}
        return self._change_reference(f"pair {label}: {ref.describe()}",
                                      dataclasses.replace(self._config, overrides=overrides))

    def clear_override(self, label: str) -> Change:
        """Return one pair to the global reference."""
        self._check_label(label)
        overrides = {k: v for k, v in self._config.overrides.items() if k != label}
        return self._change_reference(f"pair {label}: global reference",
                                      dataclasses.replace(self._config, overrides=overrides))

    def clear_overrides(self) -> Change:
        """Return every pair to the global reference."""
        return self._change_reference("every pair: global reference",
                                      dataclasses.replace(self._config, overrides={}))

    # ------------------------------------------------------------ controls: operators
    def set_bottom_triangle(self, rule: str) -> Change:
        """Velocity rule below each pair's deepest common level (rebuilds the operators).

        Parameters
        ----------
        rule : {"constant", "zero", "shear"}
        """
        if rule not in TRIANGLE_RULES:
            raise ConfigError(f"bottom triangle rule {rule!r} is not one of "
                              f"{', '.join(TRIANGLE_RULES)}")
        return self._change("classes", f"bottom triangles: {rule}",
                            dataclasses.replace(self._config, bottom_triangle=rule))

    def set_interfaces(
        self,
        interfaces: Sequence[Interface | tuple[float, float] | dict],
        names: Sequence[str] | None = None,
    ) -> Change:
        """New density-class interfaces (rebuilds the operators).

        Parameters
        ----------
        interfaces : sequence
            Light to dense; each an :class:`Interface`, ``(sigma, p_ref)``
            or ``{"sigma": ..., "p_ref": ...}`` (kg m^-3, dbar).
        names : sequence of str, optional
            One name per class. Kept from the current classes when the
            number of classes is unchanged, ``class_0 ...`` otherwise.

        Notes
        -----
        Nothing changes silently: per-class settings of the inverse (mass,
        salt and heat noise, known transports) follow their class by name.
        Without names, a class bounded by the same interfaces as before keeps
        its name. New classes get the default settings and are listed in
        :attr:`flagged_classes` until their settings are edited.
        """
        faces = [_as_interface(f, n) for n, f in enumerate(interfaces)]
        check_interfaces(faces, None)  # light to dense, before any naming
        n_class = len(faces) + 1
        old_names = list(self._config.layer_names)
        if names is None:
            names = class_names_by_bounds(self._config.interfaces, old_names, faces)
        names = [str(n) for n in names]
        if len(names) != n_class:
            raise ConfigError(f"{len(faces)} interfaces make {n_class} classes; "
                              f"{len(names)} names were given ({', '.join(names)})")
        if len(set(names)) != len(names):
            raise ConfigError(f"class names must differ; got {', '.join(names)}")
        inverse = map_class_settings(self._config.inverse, old_names, names)
        if self._stashed_inverse is not None:  # refuse now what switching it on would refuse
            map_class_settings(self._stashed_inverse, self._stashed_names, names)
        new = [n for n in names if n not in old_names]
        text = "interfaces: " + (", ".join(f.label() for f in faces) or "none")
        if new and (inverse is not None or self._stashed_inverse is not None):
            text += f"; new class(es) {', '.join(new)} with default inverse settings"
        return self._change("classes", text,
                            dataclasses.replace(self._config, interfaces=faces,
                                                layer_names=names, inverse=inverse))

    def set_ekman_depth(self, depth: float) -> Change:
        """Depth of the Ekman layer, m (rebuilds the operators)."""
        return self._change("classes", f"Ekman depth: {depth:g} m",
                            dataclasses.replace(self._config, ekman_depth=float(depth)))

    # ------------------------------------------------------------ controls: Ekman
    def set_ekman_stress(self, section: str, east: float, north: float) -> Change:
        """Uniform wind stress over one section.

        Parameters
        ----------
        section : str
            Section name.
        east, north : float
            Stress components, N m^-2 (both zero removes the section's stress).
        """
        if section not in self.section_names:
            raise ConfigError(f"section {section!r} does not exist "
                              f"(sections: {', '.join(self.section_names)})")
        stress = dict(self._config.ekman_stress)
        if float(east) == 0.0 and float(north) == 0.0:
            stress.pop(section, None)
        else:
            stress[section] = (float(east), float(north))
        return self._change("ekman", f"wind stress on {section}: ({east:g}, {north:g}) N m^-2",
                            dataclasses.replace(self._config, ekman_stress=stress))

    def set_wind(self, stress: dict[str, tuple[float, float]],
                 depth: float | None = None) -> Change:
        """Wind stress of several sections (and the Ekman depth) as one change.

        Parameters
        ----------
        stress : dict of str -> (float, float)
            (east, north) stress per section, N m^-2; (0, 0) removes it.
            Sections not named keep theirs.
        depth : float, optional
            Ekman layer depth, m (a new depth rebuilds the operators).
        """
        current = dict(self._config.ekman_stress)
        for section, (east, north) in stress.items():
            if section not in self.section_names:
                raise ConfigError(f"section {section!r} does not exist "
                                  f"(sections: {', '.join(self.section_names)})")
            if float(east) == 0.0 and float(north) == 0.0:
                current.pop(section, None)
            else:
                current[section] = (float(east), float(north))
        changes: dict[str, Any] = {"ekman_stress": current}
        if depth is not None:
            changes["ekman_depth"] = float(depth)
        text = "; ".join(f"{k} ({v[0]:g}, {v[1]:g})" for k, v in current.items()) or "none"
        return self._change("ekman", f"wind stress: {text}",
                            dataclasses.replace(self._config, **changes))

    # ------------------------------------------------------------ controls: inverse
    def set_inverse(self, enabled: bool) -> Change:
        """Switch the box inverse on (last or default settings) or off.

        Settings kept while it was off follow the classes by name, as a change
        of classes with the inverse on would carry them.
        """
        if enabled:
            if self._config.inverse is not None:
                inverse = self._config.inverse
            elif self._stashed_inverse is not None:
                inverse = map_class_settings(self._stashed_inverse, self._stashed_names,
                                             list(self._config.layer_names))
            else:
                inverse = InverseSpec()
            text = "inverse on"
        else:
            if self._config.inverse is not None:
                self._stashed_inverse = self._config.inverse
                self._stashed_names = list(self._config.layer_names)
            inverse = None
            text = "inverse off"
        return self._change("inverse", text, dataclasses.replace(self._config, inverse=inverse))

    def set_conserve(self, kinds: Sequence[str]) -> Change:
        """Which properties the boxes conserve: any of "mass", "salt", "heat"."""
        return self._set_inverse(f"conserve: {', '.join(kinds)}", conserve=list(kinds))

    def set_priors(self, velocity: float | None = None, diapycnal: float | None = None,
                   ekman: float | None = None) -> Change:
        """Prior standard deviations of the unknowns (None keeps a value).

        Parameters
        ----------
        velocity : float, optional
            Reference-velocity adjustment, m s^-1.
        diapycnal : float, optional
            Transfer across each interface, Sv (0 removes the unknowns).
        ekman : float, optional
            Fractional Ekman adjustment, dimensionless (0 removes it).
        """
        changes = {k: float(v) for k, v in (("prior_velocity", velocity),
                                            ("prior_diapycnal", diapycnal),
                                            ("prior_ekman", ekman)) if v is not None}
        text = ", ".join(f"{k} = {v:g}" for k, v in changes.items())
        return self._set_inverse(f"priors: {text}", **changes)

    def set_noise(self, total: float | None = None,
                  layer: Sequence[float] | None = None) -> Change:
        """Noise of the mass constraints (None keeps a value).

        Parameters
        ----------
        total : float, optional
            Of the total mass row, Sv.
        layer : sequence of float, optional
            One per class, Sv.
        """
        changes: dict[str, Any] = {}
        if total is not None:
            changes["noise_total"] = float(total)
        if layer is not None:
            changes["noise_layer"] = [float(v) for v in layer]
        text = ", ".join(f"{k} = {v}" for k, v in changes.items())
        return self._set_inverse(f"noise: {text}", **changes)

    def set_solver(self, name: str, rank: int | None = None) -> Change:
        """Inverse solver by name ("gauss-markov", "svd", "bounded"); rank for svd."""
        changes: dict[str, Any] = {"solver": str(name)}
        if rank is not None:
            changes["rank"] = int(rank)
        return self._set_inverse(f"solver: {name}", **changes)

    def set_rank(self, rank: int) -> Change:
        """Singular values kept by the svd solver (0 picks them from the noise level)."""
        return self._set_inverse(f"rank: {rank}", rank=int(rank))

    def set_inverse_settings(
        self,
        *,
        solver: str | None = None,
        rank: int | None = None,
        conserve: Sequence[str] | None = None,
        prior_velocity: float | None = None,
        prior_diapycnal: float | None = None,
        prior_ekman: float | None = None,
        noise_total: float | None = None,
        noise_layer: Sequence[float] | None = None,
        noise_salt: Sequence[float] | None = None,
        noise_heat: Sequence[float] | None = None,
        known: Sequence[dict | KnownTransport] | None = None,
        section_net: Sequence[dict | SectionNet] | None = None,
        bounds: dict[str, Sequence[float]] | None = None,
    ) -> Change:
        """Several inverse settings as one change (None keeps a value).

        Parameters
        ----------
        solver : str, optional
            "gauss-markov", "svd" or "bounded".
        rank : int, optional
            Singular values kept by svd (0 picks them from the noise level).
        conserve : sequence of str, optional
            Any of "mass", "salt", "heat".
        prior_velocity : float, optional
            Prior of the reference-velocity adjustments, m s^-1.
        prior_diapycnal : float, optional
            Prior of the transfer across each interface, Sv.
        prior_ekman : float, optional
            Prior of the fractional Ekman adjustment, dimensionless.
        noise_total : float, optional
            Noise of the total mass row, Sv.
        noise_layer : sequence of float, optional
            Noise of each class's mass row, Sv.
        noise_salt, noise_heat : sequence of float, optional
            Noise of each class's salt (Sv g/kg) and heat (PW) row; 0 for a
            class (or an empty list) keeps the automatic value.
        known : sequence of dict or KnownTransport, optional
            Transports entering a box elsewhere: ``{name, transport, noise,
            layer (or class), box}``, Sv.
        section_net : sequence of dict or SectionNet, optional
            Net-transport constraints ``{section, transport, noise}``, Sv.
        bounds : dict of str -> (float, float), optional
            Lower and upper bound of a pair's adjustment (bounded solver), m s^-1.

        Notes
        -----
        Setting any per-class value marks every class as reviewed (clears
        :attr:`flagged_classes`).
        """
        given = {
            "solver": None if solver is None else str(solver),
            "rank": None if rank is None else int(rank),
            "conserve": None if conserve is None else list(conserve),
            "prior_velocity": None if prior_velocity is None else float(prior_velocity),
            "prior_diapycnal": None if prior_diapycnal is None else float(prior_diapycnal),
            "prior_ekman": None if prior_ekman is None else float(prior_ekman),
            "noise_total": None if noise_total is None else float(noise_total),
            "noise_layer": None if noise_layer is None else [float(v) for v in noise_layer],
            "noise_salt": None if noise_salt is None else [float(v) for v in noise_salt],
            "noise_heat": None if noise_heat is None else [float(v) for v in noise_heat],
            "known": None if known is None else [_as_known(k) for k in known],
            "section_net": None if section_net is None else [_as_net(n) for n in section_net],
            "bounds": None if bounds is None else {str(k): [float(v) for v in b]
                                                   for k, b in bounds.items()},
        }
        inv = self._config.inverse
        changes = {k: v for k, v in given.items()
                   if v is not None and (inv is None or getattr(inv, k) != v)}
        text = ", ".join(_setting_text(k, v) for k, v in changes.items()) or "unchanged"
        reviewed = set(self._reviewed)
        if any(given[k] is not None for k in ("noise_layer", "noise_salt", "noise_heat",
                                              "known")):
            self._reviewed |= set(self._config.layer_names)  # before the listeners hear it
        try:
            return self._set_inverse(f"inverse: {text}", **changes)
        except Exception:
            self._reviewed = reviewed
            raise

    def _set_inverse(self, text: str, **changes: Any) -> Change:
        if self._config.inverse is None:
            raise ConfigError("the box inverse is off; switch it on before changing its settings")
        inverse = dataclasses.replace(self._config.inverse, **changes)
        return self._change("inverse", text, dataclasses.replace(self._config, inverse=inverse))

    # ------------------------------------------------------------ history
    @property
    def can_undo(self) -> bool:
        """Whether there is a change to undo."""
        return bool(self._undo)

    @property
    def can_redo(self) -> bool:
        """Whether there is an undone change to redo."""
        return bool(self._redo)

    def undo(self) -> Change:
        """Return to the configuration before the last change."""
        if not self._undo:
            raise ConfigError("nothing to undo")
        config, text = self._undo[-1]
        return self._apply(config, "undo", f"undid: {text}", history="undo")

    def redo(self) -> Change:
        """Apply the last undone change again."""
        if not self._redo:
            raise ConfigError("nothing to redo")
        config, text = self._redo[-1]
        return self._apply(config, "redo", f"redid: {text}", history="redo")

    # ------------------------------------------------------------ files
    def save(self, path: str | Path) -> Path:
        """Write the configuration to the .toml file ``path`` (atomically, as
        :meth:`Config.save`); relative file names are rewritten to follow the file."""
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        return portable(self._config, path.parent).save(path)

    def load(self, path: str | Path, *, record: bool = True, kind: str = "load") -> Change:
        """Replace the configuration by a TOML file (undoable).

        Parameters
        ----------
        path : str or Path
            A configuration file, e.g. a saved session or an autosave.
        record : bool
            Record the change for undo.
        """
        config = self._validated(load_config(path))
        change = self._apply(config, kind, f"loaded {Path(path).name}",
                             history="new" if record else None)
        self._reviewed = set(config.layer_names)
        return change

    def export(self, folder: str | Path, *, figures: bool = True,
               progress: Callable[[int, int, str], None] | None = None) -> list[Path]:
        """Write the batch outputs of the current state, as ``sectionkit budget`` would.

        The same writers as the command line (CSV tables, paper tables,
        figures, provenance), so the CSVs are byte-identical to
        ``sectionkit budget`` of the saved configuration.

        Parameters
        ----------
        folder : str or Path
            Output folder (written atomically).
        figures : bool
            Write the figures too (False is ``sectionkit budget --no-figures``).
        progress : callable, optional
            ``progress(done, total, what)`` before each step and at the end.

        Returns
        -------
        list of Path
            Files written, relative to ``folder``.
        """
        return self.prepare_export(folder, figures=figures)(progress)

    def prepare_export(self, folder: str | Path, *, figures: bool = True
                       ) -> Callable[[Callable[[int, int, str], None] | None], list[Path]]:
        """The export of the current state as a function to run later, e.g. on a thread.

        The full results are computed here (on the caller's thread); the
        returned ``run(progress)`` only writes files from the study and
        results of this moment, which later changes replace but never modify.

        Parameters
        ----------
        folder : str or Path
            Output folder (written atomically).
        figures : bool
            Write the figures too.
        """
        from sectionkit.report import default_writers, write_outputs

        study = dataclasses.replace(self.study, config=self._config,
                                    operators=dict(self.study.operators),
                                    sections=dict(self.study.sections))
        results = self.results
        writers = default_writers(figures)
        names = {"write_paper_tables": "paper tables", "write_figures": "figures"}

        def run(progress: Callable[[int, int, str], None] | None = None) -> list[Path]:
            total = len(writers) + 1
            step = [0]

            def tell(what: str) -> None:
                if progress is not None:
                    progress(step[0], total, what)
                step[0] += 1

            def announced(writer: Callable, what: str) -> Callable:
                def write(study_: Study, results_: Results, where: Path) -> None:
                    tell(what)
                    writer(study_, results_, where)
                return write

            tell("tables")
            written = write_outputs(study, results, folder, [
                announced(w, names.get(getattr(w, "__name__", ""), "files")) for w in writers])
            if progress is not None:
                progress(total, total, "done")
            return written

        return run

    # ------------------------------------------------------------ machinery
    def _check_label(self, label: str) -> None:
        parse_pair_label(label, {name: op.n_pair for name, op in self.study.operators.items()},
                         "pair override")

    def _validated(self, config: Config) -> Config:
        """A fresh copy of ``config`` validated exactly as a saved file would be."""
        return parse_config(config.to_dict(), base_dir=Path(config.base_dir))

    def _change(self, kind: str, text: str, candidate: Config) -> Change:
        return self._apply(self._validated(candidate), kind, text, history="new")

    def _change_reference(self, text: str, candidate: Config, global_only: bool = False,
                          gesture: str | None = None) -> Change:
        """A change of references only: operators, Ekman and inverse settings are untouched.

        ``candidate`` shares everything but its references with the current
        configuration, which was validated already; only the references are
        checked (each one through its TOML form, as a saved file would be).
        ``global_only``: only the global reference differs (overrides are
        unchanged).
        """
        return self._apply(candidate, "reference", text, history="new", references_only=True,
                           global_only=global_only, gesture=gesture)

    def _apply(self, new: Config, kind: str, text: str, *, history: str | None,
               references_only: bool = False, global_only: bool = False,
               gesture: str | None = None) -> Change:
        """Make the validated configuration ``new`` current, recomputing what depends on it.

        ``history`` is "new" (record for undo), "undo", "redo" or None;
        ``gesture`` names a dragged control (see :meth:`set_reference`).
        """
        old = self._config
        old_study = self.study
        rebuilt = False
        if references_only:
            same_errors = reference_error_key(new) == reference_error_key(old)
            key = self._key if same_errors else solve_key(new)
        else:
            key = solve_key(new)
        try:
            if not references_only and data_key(new) != data_key(old):
                self.study = Study.from_config(new)
            elif not references_only and operator_key(new) != operator_key(old):
                self.study.config = new
                rebuilt = True
                self.study.rebuild_operators()
            else:
                self.study.config = new
            self._config = new
            linear = self.engine.refresh(key, global_only and references_only)
        except Exception:
            self.study = old_study
            self.study.config = old
            self._config = old
            if rebuilt:
                self.study.rebuild_operators()
            raise
        self._key = key
        now = self.clock()
        continued = (gesture is not None and gesture == self._gesture and bool(self._undo)
                     and now - self._gesture_time <= GESTURE_GAP)
        if history == "new":
            if continued:  # one more step of a drag: the drag is one undo step
                self._undo[-1] = (self._undo[-1][0], text)
            else:
                self._undo.append((old, text))
            self._redo.clear()
        elif history == "undo":
            self._redo.append((old, self._undo.pop()[1]))
        elif history == "redo":
            self._undo.append((old, self._redo.pop()[1]))
        self._gesture = gesture if history == "new" else None
        self._gesture_time = now
        self._autosave()
        change = Change(kind, text, linear, gesture)
        for listener in list(self._listeners):
            listener(change)
        return change

    def _autosave(self) -> None:
        if self._writer is not None:
            self._writer.submit(self._config)

    def flush_autosave(self, timeout: float = 10.0) -> bool:
        """Wait until the autosave file holds the current configuration.

        Parameters
        ----------
        timeout : float
            Longest wait, s.

        Returns
        -------
        bool
            True when written (or autosaving is off).
        """
        return True if self._writer is None else self._writer.flush(timeout)

    @property
    def autosave_error(self) -> str | None:
        """The last autosave failure, or None."""
        return None if self._writer is None else self._writer.error


def _as_reference(choice: ReferenceChoice | float | str | dict, where: str) -> ReferenceChoice:
    """A validated reference, normalised exactly as reading it from a saved file would."""
    if isinstance(choice, ReferenceChoice):
        choice = _reference_to_toml(choice)
    return parse_reference(choice, where)


def _as_known(item: dict | KnownTransport) -> KnownTransport:
    """A known transport from its TOML table form (``class`` or ``layer`` names its class)."""
    if isinstance(item, KnownTransport):
        return item
    item = dict(item)
    if "class" in item:
        item["layer"] = item.pop("class")
    unknown = set(item) - {"name", "transport", "noise", "layer", "box"}
    if unknown:
        raise ConfigError(f"known transport: unknown key(s) {', '.join(sorted(unknown))}; use "
                          "name, transport (Sv), noise (Sv), class, box")
    name = str(item.get("name", "known"))
    return KnownTransport(name=name,
                          transport=_given_number(item, "transport", f"known transport {name!r}"),
                          noise=_given_number(item, "noise", f"known transport {name!r}"),
                          layer=str(item.get("layer", "")), box=item.get("box"))


def _given_number(item: dict, key: str, where: str) -> float:
    """``item[key]`` as a finite number (Sv), or one clear error naming it."""
    value = item.get(key)
    if isinstance(value, bool) or not isinstance(value, int | float) or value != value:
        raise ConfigError(f"{where}: {key} = {value!r} must be a number in Sv")
    return float(value)


def _as_net(item: dict | SectionNet) -> SectionNet:
    """A net-transport constraint from its TOML table form."""
    if isinstance(item, SectionNet):
        return item
    unknown = set(item) - {"section", "transport", "noise"}
    if unknown:
        raise ConfigError(f"section net transport: unknown key(s) {', '.join(sorted(unknown))}; "
                          "use section, transport (Sv), noise (Sv)")
    section = str(item.get("section", ""))
    where = f"net transport of {section!r}"
    return SectionNet(section=section, transport=_given_number(item, "transport", where),
                      noise=_given_number(item, "noise", where))


def _setting_text(key: str, value: Any) -> str:
    """One inverse setting for the status line."""
    if key == "known":
        return "known: " + (", ".join(f"{k.name} {k.transport:g}±{k.noise:g} Sv ({k.layer})"
                                      for k in value) or "none")
    if key == "section_net":
        return "net: " + (", ".join(f"{n.section} {n.transport:g}±{n.noise:g} Sv"
                                    for n in value) or "none")
    return f"{key} = {value}"


def _as_interface(face: Interface | tuple[float, float] | dict, n: int) -> Interface:
    if isinstance(face, Interface):
        return face
    if isinstance(face, dict):
        unknown = set(face) - {"sigma", "p_ref"}
        if unknown or "sigma" not in face:
            raise ConfigError(f"interface {n}: use {{'sigma': ..., 'p_ref': ...}}; got {face!r}")
        return Interface(float(face["sigma"]), float(face.get("p_ref", 0.0)))
    try:
        sigma, p_ref = face
        return Interface(float(sigma), float(p_ref))
    except (TypeError, ValueError):
        raise ConfigError(f"interface {n}: give (sigma, p_ref) in kg m^-3 and dbar; "
                          f"got {face!r}") from None
