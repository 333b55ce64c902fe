"""The workbench's state model: one study, its configuration, and what follows from it.

The model knows nothing of widgets. Every control of the workbench is a
method here that derives a new :class:`~sectionkit.config.Config` from the
current one, validates it exactly as a saved file would be validated, and
recomputes only what depends on the change:

* a new reference (global level, mode or a pair's override) is a linear
  update: the reference offsets are resolved again (cheap), the class
  transports are ``relative + area * offset`` and, with an inverse, the new
  estimate is the solver's gain applied to the shifted constraint data. The
  full budget (overturning, heat, freshwater) is recomputed only when asked
  for (:attr:`WorkbenchState.results`), so a slider never waits for it;
* a new Ekman stress or inverse setting runs :meth:`Study.solve` on the
  stored operators (no dynamic height);
* new class interfaces, bottom-triangle rule or Ekman depth rebuild the
  section operators;
* a configuration naming other section files loads them.

Each change is recorded for undo/redo, written to an autosave file beside
the session (atomic write) and announced to listeners as a :class:`Change`.
"""

from __future__ import annotations

import atexit
import copy
import dataclasses
import os
import threading
import time
import weakref
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sectionkit.budget import SV, UnknownLayout
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
from sectionkit.geostrophy import TRIANGLE_RULES, ReferenceChoice
from sectionkit.labels import parse_pair_label
from sectionkit.layers import Interface, check_interfaces
from sectionkit.study import NET_MASS_HEAT_TOLERANCE, Results, Study
from sectionkit.workbench.snapshot import (
    InverseView,
    LineDirection,
    ReferenceSensitivity,
    class_names_by_bounds,
    inverse_view,
    line_direction,
    map_class_settings,
    reference_sensitivity,
)

REFERENCE_MODES = ("pressure", "bottom", "isopycnal")
AUTOSAVE_SUFFIX = ".autosave.toml"
AUTOSAVE_COALESCE = 0.05  # s a change waits for newer ones before the autosave is written
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


@dataclass(frozen=True)
class ClassTransports:
    """Volume transport of every section in every density class.

    Attributes
    ----------
    sections : tuple of str
        Section names, configuration order.
    layers : tuple of str
        Class names, light to dense.
    initial : ndarray (section, class)
        Transport with the chosen references, Sv, positive to the left of
        increasing station order (the section's own frame).
    adjusted : ndarray (section, class)
        After the inverse's reference adjustments, Sv (equals ``initial``
        without an inverse).
    error : ndarray (section, class)
        Posterior standard deviation of ``adjusted``, Sv (NaN without an
        inverse).
    inverse : bool
        Whether an inverse adjusted the transports.
    """

    sections: tuple[str, ...]
    layers: tuple[str, ...]
    initial: np.ndarray
    adjusted: np.ndarray
    error: np.ndarray
    inverse: bool

    def to_frame(self) -> pd.DataFrame:
        """One row per section x class: section, class, initial_sv, adjusted_sv, adjusted_err_sv."""
        rows = []
        for s, section in enumerate(self.sections):
            for i, layer in enumerate(self.layers):
                rows.append({
                    "section": section,
                    "class": layer,
                    "initial_sv": float(self.initial[s, i]),
                    "adjusted_sv": float(self.adjusted[s, i]),
                    "adjusted_err_sv": float(self.error[s, i]),
                })
        return pd.DataFrame(rows)


