"""The engine side of the workbench: what its tables and views show, on plain arrays.

No widgets, no drawing. :class:`Engine` keeps the numbers of a study's
current configuration up to date (a full solve, or the linear update of a
reference change) as a :class:`Snapshot` of value objects
(:class:`ClassTransports`, :class:`BoxBudget`); :func:`solve_key` and its
companions decide which update a change needs. Pure functions of a
:class:`~sectionkit.study.Study` and its :class:`~sectionkit.study.Results`
give the other views
(:class:`~sectionkit.workbench.model.WorkbenchState` hands them to the view):

* :func:`line_direction`: what positive transport means for a line, in words
  ("northward across S01→S47", "into the box interior");
* :func:`reference_sensitivity`: class transports as functions of the global
  level of no motion over the whole water column (linear in the reference
  offsets, so every level at once is one indexing and one product);
* :func:`inverse_view`: the inverse's pair adjustments, diapycnal transfers,
  singular values, resolution and constraint residuals;
* :func:`class_names_by_bounds` and :func:`map_class_settings`: per-class
  settings carried over by class name when the classes change.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sectionkit.budget import SV, Q, UnknownLayout
from sectionkit.config import Config, InverseSpec
from sectionkit.errors import Cautions, ConfigError
from sectionkit.geometry import compass_name, pair_along_line_distance
from sectionkit.inverse import InverseResult
from sectionkit.labels import constraint_label
from sectionkit.layers import Interface
from sectionkit.study import Results, Study

#: Noise of a new class's mass constraint, Sv (the configuration's default).
DEFAULT_CLASS_NOISE = 1.0
#: Per-class salt or heat noise meaning "the automatic value" (config: 0 = automatic).
AUTOMATIC_NOISE = 0.0
MAX_SENSITIVITY_LEVELS = 400


# ---------------------------------------------------------------- values the tables show
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

    @classmethod
    def of_inverse(cls, inverse: InverseResult, posterior_std: np.ndarray) -> BoxBudget:
        """The constraint rows of an inverse: its initial and adjusted inflow and noise.

        Parameters
        ----------
        inverse : InverseResult
            A solved inverse (its ``system`` holds rows, units and noise).
        posterior_std : ndarray (row,)
            Posterior residual std of each row, in its units.
        """
        system = inverse.system
        return cls(tuple(system.rows), system.initial.copy(), inverse.adjusted,
                   system.noise.copy(), tuple(system.units), posterior_std)

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
class Snapshot:
    """The current state's references, estimate, class table and box budget."""

    offsets: dict[str, np.ndarray]
    ref_pressure: dict[str, np.ndarray]
    layout: UnknownLayout
    estimate: np.ndarray | None
    classes: ClassTransports
    box: BoxBudget
    cautions: Cautions | None  # None: not collected yet (see reference_cautions)


# ---------------------------------------------------------------- config keys
def reference_error_key(cfg: Config) -> list:
    """References whose stated error sets a pair's inverse prior."""
    out = []
    if cfg.reference.kind == "velocity":
        out.append(("*", cfg.reference.velocity_error))
    for label, ref in sorted(cfg.overrides.items()):
        if ref.kind == "velocity":
            out.append((label, ref.velocity_error))
    return out


def data_key(cfg: Config) -> str:
    """Everything that decides which sections are read and how they are gridded."""
    files = [(s.name, [str(p.resolve()) for p in cfg.section_paths(s)], sorted(s.columns.items()))
             for s in cfg.sections]
    return repr((files, cfg.dp, cfg.allow_equator))


def operator_key(cfg: Config) -> str:
    """Everything the section operators are built from."""
    faces = [(f.sigma, f.p_ref) for f in cfg.interfaces]
    bathy = [(s.name, s.bathymetry) for s in cfg.sections]
    return repr((data_key(cfg), faces, cfg.layer_names, cfg.bottom_triangle, cfg.ekman_depth,
                 bathy, str(cfg.base_dir)))


def solve_key(cfg: Config) -> str:
    """Everything except the references: equal keys allow the linear reference update."""
    d = cfg.to_dict()
    ref = d.pop("reference")
    return repr((d, ref.get("bottom_triangle"), ref.get("allow_equator"),
                 reference_error_key(cfg), operator_key(cfg)))


