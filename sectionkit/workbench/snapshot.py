"""What the workbench's views show, computed from the engine on plain arrays.

Pure functions of a :class:`~sectionkit.study.Study` (its operators and
configuration) and its :class:`~sectionkit.study.Results`; no widgets, no
drawing. :class:`~sectionkit.workbench.model.WorkbenchState` hands their
value objects to the view:

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
from dataclasses import dataclass

import numpy as np

from sectionkit.budget import SV
from sectionkit.config import Config, InverseSpec
from sectionkit.errors import ConfigError
from sectionkit.geometry import compass_name
from sectionkit.layers import Interface
from sectionkit.study import Results, Study

#: Noise of a new class's mass constraint, Sv (the configuration's default).
DEFAULT_CLASS_NOISE = 1.0
#: Per-class salt or heat noise meaning "the automatic value" (config: 0 = automatic).
AUTOMATIC_NOISE = 0.0
MAX_SENSITIVITY_LEVELS = 400


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
        """E.g. ``"northward across S01→S47"``."""
        return f"{self.compass} across {self.first_station}→{self.last_station}"

    @property
    def box_text(self) -> str:
        """E.g. ``"into the box interior"`` (empty when the line bounds no box)."""
        return "; ".join(f"{'into' if into else 'out of'} the box {name}"
                         for name, into in self.boxes)

    def describe(self) -> str:
        """Both parts, e.g. ``"+ = northward across S01→S47, into the box interior"``."""
        text = f"+ = {self.across}"
        return f"{text}, {self.box_text}" if self.boxes else text


def compass_of(east: float, north: float) -> str:
    """Eight-point compass name of a direction (``sectionkit.geometry.compass_name``)."""
    return compass_name(east, north)


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
    return LineDirection(section, compass_of(-north, east), stations[0], stations[-1], boxes)


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
        out[s] = t[:, 0].sum(axis=-2) / SV
    ref = cfg.reference
    current = float(ref.pressure) if ref.kind == "pressure" and ref.pressure is not None else None
    return ReferenceSensitivity(pressure.astype(float), out, tuple(ops),
                                tuple(first.layer_names), current, n_own)


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
        d = np.concatenate([[0.0], np.cumsum(op.pairs["distance"].values)]) / 1e3
        dist[name] = 0.5 * (d[:-1] + d[1:])
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