@dataclass(frozen=True)
class BoxBudget:
    """Net inflow of every box constraint.

    Attributes
    ----------
    rows : tuple of (str, str)
        (box, constraint) with constraint ``mass:<class>``, ``mass:total``,
        ``salt:<class>`` or ``heat:<class>``.
    initial, adjusted : ndarray (row,)
        Net inflow into the box before and after the inverse, in ``units``
        (positive in).
    noise : ndarray (row,)
        One standard deviation of each constraint's noise (NaN without an
        inverse).
    units : tuple of str
        ``"Sv"``, ``"Sv g/kg"`` or ``"PW"`` per row.
    posterior_std : ndarray (row,) or None
        Residual std the estimate can achieve, sqrt(diag(N - E P E^T)) in
        ``units`` (Wunsch 1996, ch. 3); None without an inverse.
    """

    rows: tuple[tuple[str, str], ...]
    initial: np.ndarray
    adjusted: np.ndarray
    noise: np.ndarray
    units: tuple[str, ...]
    posterior_std: np.ndarray | None = None

    @property
    def normalized_residual(self) -> np.ndarray:
        """Adjusted inflow over its noise, dimensionless (DESIGN.md §7)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.adjusted / self.noise

    @property
    def posterior_normalized_residual(self) -> np.ndarray:
        """Adjusted inflow over its posterior residual std (NaN without an inverse)."""
        if self.posterior_std is None:
            return np.full(len(self.rows), np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.posterior_std > 0, self.adjusted / self.posterior_std, np.nan)

    def to_frame(self) -> pd.DataFrame:
        """One row per constraint, the columns of box_budget.csv."""
        return pd.DataFrame({
            "box": [r[0] for r in self.rows],
            "constraint": [r[1] for r in self.rows],
            "initial": self.initial,
            "adjusted": self.adjusted,
            "noise": self.noise,
            "normalized_residual": self.normalized_residual,
            "posterior_residual_std": (np.full(len(self.rows), np.nan)
                                       if self.posterior_std is None else self.posterior_std),
            "posterior_normalized_residual": self.posterior_normalized_residual,
            "unit": list(self.units),
        })


@dataclass(frozen=True)
class VelocitySection:
    """What a velocity-section figure shows, on plain arrays.

    Attributes
    ----------
    section : str
        Section name.
    station_distance : ndarray (station,)
        Along-line distance of each station from the first, km.
    pressure : ndarray (level,)
        Pressure grid, dbar.
    velocity : ndarray (pair, level)
        Absolute geostrophic velocity (chosen reference plus any inverse
        adjustment), m s^-1, positive to the left of increasing station
        order; NaN below the bottom.
    reference_pressure : ndarray (pair,)
        Pressure each pair's reference actually used, dbar.
    bottom_pressure : ndarray (station,)
        Sea-floor pressure of each station, dbar.
    interfaces : tuple of (str, ndarray (pair, level), float)
        Each class interface: label, the pair-mean potential density anomaly
        at its reference pressure (kg m^-3) and its value (kg m^-3).
    reference : str
        The global reference in words.
    adjusted : bool
        Whether inverse adjustments are included.
    interface_pressure : tuple of (str, ndarray (pair,))
        Each interface's label and the pressure where each pair's density
        first reaches it (dbar, NaN where it does not).
    """

    section: str
    station_distance: np.ndarray
    pressure: np.ndarray
    velocity: np.ndarray
    reference_pressure: np.ndarray
    bottom_pressure: np.ndarray
    interfaces: tuple[tuple[str, np.ndarray, float], ...]
    reference: str
    adjusted: bool
    interface_pressure: tuple[tuple[str, np.ndarray], ...] = ()

    @property
    def pair_distance(self) -> np.ndarray:
        """Along-line distance of each pair's mid-point, km."""
        return 0.5 * (self.station_distance[:-1] + self.station_distance[1:])


@dataclass
class _Snapshot:
    """The current state's references, estimate, class table and box budget."""

    offsets: dict[str, np.ndarray]
    ref_pressure: dict[str, np.ndarray]
    layout: UnknownLayout
    estimate: np.ndarray | None
    classes: ClassTransports
    box: BoxBudget
    cautions: Cautions | None  # None: not collected yet (see reference_cautions)


# ---------------------------------------------------------------- config keys
def _reference_error_key(cfg: Config) -> list:
    """References whose stated error sets a pair's inverse prior."""
    out = []
    if cfg.reference.kind == "velocity":
        out.append(("*", cfg.reference.velocity_error))
    for label, ref in sorted(cfg.overrides.items()):
        if ref.kind == "velocity":
            out.append((label, ref.velocity_error))
    return out


def _data_key(cfg: Config) -> str:
    """Everything that decides which sections are read and how they are gridded."""
    files = [(s.name, [str(p.resolve()) for p in cfg.section_paths(s)], sorted(s.columns.items()))
             for s in cfg.sections]
    return repr((files, cfg.dp, cfg.allow_equator))


def _operator_key(cfg: Config) -> str:
    """Everything the section operators are built from."""
    faces = [(f.sigma, f.p_ref) for f in cfg.interfaces]
    bathy = [(s.name, s.bathymetry) for s in cfg.sections]
    return repr((_data_key(cfg), faces, cfg.layer_names, cfg.bottom_triangle, cfg.ekman_depth,
                 bathy, str(cfg.base_dir)))