# ---------------------------------------------------------------- the engine snapshot
class Engine:
    """The numbers of one study for its current configuration, kept up to date cheaply.

    A change of references only is a linear update of the last full solve
    (:meth:`linear_update`); anything else is a full solve on the stored
    operators (:meth:`solve_full`). ``snap`` holds what the tables show at
    once; ``full`` the full results when they are current.

    Parameters
    ----------
    study : Study
        The study (its ``config`` is the current configuration).
    known_transports : callable
        Returns the known transports entering the boxes (also while the
        inverse is switched off), for the initial box budget.
    """

    def __init__(self, study: Study, known_transports: Callable[[], list]) -> None:
        self.study = study
        self.known_transports = known_transports
        self.full: Results | None = None
        self.base: Results | None = None
        self.base_key = ""
        self.snap: Snapshot | None = None
        self._error_cache: tuple[Results, np.ndarray] | None = None
        self._gradient_cache: tuple[Results, dict[str, np.ndarray]] | None = None

    def refresh(self, key: str, global_only: bool = False) -> bool:
        """Bring the snapshot up to date; True when the linear update sufficed.

        ``key`` is :func:`solve_key` of the current configuration;
        ``global_only`` says that only the global reference changed since the
        current snapshot.
        """
        base = self.base
        linear_ok = base is not None and key == self.base_key and base.state.is_linear
        if not linear_ok:
            self.solve_full(key)
            return False
        self.linear_update(global_only)
        return True

    def solve_full(self, key: str | None = None) -> None:
        """Run the whole budget (and inverse) on the stored operators."""
        results = self.study.solve()
        self.full = results
        self.base = results
        self.base_key = solve_key(self.study.config) if key is None else key
        self.snap = self._snapshot_from(results)

    def _snapshot_from(self, results: Results) -> Snapshot:
        sections = tuple(self.study.operators)
        layers = tuple(next(iter(self.study.operators.values())).layer_names)
        volume = [results.select("class_volume_transport", name) for name in sections]
        initial = np.array([v.initial for v in volume])
        adjusted = np.array([v.adjusted for v in volume])
        error = self._errors(results, sections, layers)
        classes = ClassTransports(sections, layers, initial, adjusted, error,
                                  results.inverse is not None)
        if results.inverse is not None:
            box = BoxBudget.of_inverse(results.inverse, results.inverse.posterior_residual_std)
        else:
            mass = {n: results.select("class_mass_transport", n).initial for n in sections}
            box = self._mass_box(mass, layers)
        cautions = Cautions()
        cautions.extend(self.study.load_cautions)
        cautions.extend(c for c in results.cautions if c.kind.startswith(("reference-below",
                                                                           "isopycnal")))
        return Snapshot(
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
                err[s] = results.select("class_volume_transport", name).error
        self._error_cache = (results, err)
        return err

    def _volume_gradient(self, base: Results, name: str) -> np.ndarray:
        """d(class volume transport)/dx of one section, Sv per unknown (cached per solve)."""
        cache = self._gradient_cache
        if cache is None or cache[0] is not base:
            cache = self._gradient_cache = (base, {})
        if name not in cache[1]:
            cache[1][name] = base.select("class_volume_transport", name).gradient
        return cache[1][name]

    def _mass_box(self, mass: dict[str, np.ndarray], layers: tuple[str, ...]) -> BoxBudget:
        """Net mass inflow of each box by class, without an inverse (Sv).

        Known transports entering a box elsewhere count here as in the
        inverse's constraints, so the initial budget is the same with the
        inverse on or off.
        """
        rows, values = [], []
        known = self.known_transports()
        for box in self.study.config.effective_boxes():
            inflow = sum((box.sign(name) * mass[name] for name in box.sections),
                         np.zeros(len(layers)))
            for kt in known:  # counted as the inverse counts them (inverse.assemble)
                if (kt.box or box.name) == box.name and kt.layer in layers:
                    inflow[layers.index(kt.layer)] += kt.transport
            for i, layer in enumerate(layers):
                rows.append((box.name, constraint_label("mass", layer)))
                values.append(inflow[i])
            rows.append((box.name, constraint_label("mass")))
            values.append(inflow.sum())
        v = np.asarray(values, dtype=float)
        return BoxBudget(tuple(rows), v, v.copy(), np.full(v.size, np.nan), ("Sv",) * v.size)

    def linear_update(self, global_only: bool = False) -> None:
        """New references on unchanged operators, Ekman and inverse settings.

        The base solve's budget state is derived with the new references
        (:meth:`sectionkit.state.BudgetState.derive`: the constraint data move
        by ``E_pairs (offset - offset_base)``, prior means from direct
        velocities follow the offsets) and solved reusing the fitted linear
        solver, whose gain gives the new estimate. The posterior covariance
        does not depend on the data, so the errors are those of the last
        full solve.
        """
        base = self.base
        assert base is not None
        if global_only:
            cautions = None  # a dragged slider: collected when asked for (reference_cautions)
            refs = self.study.references(None)
        else:
            cautions = Cautions()
            cautions.extend(self.study.load_cautions)
            refs = self.study.references(cautions)
        state = base.state.derive(refs)  # constraint data and prior means follow the offsets
        sections = tuple(self.study.operators)
        layers = self.snap.classes.layers
        x = None
        box = None
        if base.inverse is not None:
            inverse = state.solve(reuse=base.inverse)  # the fitted solver's gain, no new fit
            x = inverse.estimate
            # the posterior covariance does not depend on the data: same residual std
            box = BoxBudget.of_inverse(inverse, base.inverse.posterior_residual_std)
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
                adjusted[s] = vol + self._volume_gradient(base, name) @ x
        if box is None:
            box = self._mass_box(mass, layers)
        classes = ClassTransports(sections, layers, initial, adjusted,
                                  self._errors(base, sections, layers), x is not None)
        self.snap = Snapshot(
            offsets=state.offsets,
            ref_pressure={n: r.pressure for n, r in refs.items()},
            layout=state.layout,
            estimate=x,
            classes=classes,
            box=box,
            cautions=cautions,
        )
        self.full = None


# ---------------------------------------------------------------- directions
@dataclass(frozen=True)
class LineDirection:
    """What positive transport means for one line.

    Attributes
    ----------
    section : str
        Section name.
    compass : str
        Direction of positive flow, e.g. ``"northward"`` (to the left of the
        direction of increasing station order, DESIGN.md §4).
    first_station, last_station : str
        Station ids at the two ends, in station order.
    boxes : tuple of (str, bool)
        Each box the line bounds and whether positive flow enters it.
    """

    section: str
    compass: str
    first_station: str
    last_station: str
    boxes: tuple[tuple[str, bool], ...]

    @property
    def across(self) -> str:
        """E.g. ``"northward across S01→S47"`` (``"across stations 1→41"`` for bare numbers)."""
        ends = f"{self.first_station}→{self.last_station}"
        if self.first_station.isdigit() and self.last_station.isdigit():
            ends = "stations " + ends
        return f"{self.compass} across {ends}"

    @property
    def box_text(self) -> str:
        """E.g. ``"into the box interior"`` (empty when the line bounds no box)."""
        return "; ".join(f"{'into' if into else 'out of'} the box {name}"
                         for name, into in self.boxes)

    def describe(self) -> str:
        """Both parts, e.g. ``"+ = northward across S01→S47, into the box interior"``."""
        text = f"+ = {self.across}"
        return f"{text}, {self.box_text}" if self.boxes else text


def line_direction(study: Study, config: Config, section: str) -> LineDirection:
    """Direction of positive transport across a line, and its role in each box.

    Positive transport is to the left of increasing station order; the
    line's mean along-line direction is the distance-weighted mean of its
    pairs' along-line unit vectors, and "left" is that vector turned 90°
    counter-clockwise.
    """
    pairs = study.operators[section].pairs
    w = pairs["distance"].values
    east = float(np.sum(w * pairs["along_east"].values))
    north = float(np.sum(w * pairs["along_north"].values))
    stations = [str(s) for s in study.sections[section]["station"].values]
    boxes = tuple((box.name, section in box.enters) for box in config.effective_boxes()
                  if section in box.enters or section in box.leaves)
    return LineDirection(section, compass_name(-north, east), stations[0], stations[-1], boxes)


# ---------------------------------------------------------------- sensitivity
@dataclass(frozen=True)
class ReferenceSensitivity:
    """Class transports against the global level of no motion.

    Attributes
    ----------
    pressure : ndarray (level,)
        Global reference pressures, dbar (the grid, thinned to at most
        ``MAX_SENSITIVITY_LEVELS`` levels).
    transports : ndarray (section, level, class)
        Initial volume transport of each class (no inverse), Sv, section frame.
    sections, layers : tuple of str
        Names.
    current : float or None
        The current global reference pressure, dbar (None when the global
        reference is not a pressure).
    overrides : int
        Pairs keeping their own reference (not moved by the global level).
    """

    pressure: np.ndarray
    transports: np.ndarray
    sections: tuple[str, ...]
    layers: tuple[str, ...]
    current: float | None
    overrides: int


def reference_sensitivity(study: Study, ekman: dict[str, np.ndarray],
                          own_offsets: dict[str, np.ndarray]) -> ReferenceSensitivity:
    """Class transports for a level of no motion at every grid pressure.

    A pair whose reference is the global pressure ``p`` gets the offset
    ``-v_rel(min(p, deepest common level))``; on grid pressures that is the
    grid value itself, so every level is one gather, and the transports are
    the operator's linear map of the offsets (DESIGN.md §2).

    Parameters
    ----------
    study : Study
        Its operators and configuration.
    ekman : dict of str -> ndarray (pair,)
        Ekman volume transport per pair, m^3 s^-1.
    own_offsets : dict of str -> ndarray (pair,)
        The current offsets, m s^-1; kept for pairs with their own reference.
    """
    cfg = study.config
    ops = study.operators
    first = next(iter(ops.values()))
    deepest = max(op.pressure.size for op in ops.values())
    stride = max(1, math.ceil(deepest / MAX_SENSITIVITY_LEVELS))
    levels = np.arange(0, deepest, stride)
    pressure = next(op.pressure for op in ops.values() if op.pressure.size == deepest)[levels]
    out = np.zeros((len(ops), levels.size, len(first.layer_names)))
    n_own = 0
    for s, (name, op) in enumerate(ops.items()):
        own = np.array([label in cfg.overrides for label in op.pair_labels])
        n_own += int(own.sum())
        k = np.minimum(levels[:, None], np.clip(op.common, 0, None)[None, :])  # (level, pair)
        offsets = -np.take_along_axis(op.v_eff.T, k, axis=0)  # v_eff (pair, level) -> (level, pair)
        offsets = np.where(own[None, :], own_offsets[name][None, :], offsets)
        t = op.transports(offsets, 0.0, ekman[name], 1.0)  # (level, quantity, pair, class)
        out[s] = t[:, Q["volume"]].sum(axis=-2) / SV
    return ReferenceSensitivity(pressure.astype(float), out, tuple(ops),
                                tuple(first.layer_names), level_of_no_motion(cfg), n_own)


def level_of_no_motion(cfg: Config) -> float | None:
    """The global reference pressure, dbar (None when the global reference is not a pressure)."""
    ref = cfg.reference
    return float(ref.pressure) if ref.kind == "pressure" and ref.pressure is not None else None


# ---------------------------------------------------------------- inverse
@dataclass(frozen=True)
class InverseView:
    """What the inverse did, for the inverse views.

    Attributes
    ----------
    solver : str
        Solver name.
    rank : int or None
        Singular values kept (truncated SVD), the one used when automatic.
    pair_distance : dict of str -> ndarray (pair,)
        Along-line distance of each pair's mid-point, km.
    adjustment, adjustment_std : dict of str -> ndarray (pair,)
        Reference-velocity adjustment b and its posterior std, m s^-1.
    adjustment_resolution : dict of str -> ndarray (pair,)
        Diagonal of the resolution matrix, dimensionless.
    transfers : tuple of (str, float, float, float)
        Each diapycnal transfer: label ``"<box>: <upper>→<lower>"``, W and
        its posterior std (Sv, positive light to dense), resolution.
    singular_values : ndarray
        Of the noise- and prior-scaled constraint matrix, descending.
    rows : tuple of str
        Constraint names ``"<box> <constraint>"``.
    before, after : ndarray (row,)
        Initial inflow over its noise, and adjusted inflow over its posterior
        residual std, dimensionless.
    """

    solver: str
    rank: int | None
    pair_distance: dict[str, np.ndarray]
    adjustment: dict[str, np.ndarray]
    adjustment_std: dict[str, np.ndarray]
    adjustment_resolution: dict[str, np.ndarray]
    transfers: tuple[tuple[str, float, float, float], ...]
    singular_values: np.ndarray
    rows: tuple[str, ...]
    before: np.ndarray
    after: np.ndarray


def inverse_view(study: Study, results: Results) -> InverseView | None:
    """The inverse's estimates and diagnostics (None without an inverse)."""
    inv = results.inverse
    if inv is None:
        return None
    std = np.sqrt(np.clip(np.diag(inv.covariance), 0.0, None))
    res = np.where(inv.solved_for, inv.resolution_diagonal, np.nan)
    layout = results.layout
    names = study.config.layer_names
    dist, b, b_std, b_res = {}, {}, {}, {}
    for name, sl in layout.pair_slices.items():
        op = study.operators[name]
        dist[name] = pair_along_line_distance(op.pairs["distance"].values) / 1e3
        b[name], b_std[name], b_res[name] = inv.estimate[sl], std[sl], res[sl]
    transfers = tuple(
        (f"{box}: {names[n]}→{names[n + 1]}", float(inv.estimate[idx]), float(std[idx]),
         float(res[idx]))
        for (box, n), idx in sorted(layout.diapycnal.items()))
    values = inv.scaled_singular_values
    system = inv.system
    with np.errstate(invalid="ignore", divide="ignore"):
        before = system.initial / system.noise
    after = inv.posterior_normalized_residuals
    return InverseView(
        solver=study.config.inverse.solver,
        rank=inv.rank,
        pair_distance=dist, adjustment=b, adjustment_std=b_std, adjustment_resolution=b_res,
        transfers=transfers, singular_values=np.asarray(values, dtype=float),
        rows=tuple(f"{box} {c}" for box, c in system.rows), before=before, after=after,
    )


# ---------------------------------------------------------------- classes
def _bounds(faces: list[Interface]) -> list[tuple]:
    keys = [(float(f.sigma), float(f.p_ref)) for f in faces]
    return [(keys[i - 1] if i > 0 else None, keys[i] if i < len(keys) else None)
            for i in range(len(keys) + 1)]


def class_names_by_bounds(old_faces: list[Interface], old_names: list[str],
                          faces: list[Interface]) -> list[str]:
    """Names of new classes: an old name where a class keeps both its interfaces.

    A class bounded by the same two interfaces (or the same open end) as
    before keeps its name, so its settings follow it; any other class gets
    a new name ``class_<k>`` not used before.
    """
    old = dict(zip(_bounds(old_faces), old_names, strict=True))
    names: list[str] = []
    for k, bound in enumerate(_bounds(faces)):
        name = old.get(bound)
        if name is None or name in names:
            n = k
            name = f"class_{n}"
            while name in old_names or name in names:
                n += 1
                name = f"class_{n}"
        names.append(name)
    return names


def map_class_settings(inverse: InverseSpec | None, old_names: list[str],
                       names: list[str]) -> InverseSpec | None:
    """Per-class inverse settings carried over to new classes by class name.

    Noise of the mass, salt and heat constraints follows each class's name;
    a new class gets the defaults (mass noise ``DEFAULT_CLASS_NOISE``, the
    automatic salt and heat noise). Known transports keep their class; one
    whose class no longer exists is refused, never dropped.

    Parameters
    ----------
    inverse : InverseSpec or None
        The current settings.
    old_names, names : list of str
        Class names before and after.
    """
    if inverse is None:
        return None
    for kt in inverse.known:
        if kt.layer not in names:
            raise ConfigError(
                f"the known transport {kt.name!r} enters the class {kt.layer!r}, which the new "
                f"classes ({', '.join(names)}) do not have; keep a class of that name (name the "
                "classes) or move the known transport to another class in the Inverse panel first")

    def carry(values: list[float], default: float) -> list[float]:
        if not values:
            return []
        by_name = dict(zip(old_names, values, strict=True))
        return [by_name.get(name, default) for name in names]

    return dataclasses.replace(
        inverse,
        noise_layer=carry(inverse.noise_layer, DEFAULT_CLASS_NOISE) or [DEFAULT_CLASS_NOISE]
        * len(names),
        noise_salt=carry(inverse.noise_salt, AUTOMATIC_NOISE),
        noise_heat=carry(inverse.noise_heat, AUTOMATIC_NOISE),
        known=list(inverse.known),
    )