def _solve_key(cfg: Config) -> str:
    """Everything except the references: equal keys allow the linear reference update."""
    d = cfg.to_dict()
    ref = d.pop("reference")
    return repr((d, ref.get("bottom_triangle"), ref.get("allow_equator"),
                 _reference_error_key(cfg), _operator_key(cfg)))


def keep_backup(path: Path) -> Path:
    """Copy a file to the first free numbered backup beside it (``x.autosave.1.toml``, ...).

    Parameters
    ----------
    path : Path
        The file (an autosave that could not be resumed).

    Returns
    -------
    Path
        The backup written.
    """
    stem = path.name.removesuffix(".toml")
    n = 1
    while (backup := path.with_name(f"{stem}.{n}.toml")).exists():
        n += 1
    backup.write_bytes(path.read_bytes())
    return backup


def _portable(cfg: Config, folder: Path) -> Config:
    """A copy whose relative file names are taken from ``folder``."""
    folder = Path(folder).resolve()
    if folder == Path(cfg.base_dir).resolve():
        return cfg

    def move(name: str) -> str:
        path = Path(name)
        if path.is_absolute():
            return name
        target = (Path(cfg.base_dir) / path).resolve()
        try:
            return os.path.relpath(target, folder)
        except ValueError:  # another drive
            return str(target)

    out = copy.deepcopy(cfg)
    for spec in out.sections:
        spec.file = move(spec.file) if isinstance(spec.file, str) else [move(f) for f in spec.file]
        if spec.bathymetry:
            spec.bathymetry = move(spec.bathymetry)
    out.base_dir = folder
    return out


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
        self._writer = _AutosaveWriter(self.autosave_path) if self.autosave_path else None
        self._listeners: list[Listener] = []
        self._undo: list[tuple[Config, str]] = []  # (configuration before, what changed)
        self._redo: list[tuple[Config, str]] = []
        self._gesture: str | None = None
        self._gesture_time = 0.0
        self.clock: Callable[[], float] = time.monotonic
        self._stashed_inverse: InverseSpec | None = None
        self.resumed_from: Path | None = None
        self.resume_error: str | None = None
        config = self._validated(config)
        self.study = study if study is not None else Study.from_config(config, sections=sections)
        self.study.config = config
        self._config = config
        self._reviewed: set[str] = set(config.layer_names)
        self._full: Results | None = None
        self._base: Results | None = None
        self._base_key = ""
        self._error_cache: tuple[Results, np.ndarray] | None = None
        self._gradient_cache: tuple[Results, dict[str, np.ndarray]] | None = None
        self._key = _solve_key(config)
        self._solve_full(self._key)

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
        if self._full is None:
            self._solve_full(self._key)
        assert self._full is not None
        return self._full

    @property
    def results_current(self) -> bool:
        """Whether :attr:`results` is ready without computing."""
        return self._full is not None

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
        return self._snap.classes

    def box_budget(self) -> BoxBudget:
        """Box constraints of the current state (updated at once by every change).

        With an inverse these are the rows of box_budget.csv; without one,
        the net mass inflow of each class and in total (noise NaN).
        """
        return self._snap.box

    def reference_pressures(self, section: str) -> np.ndarray:
        """Pressure each pair's reference actually uses, dbar."""
        return self._snap.ref_pressure[section].copy()

    def reference_cautions(self) -> list[str]:
        """Cautions of the current references (fall-backs) and of loading."""
        if self._snap.cautions is None:
            cautions = Cautions()
            cautions.extend(self.study.load_cautions)
            self.study.references(cautions)
            self._snap.cautions = cautions
        return [str(c) for c in self._snap.cautions]

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
            ekman = self._base.ekman if self._base is not None else self.study.ekman()
            cache = (key, reference_sensitivity(self.study, ekman, self._snap.offsets))
            self._sensitivity_cache = cache
        return dataclasses.replace(cache[1], current=self._current_pressure())

    def _current_pressure(self) -> float | None:
        ref = self._config.reference
        return float(ref.pressure) if ref.kind == "pressure" and ref.pressure is not None else None

    def inverse_view(self) -> InverseView | None:
        """The inverse's adjustments, transfers, singular values and residuals (None if off)."""
        return inverse_view(self.study, self.results)

    def rank_used(self) -> int | None:
        """Singular values the truncated SVD kept (None for the other solvers or no inverse)."""
        base = self._base
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
        snap = self._snap
        adjustment: np.ndarray | float = 0.0
        if snap.estimate is not None:
            adjustment = snap.estimate[snap.layout.pair_slices[section]]
        velocity = op.absolute_velocity(snap.offsets[section], adjustment)
        distance = np.concatenate([[0.0], np.cumsum(op.pairs["distance"].values)]) / 1e3
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

    def end_gesture(self) -> None:
        """End a drag: the next change is a new undo step even if it comes at once."""
        self._gesture = None

    def set_reference_bottom(self) -> Change:
        """Level of no motion at each pair's deepest common level."""
        return self.set_reference(ReferenceChoice("bottom"))

    def set_reference_isopycnal(self, sigma: float, p_ref: float = 0.0) -> Change:
        """Level of no motion on an isopycnal.

        Parameters
        ----------
        sigma : float
            Potential density anomaly, kg m^-3.
        p_ref : float
            Its reference pressure, dbar.
        """
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
        stashed = map_class_settings(self._stashed_inverse, old_names, names)
        new = [n for n in names if n not in old_names]
        text = "interfaces: " + (", ".join(f.label() for f in faces) or "none")
        if new and (inverse is not None or stashed is not None):
            text += f"; new class(es) {', '.join(new)} with default inverse settings"
        change = self._change("classes", text,
                              dataclasses.replace(self._config, interfaces=faces,
                                                  layer_names=names, inverse=inverse))
        self._stashed_inverse = stashed
        return change

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
        """Switch the box inverse on (last or default settings) or off."""
        if enabled:
            if self._config.inverse is not None:
                inverse = self._config.inverse
            elif self._stashed_inverse is not None:
                inverse = self._stashed_inverse
            else:
                inverse = InverseSpec()
            text = "inverse on"
        else:
            if self._config.inverse is not None:
                self._stashed_inverse = self._config.inverse
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
        change = self._set_inverse(f"inverse: {text}", **changes)
        if any(given[k] is not None for k in ("noise_layer", "noise_salt", "noise_heat",
                                              "known")):
            self._reviewed |= set(self._config.layer_names)
        return change

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
        """Write the configuration as TOML (atomically); relative file names follow the file.

        Parameters
        ----------
        path : str or Path
            Destination .toml file.
        """
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        return _portable(self._config, path.parent).save(path)

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
            same_errors = _reference_error_key(new) == _reference_error_key(old)
            key = self._key if same_errors else _solve_key(new)
        else:
            key = _solve_key(new)
        try:
            if not references_only and _data_key(new) != _data_key(old):
                self.study = Study.from_config(new)
            elif not references_only and _operator_key(new) != _operator_key(old):
                self.study.config = new
                rebuilt = True
                self.study.rebuild_operators()
            else:
                self.study.config = new
            self._config = new
            linear = self._refresh(key, global_only and references_only)
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

    def _refresh(self, key: str, global_only: bool = False) -> bool:
        """Bring the snapshot up to date; True when the linear update sufficed.

        ``key`` is :func:`_solve_key` of the current configuration;
        ``global_only`` says that only the global reference changed since the
        current snapshot.
        """
        base = self._base
        linear_ok = base is not None and key == self._base_key and base.state.is_linear
        if not linear_ok:
            self._solve_full(key)
            return False
        self._linear_update(global_only)
        return True

    def _solve_full(self, key: str | None = None) -> None:
        """Run the whole budget (and inverse) on the stored operators."""
        results = self.study.solve()
        self._full = results
        self._base = results
        self._base_key = _solve_key(self._config) if key is None else key
        self._snap = self._snapshot_from(results)

    def _snapshot_from(self, results: Results) -> _Snapshot:
        sections = tuple(self.study.operators)
        layers = tuple(next(iter(self.study.operators.values())).layer_names)
        x = results.estimate
        initial = np.zeros((len(sections), len(layers)))
        adjusted = np.zeros_like(initial)
        for s, name in enumerate(sections):
            out = results.outputs[name]
            v0 = out.value(None)
            v1 = out.value(x)
            for i, layer in enumerate(layers):
                k = out.index(f"volume:{layer}")
                initial[s, i] = v0[k]
                adjusted[s, i] = v1[k]
        error = self._errors(results, sections, layers)
        classes = ClassTransports(sections, layers, initial, adjusted, error,
                                  results.inverse is not None)
        if results.inverse is not None:
            sys_ = results.inverse.system
            box = BoxBudget(tuple(sys_.rows), sys_.initial.copy(), results.inverse.adjusted,
                            sys_.noise.copy(), tuple(sys_.units),
                            results.inverse.posterior_residual_std)
        else:
            mass = {n: results.outputs[n].value(None)[
                [results.outputs[n].index(f"mass:{layer}") for layer in layers]]
                for n in sections}
            box = self._mass_box(mass, layers)
        cautions = Cautions()
        cautions.extend(self.study.load_cautions)
        cautions.extend(c for c in results.cautions if c.kind.startswith(("reference-below",
                                                                           "isopycnal")))
        return _Snapshot(
            offsets={n: r.offset for n, r in results.references.items()},
            ref_pressure={n: r.pressure for n, r in results.references.items()},
            layout=results.layout,
            estimate=results.estimate if results.inverse is not None else None,
            classes=classes,
            box=box,
            cautions=cautions,
        )

    def _errors(self, results: Results, sections: tuple[str, ...],
                layers: tuple[str, ...]) -> np.ndarray:
        """Posterior errors of class transports, Sv (they do not depend on the references)."""
        if self._error_cache is not None and self._error_cache[0] is results:
            return self._error_cache[1]
        err = np.full((len(sections), len(layers)), np.nan)
        if results.inverse is not None:
            for s, name in enumerate(sections):
                for i, layer in enumerate(layers):
                    err[s, i] = results.error(name, f"volume:{layer}")
        self._error_cache = (results, err)
        return err

    def _volume_gradient(self, base: Results, name: str, layers: tuple[str, ...]) -> np.ndarray:
        """d(class volume transport)/dx of one section, Sv per unknown (cached per solve)."""
        cache = self._gradient_cache
        if cache is None or cache[0] is not base:
            cache = self._gradient_cache = (base, {})
        if name not in cache[1]:
            out = base.outputs[name]
            cache[1][name] = out.gradient[[out.index(f"volume:{layer}") for layer in layers]]
        return cache[1][name]

    def _mass_box(self, mass: dict[str, np.ndarray], layers: tuple[str, ...]) -> BoxBudget:
        """Net mass inflow of each box by class, without an inverse (Sv).

        Known transports entering a box elsewhere count here as in the
        inverse's constraints, so the initial budget is the same with the
        inverse on or off.
        """
        rows, values = [], []
        inverse = self._config.inverse or self._stashed_inverse
        known = inverse.known if inverse is not None else []
        for box in self._config.effective_boxes():
            inflow = np.zeros(len(layers))
            for name in box.enters:
                inflow = inflow + mass[name]
            for name in box.leaves:
                inflow = inflow - mass[name]
            for kt in known:  # counted as the inverse counts them (inverse.assemble)
                if (kt.box or box.name) == box.name and kt.layer in layers:
                    inflow[layers.index(kt.layer)] += kt.transport
            for i, layer in enumerate(layers):
                rows.append((box.name, f"mass:{layer}"))
                values.append(inflow[i])
            rows.append((box.name, "mass:total"))
            values.append(inflow.sum())
        v = np.asarray(values, dtype=float)
        return BoxBudget(tuple(rows), v, v.copy(), np.full(v.size, np.nan), ("Sv",) * v.size)

    def _linear_update(self, global_only: bool = False) -> None:
        """New references on unchanged operators, Ekman and inverse settings.

        The base solve's budget state is derived with the new references
        (:meth:`BudgetState.derive`: the constraint data move by
        ``E_pairs (offset - offset_base)``) and solved reusing the fitted
        linear solver (its gain gives the new estimate; the posterior
        covariance does not depend on the data, so the errors are those of
        the last full solve).
        """
        base = self._base
        assert base is not None
        if global_only:
            cautions = None  # a dragged slider: collected when asked for (reference_cautions)
            refs = self.study.references(None)
        else:
            cautions = Cautions()
            cautions.extend(self.study.load_cautions)
            refs = self.study.references(cautions)
        state = base.state.derive(refs)
        sections = tuple(self.study.operators)
        layers = self._snap.classes.layers
        x = None
        box = None
        inverse = state.solve(reuse=base.inverse) if base.inverse is not None else None
        if inverse is not None:
            x = inverse.estimate
            system = inverse.system
            # the posterior covariance does not depend on the data: same residual std
            box = BoxBudget(tuple(system.rows), system.initial, inverse.adjusted,
                            system.noise.copy(), tuple(system.units),
                            base.inverse.posterior_residual_std)
        initial = np.zeros((len(sections), len(layers)))
        adjusted = np.zeros_like(initial)
        mass = {}
        for s, name in enumerate(sections):
            t = state.class_transports(name)
            vol = t["volume"] / SV
            mass[name] = t["mass"] / SV
            initial[s] = vol
            if x is None:
                adjusted[s] = vol
            else:
                adjusted[s] = vol + self._volume_gradient(base, name, layers) @ x
        if box is None:
            box = self._mass_box(mass, layers)
        classes = ClassTransports(sections, layers, initial, adjusted,
                                  self._errors(base, sections, layers), x is not None)
        self._snap = _Snapshot(
            offsets=state.offsets,
            ref_pressure={n: r.pressure for n, r in refs.items()},
            layout=state.layout,
            estimate=x,
            classes=classes,
            box=box,
            cautions=cautions,
        )
        self._full = None

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


_LIVE_WRITERS: weakref.WeakSet[_AutosaveWriter] = weakref.WeakSet()


@atexit.register
def _flush_autosaves() -> None:
    """Let pending autosaves reach the disk when the interpreter exits."""
    for writer in list(_LIVE_WRITERS):
        writer.flush(5.0)


class _AutosaveWriter:
    """Writes the latest configuration to the autosave file on a background thread.

    Changes hand over the (immutable) configuration and return at once;
    the thread serialises it and replaces the file atomically. Configurations
    submitted within ``AUTOSAVE_COALESCE`` seconds of each other, or while a
    write is under way, are coalesced: only the newest one is written. The
    file is never half-written, and a change is on disk well within a tenth
    of a second.
    """

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self.error: str | None = None
        self._pending: Config | None = None
        self._busy = False
        self._cond = threading.Condition()
        self._thread: threading.Thread | None = None
        _LIVE_WRITERS.add(self)

    def submit(self, config: Config) -> None:
        """Queue ``config`` for writing (replacing any queued one)."""
        with self._cond:
            self._pending = config
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._run, name="sectionkit-autosave",
                                                daemon=True)
                self._thread.start()
            self._cond.notify_all()

    def flush(self, timeout: float = 10.0) -> bool:
        """Wait until nothing is queued or being written; True when done in time."""
        with self._cond:
            return self._cond.wait_for(lambda: self._pending is None and not self._busy,
                                       timeout=timeout)

    def _run(self) -> None:
        while True:
            with self._cond:
                if not self._cond.wait_for(lambda: self._pending is not None, timeout=30.0):
                    self._thread = None
                    return
            time.sleep(AUTOSAVE_COALESCE)  # let a dragged slider settle: one write, not fifty
            with self._cond:
                config, self._pending = self._pending, None
                self._busy = True
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
                _portable(config, self.path.parent).save(self.path)
                error = None
            except Exception as exc:  # reported through the state, never raised
                error = f"autosave to {self.path} failed: {exc}"
            with self._cond:
                self.error = error
                self._busy = False
                self._cond.notify_all()


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
    return KnownTransport(name=str(item.get("name", "known")), transport=item.get("transport"),
                          noise=item.get("noise"), layer=str(item.get("layer", "")),
                          box=item.get("box"))


def _as_net(item: dict | SectionNet) -> SectionNet:
    """A net-transport constraint from its TOML table form."""
    if isinstance(item, SectionNet):
        return item
    unknown = set(item) - {"section", "transport", "noise"}
    if unknown:
        raise ConfigError(f"section net transport: unknown key(s) {', '.join(sorted(unknown))}; "
                          "use section, transport (Sv), noise (Sv)")
    return SectionNet(section=str(item.get("section", "")), transport=item.get("transport"),
                      noise=item.get("noise"))


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
